"""The sector Sylvester preconditioner of the stationary solve: cheap on one large block.

The no-jump part ``ρ -> −i(Kρ − ρK†)`` of the Liouvillian is inverted exactly by an
eigendecomposition ``K = V Λ V⁻¹``: ``X = V [(V⁻¹ Y V⁻†) / (−i(λ_i − λ̄_j))] V†``. On a
block of ``d`` states that costs a ``d × d`` eigendecomposition once and four dense
``d³`` products per application. Here ``K`` is replaced by its number-conserving part
``K₀`` (the entries of ``K`` between states with the same weighted number of quanta):
``K₀`` is block-diagonal in the number sectors even when a drive couples them, so ``V`` is
block-diagonal, each sector's block is decomposed once, and an application costs four
products of a block-diagonal matrix with the ``d × d`` block, ``4 d Σ_N d_N²`` instead of
``4 d³`` multiply-adds (about 10 times fewer for 6 modes of cutoff 3).

The jumps that all lower (or all raise) the number of quanta by a fixed amount, such as
loss, are kept in ``M`` exactly: they carry the sector pair ``(N, M)`` of ``ρ`` into
``(N + c, M + c)`` only, so ``M = 𝓚₀ + 𝓙`` is block-triangular in the sector pairs and is
inverted by solving the pairs from the highest ``N + M`` down, each pair's Sylvester
equation with the jumps of the pairs already solved moved to its right-hand side. What is
left to GMRES is the drive (the part of ``K`` that changes the number) and the jumps of the
other direction or of none (dephasing): for the driven, lossy chains of
``benchmarks/bench_lindblad.py`` this halves the iterations (55 → 26 at 4 × 3, 63 → 28 at
5 × 3).

When every sector's ``K₀`` is a real symmetric matrix plus ``iβ`` times the identity
(real Hamiltonian, equal loss on every state of a sector, as for uniform loss ``κ Σ n_i``
whose ``L†L`` sum is ``κN``) and the kept jumps are real, ``V`` is real orthogonal and the
whole application runs in real arithmetic on the real form of ``ρ`` (a quarter of the
complex multiply-adds).
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.linalg as sla
import scipy.sparse as sp

from fockmill.lindblad.liouvillian import Liouvillian, hermitian_from_real, real_from_hermitian

__all__ = ["sector_sizes", "sector_sylvester"]

#: A sector block counts as "real symmetric plus iβ" when its other parts are below
#: this fraction of the largest entry of ``K``.
NORMAL_TOL = 1e-12
#: Eigenvector matrices with a larger condition number make the inverse unstable.
MAX_CONDITION = 1e10
#: A sector pair with at least this many entries has its dense products on every thread
#: when it is alone in its level (smaller ones were slower with threaded BLAS).
LARGE_PAIR = 800 * 800


@dataclass
class _Block:
    """One block of ``ρ``: its states in sector order, each sector's charge and
    eigenvectors, and ``1 / (−i(λ_i − λ̄_j))`` in sector order."""

    order: npt.NDArray[np.intp]
    back: npt.NDArray[np.intp]
    bounds: list[tuple[int, int]]
    charges: list[int]
    vectors: list[npt.NDArray[Any]]
    inverses: list[npt.NDArray[Any]]
    real: bool
    factor: npt.NDArray[Any]
    state_charges: npt.NDArray[np.int64]
    factor_parts: tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]] | None = None
    sector_of: dict[int, int] = field(default_factory=dict)

    def rows(self, s: int) -> slice:
        a, e = self.bounds[s]
        return slice(a, e)


@dataclass
class _Feed:
    """A kept jump channel from block ``src`` into block ``dst`` (charge change ``c``):
    its rate and, for each sector ``s`` of ``dst``, the source sector and the piece of
    ``L`` between them (sector order)."""

    rate: float
    src: int
    dst: int
    change: int
    pieces: dict[int, tuple[int, Any]]


def _charges(liou: Liouvillian, b: int) -> npt.NDArray[np.int64]:
    occ = np.asarray(liou.spaces[b].occupations(), dtype=np.int64)
    return occ @ np.asarray(liou.full.weights, dtype=np.int64)  # type: ignore[no-any-return]


@dataclass
class _Monomial:
    """A matrix with at most one entry per row, ``L_ij = w_i δ(j, p_i)`` (the lowering
    or raising operator of one mode between two sectors): ``L X Mᵀ`` is then a gather,
    ``w_i X[p_i, q_j] v_j``, with no sparse product."""

    columns: npt.NDArray[np.intp]
    weights: npt.NDArray[Any]
    data: npt.NDArray[Any]  # the stored values (for the check of real arithmetic)

    @property
    def real(self) -> _Monomial:
        return _Monomial(self.columns, self.weights.real.copy(), self.data.real.copy())


def _monomial(m: sp.csr_array) -> _Monomial | None:
    counts = np.diff(m.indptr)
    if np.any(counts > 1):
        return None
    columns = np.zeros(m.shape[0], dtype=np.intp)
    weights = np.zeros(m.shape[0], dtype=m.dtype)
    rows = np.flatnonzero(counts)
    columns[rows] = m.indices[m.indptr[rows]]
    weights[rows] = m.data[m.indptr[rows]]
    return _Monomial(columns, weights, m.data)


def _sandwich(left: Any, x: npt.NDArray[Any], right: Any, conj: bool) -> npt.NDArray[Any]:
    """``L X Rᵀ`` (``conj``: ``L X R†``) for the pieces of two kept jumps."""
    if isinstance(left, _Monomial) and isinstance(right, _Monomial):
        out = x[np.ix_(left.columns, right.columns)]
        out *= left.weights[:, None]
        out *= (right.weights.conj() if conj else right.weights)[None, :]
        return out  # type: ignore[no-any-return]
    left = left if isinstance(left, sp.csr_array) else _as_csr(left, x.shape[0])
    right = right if isinstance(right, sp.csr_array) else _as_csr(right, x.shape[1])
    return left @ ((right.conj() if conj else right) @ x.T).T  # type: ignore[no-any-return]


def _as_csr(m: _Monomial, cols: int) -> sp.csr_array:
    rows = np.flatnonzero(m.weights)
    return sp.csr_array((m.weights[rows], (rows, m.columns[rows])), shape=(m.weights.size, cols))


def sector_sizes(liou: Liouvillian) -> list[int]:
    """The sizes of the number sectors inside every block (one entry per sector)."""
    out: list[int] = []
    for b in range(len(liou.spaces)):
        _values, counts = np.unique(_charges(liou, b), return_counts=True)
        out.extend(int(c) for c in counts)
    return out


def _decompose(m: npt.NDArray[np.complex128], scale: float) -> tuple[Any, Any, Any, bool] | None:
    """Eigenvalues, eigenvectors and their inverse of one sector block; real orthogonal
    vectors when the block is real symmetric plus ``iβ``; None when (nearly) defective."""
    herm = 0.5 * (m + m.conj().T)
    anti = (m - m.conj().T) / 2j
    beta = float(np.mean(np.diag(anti).real)) if m.size else 0.0
    tol = NORMAL_TOL * max(scale, 1e-300)
    if (
        np.max(np.abs(herm.imag), initial=0.0) <= tol
        and np.max(np.abs(anti - beta * np.eye(m.shape[0])), initial=0.0) <= tol
    ):
        w, v = np.linalg.eigh(herm.real)
        return w + 1j * beta, v, v.T, True
    lam, v = sla.eig(m)
    try:
        vi = np.linalg.inv(v)
    except np.linalg.LinAlgError:
        return None
    # The 1-norm condition number from the inverse made anyway (the 2-norm one would
    # take a singular value decomposition as costly as the eigendecomposition).
    if np.linalg.norm(v, 1) * np.linalg.norm(vi, 1) > MAX_CONDITION:
        return None
    return lam, v, vi, False


def _block(
    k: sp.csr_array, charges: npt.NDArray[np.int64], scale_k: float
) -> tuple[_Block, npt.NDArray[np.complex128]] | None:
    """A block's sector data and its denominators ``−i(λ_i − λ̄_j)`` (None: defective)."""
    order = np.argsort(charges, kind="stable")
    back = np.empty_like(order)
    back[order] = np.arange(order.size)
    sorted_charges = charges[order]
    cuts = [0, *(np.flatnonzero(np.diff(sorted_charges)) + 1).tolist(), order.size]
    kp = k[order][:, order].tocsr()
    bounds, vectors, inverses, lams, real = [], [], [], [], True
    for a, e in itertools.pairwise(cuts):
        part = _decompose(kp[a:e, a:e].toarray(), scale_k)
        if part is None:
            return None
        lam, v, vi, is_real = part
        bounds.append((a, e))
        vectors.append(v)
        inverses.append(vi)
        lams.append(lam)
        real = real and is_real
    lam = np.concatenate(lams) if lams else np.zeros(0, dtype=np.complex128)
    qs = [int(sorted_charges[a]) for a, _e in bounds]
    blk = _Block(order, back, bounds, qs, vectors, inverses, real, np.empty(0), charges)
    blk.sector_of = {q: s for s, q in enumerate(qs)}
    return blk, -1j * (lam[:, None] - lam.conj()[None, :])


