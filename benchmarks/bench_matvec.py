"""Benchmark: matrix-free product vs scipy's CSR product on the same matrix, and thread
scaling of the matrix-free product (Bose–Hubbard ring at unit filling).

The matrix-free product is the bipartite kernel with the automatic cut (printed), kept
between products as a prepared problem keeps it; the first product (which builds the
kernel) is not timed. Besides wall-clock medians the table shows CPU-time minima of the
single-threaded runs, which a shared machine disturbs less.

Targets: matrix-free (2 threads) <= 1.0x scipy's CSR product at L = 12, 13, 14;
>= 1.7x speed-up from 1 to 2 threads.

Usage: python benchmarks/bench_matvec.py [--sites 12 13 14] [--repeats 7]
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm
from _common import bose_hubbard_ring, median_time, table, unit_filling


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[12, 13, 14])
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
        cpu_csr = cpu_time(lambda m=matrix, x=x: m @ x, args.repeats)
        del matrix
        timings = {}
        cut = 0
        cpu_free = 0.0
        for threads in (1, 2):
            op = fm.build_operator(h, space, threads=threads)
            y = op @ x  # builds the kernel once
            cut = op.native.cut
            timings[threads], y = median_time(lambda op=op, x=x: op @ x, args.repeats)
            assert np.allclose(y, y_csr, atol=1e-9), "products disagree"
            if threads == 1:
                cpu_free = cpu_time(lambda op=op, x=x: op @ x, args.repeats)
            del op
        rows.append(
            [
                str(sites),
                f"{space.dim:,}",
                f"{nnz:,}",
                str(cut),
                f"{t_csr * 1e3:.1f}",
                f"{timings[1] * 1e3:.1f}",
                f"{timings[2] * 1e3:.1f}",
                f"{timings[2] / t_csr:.2f}x",
                f"{timings[1] / timings[2]:.2f}x",
                f"{cpu_free / cpu_csr:.2f}x",
            ]
        )
        print(f"L={sites} done", flush=True)
    headers = [
        "L=N",
        "states",
        "nonzeros",
        "cut",
        "scipy CSR ms",
        "free 1t ms",
        "free 2t ms",
        "free 2t/CSR",
        "2t speed-up",
        "1t/CSR cpu",
    ]
    print()
    print(table(headers, rows))
    print(
        f"\nmedians of {args.repeats} products (wall clock); scipy's CSR product is "
        "single-threaded; 'free' = fockmill matrix-free product (no matrix stored), "
        "'cut' = left modes of its bipartite kernel; '1t/CSR cpu' = ratio of CPU-time "
        f"minima, both single-threaded. Load: {os.getloadavg()[0]:.1f} (1-min average "
        f"on {os.cpu_count()} cores). Targets: free 2t/CSR <= 1.0x, 2-thread speed-up >= 1.7x."
    )


def cpu_time(run: object, repeats: int) -> float:
    """Smallest CPU time (all threads of this process) of ``repeats`` calls."""
    assert callable(run)
    best = float("inf")
    for _ in range(repeats):
        t0 = time.process_time()
        run()
        best = min(best, time.process_time() - t0)
    return best


if __name__ == "__main__":
    main()
