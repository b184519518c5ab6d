"""Benchmark: the lowest k levels of the unit-filled Bose–Hubbard ring (J = U = 1) by
the Rust thick-restart Lanczos (on the CSR matrix kept in Rust, and matrix-free) against
scipy's eigsh on the stored CSR matrix, with wall time and peak memory.

Each variant runs in a fresh subprocess, so its peak resident memory (from wait4) is its
own. Target (issue 8): at L = 13 (5,200,300 states), k = 4, the Rust solver beats eigsh
in time and memory.

Usage: python benchmarks/bench_levels.py [--sites 13] [--levels 4] [--repeats 1]
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from typing import Any

sys.path.insert(0, os.path.dirname(__file__))
from _common import table

CHILD = """
import json, sys, time
import numpy as np
sys.path.insert(0, {here!r})
from _common import bose_hubbard_ring, unit_filling
import fockmill as fm
sites, k, variant, tol = {sites}, {levels}, {variant!r}, {tol}
h = bose_hubbard_ring(sites, 1.0, 1.0)
space = unit_filling(sites)
t0 = time.perf_counter()
if variant == "eigsh":
    import scipy.sparse.linalg as sla
    matrix = fm.build_matrix(h, space)
    v0 = np.random.default_rng(1).standard_normal(space.dim)
    energies, vectors = sla.eigsh(matrix, k=k, which="SA", tol=tol, v0=v0)
    seconds = time.perf_counter() - t0
    order = np.argsort(energies)
    energies, vectors = energies[order], vectors[:, order]
    residuals = np.linalg.norm(matrix @ vectors - vectors * energies, axis=0)
    products = -1
elif variant == "lowest_levels csr":
    # The public path on the stored matrix: eigsh, then the recovery of degenerate
    # copies eigsh skipped (a deflated eigsh per missed copy).
    levels = fm.lowest_levels(h, space, k, method="csr", tol=tol)
    seconds = time.perf_counter() - t0
    energies, residuals, products = levels.energies, levels.residuals, levels.products
else:
    problem = fm.prepare(h, space)
    found = problem.native.lanczos_levels(k, tol=tol, store=(variant == "rust stored"))
    seconds = time.perf_counter() - t0
    assert found.converged
    energies, residuals, products = found.energies, found.residuals, found.products
print(json.dumps(dict(dim=space.dim, energies=[float(e) for e in energies],
                      residual=float(np.max(residuals)), products=int(products),
                      seconds=seconds)))
"""


def run(sites: int, levels: int, variant: str, tol: float) -> dict[str, Any]:
    """Solve in a child process; its peak resident memory comes from wait4."""
    code = CHILD.format(
        here=os.path.dirname(os.path.abspath(__file__)),
        sites=sites,
        levels=levels,
        variant=variant,
        tol=tol,
    )
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    out = child.stdout.read() if child.stdout else ""
    _, status, usage = os.wait4(child.pid, 0)
    if status != 0:
        raise RuntimeError(f"{variant}: child failed with status {status}")
    result: dict[str, Any] = json.loads(out.strip().splitlines()[-1])
    result["peak_gib"] = usage.ru_maxrss / 2**20  # KiB on Linux
    return result


VARIANTS = ["rust stored", "rust free", "eigsh", "lowest_levels csr"]
HEADERS = [
    "variant",
    "states",
    "E0 .. E(k-1)",
    "max residual",
    "products",
    "median s",
    "time / eigsh",
    "peak GiB",
    "memory / eigsh",
]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, default=13)
    parser.add_argument("--levels", type=int, default=4)
    parser.add_argument("--tol", type=float, default=1e-8)
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--variants", nargs="+", default=VARIANTS, choices=VARIANTS)
    args = parser.parse_args()
    load_before = os.getloadavg()
    measured: dict[str, list[dict[str, Any]]] = {v: [] for v in args.variants}
    for _ in range(args.repeats):
        for variant in args.variants:
            t0 = time.perf_counter()
            result = run(args.sites, args.levels, variant, args.tol)
            measured[variant].append(result)
            print(
                f"{variant}: {result['seconds']:.1f} s, peak {result['peak_gib']:.2f} GiB "
                f"(wall {time.perf_counter() - t0:.1f} s)",
                flush=True,
            )
    load_after = os.getloadavg()
    seconds = {v: statistics.median(float(r["seconds"]) for r in rs) for v, rs in measured.items()}
    peaks = {v: statistics.median(float(r["peak_gib"]) for r in rs) for v, rs in measured.items()}
    rows = []
    for variant, results in measured.items():
        last = results[-1]
        energies = " ".join(f"{e:.8f}" for e in last["energies"])
        ratio_t = seconds[variant] / seconds["eigsh"] if "eigsh" in seconds else float("nan")
        ratio_m = peaks[variant] / peaks["eigsh"] if "eigsh" in peaks else float("nan")
        products = int(last["products"])
        rows.append(
            [
                variant,
                f"{int(last['dim']):,}",
                energies,
                f"{float(last['residual']):.1e}",
                "-" if products < 0 else str(products),
                f"{seconds[variant]:.1f}",
                f"{ratio_t:.2f}",
                f"{peaks[variant]:.2f}",
                f"{ratio_m:.2f}",
            ]
        )
    print()
    print(table(HEADERS, rows))
    print(
        f"\nL = N = {args.sites}, J = U = 1, k = {args.levels}, tol = {args.tol}, "
        f"{args.repeats} run(s) per variant, medians. Time includes building the matrix "
        "(in Rust for 'rust stored', fm.build_matrix for eigsh); peak = maximum resident "
        "memory of the solving process (wait4). eigsh: scipy.sparse.linalg.eigsh(k, "
        "which='SA') on the CSR matrix (ncv = max(2k + 1, 20)), which can skip copies of "
        "degenerate levels; 'lowest_levels csr': fm.lowest_levels(method='csr'), eigsh "
        "plus the recovery of skipped copies; Rust: "
        "NativeOperator.lanczos_levels (basis 2k + 8, plus the deflated re-check), "
        f"{os.cpu_count()} cores. Load average (1, 5, 15 min) before: "
        f"{' '.join(f'{x:.2f}' for x in load_before)}, after: "
        f"{' '.join(f'{x:.2f}' for x in load_after)}."
    )


if __name__ == "__main__":
    main()
