"""Benchmark: CSR build of the Bose–Hubbard ring at unit filling, L = N = 10 … 13.

Compares fockmill's parallel Rust build with
(a) a hand-written pure-Python build of the same matrix (enumerate the sector, one
    dict look-up per hop), run only where it finishes in reasonable time, and
(b) the time numpy takes merely to fill arrays of the output's size (indptr, indices,
    data), the floor for any builder that returns those arrays.
Prints a table with medians and the ratios the targets refer to:
  >= 500x the pure-Python build at L = 11, and <= 3x the fill time at L = 13.

Usage: python benchmarks/bench_build.py [--max-sites 13] [--python-up-to 11] [--repeats 3]
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np
import scipy.sparse as sp

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm
from _common import bose_hubbard_ring, median_time, table, unit_filling


def sector_states(sites: int, quanta: int) -> list[tuple[int, ...]]:
    """All occupation tuples with the given total, in lexicographic order."""
    out: list[tuple[int, ...]] = []

    def fill(prefix: list[int], left: int, modes_left: int) -> None:
        if modes_left == 1:
            out.append((*prefix, left))
            return
        for n in range(left + 1):
            fill([*prefix, n], left - n, modes_left - 1)

    fill([], quanta, sites)
    return out


def pure_python_build(sites: int, hopping: float = 1.0, interaction: float = 1.0) -> sp.csr_array:
    """The reference a careful Python programmer would write: dict look-ups per hop."""
    states = sector_states(sites, sites)
    index = {s: k for k, s in enumerate(states)}
    indptr = [0]
    indices: list[int] = []
    data: list[float] = []
    for state in states:
        row: dict[int, float] = {}
        diag = 0.5 * interaction * sum(n * (n - 1) for n in state)
        if diag:
            row[index[state]] = diag
        for i in range(sites):
            for a, b in ((i, (i + 1) % sites), ((i + 1) % sites, i)):
                if state[b] == 0:
                    continue
                new = list(state)
                amp = np.sqrt(new[b] * (new[a] + 1))
                new[b] -= 1
                new[a] += 1
                col = index[tuple(new)]
                row[col] = row.get(col, 0.0) - hopping * amp
        for col in sorted(row):
            if row[col] != 0.0:
                indices.append(col)
                data.append(row[col])
        indptr.append(len(indices))
    dim = len(states)
    return sp.csr_array((np.array(data), np.array(indices), np.array(indptr)), shape=(dim, dim))


def fill_arrays(dim: int, nnz: int) -> None:
    """Allocate and fill arrays of a CSR matrix's size: the floor for any builder."""
    indptr = np.full(dim + 1, 1, dtype=np.int32)
    indices = np.full(nnz, 1, dtype=np.int32)
    data = np.full(nnz, 1.0)
    del indptr, indices, data


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--min-sites", type=int, default=10)
    parser.add_argument("--max-sites", type=int, default=13)
    parser.add_argument("--python-up-to", type=int, default=11)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--threads", type=int, default=None)
    args = parser.parse_args()

    print(f"fockmill {fm.__version__}, threads: {args.threads or fm._native.default_threads()}")
    rows = []
    for sites in range(args.min_sites, args.max_sites + 1):
        h = bose_hubbard_ring(sites)
        space = unit_filling(sites)
        t_rust, matrix = median_time(
            lambda h=h, space=space: fm.build_matrix(h, space, threads=args.threads), args.repeats
        )
        dim, nnz = space.dim, matrix.nnz
        del matrix
        t_fill, _ = median_time(lambda dim=dim, nnz=nnz: fill_arrays(dim, nnz), args.repeats)
        if sites <= args.python_up_to:
            t0 = time.perf_counter()
            reference = pure_python_build(sites)
            t_py = time.perf_counter() - t0
            check = fm.build_matrix(h, space)
            assert abs(reference - check).max() < 1e-12, "pure-Python build disagrees"
            py_cells = [f"{t_py:.2f}", f"{t_py / t_rust:.0f}x"]
        else:
            py_cells = ["-", "-"]
        rows.append(
            [
                str(sites),
                f"{dim:,}",
                f"{nnz:,}",
                f"{t_rust:.3f}",
                f"{nnz / t_rust / 1e6:.1f}",
                *py_cells,
                f"{t_fill:.3f}",
                f"{t_rust / t_fill:.2f}x",
            ]
        )
        print(table(_HEADERS, rows[-1:]) if len(rows) == 1 else "", end="", flush=True)
    print("\n")
    print(table(_HEADERS, rows))
    print(
        "\nmedians of",
        args.repeats,
        "runs (wall clock; fockmill's time includes preparing its kernel); 'vs python' = "
        "pure-Python time / fockmill time (target >= 500x at L=11); 'vs fill' = fockmill "
        f"time / numpy fill time (target <= 3x at L=13). Load: {os.getloadavg()[0]:.1f} "
        f"(1-min average on {os.cpu_count()} cores).",
    )


_HEADERS = [
    "L=N",
    "states",
    "nonzeros",
    "fockmill s",
    "Mnnz/s",
    "python s",
    "vs python",
    "fill s",
    "vs fill",
]

if __name__ == "__main__":
    main()
