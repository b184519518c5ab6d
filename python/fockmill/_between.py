"""Operators that carry one space's states into another: ``a_0`` from the N-quanta
sector to N − 1, ``a_0† a_1†`` from N to N + 2, anything from a sector into the full
truncated space. Matrices have shape ``(target.dim, space.dim)``."""

from __future__ import annotations

import cmath
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator

from fockmill import _native
from fockmill._args import check_memory_limit, check_threads
from fockmill._expr import LadderExpr, format_monomial
from fockmill._space import FockSpace
from fockmill.exceptions import ModeIndexError, SizeLimitError, SpaceError

__all__ = ["BetweenOperator", "between_matrix", "compile_between", "same_space"]

#: Largest creation or annihilation power of one mode in a term (the largest cutoff).
_MAX_POWER = 65_535


def same_space(space: object, target: object) -> bool:
    """Whether ``target`` is None or the same space as ``space`` (square case)."""
    return target is None or target is space or target == space


def _check_fock(space: object, name: str) -> FockSpace:
    if not isinstance(space, FockSpace):
        raise TypeError(
            f"{name} must be a fm.FockSpace for an operator between spaces; got "
            f"{type(space).__name__}"
        )
    return space


def compile_between(
    expr: object, space: object, target: object, *, project: bool = False
) -> _native.NativeBetween:
    """Validate ``expr`` as an operator from ``space`` into ``target``; compile it.

    Parameters
    ----------
    expr : LadderExpr
        The operator (numbers mean multiples of the identity).
    space, target : FockSpace
        Source and target; same number of modes and the same cutoffs.
    project : bool
        Drop the part of the image outside ``target`` instead of refusing the term
        (used for adjoints of checked operators).

    Raises
    ------
    ChargeError
        A term carries states of ``space`` outside ``target``; the message names the
        term, its charge and both sectors.
    SpaceError
        The spaces differ in modes or cutoffs (or, both being sectors, in weights).
    ModeIndexError, ValueError, TypeError
        Bad mode indices, powers, coefficients or argument types.
    """
    from fockmill._prepare import as_expr

    e = as_expr(expr)
    s = _check_fock(space, "space")
    t = _check_fock(target, "target")
    if s.modes != t.modes:
        raise SpaceError(
            f"space has {s.modes} modes and target has {t.modes}; an operator between spaces "
            "needs the same modes (change only the total)"
        )
    for coefficient, key in e.terms():
        for mode, p, q in key:
            if mode >= s.modes:
                raise ModeIndexError(
                    f"term {format_monomial(key)} acts on mode {mode}, but the space has only "
                    f"{s.modes} modes (valid indices 0..{s.modes - 1}); use a space with more "
                    "modes or fix the index"
                )
            if p > _MAX_POWER or q > _MAX_POWER:
                raise ValueError(
                    f"term {format_monomial(key)} has a power above {_MAX_POWER}; such powers "
                    "vanish on every supported space, drop the term"
                )
        if not cmath.isfinite(coefficient):
            raise ValueError(
                f"term {format_monomial(key)} has the coefficient {coefficient}, which is not "
                "finite; check the parameters for NaN, inf or overflow"
            )
    return _native.NativeBetween(s.native, t.native, e.to_native(), project)


def _estimate_bytes(native: _native.NativeBetween, threads: Any) -> tuple[int, int, bool]:
    """(peak bytes of the build, nnz, wide indices)."""
    nnz_f, _, _, _ = native.estimate_nnz(2048, threads)
    nnz = round(nnz_f)
    rows, cols = int(native.rows), int(native.dim)
    wide = max(nnz, rows, cols) > np.iinfo(np.int32).max
    index = 8 if wide else 4
    value = 8 if native.is_real else 16
    csr = (rows + 1) * index + nnz * (index + value)
    return csr + 8 * (rows + 1), nnz, wide


