"""Benchmark: matrix-free product vs scipy's CSR product on the same matrix, and thread
scaling of the matrix-free product (Bose–Hubbard ring at unit filling).

Targets: matrix-free time <= 2x scipy's CSR product; >= 1.7x speed-up on 2 threads.

Usage: python benchmarks/bench_matvec.py [--sites 11 12 13] [--repeats 7]
"""

from __future__ import annotations

import argparse
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm
from _common import bose_hubbard_ring, median_time, table, unit_filling


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[11, 12, 13])
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()
    rows = []
    for sites in args.sites:
        h = bose_hubbard_ring(sites)
        space = unit_filling(sites)
        x = np.random.default_rng(1).standard_normal(space.dim)
        matrix = fm.build_matrix(h, space)
        t_csr, y_csr = median_time(lambda m=matrix, x=x: m @ x, args.repeats)
        nnz = matrix.nnz
        del matrix
        timings = {}
        for threads in (1, 2):
            op = fm.build_operator(h, space, threads=threads)
            timings[threads], y = median_time(lambda op=op, x=x: op @ x, args.repeats)
            assert np.allclose(y, y_csr, atol=1e-9), "products disagree"
        rows.append(
            [
                str(sites),
                f"{space.dim:,}",
                f"{nnz:,}",
                f"{t_csr * 1e3:.1f}",
                f"{timings[1] * 1e3:.1f}",
                f"{timings[2] * 1e3:.1f}",
                f"{timings[2] / t_csr:.2f}x",
                f"{timings[1] / timings[2]:.2f}x",
            ]
        )
        print(f"L={sites} done", flush=True)
    headers = [
        "L=N",
        "states",
        "nonzeros",
        "scipy CSR ms",
        "free 1t ms",
        "free 2t ms",
        "free/CSR",
        "2t speed-up",
    ]
    print()
    print(table(headers, rows))
    print(
        f"\nmedians of {args.repeats} products; scipy's CSR product is single-threaded; "
        "'free' = fockmill matrix-free product (no matrix stored). Targets: free/CSR <= 2x, "
        "2-thread speed-up >= 1.7x."
    )


if __name__ == "__main__":
    main()