def _feeds(liou: Liouvillian, blocks: list[_Block], chans: list[Any]) -> list[_Feed]:
    """The channels kept in ``M``: those with one fixed charge change ``c`` of the sign
    of the first such channel that lowers the number (else of one that raises it)."""
    changes: list[int | None] = []
    for _rate, lm, src, dst in chans:
        rows, cols = sp.csr_array(lm).nonzero()
        diff = np.unique(blocks[dst].state_charges[rows] - blocks[src].state_charges[cols])
        changes.append(int(diff[0]) if diff.size == 1 and diff[0] != 0 else None)
    sign = -1 if any(c is not None and c < 0 for c in changes) else 1
    out = []
    for (rate, lm, src, dst), c in zip(chans, changes, strict=True):
        if c is None or c * sign < 0 or rate == 0:
            continue
        bs, bd = blocks[src], blocks[dst]
        lp = sp.csr_array(lm)[bd.order][:, bs.order]
        pieces = {}
        for s, q in enumerate(bd.charges):
            s2 = bs.sector_of.get(q - c)
            if s2 is None:
                continue
            piece = sp.csr_array(lp[bd.rows(s)][:, bs.rows(s2)])
            if piece.nnz:
                pieces[s] = (s2, _monomial(piece) or piece)
        if pieces:
            out.append(_Feed(float(rate), src, dst, c, pieces))
    return out


