"""Sparse matrices of ladder-operator expressions, built in compiled code."""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.sparse as sp

from fockmill._expr import LadderExpr
from fockmill._problem import Problem, as_problem

__all__ = ["build_matrix"]


def build_matrix(
    expr: LadderExpr | Problem,
    space: Any = None,
    *,
    target: Any = None,
    threads: int | None = None,
    memory_limit: int | None = None,
    index_dtype: type[np.int32] | type[np.int64] | None = None,
) -> sp.csr_array:
    """The matrix of ``expr`` on ``space`` as a ``scipy.sparse.csr_array``.

    Parameters
    ----------
    expr : LadderExpr or Problem
        Any expression (need not be Hermitian); plain numbers mean multiples of the
        identity. Or a prepared problem (:func:`fockmill.prepare`), whose compiled
        operator is then reused; ``space`` is omitted.
    space : FockSpace
        The basis; the matrix is ``(space.dim, space.dim)`` in the space's basis order.
    target : FockSpace, optional
        The space the operator lands in (same modes and cutoffs as ``space``): the
        matrix is then ``(target.dim, space.dim)``, e.g. ``fm.lowering(0)`` from the
        N-quanta sector into the N − 1 sector. None (default): ``space``.
    threads : int, optional
        Worker threads; None or 0 means all cores (or ``RAYON_NUM_THREADS``).
    memory_limit : int, optional
        Bytes the build may use; default: the memory available now.
    index_dtype : {numpy.int32, numpy.int64}, optional
        Force the index type; by default ``int32`` when ``dim`` and ``nnz`` fit, else
        ``int64`` (as scipy itself chooses).

    Returns
    -------
    scipy.sparse.csr_array
        Canonical format: sorted column indices, duplicates summed, no stored zeros.
        ``float64`` when every coefficient is real, else ``complex128``.

    Raises
    ------
    ChargeError
        A term changes the conserved charge of the space (with ``target``: a term
        carries states of ``space`` outside ``target``; the message names both).
    ModeIndexError
        A term acts on a mode the space does not have.
    SizeLimitError
        The estimated build exceeds ``memory_limit``; the message carries the estimate.

    Notes
    -----
    Convention: each normal-ordered monomial is restricted to the truncated space,
    ``P H P``. Lowering below zero quanta or raising past a cutoff gives zero; nothing
    else is truncated, so ``a a†`` (which normal-orders to ``a†a + 1``) is ``n + 1`` even
    on the top level. The arrays are produced by Rust and handed to scipy without a copy.

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    >>> fm.build_matrix(h, space).toarray().round(3).tolist()
    [[0.0, 1.414, 0.0], [1.414, 0.0, 1.414], [0.0, 1.414, 0.0]]
    """
    problem = as_problem(expr, space, threads=threads, memory_limit=memory_limit, target=target)
    return problem.matrix(index_dtype=index_dtype)
