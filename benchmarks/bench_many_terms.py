"""Benchmark: models with many terms — an all-to-all network of modes with a random
coupling matrix (invented: symmetric Gaussian couplings, seed 1) and bosons in the
lowest Landau level (Laughlin sectors L = N(N − 1)).

Each size runs in a fresh process (``--one``), so no kernel, pool or cache of an
earlier size is reused; the driver prints the load average before and after each.

Network columns: assembling the expression from the array (terms/s); the first build
of a freshly prepared problem, preparation included (entries/s); a second build of
the same problem; the matrix-free product (the prepared kernel, two threads) against
scipy's product with the stored CSR matrix, medians and their ratio.

Landau-level columns: states, the time to assemble the model, build the CSR matrix
and find the ground state (``fm.ground_state``, method auto), and the energy (0 for
the Laughlin state).

Targets (issue 20): network, 100 modes, 3 quanta: first build >= 50 M entries/s and
product <= 1.5x CSR; 2 quanta: product <= 3x CSR. Largest Laughlin N solved in < 5 min.

Usage: python benchmarks/bench_many_terms.py [--network 2 3] [--laughlin 6 7 8]
       [--repeats 7] [--modes 100]
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


def network(modes: int, quanta: int, repeats: int) -> str:
    rng = np.random.default_rng(1)
    t = rng.normal(size=(modes, modes))
    t = (t + t.T) / 2
    t0 = time.perf_counter()
    h = fm.quadratic_form(t)
    assemble = time.perf_counter() - t0
    space = fm.FockSpace(modes, quanta, quanta)
    t0 = time.perf_counter()
    problem = fm.prepare(h, space, threads=2)
    matrix = problem.matrix()
    first = time.perf_counter() - t0
    second, matrix = median_time(problem.matrix, 3)
    nnz = matrix.nnz
    x = rng.standard_normal(space.dim)
    problem.matvec(x)  # the kernel is ready; warm the caches
    free, y = median_time(lambda: problem.matvec(x), repeats)
    stored, y_csr = median_time(lambda: matrix @ x, repeats)
    assert np.allclose(y, y_csr, atol=1e-9 * np.abs(y_csr).max()), "products disagree"
    rate = h.term_count() / assemble / 1e6
    return (
        f"| {modes} | {quanta} | {space.dim:,} | {nnz:,} | {rate:.1f} M/s "
        f"| {first:.3f} s ({nnz / first / 1e6:.0f} M/s) | {second:.3f} s "
        f"({nnz / second / 1e6:.0f} M/s) | {free * 1e3:.2f} ms | {stored * 1e3:.2f} ms "
        f"| {free / stored:.2f}x | cut {problem.native.cut} |"
    )


def laughlin(particles: int) -> str:
    momentum = particles * (particles - 1)
    t0 = time.perf_counter()
    model = lowest_landau_level(total=particles, angular_momentum=momentum)
    h = model.hamiltonian()
    made = time.perf_counter() - t0
    t0 = time.perf_counter()
    problem = fm.prepare(h, model.space, threads=2)
    matrix = problem.matrix()
    build = time.perf_counter() - t0
    nnz = matrix.nnz
    del matrix
    t0 = time.perf_counter()
    result = problem.ground_state(tol=1e-8)
    solve = time.perf_counter() - t0
    return (
        f"| {particles} | {momentum} | {model.space.dim:,} | {h.term_count():,} | {nnz:,} "
        f"| {made:.2f} s | {build:.2f} s | {solve:.1f} s ({result.method}) "
        f"| {result.energy:.2e} |"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--network", type=int, nargs="*", default=[2, 3])
    parser.add_argument("--laughlin", type=int, nargs="*", default=[6, 7, 8])
    parser.add_argument("--modes", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=7)
    parser.add_argument("--one", nargs=2, metavar=("CASE", "SIZE"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        case, size = args.one[0], int(args.one[1])
        print(network(args.modes, size, args.repeats) if case == "network" else laughlin(size))
        return
    here = os.path.abspath(__file__)
    print(
        "| modes | quanta | states | entries | assembly | first build | second build "
        "| matrix-free | CSR | ratio | kernel |"
    )
    print("| --- | --- | --- | --- | --- | --- | --- | --- | --- | --- | --- |")
    for quanta in args.network:
        before = load()
        command = [
            sys.executable,
            here,
            "--modes",
            str(args.modes),
            "--repeats",
            str(args.repeats),
            "--one",
            "network",
            str(quanta),
        ]
        out = subprocess.run(command, capture_output=True, text=True, check=True).stdout
        print(out.strip(), f" load {before} -> {load()}", flush=True)
    print()
    print("| N | L | states | terms | entries | model | CSR build | ground state | E0 |")
    print("| --- | --- | --- | --- | --- | --- | --- | --- | --- |")
    for particles in args.laughlin:
        before = load()
        command = [sys.executable, here, "--one", "laughlin", str(particles)]
        out = subprocess.run(command, capture_output=True, text=True, check=True).stdout
        print(out.strip(), f" load {before} -> {load()}", flush=True)


if __name__ == "__main__":
    main()
