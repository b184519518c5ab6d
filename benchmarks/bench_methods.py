"""Benchmark: every solver method on a fixed set of problems, and what "auto" picks.

The set: Bose–Hubbard rings L = 8…14 at unit filling (J = U = 1), a 3×4 Bose–Hubbard
lattice (12 sites, 12 bosons), a Jaynes–Cummings–Hubbard chain (8 cavities with cutoff 4
and 8 emitters, 8 excitations) and a driven Kerr trio in its even-parity sector (cutoff
60) — the last two are invented parameter sets. For k = 1 and k = 4 lowest levels, each
method runs in a fresh subprocess (peak resident memory from wait4, minus the same
process's resident memory before the solve) with a time cap; "auto" is then compared
with the fastest explicit method and with its own memory estimate.

Targets: "auto" never slower than 1.25x the fastest explicit method, never above its
own memory estimate.

Usage: python benchmarks/bench_methods.py [--cases ring8 ring10 ...] [--k 1 4]
       [--cap 240] [--json out.json]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import threading

sys.path.insert(0, os.path.dirname(__file__))
from _common import table

CASES = [f"ring{n}" for n in range(6, 15)] + ["lattice3x4", "jch8", "kerr3"]
#: (method, store_matrix) variants; "lanczos-stored" keeps the CSR inside Rust.
VARIANTS = {
    "dense": ("dense", None),
    "csr": ("csr", None),
    "operator": ("operator", None),
    "lanczos-stored": ("lanczos", True),
    "lanczos-free": ("lanczos", False),
    "auto": ("auto", None),
}

CHILD = r"""
import json, resource, sys, time
import fockmill as fm
from fockmill import models as M
case, k, method, store, dense_max = {case!r}, {k}, {method!r}, {store!r}, {dense_max}
if case.startswith("ring"):
    n = int(case[4:])
    model = M.bose_hubbard(M.ring_edges(n), J=1.0, U=1.0, cutoff=n, total=n)
elif case == "lattice3x4":
    model = M.bose_hubbard(M.rectangular_edges(3, 4), J=1.0, U=1.0,
                           cutoff=12, total=12)
elif case == "jch8":
    model = M.jaynes_cummings_hubbard(8, g=0.1, J=0.05, cavity_cutoff=4, total=8)
elif case == "kerr3":
    base = M.kerr_network([0.2, 0.25, 0.3], self_kerr=0.05,
                          couplings={{(0, 1): 0.02, (1, 2): 0.02}}, cutoff=60, total=0)
    model = M.with_drives(base, two_photon={{0: 0.1, 1: 0.1, 2: 0.1}})
h, space = model.hamiltonian(), model.space
if method == "dense" and space.dim > dense_max:
    print(json.dumps(dict(dim=space.dim, skipped=f"dim above {{dense_max}}")))
    sys.exit(0)
problem = fm.prepare(h, space)
estimate = problem.estimate
chosen = problem.choose_method(k)
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
options = dict(store_matrix=store) if store is not None else dict()
times = []
while len(times) < 3 and sum(times) < 1.0:  # repeat short solves; report the median
    t0 = time.perf_counter()
    if k == 1:
        r = problem.ground_state(method=method, tol=1e-9, cutoff_warning=None, **options)
        energies, products, used = [r.energy], r.products, r.method
    else:
        r = problem.lowest_levels(k, method=method, tol=1e-9, **options)
        energies, products, used = list(r.energies), r.products, r.method
    times.append(time.perf_counter() - t0)
