"""Ground states and lowest levels, with the method chosen from size and memory."""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import numpy.typing as npt
import scipy.sparse.linalg as sla
from scipy.sparse.linalg import LinearOperator

from fockmill._args import check_memory_limit
from fockmill._build import build_matrix
from fockmill._expr import LadderExpr
from fockmill._memory import MemoryEstimate, estimate_memory, format_bytes
from fockmill._observe import check_vector, top_level_weights
from fockmill._operator import LadderOperator
from fockmill._prepare import as_expr, check_space, check_threads, prepare
from fockmill._space import FockSpace
from fockmill.exceptions import (
    ConvergenceError,
    CutoffWarning,
    NotHermitianError,
    SizeLimitError,
)

__all__ = ["GroundState", "Levels", "Method", "choose_method", "ground_state", "lowest_levels"]

Method = Literal["auto", "dense", "csr", "operator", "lanczos"]
_METHODS = ("auto", "dense", "csr", "operator", "lanczos")
#: Spaces up to this dimension are diagonalised densely.
DENSE_MAX_DIM = 1500
#: Fraction of the available memory a solve may plan to use.
MEMORY_BUDGET = 0.8


@dataclass(frozen=True)
class GroundState:
    """The lowest eigenpair of a Hamiltonian on a space.

    Attributes
    ----------
    energy : float
        Lowest eigenvalue.
    vector : numpy.ndarray
        Unit-norm eigenvector, shape ``(dim,)``, in the space's basis order.
    residual : float
        ``‖H v − E v‖``, measured after the solve.
    method : str
        ``"dense"``, ``"csr"`` (eigsh on the stored matrix), ``"operator"`` (eigsh on the
        matrix-free operator) or ``"lanczos"`` (low-memory Lanczos in Rust).
    products : int
        Matrix-vector products used (0 for dense).
    iterations : int
        Lanczos steps for ``"lanczos"``; equal to ``products`` for the eigsh methods.
    seconds : float
        Wall time of the solve, including any build.
    degeneracy : int or None
        How many computed levels equal the lowest within the tolerance (1: unique);
        None when the method computes a single vector (``"lanczos"``).
    converged : bool
        Whether ``residual <= 10 · tol · max(1, |energy|)``.
    """

    energy: float
    vector: npt.NDArray[Any]
    residual: float
    method: str
    products: int
    iterations: int
    seconds: float
    degeneracy: int | None
    converged: bool


@dataclass(frozen=True)
class Levels:
    """The ``k`` lowest eigenpairs.

    Attributes
    ----------
    energies : numpy.ndarray
        Shape ``(k,)``, ascending.
    vectors : numpy.ndarray
        Shape ``(dim, k)``; column ``i`` belongs to ``energies[i]``.
    residuals : numpy.ndarray
        ``‖H v_i − E_i v_i‖`` for each level.
    method, products, seconds : as in :class:`GroundState`.
    degeneracies : tuple of int
        Sizes of the groups of equal energies, in ascending order of energy
        (``(2, 1, 1)``: a degenerate doublet then two single levels). The last group
        may continue beyond the ``k`` levels computed.
    """

    energies: npt.NDArray[np.float64]
    vectors: npt.NDArray[Any]
    residuals: npt.NDArray[np.float64]
    method: str
    products: int
    seconds: float
    degeneracies: tuple[int, ...]

    @property
    def gap(self) -> float:
        """``energies[1] − energies[0]`` (0 for a degenerate ground state)."""
        if self.energies.size < 2:
            raise ValueError("the gap needs at least two levels; ask for k >= 2")
        return float(self.energies[1] - self.energies[0])


def _check_hermitian(expr: LadderExpr) -> None:
    if not expr.is_hermitian():
        anti = (expr - expr.adjoint()) * 0.5
        raise NotHermitianError(
            "the Hamiltonian is not Hermitian (its anti-Hermitian part is "
            f"{anti}); add the Hermitian conjugate of each term, e.g. "
            "h + h.adjoint(), or use expr.hermitian_part()"
        )


