"""What a sweep computes and in which order: checked settings, points, the visiting path.

The solver settings use the words and defaults of :func:`fockmill.ground_state` and
:func:`fockmill.lowest_levels` (``method``, ``tol``, ``seed``, ``max_iterations``,
``threads``), plus ``levels``, the number of lowest levels (``k``). A model with jumps
(``Model.jumps``) is solved for its stationary state instead, with the words of
:func:`fockmill.stationary_state` (``STATIONARY_METHODS``), and records
``STATIONARY_QUANTITIES``.
"""

from __future__ import annotations

import itertools
import math
import warnings
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.models.model import Model
from fockmill.settings.checks import (
    check_levels,
)
from fockmill.settings.solver import SolverSettings

__all__ = [
    "DEFAULT_QUANTITIES",
    "DEFAULT_STATIONARY_QUANTITIES",
    "QUANTITIES",
    "RENAMED_QUANTITIES",
    "SOLVER_DEFAULTS",
    "STATIONARY_METHODS",
    "STATIONARY_QUANTITIES",
    "SweepSettings",
    "current_quantity_names",
    "full_points",
    "serpentine_order",
    "sweep_settings",
]

RECORDABLE: tuple[str, ...] = (
    "energy",
    "gap",
    "levels",
    "populations",
    "number_variances",
    "one_body_matrix",
    "entanglement_entropy",
    "top_level_weights",
    "residual",
)
"""Values allowed in ``record.quantities``."""

STATIONARY_QUANTITIES: tuple[str, ...] = (
    "energy",
    "populations",
    "g2",
    "purity",
    "number_variances",
    "residual",
)
"""What a sweep of an open model (one with jumps) can record of each stationary state:
``energy`` is ``Tr(ρH)``, ``g2`` the ``g⁽²⁾(0)`` of every mode (NaN for an empty mode),
``purity`` ``Tr ρ²``, ``residual`` ``‖𝓛ρ‖``."""

DEFAULT_STATIONARY_QUANTITIES: tuple[str, ...] = ("populations", "g2", "purity")
"""What an open model's sweep records when ``quantities`` is not given (with the
always-recorded ``energy`` and ``residual``)."""

STATIONARY_METHODS: tuple[str, ...] = ("auto", "dense", "iterative")
"""``method=`` words of a sweep of an open model (those of ``fm.stationary_state``)."""

#: ``max_iterations`` of a stationary solve when none is given (GMRES applications).
STATIONARY_MAX_ITERATIONS = 2000

RENAMED_QUANTITIES: Mapping[str, str] = {
    "number_variance": "number_variances",
    "one_body": "one_body_matrix",
    "one_body_imag": "one_body_matrix_imag",
    "entropy": "entanglement_entropy",
    "top_weight": "top_level_weights",
}
"""Older names of recorded quantities -> the names of the functions that compute them
(accepted for one release, with a DeprecationWarning; results files written with the old
names read under the new ones)."""


@dataclass(frozen=True)
class SweepGrid:
    """A Cartesian grid of parameter values.

    Attributes
    ----------
    axes : dict of str to numpy.ndarray
        Parameter name -> its 1-D float64 values (read-only), in sweep order.

    Raises
    ------
    ValueError
        For no axes, or an axis that is not a non-empty 1-D array of finite numbers.

    Examples
    --------
    >>> grid = SweepGrid({"U": np.array([1.0, 2.0]), "J": np.array([0.5])})
    >>> grid.points()
    [{'U': 1.0, 'J': 0.5}, {'U': 2.0, 'J': 0.5}]
    """

    axes: dict[str, npt.NDArray[np.float64]]

    def __post_init__(self) -> None:
        if not self.axes:
            raise ValueError("a sweep grid needs at least one axis")
        clean: dict[str, npt.NDArray[np.float64]] = {}
        for name, values in self.axes.items():
            array = np.array(values, dtype=np.float64)
            if array.ndim != 1 or array.size == 0:
                raise ValueError(
                    f"sweep axis {name!r} must be a non-empty 1-D array; got shape {array.shape}"
                )
            if not np.all(np.isfinite(array)):
                raise ValueError(f"sweep axis {name!r} holds non-finite values")
            array.flags.writeable = False
            clean[str(name)] = array
        object.__setattr__(self, "axes", clean)

    @property
    def shape(self) -> tuple[int, ...]:
        """Number of values along each axis."""
        return tuple(len(values) for values in self.axes.values())

    @property
    def size(self) -> int:
        """Number of grid points."""
        return math.prod(self.shape)

    def points(self) -> list[dict[str, float]]:
        """Every grid point as ``{name: value}``, last axis varying fastest.

        Returns
        -------
        list of dict
            ``size`` dictionaries in ``itertools.product`` order over the axes.
        """
        names = list(self.axes)
        columns = [[float(v) for v in values] for values in self.axes.values()]
        return [dict(zip(names, combo, strict=True)) for combo in itertools.product(*columns)]

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, SweepGrid):
            return NotImplemented
        return list(self.axes) == list(other.axes) and all(
            np.array_equal(self.axes[name], other.axes[name]) for name in self.axes
        )

    def __hash__(self) -> int:
        return hash(tuple((name, values.tobytes()) for name, values in self.axes.items()))


