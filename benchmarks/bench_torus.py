"""Benchmark: the unit-filled Bose–Hubbard model on the 4 × 4 torus (16 bosons on 16
sites, 300,540,195 states), ground state in the fully symmetric sector of the torus's
space group (both translations, the rotation by 90° and a mirror: 128 elements), and
optionally in the full number sector, matrix-free, for the same energy.

Each run is a fresh process, so its peak resident memory (wait4) is its own. The table
shows: sector dimension, enumeration time (one pass over the base space with the orbit
table), the orbit table's size, the ground-state solve (the library's default choice of
a stored or matrix-free product), products, E0 and E0 per site to 10 digits, the peak
memory, and the load average before and after.

Usage: python benchmarks/bench_torus.py [--rows 4] [--cols 4] [--full] [--tol 1e-8]
"""

from __future__ import annotations

import argparse
import os
import sys
from typing import Any

sys.path.insert(0, os.path.dirname(__file__))
from _common import fresh_process, table

CHILD = """
import json, time
import fockmill as fm
rows, cols, what, tol = {rows}, {cols}, {what!r}, {tol}
sites = rows * cols
edges = fm.models.rectangular_edges(rows, cols, periodic=True)
model = fm.models.bose_hubbard(edges, J=1.0, U=1.0, total=sites)
h = model.hamiltonian()
base = fm.FockSpace(modes=sites, cutoff=sites, total=sites)

def perm(f):
    return fm.ModePermutation([f(r, c)[0] % rows * cols + f(r, c)[1] % cols
                               for r in range(rows) for c in range(cols)])

t0 = time.perf_counter()
if what == "sector":
    gens = [perm(lambda r, c: (r, c + 1)), perm(lambda r, c: (r + 1, c)),
            perm(lambda r, c: (r, -c))]
    if rows == cols:
        gens.append(perm(lambda r, c: (c, -r)))
    space = fm.SymmetricSpace(base, [(g, 0) for g in gens])
    extra = dict(order=space.group_order, table_mib=space.orbit_table_bytes / 2**20)
else:
    space = base
    extra = dict(order=1, table_mib=0.0)
enum = time.perf_counter() - t0
print(json.dumps(dict(stage="space", dim=space.dim, seconds=enum)), flush=True)
t0 = time.perf_counter()
store = None if what == "sector" else False
g = fm.ground_state(h, space, method="lanczos", tol=tol, cutoff_warning=None,
                    store_matrix=store, progress=False)
out = dict(dim=space.dim, enum=enum, seconds=time.perf_counter() - t0, energy=g.energy,
           products=g.products, residual=g.residual, **extra)
print(json.dumps(out), flush=True)
"""


def run(rows: int, cols: int, what: str, tol: float) -> dict[str, Any]:
    """One solve in a fresh process; peak resident memory from wait4."""
    return fresh_process(CHILD.format(rows=rows, cols=cols, what=what, tol=tol), what)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=4)
    parser.add_argument("--cols", type=int, default=4)
    parser.add_argument("--tol", type=float, default=1e-8)
    parser.add_argument("--full", action="store_true", help="also the full number sector")
    args = parser.parse_args()
    print(f"load average {os.getloadavg()}; {os.cpu_count()} cores", flush=True)
    runs = ["sector"] + (["full"] if args.full else [])
    results = {what: run(args.rows, args.cols, what, args.tol) for what in runs}
    sites = args.rows * args.cols
    rows = [
        [
            what,
            f"{r['dim']:,}",
            str(r["order"]),
            f"{r['enum']:.1f}",
            f"{r['table_mib']:,.0f}",
            f"{r['seconds']:.1f}",
            str(r["products"]),
            f"{r['energy']:.10f}",
            f"{r['energy'] / sites:.10f}",
            f"{r['wall']:.1f}",
            f"{r['peak_gib']:.2f}",
            r["load"],
        ]
        for what, r in results.items()
    ]
    headers = [
        "space",
        "dim",
        "group",
        "space s",
        "table MiB",
        "solve s",
        "products",
        "E0",
        "E0/L",
        "wall s",
        "peak GiB",
        "load",
    ]
    print()
    print(table(headers, rows))
    if "full" in results:
        diff = results["sector"]["energy"] - results["full"]["energy"]
        print(f"\nE0(sector) - E0(full) = {diff:.2e}")
    print(
        f"\n{args.rows} x {args.cols} torus, J = U = 1, {sites} bosons, tol = {args.tol:g}; "
        "sector = trivial representation of the space group; full = the number sector, "
        f"matrix-free; load average at the end {os.getloadavg()}."
    )


if __name__ == "__main__":
    main()