seconds = sorted(times)[len(times) // 2]
stored = store if store is not None else None
if used == "lanczos" and store is None:
    from fockmill.problem.eigensolve import _store_matrix
    stored = _store_matrix(problem, None)
vec = estimate.vector_bytes
planned = {{
    "dense": 3 * estimate.dim ** 2 * estimate.value_dtype.itemsize,
    "csr": estimate.build_peak_bytes + vec * (max(2 * k + 1, 20) + 2),
    "operator": vec * (max(2 * k + 1, 20) + 2),
    "lanczos": (estimate.build_peak_bytes if stored else 0) + vec * (5 if k == 1 else 3 * k + 8),
}}[used]
print(json.dumps(dict(dim=space.dim, energies=energies, products=products, method=used,
                      stored=stored, seconds=seconds, auto=chosen, planned=planned,
                      before=before)))
"""


def run(case: str, k: int, variant: str, cap: float, dense_max: int) -> dict[str, object] | None:
    """Solve in a child process; None when it exceeded ``cap`` seconds. The child's peak
    resident memory comes from wait4."""
    method, store = VARIANTS[variant]
    code = CHILD.format(case=case, k=k, method=method, store=store, dense_max=dense_max)
    with tempfile.TemporaryFile("w+") as err:
        child = subprocess.Popen(
            [sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=err, text=True
        )
        timer = threading.Timer(cap, child.kill)
        timer.start()
        out = child.stdout.read() if child.stdout else ""
        _, status, usage = os.wait4(child.pid, 0)
        timer.cancel()
        child.returncode = status  # reaped here; keep Popen from waiting again
        if status != 0:
            if not timer.is_alive() and status in (-9, 9):
                return None
            err.seek(0)
            last = (err.read().strip().splitlines() or ["?"])[-1]
            return None if "Killed" in last or status == 9 else {"error": last[:100]}
    result = json.loads(out.strip().splitlines()[-1])
    result["peak"] = usage.ru_maxrss * 1024  # KiB on Linux
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", nargs="+", default=CASES, choices=CASES)
    parser.add_argument("--k", type=int, nargs="+", default=[1, 4])
    parser.add_argument("--variants", nargs="+", default=list(VARIANTS), choices=list(VARIANTS))
    parser.add_argument("--cap", type=float, default=240.0, help="seconds per run")
    parser.add_argument("--dense-max", type=int, default=8000, help="skip dense above this dim")
    parser.add_argument("--json", help="also write the raw results here")
    args = parser.parse_args()
    rows, raw = [], []
    for case in args.cases:
        for k in args.k:
            results: dict[str, dict[str, object] | None] = {}
            for variant in args.variants:
                if variant.startswith("lanczos") and k > 1 and not _levels_native():
                    continue
                r = _measure(case, k, variant, args)
                results[variant] = r
                raw.append({"case": case, "k": k, "variant": variant, "result": r})
            rows.append(_row(case, k, results))
            print(table(HEADERS, rows[-1:]).splitlines()[-1], flush=True)
    print()
    print(table(HEADERS, rows))
    print(
        f"\nseconds per method (median of 1 run each, fresh process, cap {args.cap:.0f} s: "
        "'>cap' = stopped); 'auto/best' = auto's time over the fastest explicit method; "
        "'peak/plan' = auto's peak resident memory above the process's baseline over its "
        "own memory estimate. Machine load: " + _load()
    )
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(raw, fh, indent=1, default=str)


def _levels_native() -> bool:
    import fockmill._native as native

    return hasattr(native.NativeOperator, "lanczos_levels")


def _measure(case: str, k: int, variant: str, args: argparse.Namespace) -> dict | None:
    return run(case, k, variant, args.cap, args.dense_max)


def _fmt(r: dict | None) -> str:
    if r is None:
        return ">cap"
    if "skipped" in r:
        return "-"
    if "error" in r:
        return "error"
    return f"{r['seconds']:.2f}"


def _row(case: str, k: int, results: dict[str, dict | None]) -> list[str]:
    ok = {v: r for v, r in results.items() if r and "seconds" in r}
    explicit = {v: float(r["seconds"]) for v, r in ok.items() if v != "auto"}
    auto = ok.get("auto")
    dim = next((int(r["dim"]) for r in results.values() if r and "dim" in r), 0)
    best = min(explicit, key=explicit.get) if explicit else "-"
    ratio = f"{float(auto['seconds']) / explicit[best]:.2f}" if auto and explicit else "-"
    plan = "-"
    if auto and auto.get("planned"):
        above = float(auto["peak"]) - float(auto["before"])
        # below 64 MiB the interpreter's own allocations dominate: show MiB instead
        planned = float(auto["planned"])
        plan = f"{above / planned:.2f}" if planned > 2**26 else f"{above / 2**20:.0f} MiB"
    picked = "-"
    if auto:
        picked = str(auto["method"])
        if picked == "lanczos":
            picked += "-stored" if auto.get("stored") else "-free"
    cells = [_fmt(results.get(v)) if v in results else "n/a" for v in VARIANTS]
    return [case, f"{dim:,}", str(k), *cells, picked, best, ratio, plan]


def _load() -> str:
    try:
        return ", ".join(f"{x:.1f}" for x in os.getloadavg())
    except OSError:
        return "unknown"


HEADERS = [
    "case",
    "states",
    "k",
    *VARIANTS,
    "auto picked",
    "fastest",
    "auto/best",
    "peak/plan",
]

if __name__ == "__main__":
    main()