def between_matrix(
    expr: LadderExpr,
    space: FockSpace,
    target: FockSpace,
    *,
    threads: int | None = None,
    memory_limit: int | None = None,
    index_dtype: type[np.int32] | type[np.int64] | None = None,
) -> sp.csr_array:
    """The ``(target.dim, space.dim)`` matrix of ``expr`` from ``space`` into ``target``.

    See :func:`fockmill.build_matrix` (``target=``) for the conventions.
    """
    from fockmill._memory import available_memory, format_bytes

    native = compile_between(expr, space, target)
    threads = check_threads(threads)
    memory_limit = check_memory_limit(memory_limit)
    if index_dtype not in (None, np.int32, np.int64):
        raise TypeError("index_dtype must be numpy.int32, numpy.int64 or None")
    peak, nnz, _ = _estimate_bytes(native, threads)
    limit = memory_limit if memory_limit is not None else available_memory()
    if limit is not None and peak > limit:
        raise SizeLimitError(
            f"building this {target.dim:,} x {space.dim:,} matrix (about {nnz:,} entries) "
            f"needs about {format_bytes(peak)}, more than the {format_bytes(limit)} allowed; "
            "use fm.build_operator(..., target=...) for matrix-free products, or raise "
            "memory_limit"
        )
    indptr, indices, data = native.build_csr(threads, index_dtype is np.int64)
    if index_dtype is np.int32 and indices.dtype != np.int32:
        raise SizeLimitError(
            f"the matrix has {indices.size:,} entries: too many for int32 indices; use "
            "index_dtype=numpy.int64 or None"
        )
    matrix = sp.csr_array((data, indices, indptr), shape=(target.dim, space.dim), copy=False)
    matrix.has_sorted_indices = True
    matrix.has_canonical_format = True
    return matrix


class BetweenOperator(LinearOperator):  # type: ignore[misc]
    """A matrix-free ``LinearOperator`` of shape ``(target.dim, space.dim)``.

    Products run in compiled code; ``rmatvec`` applies the adjoint from ``target`` back
    to ``space`` (the part of its image outside ``space`` is dropped, as the transpose
    of the restricted matrix requires).

    Attributes
    ----------
    products : int
        Number of vectors multiplied so far (a block of k vectors counts k).
    """

    def __init__(
        self,
        expr: LadderExpr,
        space: FockSpace,
        target: FockSpace,
        *,
        threads: int | None = None,
    ) -> None:
        from fockmill._prepare import as_expr

        self.expr = as_expr(expr)
        self.space = space
        self.target = target
        self.threads = check_threads(threads)
        self._op = compile_between(self.expr, space, target)
        self._adjoint_op: _native.NativeBetween | None = None
        self.products = 0
        dtype = np.float64 if self._op.is_real else np.complex128
        super().__init__(dtype=np.dtype(dtype), shape=(target.dim, space.dim))

    @property
    def native(self) -> _native.NativeBetween:
        """The compiled operator."""
        return self._op

    @staticmethod
    def _vector(x: npt.NDArray[Any], n: int) -> npt.NDArray[Any]:
        x = np.asarray(x)
        if x.dtype.kind not in "fciu" or x.dtype.kind == "b":
            raise TypeError(f"products need a float or complex array; got dtype {x.dtype}")
        if x.shape[0] != n:
            raise ValueError(
                f"the input has {x.shape[0]} rows but this operator needs {n} (the dimension "
                "of the space it acts on)"
            )
        kind = np.complex128 if x.dtype.kind == "c" else np.float64
        return np.ascontiguousarray(x, dtype=kind)

    def _matvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += 1
        y = self._op.matvec(self._vector(x, self.shape[1]).reshape(-1), self.threads)
        return y.reshape(-1, 1) if np.ndim(x) == 2 else y

    def _matmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self._op.matmat(self._vector(x, self.shape[1]), self.threads)

    def _adjoint_native(self) -> _native.NativeBetween:
        if self._adjoint_op is None:
            self._adjoint_op = compile_between(
                self.expr.adjoint(), self.target, self.space, project=True
            )
        return self._adjoint_op

    def _rmatvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += 1
        y = self._adjoint_native().matvec(self._vector(x, self.shape[0]).reshape(-1), self.threads)
        return y.reshape(-1, 1) if np.ndim(x) == 2 else y

    def _rmatmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self._adjoint_native().matmat(self._vector(x, self.shape[0]), self.threads)
