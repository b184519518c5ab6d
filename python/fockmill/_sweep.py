"""Parameter sweeps: many ground states of one model, reusing its matrix structure.

A model is ``H(p) = constant + Σ_k p_k · piece_k``. Each piece is built once as a CSR
matrix, and all pieces are re-expressed on one shared sparsity pattern (the union of
their patterns), so the matrix at a point is only ``data = constant + Σ_k p_k data_k``
on fixed ``(indptr, indices)``. Points are visited along a serpentine path through
the parameter grid, and each point's eigensolver starts from the previous point's
eigenvectors.

Work goes to a process pool, any :class:`concurrent.futures.Executor`, or a Dask
``Client`` in chunks of consecutive points; workers return finished rows and only the
calling process writes the results store.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import dataclasses
import functools
import math
import multiprocessing
import os
import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, cast

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from fockmill._build import build_matrix
from fockmill._expr import LadderExpr
from fockmill._model import Model
from fockmill._modelfile import RECORDABLE as _RECORDABLE
from fockmill._observe import (
    entanglement_entropy,
    number_variances,
    one_body_matrix,
    populations,
    top_level_weights,
)
from fockmill._solve import Method, ground_state, lowest_levels
from fockmill._space import FockSpace
from fockmill._store import PointResult, ResultsStore, StoreError, SweepTable, utc_now
from fockmill.exceptions import ConvergenceError, NotHermitianError

__all__ = [
    "RECORDABLE",
    "SOLVER_OPTIONS",
    "SharedPattern",
    "run_sweep",
    "serpentine_order",
]

# The vocabulary of what a sweep can record is the model-file schema's.
RECORDABLE = _RECORDABLE
"""Quantities a sweep can record at each point."""

SOLVER_OPTIONS: Mapping[str, object] = MappingProxyType(
    {
        "method": "auto",
        "tol": 1e-12,
        "dense_limit": 300,
        "max_iterations": None,
        "seed": 0,
        "threads": None,
    }
)
"""Solver options of :func:`run_sweep` and their defaults.