def _degeneracy_groups(energies: npt.NDArray[np.float64], tol: float) -> tuple[int, ...]:
    groups: list[int] = []
    start = 0
    for i in range(1, energies.size + 1):
        if i == energies.size or energies[i] - energies[start] > tol * max(
            1.0, abs(float(energies[start]))
        ):
            groups.append(i - start)
            start = i
    return tuple(groups)


def _krylov_vectors(k: int) -> int:
    return max(2 * k + 1, 20) + 2


def choose_method(
    estimate: MemoryEstimate, k: int, memory_limit: int | None = None
) -> Literal["dense", "csr", "operator", "lanczos"]:
    """The method ``"auto"`` picks for ``k`` levels given a memory estimate.

    Dense for at most ``DENSE_MAX_DIM`` states; eigsh on the stored matrix when the
    matrix and a Krylov basis fit in ``MEMORY_BUDGET`` of the memory; eigsh on the
    matrix-free operator when only the Krylov basis fits; the four-vector Lanczos solver
    (ground state only) when even that does not fit.

    Raises
    ------
    SizeLimitError
        When no method fits.
    """
    limit = memory_limit if memory_limit is not None else estimate.available_bytes
    budget = float("inf") if limit is None else MEMORY_BUDGET * limit
    krylov = estimate.krylov_bytes(_krylov_vectors(k))
    if estimate.dim <= DENSE_MAX_DIM:
        return "dense"
    if estimate.build_peak_bytes + krylov <= budget:
        return "csr"
    if krylov <= budget:
        return "operator"
    if k == 1 and estimate.krylov_bytes(5) <= budget:
        return "lanczos"
    raise SizeLimitError(
        f"no solver fits in memory: {estimate}; even the four-vector Lanczos solver needs "
        f"{estimate.krylov_bytes(5) / 2**30:.2f} GiB. Use a smaller sector or cutoffs"
    )


def _check_fits(estimate: MemoryEstimate, method: str, k: int, memory_limit: int | None) -> None:
    """Refuse an explicitly chosen method whose vectors alone exceed the memory."""
    limit = memory_limit if memory_limit is not None else estimate.available_bytes
    if limit is None:
        return
    vectors = {
        "dense": estimate.dim * estimate.dim * estimate.value_dtype.itemsize * 3,
        "csr": estimate.krylov_bytes(_krylov_vectors(k)),
        "operator": estimate.krylov_bytes(_krylov_vectors(k)),
        "lanczos": estimate.krylov_bytes(5),
    }[method]
    if vectors > limit:
        raise SizeLimitError(
            f"method={method!r} needs about {format_bytes(vectors)} for its vectors alone "
            f"({estimate}), more than the {format_bytes(limit)} available; use a smaller "
            "sector or cutoffs, or method='lanczos' (four vectors)"
        )


def _start_vector(
    v0: npt.ArrayLike | None, space: FockSpace, real: bool
) -> npt.NDArray[Any] | None:
    if v0 is None:
        return None
    v = check_vector(space, v0, "v0")
    if real and v.dtype.kind == "c":
        v = np.ascontiguousarray(v.real)
        if not np.any(v):
            return None
    return v


def _residuals(op: Any, energies: npt.NDArray[Any], vectors: npt.NDArray[Any]) -> Any:
    hv = op @ vectors
    return np.linalg.norm(hv - vectors * energies[np.newaxis, :], axis=0)


class _Counted(LinearOperator):  # type: ignore[misc]
    """A Hermitian operator (CSR matrix or matrix-free) that counts its products."""

    def __init__(self, inner: Any) -> None:
        self.inner = inner
        self.products = 0
        super().__init__(dtype=np.dtype(inner.dtype), shape=inner.shape)

    def _matvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += 1
        return self.inner @ x

    def _matmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self.inner @ x

    _rmatvec = _matvec
    _rmatmat = _matmat

    def _adjoint(self) -> _Counted:
        return self


