"""Benchmark: density_correlations (one pass in Rust) vs one expectation() call per pair
of modes, on ground-state-sized random states of Bose–Hubbard rings at unit filling.

Usage: python benchmarks/bench_correlations.py [--sites 8 9 10 11] [--repeats 5]
"""

from __future__ import annotations

import argparse
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm
from _common import median_time, table, unit_filling


def pairwise(space: fm.FockSpace, v: np.ndarray) -> np.ndarray:
    """The loop a user would write without density_correlations."""
    modes = space.modes
    out = np.empty((modes, modes))
    for i in range(modes):
        for j in range(i, modes):
            value = fm.expectation(fm.number(i) * fm.number(j), space, v).real
            out[i, j] = out[j, i] = value
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[8, 9, 10, 11])
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    rows = []
    for sites in args.sites:
        space = unit_filling(sites)
        v = np.random.default_rng(2).standard_normal(space.dim)
        t_one, fast = median_time(lambda s=space, v=v: fm.density_correlations(s, v), args.repeats)
        t_loop, slow = median_time(lambda s=space, v=v: pairwise(s, v), args.repeats)
        assert np.allclose(fast, slow, rtol=1e-10, atol=1e-10), "results disagree"
        rows.append(
            [
                str(sites),
                f"{space.dim:,}",
                str(sites * (sites + 1) // 2),
                f"{t_one * 1e3:.1f}",
                f"{t_loop * 1e3:.1f}",
                f"{t_loop / t_one:.1f}x",
            ]
        )
        print(f"L={sites} done", flush=True)
    headers = ["L=N", "states", "pairs", "one pass ms", "per-pair loop ms", "ratio"]
    print(table(headers, rows))


if __name__ == "__main__":
    main()
