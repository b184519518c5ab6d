"""The sector Sylvester preconditioner of the stationary solve: cheap on one large block.

The no-jump part ``ρ -> −i(Kρ − ρK†)`` of the Liouvillian is inverted exactly by an
eigendecomposition ``K = V Λ V⁻¹``: ``X = V [(V⁻¹ Y V⁻†) / (−i(λ_i − λ̄_j))] V†``. On a
block of ``d`` states that costs a ``d × d`` eigendecomposition once and four dense
``d³`` products per application. Here ``K`` is replaced by its number-conserving part
``K₀`` (the entries of ``K`` between states with the same weighted number of quanta):
``K₀`` is block-diagonal in the number sectors even when a drive couples them, so ``V`` is
block-diagonal, each sector's block is decomposed once, and an application costs four
products of a block-diagonal matrix with the ``d × d`` block, ``4 d Σ_N d_N²`` instead of
``4 d³`` multiply-adds (about 10 times fewer for 6 modes of cutoff 3). What is left out of
``K`` (the drive) is a small part of it for weak drives; GMRES then needs about as few
iterations as with the exact inverse (measured in benchmarks/bench_lindblad.py).

When every sector's ``K₀`` is a real symmetric matrix plus ``iβ`` times the identity
(real Hamiltonian, equal loss on every state of a sector, as for uniform loss ``κ Σ n_i``
whose ``L†L`` sum is ``κN``), ``V`` is real orthogonal and the whole application runs in
real arithmetic on the real form of ``ρ`` (a quarter of the complex multiply-adds).
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.linalg as sla

from fockmill.lindblad.liouvillian import Liouvillian, hermitian_from_real, real_from_hermitian

__all__ = ["sector_sizes", "sector_sylvester"]

#: A sector block counts as "real symmetric plus iβ" when its other parts are below
#: this fraction of the largest entry of ``K``.
NORMAL_TOL = 1e-12
#: Eigenvector matrices with a larger condition number make the inverse unstable.
MAX_CONDITION = 1e10


@dataclass
class _Block:
    """One block of ``ρ``: its states in sector order and each sector's eigenvectors."""

    order: npt.NDArray[np.intp]
    back: npt.NDArray[np.intp]
    bounds: list[tuple[int, int]]
    vectors: list[npt.NDArray[Any]]
    inverses: list[npt.NDArray[Any]]
    real: bool
    factor: npt.NDArray[Any]  # 1 / (−i(λ_i − λ̄_j)) in sector order (complex)
    factor_parts: tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]] | None = None


def _charges(liou: Liouvillian, b: int) -> npt.NDArray[np.int64]:
    occ = np.asarray(liou.spaces[b].occupations(), dtype=np.int64)
    return occ @ np.asarray(liou.full.weights, dtype=np.int64)  # type: ignore[no-any-return]


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
    if np.linalg.cond(v) > MAX_CONDITION:
        return None
    return lam, v, np.linalg.inv(v), False


def sector_sylvester(
    liou: Liouvillian,
) -> tuple[Callable[[npt.NDArray[np.float64]], npt.NDArray[np.float64]], float] | None:
    """``x -> M⁻¹ x`` on the real form of Hermitian blocks, with ``M`` the no-jump part
    built from the number-conserving part of ``K`` (see the module), and the
    Liouvillian's scale; None when a sector's ``K₀`` is (nearly) defective."""
    from fockmill.settings.threads import blas_threads

    ks, _chans = liou.sparse_matrices()
    scale_k = max((float(np.max(np.abs(k.data), initial=0.0)) for k in ks), default=1.0)
    blocks: list[_Block] = []
    with blas_threads(1):
        for b, k in enumerate(ks):
            charges = _charges(liou, b)
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
            if not real:  # one complex sector: the whole block in complex arithmetic
                vectors = [v.astype(np.complex128) for v in vectors]
                inverses = [vi.astype(np.complex128) for vi in inverses]
            lam = np.concatenate(lams)
            denom = -1j * (lam[:, None] - lam.conj()[None, :])
            blocks.append(_Block(order, back, bounds, vectors, inverses, real, denom))
    scale = max(float(np.max(np.abs(blk.factor))) for blk in blocks)
    floor = 1e-3 * max(scale, 1e-300)
    for blk in blocks:
        d = blk.factor
        blk.factor = 1.0 / np.where(np.abs(d) < floor, -floor, d)
        if blk.real:  # kept as two real arrays: the real form uses them apart
            blk.factor_parts = (blk.factor.real.copy(), blk.factor.imag.copy())
            blk.factor = np.empty(0, dtype=np.complex128)

    # The sectors' products run on `workers` threads of single-threaded BLAS (numpy
    # releases the interpreter in them): each sector is one call whatever the thread
    # count (so the result does not depend on it), and on a shared machine two-threaded
    # BLAS was 10-17 times slower than one thread in these products (measured at 5 × 3).
    workers = max(1, int(getattr(liou.pool, "threads", 0) or _native_threads()))
    runner = ThreadPoolExecutor(max_workers=workers) if workers > 1 else None

    def apply(x: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
        x = np.asarray(x).reshape(-1)
        out = np.empty_like(x)
        start = 0
        with blas_threads(1):
            for blk in blocks:
                d = blk.order.size
                xb = x[start : start + d * d].reshape(d, d)
                out[start : start + d * d] = _apply_block(blk, xb, runner).ravel()
                start += d * d
        return out

    return apply, scale


def _native_threads() -> int:
    import fockmill._native as _native

    return int(_native.default_threads())


def _sides(
    z: npt.NDArray[Any],
    blk: _Block,
    left: list[Any],
    right: list[Any],
    runner: ThreadPoolExecutor | None,
) -> None:
    """``z -> A z B`` in place, ``A`` and ``B`` block-diagonal over the sectors (each
    sector's rows, then each sector's columns, on the runner's threads)."""
    # Largest sectors first: the threads then finish together.
    order = sorted(range(len(blk.bounds)), key=lambda k: blk.bounds[k][0] - blk.bounds[k][1])

    def rows(k: int) -> None:
        a, e = blk.bounds[k]
        z[a:e] = left[k] @ z[a:e]

    def cols(k: int) -> None:
        a, e = blk.bounds[k]
        z[:, a:e] = z[:, a:e] @ right[k]

    for step in (rows, cols):
        if runner is None:
            for k in order:
                step(k)
        else:
            list(runner.map(step, order))


def _apply_block(
    blk: _Block, xb: npt.NDArray[np.float64], runner: ThreadPoolExecutor | None
) -> npt.NDArray[np.float64]:
    ix = np.ix_(blk.order, blk.order)
    if blk.factor_parts is not None:
        # Real form of ρ' = Vᵀ ρ V is Vᵀ x V; the division by d (with d_ji = conj d_ij)
        # is x' ∘ Re q + x'ᵀ ∘ Im q in real form (q = 1/d).
        z = xb[ix]
        _sides(z, blk, blk.inverses, [vi.T for vi in blk.inverses], runner)
        fre, fim = blk.factor_parts
        z = z * fre + z.T * fim
        _sides(z, blk, blk.vectors, [v.T for v in blk.vectors], runner)
        return z[np.ix_(blk.back, blk.back)]  # type: ignore[no-any-return]
    y = hermitian_from_real(xb)[ix]
    _sides(y, blk, blk.inverses, [vi.conj().T for vi in blk.inverses], runner)
    y *= blk.factor
    _sides(y, blk, blk.vectors, [v.conj().T for v in blk.vectors], runner)
    return real_from_hermitian(y[np.ix_(blk.back, blk.back)])