def _solve_levels(
    expr: LadderExpr,
    space: FockSpace,
    k: int,
    method: str,
    tol: float,
    v0: npt.ArrayLike | None,
    threads: int | None,
    max_iterations: int | None,
    memory_limit: int | None,
    seed: int = 0,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any], npt.NDArray[np.float64], _Counted | None]:
    """Energies, vectors, residuals and the (counting) operator used, for the eigsh and
    dense methods (the operator is None for dense)."""
    dim = space.dim
    if method == "dense":
        dense = build_matrix(expr, space, threads=threads, memory_limit=memory_limit).toarray()
        energies, vectors = np.linalg.eigh(dense)
        energies, vectors = energies[:k], vectors[:, :k]
        residuals = np.linalg.norm(dense @ vectors - vectors * energies, axis=0)
        return energies, vectors, residuals, None
    if method == "csr":
        target = _Counted(build_matrix(expr, space, threads=threads, memory_limit=memory_limit))
    else:
        target = _Counted(LadderOperator(expr, space, threads=threads))
    start = _start_vector(v0, space, target.dtype == np.float64)
    if dim - 1 <= k:
        raise ValueError(
            f"k={k} levels need a space with more than {k + 1} states for an iterative "
            f"method; this one has {dim}: use method='dense'"
        )
    if start is None:
        start = np.random.default_rng(seed).standard_normal(dim)
    try:
        energies, vectors = sla.eigsh(
            target, k=k, which="SA", tol=tol, v0=start, maxiter=max_iterations
        )
        order = np.argsort(energies)
        energies, vectors = energies[order], vectors[:, order]
        energies, vectors = _recover_missed_copies(
            target, energies, vectors, tol, seed, max_iterations
        )
    except sla.ArpackNoConvergence as exc:
        raise ConvergenceError(
            f"eigsh ({method}) did not converge to tol={tol} for k={k} levels "
            f"({len(exc.eigenvalues)} converged); raise max_iterations or tol"
        ) from exc
    residuals = _residuals(target.inner, energies, vectors)
    return energies, vectors, residuals, target


def _lowest_outside(
    target: LinearOperator,
    basis: npt.NDArray[Any],
    sigma: float,
    tol: float,
    rng: np.random.Generator,
    max_iterations: int | None,
) -> tuple[float, npt.NDArray[Any]]:
    """Lowest eigenpair of ``H + σ B B†``: with ``σ`` above the spread of the levels in
    ``B``, the lowest level of ``H`` not yet in ``B``."""
    dim = target.shape[0]

    def shifted(x: npt.NDArray[Any]) -> Any:
        x = np.asarray(x).reshape(-1)
        return target.matvec(x).reshape(-1) + sigma * (basis @ (basis.conj().T @ x))

    op = LinearOperator((dim, dim), matvec=shifted, rmatvec=shifted, dtype=basis.dtype)
    e, v = sla.eigsh(
        op, k=1, which="SA", tol=tol, v0=rng.standard_normal(dim), maxiter=max_iterations
    )
    w = v[:, 0] - basis @ (basis.conj().T @ v[:, 0])
    return float(e[0]), w / np.linalg.norm(w)


def _recover_missed_copies(
    target: LinearOperator,
    energies: npt.NDArray[np.float64],
    vectors: npt.NDArray[Any],
    tol: float,
    seed: int,
    max_iterations: int | None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any]]:
    """Find degenerate copies a single-vector Krylov method skipped.

    A Krylov space grown from one vector holds one vector per eigenspace, so eigsh can
    miss the second copy of a degenerate level. Shift the levels found out of the way
    (:func:`_lowest_outside` on all but the highest) and ask for the lowest remaining
    level: anything below the highest level found is a missed copy and replaces it.
    Repeat until none is left.
    """
    dim = target.shape[0]
    k = energies.size
    if k < 2 or k >= dim - 1:
        return energies, vectors
    rng = np.random.default_rng(seed + 1)
    for _ in range(k):
        scale = max(1.0, float(np.max(np.abs(energies))))
        sigma = float(energies[-1] - energies[0]) + scale
        e, w = _lowest_outside(target, vectors[:, :-1], sigma, tol, rng, max_iterations)
        if e >= energies[-1] - max(1e3 * tol, 1e-9) * scale:
            break
        energies = np.append(energies[:-1], e)
        vectors = np.column_stack([vectors[:, :-1], w])
        order = np.argsort(energies)
        energies, vectors = energies[order], vectors[:, order]
    return energies, vectors


