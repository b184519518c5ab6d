"""Parameter sweeps: many ground states of one model, solved by the library's solvers.

A model is ``H(p) = constant + Σ_k p_k · piece_k``. :func:`run_sweep` checks its
options (:mod:`fockmill.sweeps.plan`), orders the points along a serpentine path, solves
them where asked (:mod:`fockmill.sweeps.execute`) with ``ground_state``/``lowest_levels``
through prepared problems (:mod:`fockmill.sweeps.records`; stored-matrix points share one
sparsity pattern, :mod:`fockmill.sweeps.pattern`), and commits each point's record to the
results store as it finishes (:mod:`fockmill.store.sweeps`). Failed points are records too.
A model with jumps (``Model.jumps``) is solved for the stationary state of its master
equation at every point instead (:mod:`fockmill.sweeps.stationary`), through the same
order, executors and store.
"""

from __future__ import annotations

import concurrent.futures as cf
import dataclasses
import os
from collections.abc import Callable, Iterable, Mapping, Sequence
from pathlib import Path
from types import MappingProxyType
from typing import Any

from fockmill.exceptions import StoreError
from fockmill.models.model import Model
from fockmill.spaces.sectors import SectorChoice
from fockmill.spaces.symmetry import ModePermutation
from fockmill.store.claims import claim
from fockmill.store.sweeps import PointResult, ResultsStore, SweepTable, space_summary
from fockmill.sweeps.pattern import SharedPattern
from fockmill.sweeps.plan import (
    QUANTITIES,
    SOLVER_DEFAULTS,
    SweepGrid,
    SweepSettings,
    full_points,
    resume_mismatch,
    serpentine_order,
    sweep_settings,
)
from fockmill.sweeps.sectors import SweepSectors, check_same_sector, sweep_recipe

__all__ = [
    "QUANTITIES",
    "RECORDABLE",
    "SOLVER_DEFAULTS",
    "SharedPattern",
    "run_sweep",
    "serpentine_order",
]

RECORDABLE = QUANTITIES
"""Old name of :data:`fockmill.sweeps.plan.QUANTITIES` (what a sweep can record)."""


def mode_labels_of(model: Model) -> list[str]:
    """The model's mode labels, or ``"mode i"`` for a model without them."""
    labels = [str(label) for label in model.mode_labels]
    if len(labels) != model.space.modes:
        labels = [f"mode {i}" for i in range(model.space.modes)]
    return labels


def _new_meta(
    model: Model,
    full: list[dict[str, float]],
    swept: tuple[str, ...],
    settings: SweepSettings,
    model_text_hash: str | None,
    units: Mapping[str, str],
    sectors: SweepSectors | None = None,
    descriptions: Mapping[str, str] | None = None,
) -> dict[str, Any]:
    extra = {} if sectors is None else sectors.meta()
    if descriptions:
        extra["descriptions"] = dict(descriptions)
    return extra | {
        "model_name": model.name,
        "model_fingerprint": model.fingerprint(),
        "model_text_hash": model_text_hash or "",
        "dim": model.space.dim,
        "space": space_summary(model.space),
        "points": len(full),
        "swept_parameters": list(swept),
        "settings": settings.as_meta(),
        "mode_labels": mode_labels_of(model),
        "units": dict(units),
    }


def _attach_store(
    store: str | os.PathLike[str] | ResultsStore,
    model: Model,
    full: list[dict[str, float]],
    settings: SweepSettings,
    sectors: SweepSectors | None,
    new_meta: Callable[[], dict[str, Any]],
) -> tuple[ResultsStore, bool]:
    """Open or create the store and check it belongs to this sweep; (store, owned).

    The caller holds the claim on a path (see :func:`fockmill.store.claims.claim`).
    """
    if isinstance(store, ResultsStore):
        handle, owned = store, False
    elif Path(store).exists():
        handle, owned = ResultsStore.open(store, purpose="resume"), True
    else:
        return ResultsStore.create(store, new_meta(), claimed=True), True
    try:
        _check_resumable(handle, model, full, settings)
        check_same_sector(handle, sectors)
    except BaseException:
        if owned:
            handle.close()
        raise
    return handle, owned