QUANTITIES = RECORDABLE
"""What a sweep can record (the values of a model file's ``record.quantities``)."""
"""Quantities a sweep can record at each point (the model files' ``record.quantities``)."""

DEFAULT_QUANTITIES: tuple[str, ...] = ("energy", "gap")
"""What ``run_sweep`` records when ``quantities`` is not given."""

SOLVER_DEFAULTS: Mapping[str, object] = {
    key: getattr(SolverSettings(), key)
    for key in ("method", "tol", "seed", "max_iterations", "threads")
}
"""Solver options of a sweep and their defaults: those of :func:`fockmill.ground_state`."""

#: Settings a resumed sweep must share with the stored results, in message order.
RESUME_KEYS = ("quantities", "levels", "entropy_modes", "method", "tol", "seed")


@dataclass(frozen=True)
class SweepSettings:
    """What to compute at each point (checked by :func:`sweep_settings`)."""

    quantities: tuple[str, ...]
    levels: int
    entropy_modes: tuple[int, ...]
    method: str
    tol: float
    seed: int
    max_iterations: int | None
    threads: int | None
    stationary: bool = False  # the model has jumps: points are stationary states
    #: A checkpoint file for the solve of a single point (``fockmill solve
    #: --checkpoint``); never stored with the results.
    checkpoint: str | None = None
    #: ``progress=`` of each point's solve (False: the sweep draws its own bar).
    solver_progress: Any = False

    def as_meta(self) -> dict[str, object]:
        """The settings stored with the results (JSON-ready)."""
        meta: dict[str, object] = {
            "quantities": list(self.quantities),
            "levels": self.levels,
            "entropy_modes": list(self.entropy_modes),
            "method": self.method,
            "tol": self.tol,
            "seed": self.seed,
            "max_iterations": self.max_iterations,
        }
        if self.stationary:  # closed sweeps keep the meta data they always had
            meta["stationary"] = True
        return meta


def _deprecated(old: str, new: str) -> None:
    warnings.warn(
        f"run_sweep({old}=...) is deprecated and will be removed in the next release; "
        f"use {new} instead",
        DeprecationWarning,
        stacklevel=4,
    )


