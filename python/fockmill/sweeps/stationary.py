"""Sweep points of an open model: the stationary state of its master equation.

A model with jumps (``Model.jumps``: rate parameters and the operators they set) is
solved at each point by :func:`fockmill.stationary_state`, exactly as a user calling it
with the point's Hamiltonian and jumps would, with the sweep's ``method``, ``tol`` and
``max_iterations``. Along the sweep's path each iterative solve starts from the previous
point's stationary state. A point records (see
:data:`~fockmill.sweeps.plan.STATIONARY_QUANTITIES`):

* ``energy``: ``Tr(ρH)``, in the energy column (always);
* ``residual``: ``‖𝓛ρ‖`` recomputed after the solve (always);
* ``populations``: ``⟨n_i⟩`` per mode; ``g2``: ``g⁽²⁾(0) = ⟨a_i†² a_i²⟩ / ⟨n_i⟩²`` per
  mode (NaN, stored as null, for an empty mode); ``purity``: ``Tr ρ²``;
  ``number_variances``: ``⟨n_i²⟩ − ⟨n_i⟩²`` per mode.

The rest of the sweep (order, chunks, executors, the results store, resuming) is the
same code as for ground states; only the preparation and the point solve differ.
"""

from __future__ import annotations

import math
import time
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import ConvergenceError
from fockmill.models.model import jump_channels
from fockmill.spaces.fock import FockSpace
from fockmill.store.sqlite import utc_now
from fockmill.store.sweeps import PointResult
from fockmill.sweeps.pattern import check_hermitian_pieces
from fockmill.sweeps.plan import STATIONARY_MAX_ITERATIONS, SweepSettings
from fockmill.sweeps.records import _NOT_POINT_ERRORS, ModelRecipe, _combine, failure

__all__ = ["PreparedStationary", "solve_stationary_path", "stationary_record"]


@dataclass(frozen=True, eq=False)
class PreparedStationary:
    """An open model ready to solve at any point: its pieces and its jumps."""

    name: str
    space: FockSpace
    pieces: Mapping[str, LadderExpr]
    constant: LadderExpr
    jumps: Mapping[str, tuple[tuple[LadderExpr, float], ...]]
    threads: int | None
    # Compiled jump operators, shared by the points (their rates change, not they).
    compiled: dict[Any, Any] = field(default_factory=dict)

    @classmethod
    def build(cls, recipe: ModelRecipe, settings: SweepSettings) -> PreparedStationary:
        """Check the recipe (Hermitian pieces, a plain Fock space) and keep its parts.

        Raises
        ------
        NotHermitianError
            A piece is not Hermitian.
        TypeError
            The recipe's space is a symmetry sector (not supported for open systems).
        """
        pieces = dict(recipe.pieces)
        check_hermitian_pieces(pieces, recipe.constant, recipe.name)
        if not isinstance(recipe.space, FockSpace):
            raise TypeError(
                "a model with jumps is solved on its whole Fock space; symmetry sectors are "
                "not supported for open systems yet (drop symmetry=)"
            )
        return cls(
            recipe.name,
            recipe.space,
            pieces,
            recipe.constant,
            dict(recipe.jumps),
            settings.threads,
        )

    def hamiltonian(self, values: Mapping[str, float]) -> LadderExpr:
        """``constant + Σ_k values[k] · piece_k``."""
        return _combine(self.constant, self.pieces, values)

    def channels(self, values: Mapping[str, float]) -> list[Any]:
        """The point's jumps as :class:`fockmill.Jump` (rates from ``values``)."""
        from fockmill.lindblad.jumps import Jump

        return [
            Jump(operator, rate, label)
            for label, operator, rate in jump_channels(self.jumps, values)
        ]


def stationary_record(state: Any, quantities: Iterable[str]) -> tuple[float, dict[str, Any]]:
    """``Tr(ρH)`` and the recorded quantities of a :class:`fockmill.StationaryState`
    (JSON-ready: floats and lists, NaN for an empty mode's ``g2``). Only the
    Hamiltonian blocks of the solve are used: nothing is compiled again."""
    wanted = set(quantities)
    modes = range(state.space.modes)
    out: dict[str, Any] = {}
    if "populations" in wanted:
        out["populations"] = [float(v) for v in state.populations]
    if "g2" in wanted:
        out["g2"] = [float(state.g2(i)) for i in modes]
    if "purity" in wanted:
        out["purity"] = float(state.purity)
    if "number_variances" in wanted:
        out["number_variances"] = [float(state.number_variance(i)) for i in modes]
    return float(state.energy), out


def _structure(prepared: PreparedStationary, hamiltonian: LadderExpr, jumps: list[Any]) -> Any:
    """What decides the blocks of ``ρ`` (a warm start must have the same)."""
    from fockmill.lindblad.liouvillian import sector_structure

    structure = sector_structure(hamiltonian, jumps, prepared.space)
    return None if structure is None else tuple(structure[0])


def solve_stationary_point(
    prepared: PreparedStationary,
    index: int,
    values: Mapping[str, float],
    settings: SweepSettings,
    previous: tuple[Any, list[Any]] | None,
) -> tuple[PointResult, tuple[Any, list[Any]] | None]:
    """One point: its record, and (block structure, blocks) for the next warm start."""
    from fockmill.lindblad.stationary import stationary_state

    started = time.perf_counter()
    try:
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            hamiltonian = prepared.hamiltonian(values)
            jumps = prepared.channels(values)
            structure = _structure(prepared, hamiltonian, jumps)
            guess = previous[1] if previous is not None and previous[0] == structure else None
            state = stationary_state(
                hamiltonian,
                prepared.space,
                jumps,
                method=settings.method,
                tol=settings.tol,
                max_iterations=settings.max_iterations or STATIONARY_MAX_ITERATIONS,
                guess=guess,
                threads=prepared.threads,
                jump_cache=prepared.compiled,
            )
            energy, recorded = stationary_record(state, settings.quantities)
    except ConvergenceError as exc:
        return failure(index, values, "not_converged", str(exc), started), None
    except _NOT_POINT_ERRORS:
        raise
    except Exception as exc:  # NotUniqueError, bad rates, sizes: this point's result
        return failure(index, values, "failed", f"{type(exc).__name__}: {exc}", started), None
    if not math.isfinite(energy) or not math.isfinite(state.residual):
        message = (
            f"the stationary state is not finite (Tr ρH = {energy}, residual "
            f"{state.residual}); check the parameters of this point"
        )
        return failure(index, values, "failed", message, started), None
    record = PointResult(
        index=index,
        parameters=dict(values),
        energy=energy,
        gap=None,
        levels=None,
        observables=recorded,
        residual=float(state.residual),
        method=str(state.method),
        seconds=time.perf_counter() - started,
        finished=utc_now(),
    )
    return record, (structure, list(state.blocks))


def solve_stationary_path(
    prepared: PreparedStationary,
    points: Iterable[tuple[int, Mapping[str, float]]],
    settings: SweepSettings,
) -> Iterator[PointResult]:
    """Solve points in the given order, each iterative solve starting from the last
    point's stationary state; yield each record as it finishes."""
    previous: tuple[Any, list[Any]] | None = None
    for index, values in points:
        record, previous = solve_stationary_point(prepared, index, values, settings, previous)
        yield record