def sector_sylvester(
    liou: Liouvillian, single_precision: bool = False
) -> (
    tuple[
        Callable[[npt.NDArray[np.float64]], npt.NDArray[np.float64]],
        float,
        list[npt.NDArray[np.intp]],
        bool,
    ]
    | None
):
    """``x -> M⁻¹ x`` (into one array reused by every call) on the real form of
    Hermitian blocks whose states are in sector order, with ``M`` the no-jump part built
    from the number-conserving part of ``K`` plus the jumps of one direction (see the
    module); the Liouvillian's scale; and the
    order (``orders[b][i]`` is the state of block ``b`` at place ``i``). The solver
    works in that order throughout (:meth:`Liouvillian.native_in_order`), so that no
    application permutes a ``d × d`` matrix. None when a sector's ``K₀`` is (nearly)
    defective.

    With ``single_precision`` and real arithmetic, the dense products run in float32
    (twice the speed of float64 on the same cores; the preconditioner needs only a few
    digits) and the last element returned is True: the result then depends on rounding
    in a way a fixed linear map does not, so the solver must be a flexible one."""
    from fockmill.settings.threads import blas_threads

    ks, chans = liou.sparse_matrices()
    scale_k = max((float(np.max(np.abs(k.data), initial=0.0)) for k in ks), default=1.0)
    blocks: list[_Block] = []
    denominators = []
    workers = max(1, int(getattr(liou.pool, "threads", 0) or _native_threads()))
    runner = ThreadPoolExecutor(max_workers=workers) if workers > 1 else None
    # The blocks' decompositions, largest first, on the runner's threads (LAPACK
    # releases the interpreter); each is one call whatever the thread count.
    biggest_first = sorted(range(len(ks)), key=lambda b: -ks[b].shape[0])

    def decompose(b: int) -> tuple[_Block, npt.NDArray[np.complex128]] | None:
        return _block(ks[b], _charges(liou, b), scale_k)

    with blas_threads(1):
        done = (
            list(runner.map(decompose, biggest_first))
            if runner
            else [decompose(b) for b in biggest_first]
        )
    made_by_block = dict(zip(biggest_first, done, strict=True))
    for b in range(len(ks)):
        made = made_by_block[b]
        if made is None:
            return None
        blk, denom = made
        blocks.append(blk)
        denominators.append(denom)
    feeds = _feeds(liou, blocks, chans)
    real = all(blk.real for blk in blocks) and all(
        np.all(piece.data.imag == 0) for f in feeds for _s2, piece in f.pieces.values()
    )
    scale = max(float(np.max(np.abs(d), initial=0.0)) for d in denominators)
    floor = 1e-3 * max(scale, 1e-300)
    for blk, d in zip(blocks, denominators, strict=True):
        q = 1.0 / np.where(np.abs(d) < floor, -floor, d)
        if real:  # kept as two real arrays: the real form uses them apart
            blk.factor_parts = (q.real.copy(), q.imag.copy())
            blk.vectors = [np.ascontiguousarray(v.real) for v in blk.vectors]
            blk.inverses = [np.ascontiguousarray(vi.real) for vi in blk.inverses]
        else:
            blk.factor = q
            blk.vectors = [v.astype(np.complex128) for v in blk.vectors]
            blk.inverses = [vi.astype(np.complex128) for vi in blk.inverses]
    single = real and single_precision
    if single:
        for blk in blocks:
            blk.vectors = [v.astype(np.float32) for v in blk.vectors]
            blk.inverses = [vi.astype(np.float32) for vi in blk.inverses]
            fre, fim = blk.factor_parts  # type: ignore[misc]
            blk.factor_parts = (fre.astype(np.float32), fim.astype(np.float32))
    if real:
        for f in feeds:
            f.pieces = {
                s: (s2, p.real if isinstance(p, _Monomial) else sp.csr_array(p.real))
                for s, (s2, p) in f.pieces.items()
            }
    levels = _levels(blocks, feeds)
    incoming: list[list[_Feed]] = [[f for f in feeds if f.dst == b] for b in range(len(blocks))]

    # The pairs of one level run on `workers` threads of single-threaded BLAS (numpy and
    # scipy's sparse products release the interpreter): each pair is one sequence of
    # calls whatever the thread count, and on a shared machine two-threaded BLAS was
    # 10-17 times slower than one thread in these products (measured at 5 × 3). A level
    # of one pair (blocks that are number sectors: the levels follow each other) gets
    # multi-threaded BLAS instead.

    # One output array for every application (the solver consumes each result before
    # the next call): a fresh d²-sized array per call cost more than its fill here.
    kept: list[npt.NDArray[np.float64]] = []

    def apply(x: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
        x = np.asarray(x).reshape(-1)
        if not kept or kept[0].shape != x.shape:
            kept[:] = [np.empty_like(x, dtype=np.float64)]
        out = kept[0]
        given, solved = [], []
        start = 0
        for blk in blocks:
            d = blk.order.size
            xb = x[start : start + d * d].reshape(d, d)
            given.append(xb if real else hermitian_from_real(xb))
            # In real arithmetic the pairs are solved straight into the output.
            if real:
                solved.append(out[start : start + d * d].reshape(d, d))
            else:
                solved.append(np.zeros((d, d), dtype=np.complex128))
            start += d * d

        def pair(task: tuple[int, int, int]) -> None:
            _solve_pair(task, blocks, incoming[task[0]], given, solved, real)

        for level in levels:
            if runner is None or len(level) == 1:
                # One pair (each block a number sector): a large one's products on all
                # threads.
                large = max(_pair_size(blocks[b], s, t) for b, s, t in level) >= LARGE_PAIR
                with blas_threads(workers if large else 1):
                    for task in level:
                        pair(task)
            else:
                with blas_threads(1):
                    list(runner.map(pair, level))
        if not real:
            start = 0
            for z in solved:
                out[start : start + z.size] = real_from_hermitian(z).ravel()
                start += z.size
        return out

    return apply, scale, [blk.order for blk in blocks], single


def _levels(blocks: list[_Block], feeds: list[_Feed]) -> list[list[tuple[int, int, int]]]:
    """The sector pairs ``(block, s, t)``, ``s ≥ t``, grouped by ``N + M`` in the order
    the kept jumps allow (from the top down when they lower the number), largest pairs
    first within a level (the threads then finish together)."""
    tasks = [
        (b, s, t)
        for b, blk in enumerate(blocks)
        for s in range(len(blk.bounds))
        for t in range(s + 1)
    ]
    lowering = not feeds or feeds[0].change < 0
    key = {
        task: blocks[task[0]].charges[task[1]] + blocks[task[0]].charges[task[2]] for task in tasks
    }
    out = []
    for value in sorted(set(key.values()), reverse=lowering):
        level = [task for task in tasks if key[task] == value]
        level.sort(key=lambda tk: -_pair_size(blocks[tk[0]], tk[1], tk[2]))
        out.append(level)
    return out


def _pair_size(blk: _Block, s: int, t: int) -> int:
    (a, e), (c, f) = blk.bounds[s], blk.bounds[t]
    return (e - a) * (f - c)


def _solve_pair(
    task: tuple[int, int, int],
    blocks: list[_Block],
    feeds: list[_Feed],
    given: list[npt.NDArray[Any]],
    solved: list[npt.NDArray[Any]],
    real: bool,
) -> None:
    """Solve the sector pair ``(s, t)`` of block ``b`` (and ``(t, s)``) of ``M X = Y``:
    the kept jumps from the pairs already solved moved to the right-hand side, then the
    Sylvester equation of ``K₀`` in its eigenbasis."""
    b, s, t = task
    blk = blocks[b]
    rs, rt = blk.rows(s), blk.rows(t)
    y_st = given[b][rs, rt].copy()
    y_ts = given[b][rt, rs].copy() if real and s != t else None
    for f in feeds:
        src_s, src_t = f.pieces.get(s), f.pieces.get(t)
        if src_s is None or src_t is None:
            continue
        (s2, ls), (t2, lt) = src_s, src_t
        bsrc = blocks[f.src]
        x_st = solved[f.src][bsrc.rows(s2), bsrc.rows(t2)]
        # L_s X L_tᵀ (real) or L_s X L_t†.
        y_st -= f.rate * _sandwich(ls, x_st, lt, not real)
        if y_ts is not None:
            x_ts = solved[f.src][bsrc.rows(t2), bsrc.rows(s2)]
            y_ts -= f.rate * _sandwich(lt, x_ts, ls, False)
    v, vi = blk.vectors, blk.inverses
    if real:
        fre, fim = blk.factor_parts  # type: ignore[misc]
        kind = v[s].dtype  # float32 in single precision: the products in it
        u_st = vi[s] @ y_st.astype(kind, copy=False) @ vi[t].T
        if y_ts is None:
            solved[b][rs, rt] = v[s] @ (u_st * fre[rs, rt] + u_st.T * fim[rs, rt]) @ v[t].T
            return
        u_ts = vi[t] @ y_ts.astype(kind, copy=False) @ vi[s].T
        solved[b][rs, rt] = v[s] @ (u_st * fre[rs, rt] + u_ts.T * fim[rs, rt]) @ v[t].T
        solved[b][rt, rs] = v[t] @ (u_ts * fre[rt, rs] + u_st.T * fim[rt, rs]) @ v[s].T
        return
    u = (vi[s] @ y_st @ vi[t].conj().T) * blk.factor[rs, rt]
    x = v[s] @ u @ v[t].conj().T
    solved[b][rs, rt] = x
    if s != t:
        solved[b][rt, rs] = x.conj().T


def _native_threads() -> int:
    import fockmill._native as _native

    return int(_native.default_threads())
