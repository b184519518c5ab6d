"""Sweep points solved in every sector along one generator: a dispersion per point.

When a sweep's symmetry has an ``"all"`` label (every momentum of a translation, say),
each point solves the ``levels`` lowest levels of every sector with the library's own
solvers (one :class:`~fockmill.sweeps.records.PreparedModel` per sector, each with its own
warm-start chain) and records:

* ``energy``, ``gap`` and ``levels`` of the whole space: the lowest levels over all
  sectors, merged (the ``k`` lowest of the merge are exact when each sector gave its
  ``k`` lowest);
* observables of the ground state (from the sector holding the lowest energy);
* ``observables["dispersion"]``: the ``levels`` lowest energies of each sector, one row
  per label (NaN where a sector has fewer states), and
  ``observables["ground_sector"]``: the label holding the lowest energy.

A point fails when any sector fails; its message names the sectors.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import time
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

import fockmill._native as _native
from fockmill.exceptions import StoreError, SymmetryError
from fockmill.models.model import Model
from fockmill.spaces.sectors import SectorChoice, sector_choice
from fockmill.spaces.symmetry import SymmetricSpace
from fockmill.store.sqlite import utc_now
from fockmill.store.sweeps import PointResult, ResultsStore
from fockmill.sweeps.plan import SweepSettings
from fockmill.sweeps.records import (
    _NOT_POINT_ERRORS,
    SHARED_PATTERN_MIN_POINTS,
    ModelRecipe,
    PreparedModel,
    failure,
    observables,
    solve_path,
    solve_point,
    worker_model,
)
from fockmill.sweeps.stationary import PreparedStationary, solve_stationary_path

__all__ = [
    "PreparedScan",
    "SweepSectors",
    "check_same_sector",
    "prepare",
    "solve_points",
    "sweep_recipe",
    "worker_prepared",
]

_STATUS_RANK = {"ok": 0, "not_converged": 1, "failed": 2}


@dataclass(frozen=True, eq=False)
class PreparedScan:
    """One prepared model per sector of the scanned generator (None: an empty sector)."""

    choice: SectorChoice
    labels: tuple[int, ...]
    parts: tuple[PreparedModel | None, ...]
    settings: tuple[SweepSettings | None, ...]

    @classmethod
    def build(
        cls,
        recipe: ModelRecipe,
        settings: SweepSettings,
        *,
        points: int,
        first: Mapping[str, float] | None = None,
    ) -> PreparedScan:
        """Enumerate every sector of ``recipe.scan`` and prepare the model on each."""
        choice = recipe.scan
        if choice is None:
            raise ValueError("the recipe scans no generator")
        labels = tuple(choice.scan_labels())
        parts: list[PreparedModel | None] = []
        part_settings: list[SweepSettings | None] = []
        base = recipe.space
        pool = _native.NativePool(settings.threads)  # one thread pool for every sector
        for label in labels:
            sector = choice.sector(base, label, threads=settings.threads)  # type: ignore[arg-type]
            if sector.dim == 0:
                parts.append(None)
                part_settings.append(None)
                continue
            sub = dataclasses.replace(
                recipe, space=sector, scan=None, fingerprint=f"{recipe.fingerprint}|{label}"
            )
            local = sector_settings(settings, sector.dim)
            parts.append(PreparedModel.build(sub, local, points=points, first=first, pool=pool))
            part_settings.append(local)
        return cls(choice, labels, tuple(parts), tuple(part_settings))


def sector_settings(settings: SweepSettings, dim: int) -> SweepSettings:
    """What one sector solves: at most ``dim`` levels, no observables (those come from
    the ground sector afterwards)."""
    return dataclasses.replace(settings, levels=min(settings.levels, dim), quantities=("levels",))


def prepare(
    recipe: ModelRecipe,
    settings: SweepSettings,
    *,
    points: int,
    first: Mapping[str, float] | None = None,
) -> PreparedModel | PreparedScan | PreparedStationary:
    """A prepared model, one per sector when the recipe scans a generator, or an open
    model's parts when it has jumps (stationary states)."""
    if recipe.jumps:
        return PreparedStationary.build(recipe, settings)
    if recipe.scan is not None:
        return PreparedScan.build(recipe, settings, points=points, first=first)
    return PreparedModel.build(recipe, settings, points=points, first=first)


