"""What a sweep point records, and how it is solved: by the library's own solvers.

A point is solved by exactly the code :func:`fockmill.ground_state` (one level) or
:func:`fockmill.lowest_levels` (several) runs, through a prepared problem, with the
sweep's ``method``, ``tol``, ``seed`` and ``max_iterations``. When the chosen method
stores a matrix and several points are solved in one place, the matrix comes from the
model's shared sparsity pattern (:class:`~fockmill.sweeps.pattern.SharedPattern`) and the
problem is built around it; otherwise each point's Hamiltonian is prepared from its
expression (matrix-free methods, single points).

Failures are results: a point that does not converge is recorded as
``not_converged``, one that raises or gives a non-finite energy as ``failed``, each
with a message, and the next point starts cold.
"""

from __future__ import annotations

import functools
import math
import time
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import ConvergenceError
from fockmill.models.model import Model
from fockmill.observables.observe import (
    entanglement_entropy,
    number_variances,
    one_body_matrix,
    populations,
    top_level_weights,
)
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.sectors import SectorChoice
from fockmill.spaces.symmetry import SymmetricSpace
from fockmill.store.sqlite import utc_now
from fockmill.store.sweeps import PointResult
from fockmill.sweeps.pattern import SharedPattern, check_hermitian_pieces
from fockmill.sweeps.plan import SweepSettings

__all__ = ["ModelRecipe", "PreparedModel", "solve_path"]

#: Weight of a fresh random vector added to a warm start (see :func:`start_vector`).
WARM_MIX = 1e-2

#: Methods that solve on a stored matrix, which the shared pattern can provide
#: (``"lanczos"`` too when the matrix fits in memory: the Rust solvers take it).
STORED_MATRIX_METHODS = ("dense", "csr")

#: Fewest points one process solves before the shared pattern pays: merging the pieces
#: costs about four to five builds of one matrix, and each point then saves about half
#: a build (assembly and a copy instead of a build; measured on the 3×4 Bose–Hubbard
#: lattice, 1,352,078 states).
SHARED_PATTERN_MIN_POINTS = 8

#: Errors that are bugs or broken installs, not a property of the point: never recorded.
_NOT_POINT_ERRORS = (TypeError, AttributeError, NameError, ImportError, AssertionError)


@dataclass(frozen=True, eq=False)
class ModelRecipe:
    """A model as sent to workers: its parts, compared by fingerprint (cheap to hash).

    ``space`` is where points are solved: the model's space or one symmetry sector of
    it. ``scan`` (a :class:`~fockmill.spaces.sectors.SectorChoice` with an ``"all"``
    label) asks for every sector along one generator (see :mod:`fockmill.sweeps.sectors`).
    The fingerprint then covers the sector too. ``jumps`` (rate parameter -> its jump
    operators with weights, the model's ``jumps``) makes every point a stationary state
    (see :mod:`fockmill.sweeps.stationary`).
    """

    name: str
    space: FockSpace | SymmetricSpace
    pieces: tuple[tuple[str, LadderExpr], ...]
    constant: LadderExpr
    fingerprint: str
    defaults: tuple[tuple[str, float], ...] = ()
    scan: SectorChoice | None = None
    jumps: tuple[tuple[str, tuple[tuple[LadderExpr, float], ...]], ...] = ()

    @classmethod
    def from_model(
        cls,
        model: Model,
        *,
        space: FockSpace | SymmetricSpace | None = None,
        scan: SectorChoice | None = None,
        sector_key: str = "",
    ) -> ModelRecipe:
        fingerprint = model.fingerprint()
        if sector_key:
            fingerprint = f"{fingerprint}|{sector_key}"
        return cls(
            name=model.name,
            space=model.space if space is None else space,
            pieces=tuple(model.pieces.items()),
            constant=model.constant,
            fingerprint=fingerprint,
            defaults=tuple((k, float(v)) for k, v in model.parameters.items()),
            scan=scan,
            jumps=tuple(model.jumps.items()),
        )

    def __hash__(self) -> int:
        return hash((self.fingerprint, self.name))

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, ModelRecipe):
            return NotImplemented
        return (self.fingerprint, self.name) == (other.fingerprint, other.name)