``method``: ``"auto"`` (dense below ``dense_limit``, else sparse Lanczos on the shared
pattern), ``"dense"``, ``"csr"``, or the matrix-free ``"operator"`` (eigsh on products
computed from the expressions) and ``"lanczos"`` (ground state only, least memory),
which store no matrix and so rebuild nothing but also reuse nothing.
``tol``: relative residual tolerance of the Lanczos solver.
``dense_limit``: largest dimension solved by full diagonalisation under ``"auto"``.
``max_iterations``: Lanczos restart limit (None: scipy's default). ``seed``: seed of the
starting vectors. ``threads``: threads for building and observables (None: all cores
in-process, 1 in each pool worker).
"""

_METHODS = ("auto", "dense", "csr", "operator", "lanczos")
_MATRIX_FREE = ("operator", "lanczos")
_WARM_MIX = 1e-2  # weight of a fresh random vector added to a warm start (see _start_vector)


# -- structure reuse ----------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class SharedPattern:
    """Every piece of a model as a data vector on one shared CSR sparsity pattern.

    Attributes
    ----------
    dim : int
        Matrix dimension.
    indptr, indices : numpy.ndarray
        The union of the pieces' sparsity patterns, canonical CSR (sorted columns).
    data : dict of str to numpy.ndarray
        Parameter name -> that piece's values aligned to ``indices``.
    constant : numpy.ndarray
        The parameter-independent part aligned to ``indices``.

    Examples
    --------
    >>> import fockmill as fm
    >>> from fockmill._model import Model
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> hop = -(fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    >>> kerr = 0.5 * (fm.raising(0) ** 2 * fm.lowering(0) ** 2
    ...               + fm.raising(1) ** 2 * fm.lowering(1) ** 2)
    >>> model = Model("pair", space, {"J": hop, "U": kerr}, {"J": 1.0, "U": 1.0})
    >>> shared = SharedPattern.from_model(model)
    >>> shared.assemble({"J": 1.0, "U": 2.0}).toarray().round(3).tolist()
    [[2.0, -1.414, 0.0], [-1.414, 0.0, -1.414], [0.0, -1.414, 2.0]]
    """

    dim: int
    indptr: npt.NDArray[Any]
    indices: npt.NDArray[Any]
    data: dict[str, npt.NDArray[Any]]
    constant: npt.NDArray[Any]

    @classmethod
    def from_model(cls, model: Model, *, threads: int | None = None) -> SharedPattern:
        """Build each piece once and align all of them to the union pattern.

        Parameters
        ----------
        model : Model
            The parametrised Hamiltonian.
        threads : int, optional
            Threads for the matrix builds (default: all cores).

        Returns
        -------
        SharedPattern

        Raises
        ------
        NotHermitianError
            A piece or the constant is not Hermitian (parameters are real, so each
            piece must be Hermitian for ``H(p)`` to be).
        """
        return cls.from_pieces(
            model.space, dict(model.pieces), model.constant, name=model.name, threads=threads
        )

    @classmethod
    def from_pieces(
        cls,
        space: FockSpace,
        pieces: Mapping[str, LadderExpr],
        constant: LadderExpr,
        *,
        name: str = "model",
        threads: int | None = None,
    ) -> SharedPattern:
        """Like :meth:`from_model`, from the parts of a model."""
        _check_hermitian_pieces(pieces, constant, name)
        parts = {**pieces, "": constant}
        matrices = {
            label: build_matrix(expr, space, threads=threads) for label, expr in parts.items()
        }
        dim = space.dim
        # A global key row*dim + col orders entries exactly as canonical CSR does, so the
        # union pattern and every piece's position in it come from sort + searchsorted.
        keys = {label: _entry_keys(m, dim) for label, m in matrices.items()}
        union = np.unique(np.concatenate(list(keys.values()))) if keys else np.zeros(0, np.int64)
        wide = dim > np.iinfo(np.int32).max or union.size > np.iinfo(np.int32).max
        index_type = np.int64 if wide else np.int32
        indices = (union % dim).astype(index_type)
        indptr = np.searchsorted(union, np.arange(dim + 1, dtype=np.int64) * dim).astype(index_type)
        complex_values = any(np.iscomplexobj(m.data) for m in matrices.values())
        dtype = np.complex128 if complex_values else np.float64
        aligned: dict[str, npt.NDArray[Any]] = {}
        for label, matrix in matrices.items():
            values = np.zeros(union.size, dtype=dtype)
            values[np.searchsorted(union, keys[label])] = matrix.data
            aligned[label] = values
        constant_data = aligned.pop("")
        return cls(dim=dim, indptr=indptr, indices=indices, data=aligned, constant=constant_data)

    @property
    def nnz(self) -> int:
        """Entries of the shared pattern."""
        return int(self.indices.size)

    def assemble(self, values: Mapping[str, float]) -> sp.csr_array:
        """The matrix ``constant + Σ_k values[k] · piece_k`` on the shared pattern.

        Parameters
        ----------
        values : Mapping[str, float]
            A value for every piece (missing names raise KeyError).

        Returns
        -------
        scipy.sparse.csr_array
            Shares ``indptr``/``indices`` with this object; its ``data`` is new. Entries
            that cancel at this point stay stored as explicit zeros.
        """
        data = self.constant.copy()
        for label, piece in self.data.items():
            coefficient = float(values[label])
            if coefficient != 0.0:
                data += coefficient * piece
        matrix = sp.csr_array(
            (data, self.indices, self.indptr), shape=(self.dim, self.dim), copy=False
        )
        matrix.has_sorted_indices = True
        return matrix


def _check_hermitian_pieces(
    pieces: Mapping[str, LadderExpr], constant: LadderExpr, name: str
) -> None:
    for label, expr in {**pieces, "": constant}.items():
        if not expr.is_hermitian():
            what = f"piece {label!r}" if label else "constant part"
            raise NotHermitianError(
                f"the {what} of {name!r} is not Hermitian; sweeps multiply pieces by real "
                "parameters, so write each piece with its Hermitian conjugate included"
            )


def _entry_keys(matrix: sp.csr_array, dim: int) -> npt.NDArray[np.int64]:
    rows = np.repeat(np.arange(dim, dtype=np.int64), np.diff(matrix.indptr))
    return rows * dim + matrix.indices.astype(np.int64)


# -- what a worker needs ------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _ModelRecipe:
    """A picklable description of a model (FockSpace itself does not pickle)."""

    name: str
    cutoffs: tuple[int, ...]
    weights: tuple[int, ...]
    total: int | None
    modulus: int | None
    pieces: tuple[tuple[str, LadderExpr], ...]
    constant: LadderExpr
    fingerprint: str

    @classmethod
    def from_model(cls, model: Model) -> _ModelRecipe:
        space = model.space
        return cls(
            name=model.name,
            cutoffs=tuple(space.cutoffs),
            weights=tuple(space.weights),
            total=space.total,
            modulus=space.modulus,
            pieces=tuple(model.pieces.items()),
            constant=model.constant,
            fingerprint=model.fingerprint(),
        )

    def space(self) -> FockSpace:
        return FockSpace(
            len(self.cutoffs),
            list(self.cutoffs),
            self.total,
            weights=list(self.weights),
            modulus=self.modulus,
        )

    def __hash__(self) -> int:
        return hash((self.fingerprint, self.name))

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, _ModelRecipe):
            return NotImplemented
        return (self.fingerprint, self.name) == (other.fingerprint, other.name)


@dataclass(frozen=True)
class _Settings:
    """What to compute at each point (validated by run_sweep)."""

    record: tuple[str, ...]
    levels: int
    entropy_modes: tuple[int, ...]
    method: str
    tol: float
    dense_limit: int
    max_iterations: int | None
    seed: int
    threads: int | None

    def as_meta(self) -> dict[str, object]:
        """The settings a resumed sweep must share with the stored one."""
        return {
            "record": list(self.record),
            "levels": self.levels,
            "entropy_modes": list(self.entropy_modes),
        }


@dataclass(frozen=True)
class _Chunk:
    """Consecutive points of the serpentine path, solved in one task."""

    recipe: _ModelRecipe
    settings: _Settings
    points: tuple[tuple[int, dict[str, float]], ...] = field(default=())


@dataclass(frozen=True, eq=False)
class _PreparedModel:
    """A model ready to solve at any point.

    ``shared`` is None for the matrix-free methods, which rebuild ``H(p)`` from the
    expressions at each point instead of storing any matrix.
    """

    name: str
    space: FockSpace
    pieces: Mapping[str, LadderExpr]
    constant: LadderExpr
    shared: SharedPattern | None

    @classmethod
    def build(
        cls,
        name: str,
        space: FockSpace,
        pieces: Mapping[str, LadderExpr],
        constant: LadderExpr,
        settings: _Settings,
    ) -> _PreparedModel:
        if settings.method in _MATRIX_FREE:
            _check_hermitian_pieces(pieces, constant, name)
            shared = None
        else:
            shared = SharedPattern.from_pieces(
                space, pieces, constant, name=name, threads=settings.threads
            )
        return cls(name, space, dict(pieces), constant, shared)

    @property
    def is_complex(self) -> bool:
        """Whether ``H(p)`` has complex matrix elements."""
        if self.shared is not None:
            return bool(np.iscomplexobj(self.shared.constant))
        exprs = [*self.pieces.values(), self.constant]
        return any(c.imag != 0 for expr in exprs for c, _ in expr.terms())

    def hamiltonian(self, values: Mapping[str, float]) -> LadderExpr:
        expr = self.constant
        for label, piece in self.pieces.items():
            if values[label] != 0.0:
                expr = expr + values[label] * piece
        return expr


@functools.lru_cache(maxsize=1)
def _worker_model(recipe: _ModelRecipe, settings: _Settings) -> _PreparedModel:
    """``recipe`` prepared for solving, built once per worker process.

    A one-entry memo: consecutive tasks of one sweep in a long-lived worker (a Dask
    worker, a pool process) reuse the pieces instead of rebuilding them.
    """
    return _PreparedModel.build(
        recipe.name, recipe.space(), dict(recipe.pieces), recipe.constant, settings
    )


def _solve_chunk(chunk: _Chunk) -> list[PointResult]:
    """Pool task: solve a chunk's points in order, each warm-started from the last."""
    settings = chunk.settings
    if settings.threads is None:  # one native thread per worker process by default
        settings = dataclasses.replace(settings, threads=1)
    with _limit_blas_threads(settings.threads):
        prepared = _worker_model(chunk.recipe, settings)
        return list(_solve_path(prepared, chunk.points, settings))


def _limit_blas_threads(threads: int | None) -> contextlib.AbstractContextManager[object]:
    """Cap BLAS threads inside a worker when threadpoolctl is installed.

    Several workers each running a multi-threaded BLAS oversubscribe the cores, and
    OpenBLAS then slows small dense solves down by orders of magnitude. Without
    threadpoolctl, set ``OPENBLAS_NUM_THREADS=1`` (or ``OMP_NUM_THREADS=1``) in the
    environment the workers start from.
    """
    if threads is None:
        return contextlib.nullcontext()
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return contextlib.nullcontext()
    return threadpool_limits(limits=threads, user_api="blas")  # type: ignore[no-any-return]


# -- solving one point --------------------------------------------------------------


def _start_vector(
    dim: int, dtype: np.dtype[Any], seed: int, index: int, previous: npt.NDArray[Any] | None
) -> npt.NDArray[Any]:
    """A deterministic Lanczos start: the previous point's levels plus a little noise.

    ``previous`` holds the neighbouring point's eigenvectors as columns (or is None for
    a cold start). Their normalised sum starts the solver close to every wanted level
    at once, which saves more products than the ground vector alone when several
    levels are computed. The noise matters: those vectors may lie in a few symmetry
    sectors (e.g. lattice momenta), and a start with no weight elsewhere would hide
    levels of other sectors from the solver, giving a wrong gap.
    """
    noise = np.random.default_rng([seed, index]).standard_normal(dim)
    noise /= np.linalg.norm(noise)
    if previous is None:
        return noise.astype(dtype, copy=False)
    combined = previous.reshape(dim, -1).sum(axis=1)
    norm = np.linalg.norm(combined)
    start = (combined / norm if norm > 0 else combined) + _WARM_MIX * noise
    return start.astype(dtype, copy=False)


def _lowest(
    matrix: sp.csr_array,
    count: int,
    start: npt.NDArray[Any],
    settings: _Settings,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any], str]:
    """The ``count`` lowest eigenpairs (ascending) of a Hermitian CSR matrix."""
    dim = matrix.shape[0]
    dense = settings.method == "dense" or (
        settings.method == "auto" and dim <= settings.dense_limit
    )
    # ARPACK needs count < dim - 1 for a Hermitian problem; tiny spaces go dense.
    if dense or count >= dim - 1:
        energies, vectors = np.linalg.eigh(matrix.toarray())
        return energies[:count], vectors[:, :count], "dense"
    try:
        energies, vectors = spla.eigsh(
            matrix,
            k=count,
            which="SA",
            v0=start,
            tol=settings.tol,
            maxiter=settings.max_iterations,
        )
    except spla.ArpackNoConvergence as exc:
        raise ConvergenceError(
            f"the sparse eigensolver did not converge ({exc}); raise max_iterations, loosen "
            "tol, or use method='dense' for small spaces"
        ) from exc
    order = np.argsort(energies)
    return energies[order], vectors[:, order], "csr"


def _observables(space: FockSpace, vector: npt.NDArray[Any], settings: _Settings) -> dict[str, Any]:
    threads = settings.threads
    out: dict[str, Any] = {}
    record = settings.record
    if "populations" in record:
        out["populations"] = populations(space, vector, threads=threads).tolist()
    if "number_variance" in record:
        out["number_variance"] = number_variances(space, vector, threads=threads).tolist()
    if "one_body" in record:
        matrix = one_body_matrix(space, vector, threads=threads)
        out["one_body"] = np.real(matrix).tolist()
        if np.iscomplexobj(matrix):
            out["one_body_imag"] = np.imag(matrix).tolist()
    if "entropy" in record:
        out["entropy"] = float(entanglement_entropy(space, vector, settings.entropy_modes))
    if "top_weight" in record:
        out["top_weight"] = top_level_weights(space, vector, threads=threads).tolist()
    return out


def _lowest_matrix_free(
    prepared: _PreparedModel,
    values: Mapping[str, float],
    start: npt.NDArray[Any],
    settings: _Settings,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any], float, str]:
    """Lowest levels from the expressions, with no stored matrix (large spaces)."""
    expr = prepared.hamiltonian(values)
    method = cast(Method, settings.method)
    if settings.levels == 1:
        found = ground_state(
            expr,
            prepared.space,
            method=method,
            tol=settings.tol,
            v0=start,
            threads=settings.threads,
            seed=settings.seed,
            max_iterations=settings.max_iterations,
            cutoff_warning=None,
        )
        energies = np.array([found.energy])
        return energies, found.vector[:, np.newaxis], float(found.residual), found.method
    levels = lowest_levels(
        expr,
        prepared.space,
        settings.levels,
        method=method,
        tol=settings.tol,
        v0=start,
        threads=settings.threads,
        max_iterations=settings.max_iterations,
    )
    return levels.energies, levels.vectors, float(levels.residuals[0]), levels.method