def _validate(
    k: int,
    method: str,
    tol: float,
    space: FockSpace,
    v0: npt.ArrayLike | None = None,
    seed: object = 0,
    max_iterations: object = None,
) -> None:
    if method not in _METHODS:
        raise ValueError(f"method must be one of {_METHODS}; got {method!r}")
    if isinstance(tol, bool) or not (isinstance(tol, float | int) and np.isfinite(tol) and tol > 0):
        raise ValueError(f"tol must be a positive finite number such as 1e-9; got {tol!r}")
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer):
        raise TypeError(f"seed must be a non-negative integer; got {seed!r}")
    if seed < 0 or seed >= 2**63:
        raise ValueError(f"seed must be a non-negative integer below 2**63; got {seed}")
    if max_iterations is not None and (
        isinstance(max_iterations, bool)
        or not isinstance(max_iterations, int | np.integer)
        or max_iterations < 1
    ):
        raise ValueError(
            f"max_iterations must be a positive integer or None; got {max_iterations!r}"
        )
    if v0 is not None:
        check_vector(space, v0, "v0")
    if isinstance(k, bool) or not isinstance(k, int | np.integer):
        raise TypeError(f"k must be an integer; got {k!r}")
    if k < 1 or k > space.dim:
        raise ValueError(f"k must be between 1 and the space's dimension {space.dim}; got {k}")


def lowest_levels(
    expr: LadderExpr,
    space: FockSpace,
    k: int = 4,
    *,
    method: Method = "auto",
    tol: float = 1e-9,
    v0: npt.ArrayLike | None = None,
    threads: int | None = None,
    seed: int = 0,
    max_iterations: int | None = None,
    memory_limit: int | None = None,
) -> Levels:
    """The ``k`` lowest eigenvalues and eigenvectors of a Hermitian expression.

    Parameters
    ----------
    expr : LadderExpr
        A Hermitian Hamiltonian.
    space : FockSpace
        The basis (a sector, or the full truncated space).
    k : int
        Number of levels (1 <= k <= dim).
    method : {"auto", "dense", "csr", "operator", "lanczos"}
        ``"auto"`` chooses from the size and the free memory (see
        :func:`choose_method`); ``"lanczos"`` only computes one level.
    tol : float
        Target relative accuracy; eigsh's ``tol``.
    v0 : array_like, optional
        Start vector (warm start from a nearby solution).
    threads : int, optional
        Threads for builds and products (default: all cores).
    seed : int
        Seed of the start vector when ``v0`` is not given: results are reproducible.
    max_iterations : int, optional
        eigsh's ``maxiter``.
    memory_limit : int, optional
        Bytes the solve may plan to use (default: available memory).

    Returns
    -------
    Levels

    Raises
    ------
    NotHermitianError
        When ``expr`` is not Hermitian.
    SizeLimitError
        When no method fits in memory.
    ConvergenceError
        When the iterative solver does not converge.

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=1, total=1)
    >>> h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    >>> fm.lowest_levels(h, space, k=2).energies.round(6).tolist()
    [-1.0, 1.0]
    """
    t0 = time.perf_counter()
    e = as_expr(expr)
    s = check_space(space)
    threads = check_threads(threads)
    memory_limit = check_memory_limit(memory_limit)
    _validate(k, method, tol, s, v0, seed, max_iterations)
    _check_hermitian(e)
    prepare(e, s)  # charge and mode errors before any size estimate
    estimate = estimate_memory(e, s, threads=threads)
    chosen = method
    if method == "auto":
        chosen = choose_method(estimate, k, memory_limit)
    else:
        _check_fits(estimate, chosen, k, memory_limit)
    if chosen == "lanczos":
        if k != 1:
            raise ValueError(
                "method='lanczos' computes only the ground state; use method='operator' "
                "for several levels"
            )
        g = ground_state(
            e,
            s,
            method="lanczos",
            tol=tol,
            v0=v0,
            threads=threads,
            seed=seed,
            memory_limit=memory_limit,
        )
        return Levels(
            np.array([g.energy]),
            g.vector[:, np.newaxis],
            np.array([g.residual]),
            g.method,
            g.products,
            time.perf_counter() - t0,
            (1,),
        )
    energies, vectors, residuals, target = _solve_levels(
        e, s, k, chosen, tol, v0, threads, max_iterations, memory_limit, seed
    )
    products = 0 if target is None else target.products
    degeneracy_tol = max(1e3 * tol, 1e-9)
    return Levels(
        energies=np.asarray(energies, dtype=np.float64),
        vectors=vectors,
        residuals=np.asarray(residuals, dtype=np.float64),
        method=chosen,
        products=products,
        seconds=time.perf_counter() - t0,
        degeneracies=_degeneracy_groups(np.asarray(energies), degeneracy_tol),
    )


