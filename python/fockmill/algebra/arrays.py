"""Expressions from coefficient arrays: one-body forms ``Σ t_ij a_i† a_j`` and pair
interactions ``½ Σ V_ijkl a_i† a_j† a_k a_l``.

The terms are kept as arrays inside the expression (a :class:`TermBlock`), so that an
array of a million entries costs a few array operations instead of a million Python
objects; the expression combines with every other one (``+``, ``*``, ``adjoint``, ...)
and only makes per-term objects when asked to list or print its terms.

Conventions
-----------
``quadratic_form(t)`` is ``Σ_ij t[i, j] a_i† a_j``: the first index is the mode
raised, the second the mode lowered, so ``t`` is the matrix of the operator in the
one-quantum states (``⟨i| H |j⟩ = t[i, j]``) and the form is Hermitian exactly when
``t`` is a Hermitian matrix.

``pair_interaction(V)`` is ``½ Σ_ijkl V[i, j, k, l] a_i† a_j† a_k a_l``, indices in the
order written (normal ordered: creators ``i, j``, then annihilators ``k, l``). Bosonic
operators of one kind commute, so only the part of ``V`` symmetric under ``i ↔ j`` and
under ``k ↔ l`` matters: texts that write ``½ Σ ⟨ij|V|kl⟩ a_i† a_j† a_l a_k`` give the
same operator with ``V[i, j, k, l] = ⟨ij|V|kl⟩``. The operator is Hermitian when
``V[i, j, k, l] = conj(V[l, k, j, i])`` once entries giving the same monomial are
summed. The factor ½ makes a contact interaction ``V[i, i, i, i] = U`` give
``(U / 2) n_i (n_i − 1)``.

Worked example (two modes): ``t = [[0, −J], [−J, 0]]`` gives ``−J (a0† a1 + a1† a0)``;
``V[0, 0, 0, 0] = V[1, 1, 1, 1] = U`` gives ``(U/2) (a0†² a0² + a1†² a1²)``; and
``V[0, 1, 1, 0] = V[1, 0, 0, 1] = W`` gives ``W a0† a1† a0 a1 = W n0 n1`` (two entries,
each with the factor ½).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr, TermBlock

__all__ = ["pair_interaction", "quadratic_form"]


def _values(raw: object, what: str) -> npt.NDArray[np.complex128]:
    """Coefficients as a complex array, refusing non-numbers and non-finite values."""
    array = np.asarray(raw)
    if array.dtype == np.bool_ or not np.issubdtype(array.dtype, np.number):
        raise TypeError(
            f"{what} must hold numbers (int, float or complex); got an array of dtype {array.dtype}"
        )
    values = array.astype(np.complex128, copy=False)
    if not np.all(np.isfinite(values)):
        bad = np.argwhere(~np.isfinite(values))[0]
        raise ValueError(
            f"{what} must be finite; entry {tuple(int(i) for i in bad)} is "
            f"{array[tuple(bad)]!r}; check the array for NaN or inf"
        )
    return values


def _indices(raw: object, width: int, count: int, what: str) -> npt.NDArray[np.int64]:
    """Index rows of a COO-style input as an (n, width) int64 array."""
    array = np.asarray(raw)
    if array.ndim == 1 and array.size == 0:
        array = array.reshape(0, width)
    if array.size and (array.dtype == np.bool_ or not np.issubdtype(array.dtype, np.integer)):
        raise TypeError(
            f"the indices of {what} must be integers; got an array of dtype {array.dtype}"
        )
    if array.ndim != 2 or array.shape[1] != width:
        raise ValueError(
            f"the indices of {what} must have shape (n, {width}), one row of {width} mode "
            f"indices per entry; got shape {array.shape}"
        )
    if array.shape[0] != count:
        raise ValueError(
            f"{what} has {array.shape[0]} index rows but {count} values; give one value "
            "per row of indices"
        )
    rows = array.astype(np.int64, copy=False)
    if rows.size and rows.min() < 0:
        raise ValueError(
            f"the indices of {what} must be non-negative mode numbers; found "
            f"{int(rows.min())} (modes are numbered 0, 1, 2, ...)"
        )
    return rows


def _entries(
    coefficients: Any, order: int, what: str
) -> tuple[npt.NDArray[np.int64], npt.NDArray[np.complex128]]:
    """``(index rows, values)`` of a dense array, a scipy sparse matrix (order 2) or an
    ``(indices, values)`` pair; zero entries dropped later."""
    if isinstance(coefficients, tuple):
        if len(coefficients) != 2:
            raise ValueError(
                f"a sparse {what} is a pair (indices, values); got a tuple of "
                f"{len(coefficients)} items"
            )
        raw_indices, raw_values = coefficients
        values = _values(raw_values, what).reshape(-1)
        return _indices(raw_indices, order, values.size, what), values
    import scipy.sparse as sparse

    if sparse.issparse(coefficients):
        if order != 2:
            raise TypeError(
                f"{what} takes a dense array or (indices, values); a scipy sparse matrix "
                "has two indices only"
            )
        matrix = sparse.coo_array(coefficients)
        values = _values(matrix.data, what)
        rows = np.stack((matrix.row, matrix.col), axis=1).astype(np.int64)
        if matrix.shape[0] != matrix.shape[1]:
            raise ValueError(f"{what} must be square; got shape {matrix.shape}")
        return rows, values
    if isinstance(coefficients, LadderExpr | str):
        raise TypeError(
            f"{what} takes a numpy array, nested lists, a scipy sparse matrix or a pair "
            f"(indices, values); got {type(coefficients).__name__}"
        )
    values = _values(coefficients, what)
    if values.ndim != order or len(set(values.shape)) != 1:
        shape = "(" + ", ".join(["M"] * order) + ")"
        raise ValueError(
            f"{what} must be an array of shape {shape}, one axis per index over the M "
            f"modes; got shape {values.shape}"
        )
    rows = np.argwhere(values != 0).astype(np.int64)
    return rows, values[tuple(rows.T)] if rows.size else np.zeros(0, np.complex128)


def quadratic_form(t: Any) -> LadderExpr:
    """Return ``Σ_ij t[i, j] a_i† a_j`` as an expression.

    Parameters
    ----------
    t : array_like, scipy sparse matrix, or (indices, values)
        The coefficients: a square (M, M) array (nested lists too) whose entry
        ``t[i, j]`` multiplies ``a_i† a_j``; a scipy sparse matrix; or a pair of an
        integer array of shape (n, 2), rows ``(i, j)``, and n values (repeated rows are
        summed). Real or complex; zero entries are dropped.

    Returns
    -------
    LadderExpr
        The terms, held as arrays (no Python object per term until listed or printed).

    Raises
    ------
    TypeError
        If the values are not numbers or the indices not integers.
    ValueError
        If the array is not square, an index is negative, the numbers of index rows and
        values differ, or a value is not finite.

    Notes
    -----
    ``t[i, j]`` is the matrix element ``⟨i| H |j⟩`` between one-quantum states, so the
    form is Hermitian exactly when ``t`` is. Assembly is vectorised (millions of
    entries per second).

    Examples
    --------
    Two modes coupled by an invented hopping J = 1 with on-site energies 0.5 and -0.5:

    >>> import numpy as np
    >>> import fockmill as fm
    >>> h = fm.quadratic_form(np.array([[0.5, -1.0], [-1.0, -0.5]]))
    >>> print(h)
    -1.0·a1† a0 - 1.0·a0† a1 + 0.5·a0† a0 - 0.5·a1† a1
    >>> a, ad = fm.lowering, fm.raising
    >>> h == 0.5 * fm.number(0) - ad(0) * a(1) - ad(1) * a(0) - 0.5 * fm.number(1)
    True
    """
    rows, values = _entries(t, 2, "the coefficient matrix t")
    return LadderExpr._assemble({}, [TermBlock((1, 1), rows, values)])


def pair_interaction(V: Any) -> LadderExpr:
    """Return ``½ Σ_ijkl V[i, j, k, l] a_i† a_j† a_k a_l`` as an expression.

    Parameters
    ----------
    V : array_like or (indices, values)
        The coefficients: an (M, M, M, M) array (nested lists too) whose entry
        ``V[i, j, k, l]`` multiplies ``½ a_i† a_j† a_k a_l``, or a pair of an integer
        array of shape (n, 4), rows ``(i, j, k, l)``, and n values (repeated rows are
        summed). Real or complex; zero entries are dropped.

    Returns
    -------
    LadderExpr
        The terms, held as arrays; entries giving the same monomial (such as
        ``V[i, j, k, l]`` and ``V[j, i, k, l]``) are summed.

    Raises
    ------
    TypeError
        If the values are not numbers or the indices not integers.
    ValueError
        If the array is not of shape (M, M, M, M), an index is negative, the numbers of
        index rows and values differ, or a value is not finite.

    Notes
    -----
    Indices are in the order written, normal ordered: creators ``i, j``, then
    annihilators ``k, l``. The result is Hermitian when
    ``V[i, j, k, l] = conj(V[l, k, j, i])`` for every entry, once entries giving the
    same monomial are summed.

    Examples
    --------
    A contact interaction U = 2 on two modes and a density-density coupling W = 0.5
    between them (invented values):

    >>> import numpy as np
    >>> import fockmill as fm
    >>> V = np.zeros((2, 2, 2, 2))
    >>> V[0, 0, 0, 0] = V[1, 1, 1, 1] = 2.0
    >>> V[0, 1, 1, 0] = V[1, 0, 0, 1] = 0.5
    >>> print(fm.pair_interaction(V))
    0.5·a0† a1† a0 a1 + 1.0·a0†^2 a0^2 + 1.0·a1†^2 a1^2
    """
    rows, values = _entries(V, 4, "the interaction tensor V")
    return LadderExpr._assemble({}, [TermBlock((2, 2), rows, values * 0.5)])
