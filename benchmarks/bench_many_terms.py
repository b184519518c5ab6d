"""Benchmark: models with many terms, in one table — an all-to-all network of modes with
a random coupling matrix (invented: symmetric Gaussian couplings, seed 1), bosons in the
lowest Landau level (Laughlin sectors L = N(N − 1)), and the Bose–Hubbard ring written
in momentum space from arrays (``fm.quadratic_form`` for −2J cos k, ``fm.pair_interaction``
for (U/L) Σ a†_{k+q} a†_{p−q} a_p a_k; N = L bosons, J = U = 1, invented) on the space
fixing the number and the total momentum (zero) modulo L (two charges).

Each size runs in a fresh process (``--one``), so no kernel, pool or cache of an
earlier size is reused; the driver prints the load average before and after each.

Columns: states, terms, stored entries; assembling the expression (terms/s; for the
Landau level the whole model); the first build of a freshly prepared problem,
preparation included (entries/s); a second build of the same problem; the first
product (which makes the row tables products keep, when the operator takes them); the matrix-free
product (the prepared kernel, two threads) against scipy's product with the stored CSR
matrix, medians and their ratio; the product kernel (cut 0: the row kernel, which
indexes many terms by the quanta they remove; cut > 0: the bipartite tables); for the
Landau level the ground-state solve and its energy (0 for the Laughlin state).

Targets (issue 20): network, 100 modes, 3 quanta: first build >= 50 M entries/s and
product <= 1.5x CSR; 2 quanta: product <= 3x CSR; ring and Landau level: build rate in
the table. Largest Laughlin N solved in < 5 min.

Usage: python benchmarks/bench_many_terms.py [--network 2 3] [--laughlin 6 7 8]
       [--ring 9 10 11] [--repeats 7] [--modes 100] [--no-solve]
       [--laughlin-solve 9 10]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm
from _common import load, median_time
from fockmill.models.builders import lowest_landau_level


def measure(h: fm.LadderExpr, space: fm.FockSpace, repeats: int) -> tuple[list[str], object]:
    """States, terms, entries, first and second build, products and kernel columns."""
    t0 = time.perf_counter()
    problem = fm.prepare(h, space, threads=2)
    matrix = problem.matrix()
    first = time.perf_counter() - t0
    second, matrix = median_time(problem.matrix, 3)
    nnz = matrix.nnz
    x = np.random.default_rng(2).standard_normal(space.dim)
    t0 = time.perf_counter()
    problem.matvec(x)  # the first product makes what products keep (row tables)
    first_product = time.perf_counter() - t0
    free, y = median_time(lambda: problem.matvec(x), repeats)
    stored, y_csr = median_time(lambda: matrix @ x, repeats)
    assert np.allclose(y, y_csr, atol=1e-9 * np.abs(y_csr).max()), "products disagree"
    columns = [
        f"{space.dim:,}",
        f"{h.term_count():,}",
        f"{nnz:,}",
        f"{first:.3f} s ({nnz / first / 1e6:.0f} M/s)",
        f"{second:.3f} s ({nnz / second / 1e6:.0f} M/s)",
        f"{first_product * 1e3:.1f} ms",
        f"{free * 1e3:.2f} ms",
        f"{stored * 1e3:.2f} ms",
        f"{free / stored:.2f}x",
        f"cut {problem.native.cut}",
    ]
    return columns, problem


def network(modes: int, quanta: int, repeats: int) -> str:
    rng = np.random.default_rng(1)
    t = rng.normal(size=(modes, modes))
    t = (t + t.T) / 2
    t0 = time.perf_counter()
    h = fm.quadratic_form(t)
    assemble = time.perf_counter() - t0
    space = fm.FockSpace(modes, quanta, quanta)
    columns, _ = measure(h, space, repeats)
    rate = f"{h.term_count() / assemble / 1e6:.1f} M terms/s"
    row = [f"network {modes} modes", f"{quanta} quanta", *columns[:3], rate, *columns[3:], ""]
    return "| " + " | ".join(row) + " |"


def laughlin(particles: int, repeats: int, solve: bool) -> str:
    momentum = particles * (particles - 1)
    t0 = time.perf_counter()
    model = lowest_landau_level(total=particles, angular_momentum=momentum)
    h = model.hamiltonian()
    made = time.perf_counter() - t0
    columns, problem = measure(h, model.space, repeats)
    note = ""
    if solve:
        t0 = time.perf_counter()
        result = problem.ground_state(tol=1e-8)  # type: ignore[attr-defined]
        seconds = time.perf_counter() - t0
        note = f"{seconds:.1f} s ({result.method}), E0 {result.energy:.1e}"
    size = f"N {particles}, L {momentum}"
    row = ["Landau level", size, *columns[:3], f"model {made:.2f} s", *columns[3:], note]
    return "| " + " | ".join(row) + " |"


def laughlin_solve(particles: int) -> str:
    """The Laughlin sector as a user solves it: the model, then ``fm.ground_state``
    (method and storage chosen by the library), timed together; no product or build
    measurements (for the sizes where each of those takes a minute)."""
    momentum = particles * (particles - 1)
    t0 = time.perf_counter()
    model = lowest_landau_level(total=particles, angular_momentum=momentum)
    result = fm.ground_state(model.hamiltonian(), model.space, tol=1e-8, cutoff_warning=None)
    seconds = time.perf_counter() - t0
    row = [
        "Landau level (solve only)",
        f"N {particles}, L {momentum}",
        f"{model.space.dim:,}",
        *[""] * 11,
    ]
    row[-1] = f"{seconds:.1f} s in all ({result.method}), E0 {result.energy:.1e}"
    return "| " + " | ".join(row) + " |"


def momentum_ring(sites: int) -> fm.LadderExpr:
    """The Bose–Hubbard ring (J = U = 1) in momentum space, from arrays."""
    k = np.arange(sites)
    dispersion = np.diag(-2.0 * np.cos(2 * np.pi * k / sites))
    a, p, q = np.meshgrid(k, k, k, indexing="ij")
    a, p, q = a.ravel(), p.ravel(), q.ravel()
    rows = np.stack([(a + q) % sites, (p - q) % sites, p, a], axis=1)
    values = np.full(len(rows), 1.0 / sites)
    return fm.quadratic_form(dispersion) + fm.pair_interaction((rows, values))


def ring(sites: int, repeats: int) -> str:
    t0 = time.perf_counter()
    h = momentum_ring(sites)
    assemble = time.perf_counter() - t0
    space = fm.FockSpace(
        cutoff=[sites] * sites,
        charges=[fm.Charge(1, sites), fm.Charge(list(range(sites)), 0, sites)],
    )
    columns, _ = measure(h, space, repeats)
    rate = f"{h.term_count() / assemble / 1e6:.1f} M terms/s"
    row = ["momentum ring", f"L = N = {sites}, K = 0", *columns[:3], rate, *columns[3:], ""]
    return "| " + " | ".join(row) + " |"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--network", type=int, nargs="*", default=[2, 3])
    parser.add_argument("--laughlin", type=int, nargs="*", default=[6, 7, 8])
    parser.add_argument("--ring", type=int, nargs="*", default=[9, 10, 11])
    parser.add_argument(
        "--laughlin-solve",
        type=int,
        nargs="*",
        default=[],
        help="Laughlin sectors timed as a user solves them (model and ground state only)",
    )
    parser.add_argument("--modes", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--no-solve", action="store_true", help="skip the Landau-level solves")
    parser.add_argument("--one", nargs=2, metavar=("CASE", "SIZE"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        case, size = args.one[0], int(args.one[1])
        if case == "network":
            print(network(args.modes, size, args.repeats))
        elif case == "laughlin":
            print(laughlin(size, args.repeats, not args.no_solve))
        elif case == "laughlin-solve":
            print(laughlin_solve(size))
        else:
            print(ring(size, args.repeats))
        return
    here = os.path.abspath(__file__)
    print(f"load average at the start: {load()}")
    print(
        "| model | size | states | terms | entries | assembly | first build | second build "
        "| first product | matrix-free | CSR | ratio | kernel | ground state |"
    )
    print("| --- " * 14 + "|")
    cases = [("network", n) for n in args.network]
    cases += [("laughlin", n) for n in args.laughlin]
    cases += [("ring", n) for n in args.ring]
    cases += [("laughlin-solve", n) for n in args.laughlin_solve]
    for case, size in cases:
        before = load()
        command = [
            sys.executable,
            here,
            "--modes",
            str(args.modes),
            "--repeats",
            str(args.repeats),
            *(["--no-solve"] if args.no_solve else []),
            "--one",
            case,
            str(size),
        ]
        out = subprocess.run(command, capture_output=True, text=True, check=True).stdout
        print(out.strip(), f" load {before} -> {load()}", flush=True)
    print(f"load average at the end: {load()}")


if __name__ == "__main__":
    main()