def sweep_settings(
    model: Model,
    *,
    quantities: Sequence[str] | None,
    levels: int | None,
    entropy_modes: Sequence[int] | None,
    method: object,
    tol: object,
    seed: object,
    max_iterations: object,
    threads: object,
    record: Sequence[str] | None = None,
    solver_options: Mapping[str, object] | None = None,
    dim: int | None = None,
) -> SweepSettings:
    """Check the options of ``run_sweep``, mapping the deprecated aliases.

    ``record`` is the old name of ``quantities``; ``solver_options`` the old dict of
    ``method``/``tol``/``seed``/``max_iterations``/``threads`` (its ``dense_limit`` is
    ignored: the dense limit is the solvers' own). ``dim``: the dimension points are
    solved in (a symmetry sector's), default the model space's.
    """
    if record is not None:
        _deprecated("record", "quantities=[...]")
        if quantities is not None:
            raise TypeError("pass quantities= only (record= is its deprecated old name)")
        quantities = record
    options: dict[str, object] = {
        "method": method,
        "tol": tol,
        "seed": seed,
        "max_iterations": max_iterations,
        "threads": threads,
    }
    if solver_options is not None:
        _deprecated("solver_options", "the keywords method=, tol=, seed=, max_iterations=")
        unknown = sorted(set(solver_options) - {*SOLVER_DEFAULTS, "dense_limit"})
        if unknown:
            raise ValueError(
                f"unknown solver option(s) {unknown}; known: {sorted(SOLVER_DEFAULTS)}"
            )
        for name, value in solver_options.items():
            # A keyword given explicitly (not at its default) wins over the old dict.
            if name != "dense_limit" and options[name] == SOLVER_DEFAULTS[name]:
                options[name] = value

    if model.is_open:
        return _stationary_settings(model, quantities, levels, entropy_modes, options)
    chosen = tuple(DEFAULT_QUANTITIES if quantities is None else _names(quantities))
    unknown = [q for q in chosen if q not in QUANTITIES]
    if unknown:
        raise ValueError(f"cannot record {unknown}; choose from {list(QUANTITIES)}")
    chosen = tuple(dict.fromkeys(chosen))
    dim = model.space.dim if dim is None else dim
    if levels is None:
        levels = min(dim, 4 if "levels" in chosen else 2 if "gap" in chosen else 1)
    count = check_levels(levels, dim)
    if "gap" in chosen and count < 2:
        raise ValueError("recording 'gap' needs levels >= 2; pass levels=2 or drop 'gap'")
    solver = SolverSettings(
        method=options["method"],  # type: ignore[arg-type]
        tol=options["tol"],  # type: ignore[arg-type]
        seed=options["seed"],  # type: ignore[arg-type]
        max_iterations=options["max_iterations"],  # type: ignore[arg-type]
        threads=options["threads"],  # type: ignore[arg-type]
    )
    modes = model.space.modes
    if entropy_modes is None:
        subsystem = tuple(range(max(1, modes // 2)))
    else:
        subsystem = tuple(sorted({int(m) for m in entropy_modes}))
        if not subsystem or any(m < 0 or m >= modes for m in subsystem):
            raise ValueError(
                f"entropy_modes must list modes in 0..{modes - 1}; got {list(entropy_modes)}"
            )
    return SweepSettings(
        quantities=chosen,
        levels=count,
        entropy_modes=subsystem
        if "entanglement_entropy" in chosen or entropy_modes is not None
        else (),
        method=solver.method,
        tol=solver.tol,
        seed=solver.seed,
        max_iterations=solver.max_iterations,
        threads=solver.threads,
    )


def _stationary_settings(
    model: Model,
    quantities: Sequence[str] | None,
    levels: int | None,
    entropy_modes: Sequence[int] | None,
    options: Mapping[str, object],
) -> SweepSettings:
    """The settings of a sweep over stationary states (a model with jumps)."""
    chosen = tuple(
        DEFAULT_STATIONARY_QUANTITIES
        if quantities is None
        else dict.fromkeys([quantities] if isinstance(quantities, str) else quantities)
    )
    unknown = [q for q in chosen if q not in STATIONARY_QUANTITIES]
    if unknown:
        raise ValueError(
            f"cannot record {unknown} of a stationary state (model {model.name!r} has jumps); "
            f"choose from {list(STATIONARY_QUANTITIES)}"
        )
    if levels not in (None, 1) or entropy_modes is not None:
        raise ValueError(
            "levels= and entropy_modes= describe eigenstates of a closed system; a model "
            "with jumps is solved for its stationary state: leave them out"
        )
    method = options["method"]
    if method not in STATIONARY_METHODS:
        raise ValueError(
            f"method={method!r}: a model with jumps is solved for its stationary state with "
            f"method in {STATIONARY_METHODS} (those of fm.stationary_state)"
        )
    solver = SolverSettings(
        tol=options["tol"],  # type: ignore[arg-type]
        seed=options["seed"],  # type: ignore[arg-type]
        max_iterations=options["max_iterations"],  # type: ignore[arg-type]
        threads=options["threads"],  # type: ignore[arg-type]
    )
    return SweepSettings(
        quantities=tuple(str(q) for q in chosen),
        levels=1,
        entropy_modes=(),
        method=str(method),
        tol=solver.tol,
        seed=solver.seed,
        max_iterations=solver.max_iterations,
        threads=solver.threads,
        stationary=True,
    )


def _names(quantities: Sequence[str] | str) -> list[str]:
    raw = [quantities] if isinstance(quantities, str) else [str(q) for q in quantities]
    old = [q for q in raw if q in RENAMED_QUANTITIES]
    if old:
        warnings.warn(
            "recorded quantities now carry the names of the functions that compute them: "
            + ", ".join(f"{q!r} is {RENAMED_QUANTITIES[q]!r}" for q in old),
            DeprecationWarning,
            stacklevel=4,
        )
    return [RENAMED_QUANTITIES.get(q, q) for q in raw]


def current_quantity_names(values: Mapping[str, Any]) -> dict[str, Any]:
    """A stored record's quantities under their current names (files written before the
    rename keep the old keys)."""
    return {RENAMED_QUANTITIES.get(key, key): value for key, value in values.items()}


def full_points(
    model: Model, points: SweepGrid | Iterable[Mapping[str, float]]
) -> tuple[list[dict[str, float]], tuple[str, ...]]:
    """Every point's complete parameter values, and the names that were given.

    ``points`` is a :class:`~fockmill.SweepGrid` (its axes, in order, are the swept
    names) or any iterable of mappings.
    """
    if isinstance(points, SweepGrid):
        axes = tuple(points.axes)
        given: Iterable[Mapping[str, float]] = points.points()
    elif isinstance(points, Mapping):
        raise TypeError(
            "points must be a SweepGrid or a list of {name: value} mappings; got one mapping "
            "(wrap it in a list for a single point)"
        )
    else:
        axes = ()
        given = points
    full: list[dict[str, float]] = []
    swept: dict[str, None] = dict.fromkeys(axes)
    for index, point in enumerate(given):
        if not isinstance(point, Mapping):
            raise TypeError(
                f"point {index} must be a mapping of parameter name to value; got {point!r}"
            )
        unknown = sorted(set(point) - set(model.parameters))
        if unknown:
            raise ValueError(
                f"point {index} sets unknown parameter(s) {unknown}; model {model.name!r} "
                f"has {sorted(model.parameters)}"
            )
        values = {}
        for name, value in point.items():
            number = float(value)
            if not math.isfinite(number):
                raise ValueError(f"point {index}: parameter {name!r} is {value!r}, not finite")
            values[name] = number
            swept.setdefault(name, None)
        full.append(model.values(**values))
    return full, tuple(swept)


def serpentine_order(points: Sequence[Mapping[str, float]], names: Sequence[str]) -> list[int]:
    """A visiting order of ``points`` in which consecutive points are grid neighbours.

    Parameters
    ----------
    points : sequence of Mapping[str, float]
        Parameter points (any order; need not form a full grid).
    names : sequence of str
        The swept parameters, slowest-varying first.

    Returns
    -------
    list of int
        A permutation of ``range(len(points))``.

    Notes
    -----
    Each parameter's values are ranked; points are sorted by their ranks with the
    direction of every axis reversed whenever the ranks of the slower axes add up to an
    odd number (a boustrophedon, or reflected mixed-radix, order). On a full grid every
    step changes one parameter by one grid step, so each warm start comes from a
    neighbour.

    Examples
    --------
    >>> grid = [{"a": a, "b": b} for a in (0.0, 1.0) for b in (0.0, 1.0, 2.0)]
    >>> serpentine_order(grid, ["a", "b"])
    [0, 1, 2, 5, 4, 3]
    """
    count = len(points)
    if count == 0 or not names:
        return list(range(count))
    ranks = []
    sizes = []
    for name in names:
        values = np.array([float(p.get(name, np.nan)) for p in points])
        unique, inverse = np.unique(values, return_inverse=True)
        ranks.append(inverse.reshape(-1).astype(np.int64))
        sizes.append(unique.size)
    digits = []
    parity = np.zeros(count, dtype=np.int64)
    for rank, size in zip(ranks, sizes, strict=True):
        digits.append(np.where(parity % 2 == 1, size - 1 - rank, rank))
        parity = parity + rank
    # np.lexsort sorts by the last key first: pass the slowest axis last.
    return [int(i) for i in np.lexsort(tuple(reversed(digits)))]


def resume_mismatch(stored: Mapping[str, Any], settings: SweepSettings) -> str | None:
    """The first setting that differs between stored results and this sweep, or None."""
    current = settings.as_meta()
    for key in RESUME_KEYS:
        if stored.get(key) != current[key]:
            return key
    return None
