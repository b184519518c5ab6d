"""Benchmark: the largest ground states, low-memory Lanczos (four vectors, no matrix)
on the Bose–Hubbard ring at unit filling, with wall time and peak memory.

Each size runs in a fresh subprocess so that its peak resident memory is its own.
Targets (matrix-free): L = N = 15 (77,558,760 states) in < 6 min with < 4 GB peak;
L = 16 (300,540,195 states) in < 45 min with < 16 GB peak.

Usage: python benchmarks/bench_ground.py [--sites 12 13 14] [--interaction 1.0]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

sys.path.insert(0, os.path.dirname(__file__))
from _common import table

CHILD = """
import json, sys, time
sys.path.insert(0, {here!r})
from _common import bose_hubbard_ring, unit_filling
import fockmill as fm
import numpy as np
sites, interaction, method, store = {sites}, {interaction}, {method!r}, {store}
h = bose_hubbard_ring(sites, 1.0, interaction)
space = unit_filling(sites)
if {probe}:
    # One product first, timed on its own (two vectors, freed before the solve), so a
    # run that cannot finish still reports the time per product.
    native = fm._native.NativeOperator.on_space(space.native, h.to_native())
    x = np.ones(space.dim)
    t0 = time.perf_counter()
    native.matvec(x)
    first = time.perf_counter() - t0
    t0 = time.perf_counter()
    native.matvec(x)
    print(json.dumps(dict(probe=True, cut=native.cut, first=first,
                          product=time.perf_counter() - t0)), file=sys.stderr, flush=True)
    del native, x
t0 = time.perf_counter()
problem = fm.prepare(h, space)
plan = problem.memory_plan(store_matrix=store) if method == "lanczos" else None
options = dict(store_matrix=store) if method == "lanczos" else dict()
g = problem.ground_state(method=method, tol=1e-8, cutoff_warning=None, **options)
print(json.dumps(dict(dim=space.dim, energy=g.energy, residual=g.residual,
                      products=g.products, seconds=time.perf_counter() - t0,
                      plan=None if plan is None else plan.peak_bytes)))
"""


def run(sites: int, interaction: float, method: str, store: bool, probe: bool) -> dict[str, float]:
    """Solve in a child process; its peak resident memory comes from wait4."""
    code = CHILD.format(
        here=os.path.dirname(os.path.abspath(__file__)),
        sites=sites,
        interaction=interaction,
        method=method,
        store=store,
        probe=probe,
    )
    t0 = time.perf_counter()
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    out = child.stdout.read() if child.stdout else ""
    _, status, usage = os.wait4(child.pid, 0)
    if status != 0:
        raise RuntimeError(f"child failed with status {status}")
    result = json.loads(out.strip().splitlines()[-1])
    result["peak_gib"] = usage.ru_maxrss / 2**20  # KiB on Linux
    result["wall"] = time.perf_counter() - t0
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[12, 13, 14])
    parser.add_argument("--interaction", type=float, default=1.0)
    parser.add_argument(
        "--probe",
        action="store_true",
        help="time one matrix-free product before each solve (printed as it happens)",
    )
    parser.add_argument("--method", default="lanczos")
    parser.add_argument(
        "--variants",
        nargs="+",
        default=["stored", "free"],
        choices=["stored", "free"],
        help="for lanczos: CSR kept in Rust (stored) and/or matrix-free (free)",
    )
    args = parser.parse_args()
    rows = []
    for sites in sorted(args.sites):
        for variant in args.variants:
            r = run(sites, args.interaction, args.method, variant == "stored", args.probe)
            rows.append(
                [
                    str(sites),
                    variant,
                    f"{int(r['dim']):,}",
                    f"{r['energy']:.10f}",
                    f"{r['energy'] / sites:.10f}",
                    f"{r['residual']:.1e}",
                    str(int(r["products"])),
                    f"{r['seconds']:.1f}",
                    f"{r['seconds'] / max(r['products'], 1) * 1e3:.0f}",
                    "-" if r["plan"] is None else f"{r['plan'] / 2**30:.2f}",
                    f"{r['peak_gib']:.2f}",
                    "-" if r["plan"] is None else f"{r['peak_gib'] * 2**30 / r['plan']:.2f}",
                ]
            )
            print(table(HEADERS, rows[-1:]).splitlines()[-1], flush=True)
    print()
    print(table(HEADERS, rows))
    print(
        f"\nmethod={args.method}, J=1, U={args.interaction}, tol=1e-8; peak = maximum "
        "resident memory of the solving process (wait4); 'stored' builds the CSR inside "
        "Rust first (its build time is included), 'free' never stores a matrix; plan = "
        "Problem.memory_plan(...).peak_bytes (resident memory when planned + the solve's "
        "planned growth), peak/plan should stay <= 1.10 (issue 19 item 6)."
    )


HEADERS = [
    "L=N",
    "variant",
    "states",
    "E0",
    "E0/L",
    "residual",
    "products",
    "solve s",
    "ms/product",
    "plan GiB",
    "peak GiB",
    "peak/plan",
]

if __name__ == "__main__":
    main()
