"""Shared machinery of the dynamics, spectral and thermal functions: a Hermitian
operator applied from a stored matrix or matrix-free (chosen from memory), and the
Lanczos recurrence that all three build on."""

from __future__ import annotations

import numbers
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt
from scipy.linalg.blas import daxpy, zaxpy

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import NotHermitianError, SizeLimitError
from fockmill.settings.checks import check_memory_limit, check_threads
from fockmill.settings.threads import blas_threads

__all__ = [
    "HermitianMap",
    "check_state",
    "expectation_function",
    "hermitian_map",
    "lanczos_coefficients",
    "subtract_scaled",
    "top_weights",
    "vector_norm",
    "warn_top_weights",
]

#: Fraction of the available memory a computation may plan to use.
MEMORY_BUDGET = 0.8
#: Observables whose CSR matrix is at most this large are stored for repeated use.
STORED_OBSERVABLE_BYTES = 64 * 2**20


@dataclass
class HermitianMap:
    """``x -> H x`` for a Hermitian ``H`` on a space, counting products.

    Attributes
    ----------
    dim : int
        Dimension of the space.
    is_real : bool
        Whether ``H`` has real matrix elements.
    method : str
        ``"csr"`` (stored scipy matrix) or ``"operator"`` (matrix-free products in Rust).
    products : int
        Vectors multiplied so far.
    """

    dim: int
    is_real: bool
    method: str
    _apply: Callable[[npt.NDArray[Any]], npt.NDArray[Any]] = field(repr=False)
    products: int = 0

    def __call__(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += 1
        return self._apply(x)


def check_hermitian(expr: LadderExpr, what: str = "the Hamiltonian") -> None:
    """Refuse a non-Hermitian expression, showing its anti-Hermitian part."""
    if not expr.is_hermitian():
        anti = (expr - expr.adjoint()) * 0.5
        raise NotHermitianError(
            f"{what} is not Hermitian (its anti-Hermitian part is {anti}); add the Hermitian "
            "conjugate of each term, e.g. h + h.adjoint(), or use expr.hermitian_part()"
        )


#: Below this dimension Krylov products use a stored scipy matrix whatever the kernel
#: (per-call overhead dominates there: measured at 462 states, 1.4x slower matrix-free).
SMALL_KRYLOV_DIM = 1 << 14


def _budget(memory_limit: int | None, available: int | None) -> float:
    limit = memory_limit if memory_limit is not None else available
    return float("inf") if limit is None else MEMORY_BUDGET * limit


def hermitian_map(
    problem: Any,
    *,
    vectors: int,
    method: str = "auto",
    complex_vectors: bool = True,
) -> HermitianMap:
    """The product ``x -> H x`` of a prepared problem, stored or matrix-free.

    ``"auto"`` uses the matrix-free product (parallel, in Rust, O(terms) memory) when the
    fast bipartite kernel serves the problem or the matrix does not fit, else stores the
    CSR matrix when it and ``vectors`` state vectors fit in ``MEMORY_BUDGET`` of the
    memory (scipy's CSR product); refuses with
    :class:`~fockmill.exceptions.SizeLimitError` when even the vectors do not fit.
    """
    from fockmill.problem.memory import size_limit_message

    if method not in ("auto", "csr", "operator"):
        raise ValueError(f"method must be 'auto', 'csr' or 'operator'; got {method!r}")
    check_hermitian(problem.expr)
    memory_limit = problem.memory_limit
    estimate = problem.estimate
    item = 16 if complex_vectors else estimate.value_dtype.itemsize
    vector_bytes = vectors * estimate.dim * item
    budget = _budget(memory_limit, estimate.available_bytes)
    if vector_bytes > budget:
        raise SizeLimitError(
            size_limit_message(
                f"keeping {vectors} state vectors",
                vector_bytes,
                budget,
                "use a smaller sector or cutoffs, fewer Krylov vectors, or raise memory_limit",
                given=memory_limit is not None,
                details=str(estimate),
            )
        )
    chosen = method
    if method == "auto":
        # As the core's solvers decide (rust/core/src/solve.rs, Storage::decide): the
        # bipartite product kernel and gathered quadratic forms read no matrix and beat
        # a stored one (the bipartite kernel on complex vectors by about 1.5x at L = 11),
        # so a matrix is stored only for the others;
        # but on small spaces a scipy product costs less than a native call's start-up.
        fits = estimate.build_peak_bytes + vector_bytes <= budget
        fast = estimate.dim >= SMALL_KRYLOV_DIM and problem.native.fast_products
        chosen = "csr" if fits and not fast else "operator"
    is_real = problem.is_real
    # Long vectors: the matrix is stored on the Rust side, whose product runs on the
    # problem's threads without the GIL (scipy's runs on one thread). Handing the built
    # arrays over copies them once, so the two copies must fit for a moment.
    if (
        chosen == "csr"
        and estimate.dim >= SMALL_KRYLOV_DIM
        and 2 * estimate.csr_bytes + vector_bytes <= budget
    ):
        from fockmill.problem.eigensolve import native_csr

        stored = native_csr(problem.matrix())
        return HermitianMap(estimate.dim, is_real, "csr", _native_product(stored, problem.pool))
    if chosen == "csr":
        matrix = problem.matrix()

        def apply(x: npt.NDArray[Any]) -> npt.NDArray[Any]:
            if is_real and x.dtype.kind == "c":
                # One pass over the real matrix for both parts (scipy would otherwise
                # convert the whole matrix to complex on every product).
                both = matrix @ np.stack([x.real, x.imag], axis=1)
                return both[:, 0] + 1j * both[:, 1]
            return np.asarray(matrix @ x)

        return HermitianMap(estimate.dim, is_real, "csr", apply)
    return HermitianMap(
        estimate.dim, is_real, "operator", _native_product(problem.native, problem.pool)
    )


def _native_product(native: Any, pool: Any) -> Callable[[npt.NDArray[Any]], npt.NDArray[Any]]:
    """``x -> A x`` with a native operator on the given thread pool."""

    def apply(x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        return native.matvec(np.ascontiguousarray(x), threads=pool)  # type: ignore[no-any-return]

    return apply


def expectation_function(observable: Any) -> Callable[[npt.NDArray[Any]], complex]:
    """``ψ -> ⟨ψ|O|ψ⟩`` from the observable's prepared problem (compiled once).

    Recorded at every time or temperature, an observable is evaluated hundreds of times
    on one space: when its CSR matrix takes at most ``STORED_OBSERVABLE_BYTES`` it is
    built once and applied by scipy (a diagonal one as its diagonal), which at small
    sizes costs a fraction of a parallel native product's start-up; larger ones use the
    matrix-free product.
    """
    if observable.estimate.csr_bytes <= STORED_OBSERVABLE_BYTES:
        matrix = observable.matrix()
        diagonal = matrix.diagonal()
        if matrix.nnz == np.count_nonzero(diagonal):

            def on_diagonal(psi: npt.NDArray[Any]) -> complex:
                return complex(np.vdot(psi, diagonal * psi))

            return on_diagonal

        def stored(psi: npt.NDArray[Any]) -> complex:
            return complex(np.vdot(psi, matrix @ psi))

        return stored
    native, pool = observable.native, observable.pool

    def value(psi: npt.NDArray[Any]) -> complex:
        return complex(np.vdot(psi, native.matvec(np.ascontiguousarray(psi), threads=pool)))

    return value


def check_state(space: Any, psi: object, name: str = "psi", tol: float = 1e-8) -> Any:
    """A normalised state of the space as a contiguous float64/complex128 array."""
    from fockmill.observables.observe import check_vector
    from fockmill.spaces.checks import check_not_empty

    check_not_empty(space, f"a state {name}")
    v = check_vector(space, psi, name)  # type: ignore[arg-type]
    norm = float(np.linalg.norm(v))
    if abs(norm - 1.0) > tol:
        raise ValueError(
            f"{name} has norm {norm:.12g}, not 1; normalise it first (psi / numpy.linalg.norm(psi))"
        )
    return v


def check_positive(value: object, name: str, example: str) -> float:
    """A positive finite real number."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not np.isfinite(value):
        raise ValueError(
            f"{name} must be a positive finite number such as {example}; got {value!r}"
        )
    if value <= 0:
        raise ValueError(f"{name} must be > 0; got {value}")
    return float(value)


def check_common(threads: object, memory_limit: object) -> tuple[int | None, int | None]:
    """Validated ``threads`` and ``memory_limit``."""
    return check_threads(threads), check_memory_limit(memory_limit)


def lanczos_coefficients(
    apply: Callable[[npt.NDArray[Any]], npt.NDArray[Any]],
    start: npt.NDArray[Any],
    max_steps: int,
    *,
    keep_basis: bool = False,
    done: Callable[[list[float], list[float]], bool] | None = None,
    on_vector: Callable[[int, npt.NDArray[Any]], None] | None = None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[Any] | None]:
    """Lanczos recurrence from a unit vector: diagonal ``alpha`` and off-diagonal
    ``beta`` of the tridiagonal matrix (``beta[j]`` couples steps ``j`` and ``j + 1``).

    With ``keep_basis`` the vectors are stored (rows of the returned array) and every
    new vector is reorthogonalised against all earlier ones (twice, classical
    Gram-Schmidt); without it three vectors are kept and orthogonality is only local,
    which leaves the spectral weights and thermal sums intact (Paige's analysis; spurious
    copies of converged levels share their weight). ``done(alpha, beta)`` is asked after
    each step; ``on_vector(j, v_j)`` sees each Lanczos vector. The recurrence stops early
    on an invariant subspace (``beta`` below ``1e-12`` of the scale).
    """
    with blas_threads(1):  # many small vector operations: see fockmill.settings.threads
        return _lanczos_coefficients(apply, start, max_steps, keep_basis, done, on_vector)


def vector_norm(v: npt.NDArray[Any]) -> float:
    """``‖v‖`` in one pass (numpy's norm of a complex vector reads it twice, strided)."""
    return float(np.sqrt(np.vdot(v, v).real))


def subtract_scaled(w: npt.NDArray[Any], c: float, v: npt.NDArray[Any]) -> None:
    """``w -= c v`` in place (BLAS axpy: no temporary vector)."""
    if w.dtype == v.dtype and w.flags.c_contiguous and v.flags.c_contiguous:
        if w.dtype == np.complex128:
            zaxpy(v, w, a=-c)
            return
        if w.dtype == np.float64:
            daxpy(v, w, a=-c)
            return
    w -= c * v


def _lanczos_coefficients(
    apply: Callable[[npt.NDArray[Any]], npt.NDArray[Any]],
    start: npt.NDArray[Any],
    max_steps: int,
    keep_basis: bool,
    done: Callable[[list[float], list[float]], bool] | None,
    on_vector: Callable[[int, npt.NDArray[Any]], None] | None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], npt.NDArray[Any] | None]:
    dim = start.shape[0]
    steps = min(max_steps, dim)
    alpha: list[float] = []
    beta: list[float] = []
    basis = np.zeros((steps, dim), dtype=start.dtype) if keep_basis else None
    v = start
    v_prev: npt.NDArray[Any] | None = None
    scale = 0.0
    for j in range(steps):
        if basis is not None:
            basis[j] = v
        if on_vector is not None:
            on_vector(j, v)
        # A fresh array of our own: updated in place below (no temporaries on long vectors).
        w = np.asarray(apply(v))
        if w.dtype != v.dtype:
            w = w.astype(np.result_type(w.dtype, v.dtype))
        elif not (w.flags.writeable and w.flags.c_contiguous) or np.may_share_memory(w, v):
            w = w.copy()
        a = float(np.vdot(v, w).real)
        alpha.append(a)
        subtract_scaled(w, a, v)
        if v_prev is not None:
            subtract_scaled(w, beta[-1], v_prev)
        if basis is not None:
            for _ in range(2):
                w = w - basis[: j + 1].T @ (basis[: j + 1] @ w.conj()).conj()
        b = vector_norm(w)
        scale = max(scale, abs(a), b)
        if done is not None and done(alpha, beta):
            break
        if j == steps - 1 or b <= 1e-12 * max(scale, 1e-300):
            break
        beta.append(b)
        w *= 1.0 / b
        v_prev, v = v, w
        if basis is not None and v.dtype != basis.dtype:
            basis = basis.astype(v.dtype)
    n = len(alpha)
    kept = None if basis is None else basis[:n]
    return np.asarray(alpha), np.asarray(beta[: n - 1]), kept


def top_weights(space: Any, vector: npt.NDArray[Any], threads: int | None) -> npt.NDArray[Any]:
    """Weight on each mode's highest kept level where that level is a truncation.

    NaN for modes whose cutoff does not truncate (the conserved total caps the mode
    there, so its top level is physical) and for spaces without modes; no pass over
    the state is made when no cutoff truncates.
    """
    from fockmill.observables.observe import top_level_weights
    from fockmill.spaces.fock import FockSpace

    out = np.full(getattr(space, "modes", 0), np.nan)
    if not isinstance(space, FockSpace):
        return out
    binding = np.asarray(space.binding_cutoffs(), dtype=bool)
    if binding.any():
        out[binding] = top_level_weights(space, vector, threads=threads)[binding]
    return out


def warn_top_weights(
    space: Any, weights: npt.NDArray[Any], threshold: float | None, what: str
) -> None:
    """CutoffWarning when a truncating cutoff (>= 2) carries more than ``threshold``."""
    from fockmill.observables.truncation import warn_cutoff_weights

    warn_cutoff_weights(space, weights, threshold, what, stacklevel=3)


def warn_tolerance_not_met(tol: float, reached: float, what: str) -> None:
    """:class:`~fockmill.exceptions.AccuracyWarning` when an error estimate ``reached``
    exceeds the requested ``tol`` (a tolerance below round-off cannot be met)."""
    import warnings

    from fockmill.exceptions import AccuracyWarning

    if reached > tol:
        warnings.warn(
            f"{what}: tol={tol:.3g} was not met; the error estimate is {reached:.3g}, the "
            "limit set by double-precision round-off. Ask for a tol above it (1e-12 or "
            "more, say)",
            AccuracyWarning,
            stacklevel=3,
        )


def as_float_grid(values: object, name: str) -> npt.NDArray[np.float64]:
    """A non-empty float array of finite values of any shape (a scalar becomes shape
    ``(1,)``), or an error naming ``name``."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(
            f"{name} must be real numbers (an array of floats); got {values!r}"
        ) from None
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.size == 0:
        raise ValueError(f"{name} must hold at least one number; got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} contains NaN or inf; give finite numbers")
    return arr


def as_float_array(values: Sequence[object] | npt.ArrayLike, name: str) -> npt.NDArray[np.float64]:
    """A 1-D float array of finite values, or a clear error."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a sequence of real numbers; got {values!r}") from None
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(
            f"{name} must be a non-empty 1-D sequence of numbers; got shape {arr.shape}"
        )
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} contains NaN or inf")
    return arr