@functools.lru_cache(maxsize=1)
def worker_prepared(
    recipe: ModelRecipe, settings: SweepSettings, many: bool
) -> PreparedModel | PreparedScan | PreparedStationary:
    """As :func:`fockmill.sweeps.records.worker_model`, for scans and open models too (a
    one-entry memo)."""
    if recipe.jumps:
        return PreparedStationary.build(recipe, settings)
    if recipe.scan is None:
        return worker_model(recipe, settings, many)
    points = SHARED_PATTERN_MIN_POINTS if many else 1
    return PreparedScan.build(recipe, settings, points=points)


def solve_points(
    prepared: PreparedModel | PreparedScan | PreparedStationary,
    points: Iterable[tuple[int, Mapping[str, float]]],
    settings: SweepSettings,
) -> Iterator[PointResult]:
    """Solve points in order, chaining warm starts (per sector for a scan, from the last
    stationary state for an open model)."""
    if isinstance(prepared, PreparedStationary):
        yield from solve_stationary_path(prepared, points, settings)
        return
    if isinstance(prepared, PreparedModel):
        yield from solve_path(prepared, points, settings)
        return
    previous: dict[int, npt.NDArray[Any] | None] = {}
    for index, values in points:
        yield _solve_scan_point(prepared, index, values, settings, previous)


def _solve_scan_point(
    scan: PreparedScan,
    index: int,
    values: Mapping[str, float],
    settings: SweepSettings,
    previous: dict[int, npt.NDArray[Any] | None],
) -> PointResult:
    started = time.perf_counter()
    k = settings.levels
    table = np.full((len(scan.labels), k), np.nan)
    status, problems = "ok", []
    best: tuple[float, int, npt.NDArray[Any]] | None = None
    residual = 0.0
    methods: dict[str, None] = {}
    for row, (label, part, local) in enumerate(
        zip(scan.labels, scan.parts, scan.settings, strict=True)
    ):
        if part is None or local is None:
            continue
        record, vectors = solve_point(part, index, values, local, previous.get(label))
        previous[label] = vectors
        if _STATUS_RANK[record.status] > _STATUS_RANK[status]:
            status = record.status
        if record.status != "ok":
            problems.append(f"sector {label}: {record.message}")
        if record.levels is None or vectors is None:
            continue
        energies = np.asarray(record.levels, dtype=np.float64)
        table[row, : energies.size] = energies
        residual = max(residual, float(record.residual or 0.0))
        methods.setdefault(record.method, None)
        if best is None or energies[0] < best[0]:
            best = (float(energies[0]), row, vectors[:, 0])
    if best is None or status == "failed":
        return failure(index, values, "failed", "; ".join(problems) or "no sector solved", started)
    merged = np.sort(table[np.isfinite(table)])[:k]
    _, ground_row, vector = best
    part = scan.parts[ground_row]
    assert part is not None
    try:
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            recorded = observables(part.space, vector, settings, part.threads)
    except _NOT_POINT_ERRORS:
        raise
    except Exception as exc:  # an observable failing is this point's result
        message = f"observables failed: {type(exc).__name__}: {exc}"
        return failure(index, values, "failed", message, started)
    recorded["dispersion"] = table.tolist()
    recorded["ground_sector"] = int(scan.labels[ground_row])
    wanted = settings.quantities
    return PointResult(
        index=index,
        parameters=dict(values),
        energy=float(merged[0]),
        gap=float(merged[1] - merged[0]) if "gap" in wanted and merged.size > 1 else None,
        levels=tuple(float(e) for e in merged) if "levels" in wanted else None,
        observables=recorded,
        residual=residual,
        method=",".join(methods),
        seconds=time.perf_counter() - started,
        finished=utc_now(),
        status=status,
        message=" ".join("; ".join(problems).split()),
    )