def _check_resumable(
    handle: ResultsStore, model: Model, full: list[dict[str, float]], settings: SweepSettings
) -> None:
    """Refuse to add this sweep's points to results of another model, grid or solver."""
    meta = handle.meta
    name = repr(str(handle.path))
    fingerprint = model.fingerprint()
    if meta.get("model_fingerprint") != fingerprint:
        raise StoreError(
            f"{name} holds results of model {meta.get('model_name')!r} (fingerprint "
            f"{meta.get('model_fingerprint')}), not of this model {model.name!r} "
            f"(fingerprint {fingerprint}); write to a new file, or delete this one to "
            "start over"
        )
    stored = meta.get("settings") or {}
    differing = resume_mismatch(stored, settings)
    if differing is not None:
        current = settings.as_meta()[differing]
        raise StoreError(
            f"{name} was solved with {differing}={stored.get(differing)!r}, but this sweep "
            f"asks for {differing}={current!r}; resume with the same {differing} (results "
            "solved differently would be mixed), or write to a new file"
        )
    count = meta.get("points")
    if isinstance(count, int) and count != len(full):
        raise StoreError(
            f"{name} holds a sweep grid of {count} points, this sweep has {len(full)}; the "
            "sweep grid changed: write to a new file, or delete this one to start over"
        )
    for index, values in sorted(handle.stored_parameters().items()):
        if index >= len(full) or values != full[index]:
            wanted = full[index] if index < len(full) else "no such point"
            raise StoreError(
                f"{name} stores point {index} at {values}, but this sweep's point "
                f"{index} is {wanted}; the sweep grid or a default value changed: "
                "write to a new file, or delete this one to start over"
            )


def _open_progress(enabled: bool, total: int, done: int, label: str) -> Any:
    """A tqdm bar when asked for and tqdm is installed, else None."""
    if not enabled:
        return None
    try:
        from tqdm import tqdm
    except ImportError:
        return None
    return tqdm(total=total, initial=done, unit="point", desc=label, dynamic_ncols=True)


