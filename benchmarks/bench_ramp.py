"""Benchmark: a ramp of the interaction on the unit-filled Bose–Hubbard ring.

H(t) = −J Σ (a_i† a_{i+1} + h.c.) + U(t)/2 Σ n_i (n_i − 1), J = 1, with U(t) rising
linearly from 2 to 10 over t = 0 .. 20 (``fm.piecewise_linear``), from the ground state
at U = 2, recording ⟨n_0(n_0 − 1)⟩ at 41 times. ``fm.evolve`` takes it as
``fm.TimeDependent(kinetic, [(interaction, ramp)])``: the fourth-order commutator-free
integrator with step doubling to ``tol``. For scale, the same window under the
time-independent H at U = 10 (a sudden quench, ``fm.evolve`` on one prepared problem)
is timed in the same run; the ratio column is ramp / sudden quench.

The table shows, per size: accepted steps, products with H(t) (each one product with
both parts; rejected steps included), the median wall time over ``--repeats`` and the
process CPU time, and the load average (1, 5, 15 min) before and after each row: the
machine is shared, so the times move with it.

Usage: python benchmarks/bench_ramp.py [--sites 8 10] [--repeats 1] [--tol 1e-6 1e-8]
"""

from __future__ import annotations

import argparse
import os
import sys

# BLAS pinned to one thread unless set (see bench_dynamics.py and README "BLAS threads").
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm  # noqa: E402
from _common import load, table, timed, unit_filling  # noqa: E402

T_END = 20.0
U_START, U_END = 2.0, 10.0


def pieces(sites: int) -> tuple[fm.LadderExpr, fm.LadderExpr]:
    """The hopping (J = 1) and the interaction ½ Σ n_i (n_i − 1) of the ring."""
    kinetic = fm.LadderExpr()
    interaction = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        kinetic = kinetic - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        interaction = interaction + 0.5 * fm.number(i) * (fm.number(i) - 1)
    return kinetic, interaction


def bench(sites: int, repeats: int, tol: float) -> list[str]:
    space = unit_filling(sites)
    kinetic, interaction = pieces(sites)
    before = load()
    k = fm.prepare(kinetic, space)
    u = fm.prepare(interaction, space)
    psi0 = fm.ground_state(kinetic + U_START * interaction, space).vector
    ramp = fm.piecewise_linear([0.0, T_END], [U_START, U_END])
    times = np.linspace(0.0, T_END, 41)
    pairs = {"pairs0": fm.number(0) * (fm.number(0) - 1)}
    H = fm.TimeDependent(k, [(u, ramp)])
    wall, cpu, ev = timed(
        lambda: fm.evolve(H, psi0=psi0, times=times, observables=pairs, tol=tol), repeats
    )
    sudden = fm.prepare(kinetic + U_END * interaction, space)
    wall_q, _, ev_q = timed(
        lambda: fm.evolve(sudden, psi0=psi0, times=times, observables=pairs, tol=tol), repeats
    )
    after = load()
    return [
        str(sites),
        f"{space.dim:,}",
        f"{tol:g}",
        str(ev.steps),
        f"{ev.products:,}",
        ev.method,
        f"{ev.error_estimate:.1e}",
        f"{ev.values['pairs0'][-1]:.4f}",
        f"{wall:.2f}",
        f"{cpu:.2f}",
        f"{ev_q.products:,}",
        f"{wall_q:.2f}",
        f"{wall / wall_q:.1f}",
        before,
        after,
    ]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, nargs="+", default=[8, 10])
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--tol", type=float, nargs="+", default=[1e-6])
    args = parser.parse_args()
    print(f"fockmill {fm.__version__}; {os.cpu_count()} cores; load average {load()}")
    print(
        f"ramp U = {U_START:g} -> {U_END:g} over t = 0 .. {T_END:g} (J = 1), from the "
        f"U = {U_START:g} ground state; {args.repeats} repeat(s), medians\n"
    )
    rows = [bench(sites, args.repeats, tol) for sites in args.sites for tol in args.tol]
    headers = [
        "L",
        "dim",
        "tol",
        "steps",
        "products",
        "method",
        "error est.",
        "<n0(n0-1)>(20)",
        "ramp s",
        "ramp cpu s",
        "quench products",
        "quench s",
        "ratio",
        "load before",
        "load after",
    ]
    print(table(headers, rows))
    print(f"\nload average at the end {load()}")


if __name__ == "__main__":
    main()