@dataclass(frozen=True, eq=False)
class PreparedModel:
    """A model ready to solve at any point.

    ``shared`` holds the pieces on one sparsity pattern when several points are solved
    on a stored matrix (methods ``"dense"`` and ``"csr"``, and ``"lanczos"`` when the
    matrix fits, whose Rust solvers take the assembled matrix); None when each point's
    Hamiltonian is prepared from its expression (matrix-free methods: compiling a
    point's terms takes well under a millisecond, next to hundreds of products). One
    thread pool and one memory estimate serve every point.
    """

    name: str
    space: FockSpace | SymmetricSpace
    pieces: Mapping[str, LadderExpr]
    constant: LadderExpr
    shared: SharedPattern | None
    pool: Any
    threads: int | None
    estimate: Any
    method: str
    probe: Any = None
    probe_values: Mapping[str, float] | None = None

    @classmethod
    def build(
        cls,
        recipe: ModelRecipe,
        settings: SweepSettings,
        *,
        points: int,
        first: Mapping[str, float] | None = None,
        pool: Any = None,
    ) -> PreparedModel:
        """Prepare ``recipe`` for ``points`` points (``first``: the first point's values;
        ``pool``: a NativePool to share, e.g. between the sectors of a scan).

        Raises
        ------
        NotHermitianError
            A piece is not Hermitian.
        SizeLimitError
            No solver method fits in memory.
        """
        import fockmill._native as _native
        from fockmill.problem.problem import Problem

        pieces = dict(recipe.pieces)
        check_hermitian_pieces(pieces, recipe.constant, recipe.name)
        if pool is None:
            pool = _native.NativePool(settings.threads)
        values = dict(recipe.defaults) if first is None else dict(first)
        for label in pieces:
            values.setdefault(label, 1.0)
        probe = Problem._from_parts(
            _combine(recipe.constant, pieces, values),
            recipe.space,
            pool=pool,
            threads=settings.threads,
        )
        estimate = probe.estimate
        method = settings.method
        if method == "auto":
            method = str(probe.choose_method(settings.levels))
        shared = None
        stores = method in STORED_MATRIX_METHODS
        if method == "lanczos":
            from fockmill.problem.eigensolve import _store_matrix

            stores = _store_matrix(probe, None, settings.levels)
        if points >= SHARED_PATTERN_MIN_POINTS and stores:
            shared = SharedPattern.from_pieces(
                recipe.space,
                pieces,
                recipe.constant,
                name=recipe.name,
                threads=settings.threads,
                pool=pool,
            )
        return cls(
            recipe.name,
            recipe.space,
            pieces,
            recipe.constant,
            shared,
            pool,
            settings.threads,
            estimate,
            method,
            probe if first is not None else None,
            dict(values) if first is not None else None,
        )

    def hamiltonian(self, values: Mapping[str, float]) -> LadderExpr:
        """``constant + Σ_k values[k] · piece_k`` as an expression."""
        return _combine(self.constant, self.pieces, values)

    def problem(self, values: Mapping[str, float]) -> Any:
        """A prepared problem (:class:`fockmill.Problem`) for the point ``values``.

        On the shared pattern, the point's matrix is assembled from the stored pieces
        and the problem is built around it (``Problem._from_parts``); otherwise the
        point's expression is prepared as ``fm.prepare`` does. Both share this model's
        thread pool and memory estimate.
        """
        from fockmill.problem.problem import Problem

        if self.shared is None and self.probe is not None and self.probe_values == values:
            return self.probe  # the first point, prepared already to choose the method
        matrix = self.shared.assemble(values) if self.shared is not None else None
        return Problem._from_parts(
            self.hamiltonian(values),
            self.space,
            matrix=matrix,
            pool=self.pool,
            threads=self.threads,
            estimate=self.estimate,
        )


