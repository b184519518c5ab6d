"""Sparse matrices of ladder-operator expressions, built in compiled code."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from fockmill._args import check_memory_limit
from fockmill._between import between_matrix, same_space
from fockmill._expr import LadderExpr
from fockmill._memory import estimate_memory, format_bytes
from fockmill._prepare import check_threads, prepare
from fockmill._space import FockSpace
from fockmill.exceptions import SizeLimitError

__all__ = ["build_matrix"]


def build_matrix(
    expr: LadderExpr,
    space: FockSpace,
    *,
    target: FockSpace | None = None,
    threads: int | None = None,
    memory_limit: int | None = None,
    index_dtype: type[np.int32] | type[np.int64] | None = None,
) -> sp.csr_array:
    """The matrix of ``expr`` on ``space`` as a ``scipy.sparse.csr_array``.

    Parameters
    ----------
    expr : LadderExpr
        Any expression (need not be Hermitian); plain numbers mean multiples of the
        identity.
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
    if not same_space(space, target):
        assert target is not None
        return between_matrix(
            expr,
            space,
            target,
            threads=threads,
            memory_limit=memory_limit,
            index_dtype=index_dtype,
        )
    op = prepare(expr, space)
    threads = check_threads(threads)
    memory_limit = check_memory_limit(memory_limit)
    if index_dtype not in (None, np.int32, np.int64):
        raise TypeError("index_dtype must be numpy.int32, numpy.int64 or None")
    estimate = estimate_memory(expr, space, threads=threads)
    limit = memory_limit if memory_limit is not None else estimate.available_bytes
    if limit is not None and estimate.build_peak_bytes > limit:
        raise SizeLimitError(
            f"building this matrix needs about {format_bytes(estimate.build_peak_bytes)} "
            f"({estimate}), more than the {format_bytes(limit)} allowed; use "
            "fm.build_operator(...) for matrix-free products or fm.ground_state(..., "
            "method='lanczos'), or raise memory_limit"
        )
    force_wide = index_dtype is np.int64
    indptr, indices, data = op.build_csr(threads, force_wide)
    if index_dtype is np.int32 and indices.dtype != np.int32:
        raise SizeLimitError(
            f"the matrix has {indices.size:,} entries for dim {space.dim:,}: too many for "
            "int32 indices; use index_dtype=numpy.int64 or None"
        )
    dim = space.dim
    matrix = sp.csr_array((data, indices, indptr), shape=(dim, dim), copy=False)
    matrix.has_sorted_indices = True
    matrix.has_canonical_format = True
    return matrix
