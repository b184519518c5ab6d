"""Matrix-free operators: ``scipy.sparse.linalg.LinearOperator`` backed by Rust products."""

from __future__ import annotations

from typing import Any

import numpy as np
import numpy.typing as npt
from scipy.sparse.linalg import LinearOperator

from fockmill import _native
from fockmill._between import BetweenOperator, same_space
from fockmill._expr import LadderExpr
from fockmill._prepare import as_expr, check_space, check_threads, prepare
from fockmill._space import FockSpace

__all__ = ["LadderOperator", "build_operator"]


class LadderOperator(LinearOperator):  # type: ignore[misc]
    """A ``LinearOperator`` whose products run in compiled code without storing a matrix.

    Parameters
    ----------
    expr : LadderExpr
        The operator.
    space : FockSpace
        The basis it acts on.
    threads : int, optional
        Worker threads for each product (default: all cores).

    Attributes
    ----------
    products : int
        Number of vectors multiplied so far (a block of k vectors counts k).

    Notes
    -----
    Each product copies its input once (O(dim), small next to the O(nnz) work) so that
    the interpreter can be released while it runs. Results are identical for any thread
    count: each row is summed by one thread in a fixed order.
    """

    def __init__(self, expr: LadderExpr, space: FockSpace, *, threads: int | None = None) -> None:
        self.expr = as_expr(expr)
        self.space = check_space(space)
        self.threads = check_threads(threads)
        self._op = prepare(self.expr, self.space)
        self._adjoint_op: _native.NativeOperator | None = None
        self.products = 0
        dtype = np.float64 if self._op.is_real else np.complex128
        super().__init__(dtype=np.dtype(dtype), shape=(space.dim, space.dim))

    @property
    def native(self) -> _native.NativeOperator:
        """The compiled operator."""
        return self._op

    def _check_input(self, x: npt.ArrayLike, block: bool) -> npt.NDArray[Any]:
        arr = np.asarray(x)
        if arr.dtype.kind not in "fciub" or arr.dtype.kind == "b":
            raise TypeError(
                f"products need a float or complex array; got dtype {arr.dtype}. Convert "
                "with numpy.asarray(x, dtype=float)"
            )
        n = self.shape[1]
        ok = arr.ndim == 2 and arr.shape[0] == n if block else arr.shape in ((n,), (n, 1))
        if not ok:
            want = f"({n}, k)" if block else f"({n},) or ({n}, 1)"
            raise ValueError(
                f"the vector has shape {arr.shape} but this operator needs shape {want}: "
                f"the space's dimension is {n}"
            )
        return arr

    def matvec(self, x: npt.ArrayLike) -> Any:
        """``H x``; ``x`` of shape ``(dim,)`` or ``(dim, 1)``."""
        return super().matvec(self._check_input(x, block=False))

    def rmatvec(self, x: npt.ArrayLike) -> Any:
        """``H† x``; ``x`` of shape ``(dim,)`` or ``(dim, 1)``."""
        return super().rmatvec(self._check_input(x, block=False))

    def matmat(self, x: npt.ArrayLike) -> Any:
        """``H X``; ``X`` of shape ``(dim, k)``."""
        return super().matmat(self._check_input(x, block=True))

    def _vector(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        x = np.asarray(x)
        if x.dtype.kind == "c":
            return np.ascontiguousarray(x, dtype=np.complex128)
        return np.ascontiguousarray(x, dtype=np.float64)

    def _matvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        shape = x.shape
        self.products += 1
        y = self._op.matvec(self._vector(x).reshape(-1), self.threads)
        return y.reshape(shape)

    def _matmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self._op.matmat(self._vector(x), self.threads)

    def _adjoint_native(self) -> _native.NativeOperator:
        if self._adjoint_op is None:
            adj = self.expr.adjoint()
            self._adjoint_op = self._op if adj == self.expr else prepare(adj, self.space)
        return self._adjoint_op

    def _rmatvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        shape = x.shape
        self.products += 1
        y = self._adjoint_native().matvec(self._vector(x).reshape(-1), self.threads)
        return y.reshape(shape)

    def _rmatmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self._adjoint_native().matmat(self._vector(x), self.threads)

    def _adjoint(self) -> LadderOperator:
        return LadderOperator(self.expr.adjoint(), self.space, threads=self.threads)


def build_operator(
    expr: LadderExpr,
    space: FockSpace,
    *,
    target: FockSpace | None = None,
    threads: int | None = None,
) -> LadderOperator | BetweenOperator:
    """A matrix-free ``LinearOperator`` for ``expr`` on ``space``.

    Memory is O(number of terms), not O(nnz): use it for sectors whose matrix would not
    fit, with ``scipy.sparse.linalg.eigsh`` or any Krylov method.

    Parameters
    ----------
    expr : LadderExpr
        The operator (same convention as :func:`build_matrix`).
    space : FockSpace
        The basis.
    target : FockSpace, optional
        The space products land in (same modes and cutoffs): the operator then has
        shape ``(target.dim, space.dim)`` and is a ``BetweenOperator``. None: ``space``.
    threads : int, optional
        Worker threads per product (default: all cores).

    Returns
    -------
    LadderOperator or BetweenOperator
        ``dtype`` float64 when every coefficient is real, else complex128; supports
        ``@``, ``.matvec``, ``.matmat``, ``.rmatvec`` and ``.H``.

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> op = fm.build_operator(fm.number(0) - fm.number(1), space)
    >>> (op @ np.ones(space.dim)).tolist()
    [-2.0, 0.0, 2.0]
    """
    if not same_space(space, target):
        assert target is not None
        return BetweenOperator(expr, space, target, threads=threads)
    return LadderOperator(expr, space, threads=threads)
