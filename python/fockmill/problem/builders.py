"""Sparse matrices of ladder-operator expressions, built in compiled code."""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.sparse as sp

from fockmill.algebra.expressions import LadderExpr
from fockmill.problem.memory import MemoryEstimate, estimate_native
from fockmill.problem.problem import LadderOperator, Problem, as_problem

__all__ = ["build_matrix", "build_operator", "estimate_memory"]


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


def estimate_memory(
    expr: Any,
    space: Any = None,
    *,
    samples: int = 2048,
    threads: int | None = None,
) -> MemoryEstimate:
    """Estimate the memory a CSR build and the state vectors of ``expr`` on ``space`` need.

    Nothing of the matrix's size is allocated: small spaces are counted exactly, larger
    ones from ``samples`` rows drawn one from each of equal strata of the basis.

    Parameters
    ----------
    expr : LadderExpr or Problem
        The operator, or a prepared problem (then ``space`` is omitted).
    space : FockSpace
        The space it acts on.
    samples : int
        Rows to sample for large spaces.
    threads : int, optional
        Threads for the count (default: all).

    Returns
    -------
    MemoryEstimate
    """
    problem = as_problem(expr, space, threads=threads)
    if samples == 2048:
        return problem.estimate
    return estimate_native(problem.native, problem.shape, samples, problem.pool)