def _solve_path(
    prepared: _PreparedModel,
    points: Iterable[tuple[int, dict[str, float]]],
    settings: _Settings,
) -> Iterator[PointResult]:
    """Solve points in the given order, chaining warm starts; yield each as it finishes."""
    previous: npt.NDArray[Any] | None = None
    shared = prepared.shared
    dim = prepared.space.dim
    dtype = np.dtype(np.complex128 if prepared.is_complex else np.float64)
    for index, values in points:
        started = time.perf_counter()
        start = _start_vector(dim, dtype, settings.seed, index, previous)
        if shared is None:
            energies, vectors, residual, method = _lowest_matrix_free(
                prepared, values, start, settings
            )
            ground = vectors[:, 0]
        else:
            matrix = shared.assemble(values)
            energies, vectors, method = _lowest(matrix, settings.levels, start, settings)
            ground = vectors[:, 0]
            residual = float(np.linalg.norm(matrix @ ground - energies[0] * ground))
        observables = _observables(prepared.space, ground, settings)
        previous = vectors
        yield PointResult(
            index=index,
            parameters=dict(values),
            energy=float(energies[0]),
            gap=float(energies[1] - energies[0]) if "gap" in settings.record else None,
            levels=tuple(float(e) for e in energies) if "levels" in settings.record else None,
            observables=observables,
            residual=residual,
            method=method,
            seconds=time.perf_counter() - started,
            finished=utc_now(),
        )