def _combine(
    constant: LadderExpr, pieces: Mapping[str, LadderExpr], values: Mapping[str, float]
) -> LadderExpr:
    expr = constant
    for label, piece in pieces.items():
        if values[label] != 0.0:
            expr = expr + values[label] * piece
    return expr


@functools.lru_cache(maxsize=1)
def worker_model(recipe: ModelRecipe, settings: SweepSettings, many: bool) -> PreparedModel:
    """``recipe`` prepared once per worker process (``many``: for enough points that the
    shared pattern pays).

    A one-entry memo: consecutive tasks of one sweep in a long-lived worker (a Dask
    worker, a pool process) reuse the pieces and the thread pool instead of rebuilding
    them.
    """
    points = SHARED_PATTERN_MIN_POINTS if many else 1
    return PreparedModel.build(recipe, settings, points=points)


# -- solving one point --------------------------------------------------------------


def start_vector(
    dim: int, dtype: np.dtype[Any], seed: int, index: int, previous: npt.NDArray[Any] | None
) -> npt.NDArray[Any] | None:
    """A warm start: the previous point's levels plus a little seeded noise (or None).

    ``previous`` holds the neighbouring point's eigenvectors as columns (None: cold
    start, the solver's own seeded start). Their normalised sum starts the solver close
    to every wanted level at once. The noise matters: those vectors may lie in a few
    symmetry sectors (e.g. lattice momenta), and a start with no weight elsewhere would
    hide levels of other sectors from the solver, giving a wrong gap.
    """
    if previous is None:
        return None
    noise = np.random.default_rng([seed, index]).standard_normal(dim)
    noise /= np.linalg.norm(noise)
    combined = previous.reshape(dim, -1).sum(axis=1)
    norm = np.linalg.norm(combined)
    if not math.isfinite(float(norm)) or norm == 0:
        return None
    start = combined / norm + WARM_MIX * noise
    return start.astype(dtype, copy=False)


@dataclass(frozen=True)
class _Solution:
    energies: npt.NDArray[np.float64]
    vectors: npt.NDArray[Any]
    residual: float
    method: str
    converged: bool
    products: int


def _tolerance_met(residual: float, energy: float, tol: float) -> bool:
    return residual <= 10 * max(tol, 1e-12) * max(1.0, abs(energy))


def solve_levels(
    problem: Any, settings: SweepSettings, start: npt.NDArray[Any] | None
) -> _Solution:
    """The point's levels by the library's ground_state / lowest_levels."""
    options: dict[str, Any] = {
        "method": settings.method,
        "tol": settings.tol,
        "seed": settings.seed,
        "max_iterations": settings.max_iterations,
        "v0": start,
        "progress": settings.solver_progress,
    }
    if settings.checkpoint is not None:
        options["checkpoint"] = settings.checkpoint
    if settings.levels == 1:
        found = problem.ground_state(cutoff_warning=None, **options)
        return _Solution(
            energies=np.array([found.energy]),
            vectors=found.vector[:, np.newaxis],
            residual=float(found.residual),
            method=str(found.method),
            converged=bool(found.converged),
            products=int(found.products),
        )
    levels = problem.lowest_levels(settings.levels, **options)
    residual = float(levels.residuals[0])
    converged = getattr(levels, "converged", None)
    if converged is None:
        converged = all(
            _tolerance_met(float(r), float(e), settings.tol)
            for r, e in zip(levels.residuals, levels.energies, strict=True)
        )
    return _Solution(
        energies=np.asarray(levels.energies, dtype=np.float64),
        vectors=levels.vectors,
        residual=residual,
        method=str(levels.method),
        converged=bool(converged),
        products=int(levels.products),
    )


