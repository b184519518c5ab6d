"""Benchmark: what structure reuse, warm starts and worker processes buy in a sweep.

Invented workload: a Bose–Hubbard ring at unit filling (default 8 sites, dim 6435),
the on-site interaction U swept over 100 values at fixed hopping J = 1, two lowest
levels per point (energy and gap), sparse Lanczos at every point.

Variants, each timed ``--repeats`` times (the table shows medians):

* rebuild + cold: per point, prepare and build ``H(p)`` from the expressions and
  start the eigensolver from its seeded random vector (a plain loop over
  ``lowest_levels``);
* rebuild + warm: rebuild per point, start from the previous ground vector;
* reuse + cold: pieces built once on a shared pattern, random start per point;
* reuse + warm: pieces built once, warm starts (``run_sweep`` in-process);
* run_sweep on 1 and on 2 worker processes (chunks of consecutive points).

BLAS is pinned to one thread (unless set already) so that worker counts compare
fairly on a small machine. Run ``python benchmarks/bench_sweep.py --help`` for sizes;
``--quick`` runs a small version in a few seconds.
"""

from __future__ import annotations

import os

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import argparse  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable  # noqa: E402

import numpy as np  # noqa: E402
from fockmill.models import bose_hubbard, ring_edges  # noqa: E402
from fockmill.models.model import Model  # noqa: E402
from fockmill.sweeps.plan import SweepSettings, sweep_settings  # noqa: E402
from fockmill.sweeps.records import (  # noqa: E402
    ModelRecipe,
    PreparedModel,
    solve_levels,
    start_vector,
)
from fockmill.sweeps.run import run_sweep  # noqa: E402


def manual_sweep(
    model: Model,
    points: list[dict[str, float]],
    settings: SweepSettings,
    *,
    reuse: bool,
    warm: bool,
    products: list[int] | None = None,
) -> list[float]:
    """Ground energies point by point with the chosen reuse/warm-start policy.

    The points are solved by the sweep's own code (prepared problems and
    ``lowest_levels``); ``reuse`` assembles each point's matrix from the shared pattern
    (pieces built once), otherwise every point's Hamiltonian is prepared and built from
    its expression. With ``products`` given, the products per point are appended there.
    """
    recipe = ModelRecipe.from_model(model)
    prepared = PreparedModel.build(recipe, settings, points=len(points) if reuse else 1)
    if reuse and prepared.shared is None:
        raise SystemExit("the shared pattern is not in use (no Problem._with_matrix hook)")
    previous = None
    energies = []
    for index, point in enumerate(points):
        values = model.values(**point)
        problem = prepared.problem(values)
        start = start_vector(
            model.space.dim, np.dtype(np.float64), 0, index, previous if warm else None
        )
        solution = solve_levels(problem, settings, start)
        if products is not None:
            products.append(solution.products)
        previous = solution.vectors
        energies.append(float(solution.energies[0]))
    return energies


def timed(action: Callable[[], object], repeats: int) -> tuple[float, object]:
    """Median wall time of ``repeats`` runs, and the last result."""
    times = []
    result: object = None
    for _ in range(repeats):
        started = time.perf_counter()
        result = action()
        times.append(time.perf_counter() - started)
    return statistics.median(times), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sites", type=int, default=8, help="ring sites = particles (8)")
    parser.add_argument("--points", type=int, default=100, help="sweep points (100)")
    parser.add_argument("--repeats", type=int, default=3, help="timings per variant (3)")
    parser.add_argument("--quick", action="store_true", help="6 sites, 30 points, 1 repeat")
    args = parser.parse_args()
    if args.quick:
        args.sites, args.points, args.repeats = 6, 30, 1

    model = bose_hubbard(ring_edges(args.sites), total=args.sites)
    points = [{"U": float(u)} for u in np.linspace(0.5, 20.0, args.points)]
    options = {"method": "csr", "tol": 1e-10}
    settings = sweep_settings(
        model,
        quantities=("energy", "gap"),
        levels=2,
        entropy_modes=None,
        method="csr",
        tol=1e-10,
        seed=0,
        max_iterations=None,
        threads=None,
    )
    print(
        f"Bose–Hubbard ring, {args.sites} sites, {args.sites} particles: dim {model.space.dim}, "
        f"{args.points} points of U, 2 levels each (eigsh, tol 1e-10); "
        f"median of {args.repeats} runs; BLAS threads {os.environ['OPENBLAS_NUM_THREADS']}"
    )

    def sweep_with(workers: int) -> Callable[[], object]:
        def action() -> list[float]:
            table = run_sweep(
                model,
                points,
                workers=workers,
                quantities=("energy", "gap"),
                levels=2,
                **options,
                progress=False,
                chunk=max(1, args.points // (4 * workers)),
            )
            return [row.energy for row in table]

        return action

    counts: dict[bool, float] = {}
    for warm in (False, True):
        products: list[int] = []
        manual_sweep(model, points, settings, reuse=True, warm=warm, products=products)
        counts[warm] = statistics.median(products)

    variants: list[tuple[str, Callable[[], object]]] = [
        (
            "rebuild + cold start",
            lambda: manual_sweep(model, points, settings, reuse=False, warm=False),
        ),
        (
            "rebuild + warm start",
            lambda: manual_sweep(model, points, settings, reuse=False, warm=True),
        ),
        (
            "reuse + cold start",
            lambda: manual_sweep(model, points, settings, reuse=True, warm=False),
        ),
        (
            "reuse + warm start",
            lambda: manual_sweep(model, points, settings, reuse=True, warm=True),
        ),
        ("run_sweep, 1 worker (in-process)", sweep_with(1)),
        ("run_sweep, 2 worker processes", sweep_with(2)),
    ]
    rows = []
    reference: list[float] | None = None
    for label, action in variants:
        seconds, energies = timed(action, args.repeats)
        assert isinstance(energies, list)
        if reference is None:
            reference = energies
        deviation = float(np.max(np.abs(np.subtract(energies, reference))))
        rows.append((label, seconds, deviation))

    baseline = rows[0][1]
    one_worker = rows[4][1]
    header = (
        f"{'variant':<34} {'total s':>8} {'ms/point':>9} {'vs rebuild+cold':>16} "
        f"{'vs 1 worker':>12} {'max |ΔE0|':>10} {'products/pt':>12}"
    )
    print(header)
    print("-" * len(header))
    for index, (label, seconds, deviation) in enumerate(rows):
        versus_one = f"{one_worker / seconds:>11.2f}x" if index >= 4 else f"{'':>12}"
        count = f"{counts['warm' in label]:>12.0f}" if index < 4 else f"{'':>12}"
        print(
            f"{label:<34} {seconds:>8.2f} {1000 * seconds / args.points:>9.1f} "
            f"{baseline / seconds:>15.2f}x {versus_one} {deviation:>10.1e} {count}"
        )
    print(
        "products/pt: median matrix-vector products per point (cold vs warm start), "
        "counted in a separate untimed pass"
    )


if __name__ == "__main__":
    main()