def dispersion_of(row: PointResult) -> npt.NDArray[np.float64] | None:
    """The ``(labels, levels)`` energies a scanned point recorded, or None."""
    value = row.observables.get("dispersion")
    if value is None:
        return None
    return np.array([[math.nan if e is None else e for e in line] for line in value], dtype=float)


# -- the symmetry of a sweep (checked in run_sweep) ------------------------------------


class SweepSectors:
    """The symmetry of a sweep: the checked choice and the sector(s) it solves in."""

    def __init__(self, model: Model, symmetry: object, threads: int | None) -> None:
        choice = sector_choice(symmetry, modes=model.space.modes)  # type: ignore[arg-type]
        parts = [(name, piece) for name, piece in model.pieces.items()]
        for name, piece in [*parts, ("constant", model.constant)]:
            try:
                choice.check_invariant(piece)
            except SymmetryError as exc:
                raise SymmetryError(
                    f"the model's {name!r} part does not commute with the symmetry: {exc}"
                ) from None
        self.choice = choice
        self.sector: SymmetricSpace | None = None
        if choice.scan is None:
            self.sector = choice.sector(model.space, threads=threads)
            self.dims = [self.sector.dim]
        else:
            self.dims = [
                choice.sector(model.space, q, threads=threads).dim for q in choice.scan_labels()
            ]
        if not any(self.dims):
            raise SymmetryError(
                f"the sector ({choice.describe()}) of this model's space holds no state; "
                "choose other labels (or another total)"
            )

    @property
    def solve_dim(self) -> int | None:
        """The dimension each point is solved in (None: the model space's, for scans)."""
        return None if self.sector is None else self.sector.dim

    def key(self) -> str:
        """What identifies the sector(s) (for the recipe's fingerprint)."""
        meta = self.choice.as_meta()
        return repr((meta["generators"], meta["labels"]))

    def table_sector(self) -> dict[str, Any]:
        """What a :class:`SweepTable` says of its sector (as the store's ``to_table``)."""
        return {**self.choice.as_meta(), "dims": list(self.dims)}

    def meta(self) -> dict[str, Any]:
        return {"symmetry": self.choice.as_meta(), "sector_dims": list(self.dims)}


def _same_symmetry(stored: object, current: Mapping[str, Any] | None) -> bool:
    if current is None:
        return stored is None
    if not isinstance(stored, Mapping):
        return False
    return bool(
        stored.get("generators") == current["generators"]
        and stored.get("labels") == current["labels"]
    )


def check_same_sector(handle: ResultsStore, sectors: SweepSectors | None) -> None:
    """Refuse to resume results of another symmetry sector (or of the whole space)."""
    stored = handle.meta.get("symmetry")
    current = None if sectors is None else sectors.choice.as_meta()
    if _same_symmetry(stored, current):
        return

    def text(meta: object) -> str:
        if isinstance(meta, Mapping):
            return f"the sector {meta.get('description', meta.get('labels'))}"
        return "the whole space"

    raise StoreError(
        f"{str(handle.path)!r} holds results solved in {text(stored)}, but this sweep asks "
        f"for {text(current)}; resume with the same symmetry, or write to a new file"
    )


def sweep_recipe(model: Model, sectors: SweepSectors | None) -> ModelRecipe:
    """The model as sent to workers, on its sector or with the generator to scan."""
    if sectors is None:
        return ModelRecipe.from_model(model)
    scan = sectors.choice if sectors.sector is None else None
    return ModelRecipe.from_model(model, space=sectors.sector, scan=scan, sector_key=sectors.key())