def run_sweep(
    model: Model,
    points: SweepGrid | Iterable[Mapping[str, float]],
    *,
    store: str | os.PathLike[str] | ResultsStore | None = None,
    quantities: Sequence[str] | None = None,
    levels: int | None = None,
    method: str = "auto",
    tol: float = 1e-9,
    seed: int = 0,
    max_iterations: int | None = None,
    threads: int | None = None,
    entropy_modes: Sequence[int] | None = None,
    executor: cf.Executor | str | Any | None = None,
    workers: int | None = None,
    chunk: int | None = None,
    progress: bool = True,
    retry_failed: bool = False,
    units: Mapping[str, str] | None = None,
    model_text_hash: str | None = None,
    on_point: Callable[[PointResult], None] | None = None,
    record: Sequence[str] | None = None,
    solver_options: Mapping[str, object] | None = None,
    symmetry: SectorChoice | Sequence[tuple[ModePermutation, int | str]] | None = None,
    descriptions: Mapping[str, str] | None = None,
    _checkpoint: str | None = None,
    _solver_progress: Any = False,
) -> SweepTable:
    """Ground states of ``model`` at many parameter points, optionally saved as they finish.

    Parameters
    ----------
    model : Model
        The parametrised Hamiltonian. A model with jumps (``model.jumps``, e.g. from a
        model file's ``[jumps]``) is solved for the stationary state of its master
        equation at each point (:func:`fockmill.stationary_state`): ``quantities`` then
        come from :data:`~fockmill.sweeps.plan.STATIONARY_QUANTITIES` (default
        ``populations``, ``g2``, ``purity``), ``energy`` holds ``Tr(ρH)``, ``residual``
        ``‖𝓛ρ‖``, ``method`` is one of ``"auto"``, ``"dense"``, ``"iterative"`` and
        ``max_iterations`` counts Liouvillian applications (default 2000).
    points : SweepGrid or iterable of Mapping[str, float]
        A grid (its axes are the swept parameters), or parameter values per point;
        parameters a point omits keep the model's default. Point ``i`` keeps index
        ``i`` in the table and the store.
    store : str, path or ResultsStore, optional
        Results file. A new path is created; an existing file of the same sweep is
        resumed (stored points are skipped). Each point is committed as it finishes.
    quantities : sequence of str, optional
        What to record, from :data:`QUANTITIES` (default ``("energy", "gap")``);
        energy, residual and status are always recorded.
    levels : int, optional
        Number of lowest levels to compute (default: 2 with ``"gap"``, 4 with
        ``"levels"``, else 1). One level runs :func:`fockmill.ground_state`, several
        :func:`fockmill.lowest_levels`.
    method, tol, seed, max_iterations : optional
        As for :func:`fockmill.ground_state` (same defaults: ``"auto"``, 1e-9, 0,
        None; ``max_iterations`` counts matrix-vector products).
    threads : int, optional
        Native threads per solve (default: all cores in-process, 1 in each pool worker).
    entropy_modes : sequence of int, optional
        Subsystem for ``"entanglement_entropy"`` (default: the first half of the modes).
    executor : Executor, dask Client, "serial" or None
        Where chunks run. None: a local process pool of ``workers`` processes (or
        in-process when ``workers == 1``). A ``concurrent.futures.Executor`` is used as
        given and not shut down; a ``dask.distributed.Client`` is used through its
        executor. ``"serial"``: in-process, one warm-start chain through every point.
    workers : int, optional
        Processes of the local pool (default: CPU count); also the parallelism assumed
        when sizing chunks for a given executor.
    chunk : int, optional
        Consecutive points per task (default: about four tasks per worker, at most 64
        points each).
    progress : bool
        Show a tqdm progress bar on stderr (when tqdm is installed).
    retry_failed : bool
        When resuming, solve again the stored points whose status is not ``"ok"``
        (default: keep them).
    units : Mapping[str, str], optional
        Units of parameters and of ``"energy"``, kept in the store's meta data.
    model_text_hash : str, optional
        Hash of the model file the model came from, kept in the store's meta data.
    on_point : callable, optional
        Called in this process with each finished point, after it is stored.
    record : sequence of str, optional
        Deprecated name of ``quantities``.
    solver_options : Mapping[str, object], optional
        Deprecated: pass ``method``, ``tol``, ``seed``, ``max_iterations`` and
        ``threads`` as keywords (its ``dense_limit`` is ignored).
    symmetry : sequence of (ModePermutation, int or "all"), optional
        Solve in a symmetry sector: generators with their labels, as for
        :class:`fockmill.SymmetricSpace` (every part of the model must commute with
        them). One label may be ``"all"``: each point then solves every sector of that
        generator (every momentum of a translation) and records, besides the energy,
        gap and levels of the whole space (merged over sectors), the observable
        ``dispersion`` (the ``levels`` lowest energies per label, NaN where a sector
        is smaller) and ``ground_sector`` (the label of the lowest energy).
        Observables are those of the ground state. The sector is stored in the
        results file's meta data (``meta.symmetry``) and a resumed sweep must ask for
        the same one.
    descriptions : Mapping[str, str], optional
        What the user's own parameters and rates are (a model file's ``description``
        keys), kept in the store's meta data for axis labels.

    Returns
    -------
    SweepTable
        Every point of the sweep, including those resumed from the store, by index;
        check ``row.status`` (or ``table.failed``).

    Raises
    ------
    ValueError
        Unknown parameters or quantities, bad options, non-finite values.
    StoreError
        The store is not a results file, is damaged, or belongs to another model, grid,
        quantity list or solver setting (``method``, ``tol``, ``seed``, ``levels``).
    NotHermitianError
        A piece of the model is not Hermitian.
    SymmetryError
        A symmetry that the model does not commute with, labels out of range or no
        one-dimensional representation, or an empty sector.
    PoolStartError
        The worker processes could not start (e.g. no ``if __name__ == "__main__":``
        guard in a script) or died.

    Notes
    -----
    A point that does not converge is recorded with status ``"not_converged"``, one
    that fails (an error, a non-finite energy) with ``"failed"``, each with a message;
    the sweep goes on. Points run along a serpentine path through the grid
    (:func:`serpentine_order`); each chunk of consecutive points is one task, and
    within it every point starts the solver from the previous point's eigenvectors
    (their sum, plus a little seeded noise).

    With the default process pool, scripts must guard their entry point with
    ``if __name__ == "__main__":``. Pool workers run single-threaded native code unless
    ``threads`` says otherwise; their BLAS is capped to the same count when
    threadpoolctl is installed.

    Examples
    --------
    >>> import fockmill as fm
    >>> from fockmill.models.model import Model
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> hop = -(fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    >>> kerr = 0.5 * (fm.raising(0) ** 2 * fm.lowering(0) ** 2
    ...               + fm.raising(1) ** 2 * fm.lowering(1) ** 2)
    >>> model = Model("pair", space, {"J": hop, "U": kerr}, {"J": 1.0, "U": 0.0})
    >>> table = run_sweep(model, [{"U": 0.0}, {"U": 4.0}], workers=1, progress=False)
    >>> [round(row.energy, 6) for row in table], [row.status for row in table]
    ([-2.0, -0.828427], ['ok', 'ok'])
    """
    from fockmill.sweeps.execute import execute

    if symmetry is not None and model.is_open:
        raise ValueError(
            f"model {model.name!r} has jumps: open systems are solved on the whole space "
            "(their number sectors are used by themselves); symmetry sectors are not "
            "supported for them yet, drop symmetry="
        )
    sectors = None if symmetry is None else SweepSectors(model, symmetry, threads)
    settings = sweep_settings(
        model,
        quantities=quantities,
        levels=levels,
        entropy_modes=entropy_modes,
        method=method,
        tol=tol,
        seed=seed,
        max_iterations=max_iterations,
        threads=threads,
        record=record,
        solver_options=solver_options,
        dim=None if sectors is None else sectors.solve_dim,
    )
    full, swept = full_points(model, points)
    if _checkpoint is not None or _solver_progress is not False:
        # Private (``fockmill solve``): one point's solve reports progress and keeps a
        # checkpoint file, which identifies a single run.
        if _checkpoint is not None and len(full) != 1:
            raise ValueError("a checkpoint file keeps the solve of one point; pass one point")
        settings = dataclasses.replace(
            settings, checkpoint=_checkpoint, solver_progress=_solver_progress
        )
    unit_map = _check_units(units)
    labels = tuple(mode_labels_of(model))

    handle: ResultsStore | None = None
    owned_store = False
    # One writer per file: claim a path before anything is computed or written (a
    # second sweep or workflow on it stops here, naming this one's claim file).
    held = None if store is None or isinstance(store, ResultsStore) else claim(store)
    try:
        if store is not None:
            handle, owned_store = _attach_store(
                store,
                model,
                full,
                settings,
                sectors,
                lambda: _new_meta(
                    model,
                    full,
                    swept,
                    settings,
                    model_text_hash,
                    unit_map,
                    sectors,
                    descriptions,
                ),
            )
    except BaseException:
        if held is not None:
            held.release()
        raise
    try:
        done = handle.finished_indices(include_failed=not retry_failed) if handle else set()
        results: dict[int, PointResult] = {}
        order = [i for i in serpentine_order(full, swept) if i not in done]
        bar = _open_progress(progress, len(full), len(done), model.name)

        def finish(row: PointResult) -> None:
            if handle is not None:
                handle.add_point(row, replace_failed=retry_failed)
            else:
                results[row.index] = row
            if bar is not None:
                bar.update(1)
            if on_point is not None:
                on_point(row)

        try:
            if order:
                recipe = sweep_recipe(model, sectors)
                execute(recipe, full, order, settings, executor, workers, chunk, finish)
        finally:
            if bar is not None:
                bar.close()
        if handle is not None:
            return handle.to_table()
        return SweepTable(
            rows=tuple(results[i] for i in sorted(results)),
            swept=swept,
            mode_labels=labels,
            units=MappingProxyType(unit_map),
            sector=None if sectors is None else sectors.table_sector(),
            stationary=settings.stationary,
        )
    finally:
        if handle is not None and owned_store:
            handle.close()
        if held is not None:
            held.release()


def _check_units(units: Mapping[str, str] | None) -> dict[str, str]:
    if units is None:
        return {}
    if not isinstance(units, Mapping):
        raise TypeError(f"units must be a mapping of name to unit string; got {units!r}")
    out: dict[str, str] = {}
    for key, value in units.items():
        if not isinstance(key, str) or not isinstance(value, str):
            raise TypeError(f"units must map names to unit strings; got {key!r}: {value!r}")
        out[key] = value
    return out
