"""Matrix-free operators: ``scipy.sparse.linalg.LinearOperator`` backed by Rust products."""

from __future__ import annotations

from typing import Any

import numpy as np
import numpy.typing as npt
from scipy.sparse.linalg import LinearOperator

from fockmill import _native
from fockmill._expr import LadderExpr
from fockmill._problem import Problem, as_problem

__all__ = ["LadderOperator", "build_operator"]


class LadderOperator(LinearOperator):  # type: ignore[misc]
    """A ``LinearOperator`` whose products run in compiled code without storing a matrix.

    Parameters
    ----------
    expr : LadderExpr or Problem
        The operator, or a prepared problem (then ``space`` is omitted).
    space : FockSpace
        The basis it acts on.
    threads : int, optional
        Worker threads for each product (default: all cores).

    Attributes
    ----------
    problem : Problem
        The prepared problem whose compiled operator and thread pool the products use.
    products : int
        Number of vectors multiplied so far (a block of k vectors counts k).

    Notes
    -----
    Each product copies its input once (O(dim), small next to the O(nnz) work) so that
    the interpreter can be released while it runs. Results are identical for any thread
    count: each row is summed by one thread in a fixed order.
    """

    def __init__(
        self,
        expr: LadderExpr | Problem,
        space: Any = None,
        *,
        target: Any = None,
        threads: int | None = None,
    ) -> None:
        self.problem = as_problem(expr, space, threads=threads, target=target)
        self._adjoint_op: _native.NativeOperator | None = None
        self.products = 0
        super().__init__(dtype=self.problem.dtype, shape=self.problem.shape)

    @property
    def expr(self) -> LadderExpr:
        """The operator's expression."""
        return self.problem.expr

    @property
    def space(self) -> Any:
        """The space it acts on."""
        return self.problem.space

    @property
    def threads(self) -> int | None:
        """Worker threads per product."""
        return self.problem.threads

    @property
    def native(self) -> Any:
        """The compiled operator."""
        return self.problem.native

    def _check_input(
        self, x: npt.ArrayLike, block: bool, adjoint: bool = False
    ) -> npt.NDArray[Any]:
        arr = np.asarray(x)
        if arr.dtype.kind not in "fciub" or arr.dtype.kind == "b":
            raise TypeError(
                f"products need a float or complex array; got dtype {arr.dtype}. Convert "
                "with numpy.asarray(x, dtype=float)"
            )
        n = self.shape[0] if adjoint else self.shape[1]
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
        return super().rmatvec(self._check_input(x, block=False, adjoint=True))

    def matmat(self, x: npt.ArrayLike) -> Any:
        """``H X``; ``X`` of shape ``(dim, k)``."""
        return super().matmat(self._check_input(x, block=True))

    def _vector(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        x = np.asarray(x)
        if x.dtype.kind == "c":
            return np.ascontiguousarray(x, dtype=np.complex128)
        return np.ascontiguousarray(x, dtype=np.float64)

    def _matvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += 1
        y = self.problem.native.matvec(self._vector(x).reshape(-1), self.problem.pool)
        return y.reshape(-1, 1) if x.ndim == 2 else y  # type: ignore[no-any-return]

    def _matmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self.problem.native.matmat(self._vector(x), self.problem.pool)  # type: ignore[no-any-return]

    def _adjoint_native(self) -> Any:
        if self._adjoint_op is None:
            adj = self.expr.adjoint()
            if adj == self.expr and self.problem.is_square:
                self._adjoint_op = self.problem.native
            elif self.problem.is_square:
                self._adjoint_op = LadderOperator(adj, self.space, threads=self.threads).native
            else:
                # The transpose of P_target A P_space is P_space A† P_target: the part
                # of A†'s image outside ``space`` is dropped, not refused.
                from fockmill._between import compile_between

                self._adjoint_op = compile_between(
                    adj, self.problem.target, self.problem.space, project=True
                )
        return self._adjoint_op

    def _rmatvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += 1
        y = self._adjoint_native().matvec(self._vector(x).reshape(-1), self.problem.pool)
        return y.reshape(-1, 1) if x.ndim == 2 else y  # type: ignore[no-any-return]

    def _rmatmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self._adjoint_native().matmat(self._vector(x), self.problem.pool)  # type: ignore[no-any-return]

    def _adjoint(self) -> LinearOperator:
        if self.problem.is_square:
            return LadderOperator(self.expr.adjoint(), self.space, threads=self.threads)
        # Between two spaces the adjoint is this operator's products swapped.
        return LinearOperator(
            shape=(self.shape[1], self.shape[0]),
            matvec=self._rmatvec,
            rmatvec=self._matvec,
            matmat=self._rmatmat,
            rmatmat=self._matmat,
            dtype=self.dtype,
        )


def build_operator(
    expr: LadderExpr | Problem,
    space: Any = None,
    *,
    target: Any = None,
    threads: int | None = None,
) -> LadderOperator:
    """A matrix-free ``LinearOperator`` for ``expr`` on ``space``.

    Memory is O(number of terms), not O(nnz): use it for sectors whose matrix would not
    fit, with ``scipy.sparse.linalg.eigsh`` or any Krylov method.

    Parameters
    ----------
    expr : LadderExpr or Problem
        The operator (same convention as :func:`build_matrix`), or a prepared problem
        (then ``space`` is omitted and its compiled operator is reused).
    space : FockSpace
        The basis.
    target : FockSpace, optional
        The space products land in (same modes and cutoffs): the operator then has
        shape ``(target.dim, space.dim)``; ``.H`` maps back. None: ``space``.
    threads : int, optional
        Worker threads per product (default: all cores).

    Returns
    -------
    LadderOperator
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
    return LadderOperator(expr, space, target=target, threads=threads)
