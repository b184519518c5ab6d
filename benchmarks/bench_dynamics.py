"""Benchmark: time evolution, a spectral function and FTLM on the unit-filled
Bose–Hubbard ring (J = U = 1).

Targets at L = 12 (1,352,078 states): evolution from the Fock state |1 1 … 1⟩ to
t = 10/J with 100 recorded times in < 2 min; the quantum-removal spectral function
of site 0 in the ground state (400 frequencies, η = 0.1) in < 1 min; FTLM with 20
random vectors (100 Lanczos steps each, 20 temperatures) in < 10 min.

Each task runs ``--repeats`` times (default 1: they are long) and the table shows the
median and its ratio to the target. The machine's load average is printed before and
after: on a shared machine the times move with it.

Usage: python benchmarks/bench_dynamics.py [--sites 12] [--repeats 1] [--tasks evolve spectral ftlm]
"""

from __future__ import annotations

import argparse
import os
import sys
import time

# BLAS pinned to one thread unless set: the Krylov vector operations are many small
# BLAS calls, and a multi-threaded OpenBLAS on a loaded machine spends more time waking
# threads than computing (measured 17x slower here; see README "BLAS threads").
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm  # noqa: E402
from _common import bose_hubbard_ring, load, table, timed, unit_filling  # noqa: E402

TARGETS = {"evolve": 120.0, "spectral": 60.0, "ftlm": 600.0}


def bench_size(sites: int, tasks: list[str], repeats: int, samples: int = 20) -> list[tuple]:
    """Rows of the table for one ring size."""
    rows: list[tuple] = []
    h = bose_hubbard_ring(sites, 1.0, 1.0)
    space = unit_filling(sites)
    if "evolve" in tasks:
        psi0 = np.zeros(space.dim)
        psi0[space.index([1] * sites)] = 1.0
        times = np.linspace(0.1, 10.0, 100)

        def run_evolve() -> fm.Evolution:
            return fm.evolve(
                h,
                space,
                psi0,
                times,
                observables={"n0^2": fm.number(0) * fm.number(0)},
                cutoff_warning=None,
            )

        seconds, cpu, ev = timed(run_evolve, repeats)
        detail = (
            f"{ev.method}, {ev.steps} Krylov steps, {ev.products} products, "
            f"error estimate {ev.error_estimate:.1e}, ⟨n0²⟩(10) = {ev.values['n0^2'][-1]:.6f}"
        )
        rows.append((sites, space.dim, "evolve to t=10, 100 times", seconds, cpu, "evolve", detail))
    if "spectral" in tasks:
        t0 = time.perf_counter()
        ground = fm.ground_state(h, space, tol=1e-10, cutoff_warning=None)
        ground_seconds = time.perf_counter() - t0
        removed = fm.FockSpace(modes=sites, cutoff=sites, total=sites - 1)
        omegas = np.linspace(-10.0, 10.0, 400)

        def run_spectral() -> np.ndarray:
            return fm.spectral_function(
                h, space, ground.vector, fm.lowering(0), omegas, eta=0.1, target=removed
            )

        seconds, cpu, spectrum = timed(run_spectral, repeats)
        weight = float(np.sum(spectrum) * (omegas[1] - omegas[0]))
        detail = (
            f"target dim {removed.dim:,}; ground state first ({ground_seconds:.1f} s, "
            f"{ground.method}); ∫S dω on the grid = {weight:.4f}"
        )
        rows.append(
            (sites, space.dim, "spectral function, 400 ω", seconds, cpu, "spectral", detail)
        )
    if "ftlm" in tasks:
        temperatures = np.geomspace(0.1, 10.0, 20)

        def run_ftlm() -> fm.Thermal:
            return fm.thermal(
                h,
                space,
                temperatures,
                observables={"n0^2": fm.number(0) * fm.number(0)},
                method="ftlm",
                samples=samples,
                cutoff_warning=None,
            )

        seconds, cpu, th = timed(run_ftlm, repeats)
        detail = (
            f"E(T=1) = {th.energy[10]:.4f} ± {th.errors[10]:.4f}, "
            f"C(T=1) = {th.heat_capacity[10]:.4f} ± {th.heat_capacity_errors[10]:.4f}"
        )
        rows.append((sites, space.dim, f"FTLM, {samples} vectors", seconds, cpu, "ftlm", detail))
    return rows


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[12])
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--tasks", nargs="+", default=["evolve", "spectral", "ftlm"])
    parser.add_argument("--samples", type=int, default=20, help="FTLM random vectors")
    args = parser.parse_args()
    print(
        f"cores: {os.cpu_count()}, BLAS threads {os.environ['OPENBLAS_NUM_THREADS']}, "
        f"load average before: {load()}"
    )
    rows = []
    for sites in args.sites:
        rows += bench_size(sites, args.tasks, args.repeats, args.samples)
    print(f"load average after: {load()}")
    print(
        table(
            ["L", "dim", "task", "wall s", "CPU s", "target s", "wall/target", "details"],
            [
                [
                    str(sites),
                    f"{dim:,}",
                    task,
                    f"{seconds:.1f}",
                    f"{cpu:.1f}",
                    f"{TARGETS[key]:.0f}",
                    f"{seconds / TARGETS[key]:.2f}",
                    detail,
                ]
                for sites, dim, task, seconds, cpu, key, detail in rows
            ],
        )
    )


if __name__ == "__main__":
    main()