def observables(
    space: FockSpace | SymmetricSpace,
    vector: npt.NDArray[Any],
    settings: SweepSettings,
    threads: Any,
) -> dict[str, Any]:
    """The recorded ground-state observables of ``vector`` (JSON-ready)."""
    out: dict[str, Any] = {}
    wanted = settings.quantities
    if "populations" in wanted:
        out["populations"] = populations(space, vector, threads=threads).tolist()
    if "number_variances" in wanted:
        out["number_variances"] = number_variances(space, vector, threads=threads).tolist()
    if "one_body_matrix" in wanted:
        matrix = one_body_matrix(space, vector, threads=threads)
        out["one_body_matrix"] = np.real(matrix).tolist()
        if np.iscomplexobj(matrix):
            out["one_body_matrix_imag"] = np.imag(matrix).tolist()
    if "entanglement_entropy" in wanted:
        out["entanglement_entropy"] = float(
            entanglement_entropy(space, vector, settings.entropy_modes)
        )
    if "top_level_weights" in wanted:
        out["top_level_weights"] = top_level_weights(space, vector, threads=threads).tolist()
    return out


def failure(
    index: int, values: Mapping[str, float], status: str, message: str, started: float
) -> PointResult:
    return PointResult(
        index=index,
        parameters=dict(values),
        energy=None,
        gap=None,
        levels=None,
        observables={},
        residual=None,
        method="",
        seconds=time.perf_counter() - started,
        finished=utc_now(),
        status=status,
        message=" ".join(message.split()),
    )


def solve_point(
    prepared: PreparedModel,
    index: int,
    values: Mapping[str, float],
    settings: SweepSettings,
    previous: npt.NDArray[Any] | None,
) -> tuple[PointResult, npt.NDArray[Any] | None]:
    """Solve one point; (its record, its vectors for the next warm start or None)."""
    started = time.perf_counter()
    try:
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            problem = prepared.problem(values)
            dtype = np.dtype(getattr(problem, "dtype", np.float64))
            start = start_vector(prepared.space.dim, dtype, settings.seed, index, previous)
            solution = solve_levels(problem, settings, start)
    except ConvergenceError as exc:
        message = str(exc)
        if "of nan" in message or "of inf" in message:
            message += (
                "; the residual is not a number because the products overflow double "
                "precision at these parameter values: use moderate values"
            )
        return failure(index, values, "not_converged", message, started), None
    except _NOT_POINT_ERRORS:
        raise
    except Exception as exc:  # any other error is this point's result, not the sweep's
        return failure(index, values, "failed", f"{type(exc).__name__}: {exc}", started), None
    energies = solution.energies
    if not np.all(np.isfinite(energies)) or not math.isfinite(solution.residual):
        message = (
            f"the energy is not finite ({energies[0]}; residual {solution.residual}); check "
            "the parameters of this point for overflow"
        )
        return failure(index, values, "failed", message, started), None
    ground = solution.vectors[:, 0]
    try:
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            recorded = observables(prepared.space, ground, settings, prepared.threads)
    except _NOT_POINT_ERRORS:
        raise
    except Exception as exc:
        message = f"observables failed: {type(exc).__name__}: {exc}"
        return failure(index, values, "failed", message, started), None
    status, message = "ok", ""
    if not solution.converged:
        status = "not_converged"
        message = (
            f"{solution.method} stopped at residual {solution.residual:.3e}, short of "
            f"tol={settings.tol}; raise max_iterations or tol"
        )
    wanted = settings.quantities
    record = PointResult(
        index=index,
        parameters=dict(values),
        energy=float(energies[0]),
        gap=float(energies[1] - energies[0]) if "gap" in wanted else None,
        levels=tuple(float(e) for e in energies) if "levels" in wanted else None,
        observables=recorded,
        residual=solution.residual,
        method=solution.method,
        seconds=time.perf_counter() - started,
        finished=utc_now(),
        status=status,
        message=message,
    )
    return record, solution.vectors


def solve_path(
    prepared: PreparedModel,
    points: Iterable[tuple[int, Mapping[str, float]]],
    settings: SweepSettings,
) -> Iterator[PointResult]:
    """Solve points in the given order, chaining warm starts; yield each as it finishes."""
    previous: npt.NDArray[Any] | None = None
    for index, values in points:
        record, previous = solve_point(prepared, index, values, settings, previous)
        yield record
