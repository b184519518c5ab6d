"""Benchmark: ``fm.evolve`` at small sizes against scipy's ``expm_multiply`` with the
occupations taken in numpy, on the same time grid.

The unit-filled Bose–Hubbard ring (J = U = 1) from the Fock state |1 1 … 1⟩ to t = 10
with 201 recorded times and every site's occupation recorded. Target: fockmill no
slower than the scipy route (ratio <= 1). Medians of ``--repeats`` runs, each size in
this process; the load average is printed with the table.

Usage: python benchmarks/bench_evolve_small.py [--sites 5 6 7] [--repeats 5]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

import numpy as np
import scipy.sparse.linalg as sla

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm
from _common import bose_hubbard_ring, unit_filling


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[5, 6, 7])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    print(f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print(f"{'L':>3} {'states':>7} {'fockmill s':>11} {'scipy s':>9} {'ratio':>6} {'max |Δn|':>9}")
    for sites in args.sites:
        space = unit_filling(sites)
        h = bose_hubbard_ring(sites)
        psi0 = space.basis_vector([1] * sites)
        times = np.linspace(0.0, 10.0, 201)
        observables = {f"n{i}": fm.number(i) for i in range(sites)}
        occupations = space.occupations().astype(np.float64)
        ours, theirs = [], []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            ev = fm.evolve(h, space, psi0=psi0, times=times, observables=observables)
            ours.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            matrix = fm.build_matrix(h, space).tocsc()
            states = sla.expm_multiply(
                -1j * matrix, psi0.astype(complex), start=0.0, stop=10.0, num=201, endpoint=True
            )
            reference = (np.abs(states) ** 2) @ occupations
            theirs.append(time.perf_counter() - t0)
        mine = np.stack([ev.values[f"n{i}"] for i in range(sites)], axis=1)
        a, b = statistics.median(ours), statistics.median(theirs)
        print(
            f"{sites:>3} {space.dim:>7,} {a:>11.3f} {b:>9.3f} {a / b:>6.2f} "
            f"{float(np.max(np.abs(mine - reference))):>9.1e}"
        )
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