# -- ordering -----------------------------------------------------------------------


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


# -- validation ---------------------------------------------------------------------


def _check_settings(
    model: Model,
    record: Sequence[str],
    levels: int,
    solver_options: Mapping[str, object] | None,
    entropy_modes: Sequence[int] | None,
) -> _Settings:
    if isinstance(record, str):
        record = (record,)
    unknown = [r for r in record if r not in RECORDABLE]
    if unknown:
        raise ValueError(f"cannot record {unknown}; choose from {list(RECORDABLE)}")
    record_tuple = tuple(dict.fromkeys(record))
    if isinstance(levels, bool) or not isinstance(levels, int | np.integer) or levels < 1:
        raise ValueError(
            f"levels must be an integer >= 1 (how many lowest energies); got {levels!r}"
        )
    levels = int(levels)
    if "gap" in record_tuple and levels < 2:
        raise ValueError("recording 'gap' needs levels >= 2; pass levels=2 or drop 'gap'")
    dim = model.space.dim
    if levels > dim:
        raise ValueError(
            f"levels={levels} exceeds the dimension {dim} of the model's space; ask for at "
            f"most {dim}"
        )
    options = dict(SOLVER_OPTIONS)
    given = dict(solver_options or {})
    unknown = sorted(set(given) - set(SOLVER_OPTIONS))
    if unknown:
        raise ValueError(f"unknown solver option(s) {unknown}; known: {sorted(SOLVER_OPTIONS)}")
    options.update(given)
    if options["method"] not in _METHODS:
        raise ValueError(
            f"solver option method must be one of {list(_METHODS)}; got {options['method']!r}"
        )
    if options["method"] == "lanczos" and levels > 1:
        raise ValueError(
            "method 'lanczos' computes the ground state only; use levels=1 without 'gap', "
            "or method 'operator' (matrix-free, several levels)"
        )
    tol = options["tol"]
    if not isinstance(tol, int | float) or not 0 <= float(tol) < 1:
        raise ValueError(f"solver option tol must be a number in [0, 1); got {tol!r}")
    for name in ("dense_limit", "seed"):
        value = options[name]
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            raise ValueError(f"solver option {name} must be an integer >= 0; got {value!r}")
    for name in ("max_iterations", "threads"):
        value = options[name]
        if value is not None and (
            isinstance(value, bool) or not isinstance(value, int) or value < 1
        ):
            raise ValueError(f"solver option {name} must be None or an integer >= 1; got {value!r}")
    modes = model.space.modes
    if entropy_modes is None:
        subsystem = tuple(range(max(1, modes // 2)))
    else:
        subsystem = tuple(sorted({int(m) for m in entropy_modes}))
        if not subsystem or any(m < 0 or m >= modes for m in subsystem):
            raise ValueError(
                f"entropy_modes must list modes in 0..{modes - 1}; got {list(entropy_modes)}"
            )
    return _Settings(
        record=record_tuple,
        levels=levels,
        entropy_modes=subsystem,
        method=str(options["method"]),
        tol=float(tol),  # type: ignore[arg-type]
        dense_limit=int(options["dense_limit"]),  # type: ignore[call-overload]
        max_iterations=options["max_iterations"],  # type: ignore[arg-type]
        seed=int(options["seed"]),  # type: ignore[call-overload]
        threads=options["threads"],  # type: ignore[arg-type]
    )


def _full_points(
    model: Model, points: Iterable[Mapping[str, float]]
) -> tuple[list[dict[str, float]], tuple[str, ...]]:
    """Every point's complete parameter values, and the names that were given."""
    full: list[dict[str, float]] = []
    swept: dict[str, None] = {}
    for index, point in enumerate(points):
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


# -- the results store --------------------------------------------------------------


def _attach_store(
    store: str | os.PathLike[str] | ResultsStore,
    model: Model,
    full: list[dict[str, float]],
    swept: tuple[str, ...],
    settings: _Settings,
    model_text_hash: str | None,
) -> tuple[ResultsStore, bool]:
    """Open or create the store and check it belongs to this sweep; (store, owned)."""
    import json

    fingerprint = model.fingerprint()
    settings_text = json.dumps(settings.as_meta(), sort_keys=True)
    if isinstance(store, ResultsStore):
        handle, owned = store, False
    elif Path(store).exists():
        handle, owned = ResultsStore.open(store), True
    else:
        meta = {
            "model_name": model.name,
            "model_fingerprint": fingerprint,
            "model_text_hash": model_text_hash or "",
            "dim": str(model.space.dim),
            "swept_parameters": json.dumps(list(swept)),
            "settings": settings_text,
            "points": str(len(full)),
        }
        return ResultsStore.create(store, meta), True
    try:
        meta = handle.meta
        name = repr(str(handle.path))
        if meta.get("model_fingerprint") != fingerprint:
            raise StoreError(
                f"{name} holds results of model {meta.get('model_name')!r} (fingerprint "
                f"{meta.get('model_fingerprint')}), not of this model {model.name!r} "
                f"(fingerprint {fingerprint}); write to a new file, or delete this one to "
                "start over"
            )
        if json.loads(meta.get("settings", "{}")) != settings.as_meta():
            raise StoreError(
                f"{name} was written recording {meta.get('settings')}, but this sweep asks "
                f"for {settings_text}; use the same record/levels/entropy modes to resume, "
                "or write to a new file"
            )
        for index, stored in sorted(handle.stored_parameters().items()):
            if index >= len(full) or stored != full[index]:
                wanted = full[index] if index < len(full) else "no such point"
                raise StoreError(
                    f"{name} stores point {index} at {stored}, but this sweep's point "
                    f"{index} is {wanted}; the sweep grid or a default value changed: "
                    "write to a new file, or delete this one to start over"
                )
    except BaseException:
        if owned:
            handle.close()
        raise
    return handle, owned


# -- execution ----------------------------------------------------------------------


def _open_progress(enabled: bool, total: int, done: int, label: str) -> Any:
    """A tqdm bar when asked for and tqdm is installed, else None."""
    if not enabled:
        return None
    try:
        from tqdm import tqdm
    except ImportError:
        return None
    return tqdm(total=total, initial=done, unit="point", desc=label, dynamic_ncols=True)


def _resolve_executor(
    executor: cf.Executor | str | Any | None, workers: int | None
) -> tuple[cf.Executor | None, bool, int]:
    """(executor or None for in-process, whether we own it, parallel slots)."""
    if workers is not None and (isinstance(workers, bool) or int(workers) < 1):
        raise ValueError(f"workers must be an integer >= 1; got {workers!r}")
    if isinstance(executor, str):
        if executor != "serial":
            raise ValueError(
                f"executor must be an Executor, a Dask Client, 'serial' or None; got {executor!r}"
            )
        return None, False, 1
    if executor is None:
        slots = int(workers) if workers is not None else (os.cpu_count() or 1)
        if slots == 1:
            return None, False, 1
        # forkserver: the parent may hold native threads, which fork() must not copy.
        method = (
            "forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else "spawn"
        )
        pool = cf.ProcessPoolExecutor(
            max_workers=slots, mp_context=multiprocessing.get_context(method)
        )
        return pool, True, slots
    if isinstance(executor, cf.Executor):
        return executor, False, int(workers) if workers is not None else (os.cpu_count() or 1)
    get_executor = getattr(executor, "get_executor", None)
    if callable(get_executor):  # a dask.distributed Client
        if workers is not None:
            return get_executor(pure=False), True, int(workers)
        try:
            slots = int(sum(executor.nthreads().values())) or 1
        except Exception:  # an unusual Client-like object: assume one slot per core
            slots = os.cpu_count() or 1
        return get_executor(pure=False), True, slots
    raise TypeError(
        "executor must be a concurrent.futures.Executor, a dask.distributed Client, 'serial' "
        f"or None; got {type(executor).__name__}"
    )


def _default_chunk(points: int, slots: int) -> int:
    """About four tasks per slot (load balance), at most 64 points each.

    The cap keeps progress updates regular and bounds the work redone after a crash;
    each chunk starts one cold solve, a small cost at 64 points.
    """
    return max(1, min(64, math.ceil(points / (4 * slots))))


def _chunks(order: list[int], size: int) -> list[list[int]]:
    return [order[i : i + size] for i in range(0, len(order), size)]


def run_sweep(
    model: Model,
    points: Iterable[Mapping[str, float]],
    *,
    store: str | os.PathLike[str] | ResultsStore | None = None,
    record: Sequence[str] = ("energy", "gap"),
    levels: int = 2,
    solver_options: Mapping[str, object] | None = None,
    entropy_modes: Sequence[int] | None = None,
    executor: cf.Executor | str | Any | None = None,
    workers: int | None = None,
    chunk: int | None = None,
    progress: bool = True,
    model_text_hash: str | None = None,
    on_point: Callable[[PointResult], None] | None = None,
) -> SweepTable:
    """Ground states of ``model`` at many parameter points, optionally saved as they finish.

    Parameters
    ----------
    model : Model
        The parametrised Hamiltonian.
    points : iterable of Mapping[str, float]
        Parameter values per point; parameters a point omits keep the model's default.
        Point ``i`` keeps index ``i`` in the table and the store.
    store : str, path or ResultsStore, optional
        Results file. A new path is created; an existing file of the same sweep is
        resumed (finished points are skipped). Each point is committed as it finishes.
    record : sequence of str
        Quantities to record, from :data:`RECORDABLE`. Energy and residual are always
        recorded.
    levels : int
        Number of lowest energies to compute (>= 2 for ``"gap"``).
    solver_options : Mapping[str, object], optional
        Overrides of :data:`SOLVER_OPTIONS` (``method``, ``tol``, ``dense_limit``,
        ``max_iterations``, ``seed``, ``threads``).
    entropy_modes : sequence of int, optional
        Subsystem for ``"entropy"`` (default: the first half of the modes).
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
    model_text_hash : str, optional
        Hash of the model file the model came from, kept in the store's meta data.
    on_point : callable, optional
        Called in this process with each finished point, after it is stored.

    Returns
    -------
    SweepTable
        Every point of the sweep, including those resumed from the store, by index.

    Raises
    ------
    ValueError
        Unknown parameters or record names, bad options, non-finite values.
    StoreError
        The store is not a results file, is damaged, or belongs to another model, grid
        or record setting.
    NotHermitianError
        A piece of the model is not Hermitian.
    ConvergenceError
        The sparse eigensolver did not converge at some point.

    Notes
    -----
    Points run along a serpentine path through the grid (:func:`serpentine_order`);
    each chunk of consecutive points is one task, and within it every point starts the
    eigensolver from the previous point's eigenvectors (their sum, plus a little
    noise). Small spaces (``dim <= dense_limit``) are diagonalised densely.

    Pool workers run single-threaded native code unless ``solver_options["threads"]``
    says otherwise; their BLAS is capped to the same count when threadpoolctl is
    installed (otherwise set ``OPENBLAS_NUM_THREADS=1`` before starting many workers on
    few cores). With the default process pool, scripts must guard their entry point
    with ``if __name__ == "__main__":``.

    Examples
    --------
    >>> import fockmill as fm
    >>> from fockmill._model import Model
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> hop = -(fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    >>> kerr = 0.5 * (fm.raising(0) ** 2 * fm.lowering(0) ** 2
    ...               + fm.raising(1) ** 2 * fm.lowering(1) ** 2)
    >>> model = Model("pair", space, {"J": hop, "U": kerr}, {"J": 1.0, "U": 0.0})
    >>> table = run_sweep(model, [{"U": 0.0}, {"U": 4.0}], workers=1, progress=False)
    >>> [round(row.energy, 6) for row in table]
    [-2.0, -0.828427]
    """
    settings = _check_settings(model, record, levels, solver_options, entropy_modes)
    full, swept = _full_points(model, points)
    if chunk is not None and (isinstance(chunk, bool) or int(chunk) < 1):
        raise ValueError(f"chunk must be an integer >= 1; got {chunk!r}")

    handle: ResultsStore | None = None
    owned_store = False
    if store is not None:
        handle, owned_store = _attach_store(store, model, full, swept, settings, model_text_hash)
    try:
        done = handle.finished_indices() if handle is not None else set()
        results: dict[int, PointResult] = {}
        order = [i for i in serpentine_order(full, swept) if i not in done]
        bar = _open_progress(progress, len(full), len(done), model.name)

        def finish(row: PointResult) -> None:
            if handle is not None:
                handle.add_point(row)
            else:
                results[row.index] = row
            if bar is not None:
                bar.update(1)
            if on_point is not None:
                on_point(row)

        try:
            if order:
                _execute(model, full, order, settings, executor, workers, chunk, finish)
        finally:
            if bar is not None:
                bar.close()
        if handle is not None:
            return handle.to_table()
        return SweepTable(rows=tuple(results[i] for i in sorted(results)), swept=swept)
    finally:
        if handle is not None and owned_store:
            handle.close()


def _execute(
    model: Model,
    full: list[dict[str, float]],
    order: list[int],
    settings: _Settings,
    executor: cf.Executor | str | Any | None,
    workers: int | None,
    chunk: int | None,
    finish: Callable[[PointResult], None],
) -> None:
    """Solve the points ``order`` (already in path order), handing each row to ``finish``."""
    pool, owned, slots = _resolve_executor(executor, workers)
    if pool is None:
        prepared = _PreparedModel.build(
            model.name, model.space, model.pieces, model.constant, settings
        )
        for row in _solve_path(prepared, ((i, full[i]) for i in order), settings):
            finish(row)
        return
    size = int(chunk) if chunk is not None else _default_chunk(len(order), slots)
    recipe = _ModelRecipe.from_model(model)
    futures: list[cf.Future[list[PointResult]]] = []
    failed = True
    try:
        for part in _chunks(order, size):
            task = _Chunk(recipe, settings, tuple((i, full[i]) for i in part))
            futures.append(pool.submit(_solve_chunk, task))
        for future in cf.as_completed(futures):
            for row in future.result():
                finish(row)
        failed = False
    finally:
        if failed:
            for future in futures:
                future.cancel()
        if owned:
            _close_pool(pool, cancel=failed)


def _close_pool(pool: cf.Executor, *, cancel: bool) -> None:
    """Shut down an executor we created; on failure or Ctrl-C, stop its work now.

    Queued chunks are cancelled, and our own worker processes are terminated rather
    than left to finish the chunk in hand (their finished rows are already stored).
    """
    if not isinstance(pool, cf.ProcessPoolExecutor):
        pool.shutdown(wait=not cancel)  # dask's ClientExecutor: wait=False cancels
        return
    if not cancel:
        pool.shutdown(wait=True)
        return
    terminate = getattr(pool, "terminate_workers", None)  # Python >= 3.14
    if callable(terminate):
        terminate()
        return
    # Older Pythons have no public way; the pool's process table is read before
    # shutdown clears it.
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        process.terminate()
    for process in processes:
        process.join()