def _probe_degeneracy(
    target: _Counted,
    space: FockSpace,
    energies: npt.NDArray[np.float64],
    vectors: npt.NDArray[Any],
    tol: float,
    degeneracy_tol: float,
    seed: int,
    max_iterations: int | None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any]]:
    """Add the ground level's degenerate copies (found by deflation), up to 16."""
    rng = np.random.default_rng(seed + 1)
    scale = max(1.0, abs(float(energies[0])))
    while energies.size < min(16, space.dim - 2):
        e, w = _lowest_outside(target, vectors, scale, tol, rng, max_iterations)
        if e - energies[0] > degeneracy_tol * scale:
            break
        energies = np.append(energies, e)
        vectors = np.column_stack([vectors, w])
    return energies, vectors


def _warn_cutoff(space: FockSpace, vector: npt.NDArray[Any], threshold: float | None) -> None:
    if threshold is None:
        return
    weights = top_level_weights(space, vector)
    binding = space.binding_cutoffs()
    flagged = [
        (i, float(w))
        for i, w in enumerate(weights)
        if binding[i] and space.cutoffs[i] >= 2 and w > threshold
    ]
    if flagged:
        detail = ", ".join(f"mode {i}: {w:.2e}" for i, w in flagged[:6])
        warnings.warn(
            f"the ground state has weight on the highest kept level ({detail}); the "
            "cutoff may be too low. Raise it (see fm.converge_cutoffs) or pass "
            "cutoff_warning=None if the truncation is intended",
            CutoffWarning,
            stacklevel=3,
        )


def ground_state(
    expr: LadderExpr,
    space: FockSpace,
    *,
    method: Method = "auto",
    tol: float = 1e-9,
    v0: npt.ArrayLike | None = None,
    threads: int | None = None,
    seed: int = 0,
    max_iterations: int | None = None,
    memory_limit: int | None = None,
    cutoff_warning: float | None = 1e-6,
    store_matrix: bool | None = None,
) -> GroundState:
    """The lowest eigenpair of a Hermitian expression on a space.

    Parameters
    ----------
    expr : LadderExpr
        A Hermitian Hamiltonian.
    space : FockSpace
        The basis.
    method : {"auto", "dense", "csr", "operator", "lanczos"}
        See :func:`lowest_levels`; ``"lanczos"`` keeps only four vectors in memory and
        never stores the matrix.
    tol : float
        Target: ``‖Hv − Ev‖ <= tol · max(1, |E|)`` (Lanczos), eigsh's ``tol`` otherwise.
    v0 : array_like, optional
        Start vector (warm start).
    threads : int, optional
        Threads for builds and products (default: all cores).
    seed : int
        Seed of the Lanczos start vector when ``v0`` is not given (results are
        reproducible for a given seed, whatever the thread count).
    max_iterations : int, optional
        Most products (Lanczos) or eigsh's ``maxiter``.
    memory_limit : int, optional
        Bytes the solve may plan to use (default: available memory).
    store_matrix : bool or None
        For ``method="lanczos"``: run on a CSR matrix built and kept inside Rust
        (several times faster products) instead of the matrix-free product. None
        (default) stores it when the matrix and five vectors fit in the memory budget.
    cutoff_warning : float or None
        Warn with :class:`~fockmill.exceptions.CutoffWarning` when a mode whose cutoff
        truncates (cutoff >= 2 and below what the total allows) holds more than this
        weight on its top level. Modes with cutoff 1 (two-level emitters, hard-core
        bosons) are never flagged. None disables the check.

    Returns
    -------
    GroundState

    Raises
    ------
    NotHermitianError, SizeLimitError, ConvergenceError
        As for :func:`lowest_levels`.

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=1, total=1)
    >>> h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    >>> round(fm.ground_state(h, space).energy, 9)
    -1.0
    """
    t0 = time.perf_counter()
    e = as_expr(expr)
    s = check_space(space)
    threads = check_threads(threads)
    memory_limit = check_memory_limit(memory_limit)
    _validate(1, method, tol, s, v0, seed, max_iterations)
    _check_hermitian(e)
    native = prepare(e, s)
    estimate = estimate_memory(e, s, threads=threads)
    chosen = method
    if method == "auto":
        chosen = choose_method(estimate, 1, memory_limit)
    else:
        _check_fits(estimate, chosen, 1, memory_limit)
    if chosen == "lanczos":
        start = _start_vector(v0, s, native.is_real)
        if store_matrix is None:
            limit = memory_limit if memory_limit is not None else estimate.available_bytes
            budget = float("inf") if limit is None else MEMORY_BUDGET * limit
            store_matrix = estimate.build_peak_bytes + estimate.krylov_bytes(5) <= budget
        max_steps = 400
        restarts = 8 if max_iterations is None else max(0, max_iterations // max_steps)
        energy, vector, residual, steps, products, _, converged = native.lanczos_ground(
            tol, max_steps, restarts, seed, start, threads, bool(store_matrix)
        )
        if not converged:
            raise ConvergenceError(
                f"Lanczos reached a residual of {residual:.3e} after {products} products, "
                f"short of tol={tol}; raise max_iterations or tol, or pass v0"
            )
        _warn_cutoff(s, vector, cutoff_warning)
        return GroundState(
            energy=float(energy),
            vector=vector,
            residual=float(residual),
            method="lanczos",
            products=int(products),
            iterations=int(steps),
            seconds=time.perf_counter() - t0,
            degeneracy=None,
            converged=True,
        )
    degeneracy_tol = max(1e3 * tol, 1e-9)
    products = 0
    if chosen == "dense":
        energies, vectors, residuals, _ = _solve_levels(
            e, s, min(17, s.dim), chosen, tol, v0, threads, max_iterations, memory_limit, seed
        )
    else:
        energies, vectors, residuals, target = _solve_levels(
            e, s, 1, chosen, tol, v0, threads, max_iterations, memory_limit, seed
        )
        assert target is not None
        energies, vectors = _probe_degeneracy(
            target, s, energies, vectors, tol, degeneracy_tol, seed, max_iterations
        )
        products = target.products
    degeneracy = _degeneracy_groups(energies, degeneracy_tol)[0]
    energy = float(energies[0])
    vector = vectors[:, 0]
    residual = float(residuals[0])
    converged = residual <= 10 * max(tol, 1e-12) * max(1.0, abs(energy))
    _warn_cutoff(s, vector, cutoff_warning)
    return GroundState(
        energy=energy,
        vector=vector,
        residual=residual,
        method=chosen,
        products=products,
        iterations=products,
        seconds=time.perf_counter() - t0,
        degeneracy=int(degeneracy),
        converged=bool(converged),
    )
