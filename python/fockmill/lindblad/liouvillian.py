"""The Liouvillian of a Hamiltonian and its jumps, applied to a density matrix without
storing the superoperator.

A density matrix is held as diagonal blocks ``ρ_b`` on a list of spaces: one block (the
whole space) in general, or one block per number sector ``N`` when the Hamiltonian
conserves the weighted number of quanta and every jump changes it by a fixed amount
(loss −1, pumping +1, dephasing 0). Each jump is compiled once per block as an operator
from its sector ``N`` into ``N + c`` (``prepare(L, space_N, target=space_{N+c})``) and
once as its adjoint back; the Hamiltonian once per block. Every product is a compiled
block product (``Problem.matmat``) on a dense ``d × d`` block.

For a Hermitian ``ρ`` (every density matrix, and every iterate of the solvers here, which
work in the real space of Hermitian matrices) with ``K = H − (i/2) Σ γ_k L_k† L_k``::

    𝓛ρ = Y + Y† + Σ_k γ_k L_k (L_k ρ)†,      Y = −i K ρ

so one application costs one product with ``H`` and three with the jumps per block and
jump (``L ρ``, ``L† (L ρ)``, ``L (L ρ)†``); ``ρ K†`` and ``ρ L†`` come from adjoints of
products already made. That block-product form (:meth:`Liouvillian.apply_blockwise`) is
kept as the reference the benchmarks compare against.

The solvers use the native product instead (:meth:`Liouvillian.apply`,
:meth:`Liouvillian.apply_real`): ``K_b`` and every channel's ``L`` as CSR matrices
(``L†L`` the product of the truncated matrices, as above), and
``𝓛ρ = −i(Kρ − ρK†) + Σ γ L ρ L†`` computed row by row in Rust, each row of the result
from rows of ``ρ`` and sparse rows of ``K`` and ``L`` (no transposed copies), parallel
over rows and the same for any thread count.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp

import fockmill._native as _native
from fockmill.algebra.expressions import LadderExpr, as_expr
from fockmill.dynamics.krylov import check_hermitian
from fockmill.exceptions import ChargeError, SizeLimitError, SpaceError
from fockmill.lindblad.jumps import Jump, check_jumps
from fockmill.problem.problem import Problem, as_problem
from fockmill.spaces.fock import FockSpace

__all__ = ["Liouvillian", "build_liouvillian", "hermitian_from_real", "real_from_hermitian"]

#: Block products use the stored CSR matrix of an operator up to this size (see
#: ``Liouvillian._store``), the matrix-free compiled product beyond.
STORED_BLOCK_BYTES = 256 * 2**20


@dataclass
class _Channel:
    """One jump acting from block ``src`` into block ``dst``."""

    rate: float
    forward: Problem  # L: space[src] -> space[dst]
    backward: Problem  # L†: space[dst] -> space[src]
    src: int
    dst: int
    label: str


@dataclass
class Liouvillian:
    """The Liouvillian of ``H`` and its jumps on diagonal blocks of ``ρ``.

    Attributes
    ----------
    full : FockSpace
        The space the user gave (density matrices are returned in its basis).
    spaces : list of FockSpace
        The block spaces: ``[full]``, or the number sectors ``N = 0, 1, ...`` of ``full``.
    sectors : list of int or None
        The charge ``N`` of each block when split by sectors, else None.
    hamiltonians : list of Problem
        ``H`` compiled on each block.
    channels : list
        Each jump compiled from each block it acts on (with its adjoint).
    products : int
        Block products made so far (one block product = one ``d × d`` matmat).
    """

    full: FockSpace
    spaces: list[FockSpace]
    sectors: list[int] | None
    hamiltonians: list[Problem]
    channels: list[_Channel]
    jumps: list[Jump]
    products: int = 0
    _index: list[npt.NDArray[np.int64]] | None = field(default=None, repr=False)
    _stored: dict[int, Any] = field(default_factory=dict, repr=False)
    _product: Any = field(default=None, repr=False)

    # -- sizes --------------------------------------------------------------------------

    @property
    def dims(self) -> list[int]:
        """Dimension of each block space."""
        return [s.dim for s in self.spaces]

    @property
    def size(self) -> int:
        """Entries of the block-diagonal density matrix, ``Σ_b d_b²``."""
        return sum(d * d for d in self.dims)

    @property
    def full_size(self) -> int:
        """Entries of the whole density matrix, ``(Σ_b d_b)²``."""
        return self.full.dim**2

    def full_indices(self) -> list[npt.NDArray[np.int64]]:
        """For each block, the indices of its basis states in ``full``."""
        if self._index is None:
            if self.sectors is None:
                self._index = [np.arange(self.full.dim, dtype=np.int64)]
            else:
                self._index = [
                    np.asarray(self.full.index(s.occupations()), dtype=np.int64).reshape(-1)
                    for s in self.spaces
                ]
        return self._index

    # -- products -----------------------------------------------------------------------

    def _mat(self, problem: Problem, x: npt.NDArray[np.complex128]) -> npt.NDArray[np.complex128]:
        self.products += 1
        stored = self._stored.get(id(problem))
        if stored is None and id(problem) not in self._stored:
            stored = self._store(problem)
        if stored is not None:
            return np.asarray(stored @ x)
        return problem.native.matmat(np.ascontiguousarray(x), threads=problem.pool)  # type: ignore[no-any-return]

    def _store(self, problem: Problem) -> sp.csr_array | None:
        """The block's CSR matrix (built once by the compiled two-pass build) when it
        takes at most ``STORED_BLOCK_BYTES``, else None (matrix-free products).

        A stored single-term operator applied by scipy to a ``d × d`` block costs a
        fraction of a parallel native product on a loaded machine, and small blocks
        would pay the native call's start-up on every product."""
        matrix = None
        if problem.estimate.csr_bytes <= STORED_BLOCK_BYTES:
            matrix = sp.csr_array(problem.matrix().astype(np.complex128))
        self._stored[id(problem)] = matrix
        return matrix

    @property
    def pool(self) -> Any:
        """The thread pool of the compiled problems (``threads=`` of the native calls)."""
        return self.hamiltonians[0].pool

    def native(self) -> Any:
        """The native Liouvillian product (built once from :meth:`sparse_matrices`)."""
        if self._product is None:
            ks, chans = self.sparse_matrices()
            self._product = _native.NativeLiouvillian(
                [_csr_parts(k) for k in ks],
                [(float(rate), src, dst, _csr_parts(lm)) for rate, lm, src, dst in chans],
            )
        return self._product

    def native_in_order(self, orders: list[npt.NDArray[np.intp]]) -> Any:
        """A native product on the blocks with their states reordered: state ``i`` of
        block ``b`` is its state ``orders[b][i]`` (what the sector preconditioner works
        in). Its ``apply_real`` takes and returns real forms in that order."""
        ks, chans = self.sparse_matrices()
        return _native.NativeLiouvillian(
            [_csr_parts(k[o][:, o]) for k, o in zip(ks, orders, strict=True)],
            [
                (float(rate), src, dst, _csr_parts(lm[orders[dst]][:, orders[src]]))
                for rate, lm, src, dst in chans
            ],
        )

    def apply(self, blocks: list[npt.NDArray[np.complex128]]) -> list[npt.NDArray[np.complex128]]:
        """``𝓛ρ`` for blocks ``ρ_b`` (complex ``d_b × d_b``, Hermitian or not), by the
        native product."""
        self.products += 1
        flat = np.concatenate([np.asarray(b, dtype=np.complex128).ravel() for b in blocks])
        out = self.native().apply(flat, threads=self.pool)
        return self._split(out)

    def apply_real(self, x: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
        """The real form (:meth:`to_real`) of ``𝓛ρ`` for Hermitian blocks given in real
        form, by the native product (what the solvers iterate on)."""
        self.products += 1
        return self.native().apply_real(  # type: ignore[no-any-return]
            np.ascontiguousarray(x, dtype=np.float64).reshape(-1), threads=self.pool
        )

    def trace_real(self, x: npt.NDArray[np.float64]) -> float:
        """``Tr ρ`` of Hermitian blocks given in real form."""
        total = 0.0
        start = 0
        for d in self.dims:
            total += float(np.trace(x[start : start + d * d].reshape(d, d)))
            start += d * d
        return total

    def _split(self, flat: npt.NDArray[Any]) -> list[npt.NDArray[Any]]:
        out = []
        start = 0
        for d in self.dims:
            out.append(flat[start : start + d * d].reshape(d, d))
            start += d * d
        return out

    def apply_blockwise(
        self, blocks: list[npt.NDArray[np.complex128]]
    ) -> list[npt.NDArray[np.complex128]]:
        """``𝓛ρ`` for Hermitian blocks by compiled block products and transposed copies
        (the form the native product replaced; kept as the benchmarks' reference).
        Only meaningful for Hermitian input (see the module)."""
        ys = [-1j * self._mat(h, rho) for h, rho in zip(self.hamiltonians, blocks, strict=True)]
        gains: list[list[tuple[float, npt.NDArray[Any], Problem]]] = [[] for _ in blocks]
        for ch in self.channels:
            lr = self._mat(ch.forward, blocks[ch.src])  # L ρ
            ys[ch.src] -= (0.5 * ch.rate) * self._mat(ch.backward, lr)  # −½γ L†L ρ
            gains[ch.dst].append((ch.rate, lr, ch.forward))
        out = []
        for b, y in enumerate(ys):
            total = y + y.conj().T
            for rate, lr, forward in gains[b]:
                total += rate * self._mat(forward, lr.conj().T)  # γ L (L ρ)† = γ L ρ L†
            out.append(total)
        return out

    def residual(self, blocks: list[npt.NDArray[np.complex128]]) -> float:
        """``‖𝓛ρ‖`` (Frobenius norm over all blocks) for Hermitian blocks (the real form
        is an isometry, so the norm of the real product is the same)."""
        return float(np.linalg.norm(self.apply_real(self.to_real(blocks))))

    # -- stored forms (small problems) --------------------------------------------------

    def sparse_matrices(
        self,
    ) -> tuple[list[sp.csr_array], list[tuple[float, sp.csr_array, int, int]]]:
        """CSR matrices of ``K`` per block and of every channel's ``L``."""
        ks = [h.matrix().astype(np.complex128) for h in self.hamiltonians]
        chans = []
        for ch in self.channels:
            lm = ch.forward.matrix().astype(np.complex128)
            ks[ch.src] = ks[ch.src] - (0.5j * ch.rate) * (lm.conj().T @ lm)
            chans.append((ch.rate, sp.csr_array(lm), ch.src, ch.dst))
        return [sp.csr_array(k) for k in ks], chans

    def superoperator(self) -> sp.csr_array:
        """The Liouvillian as a sparse ``n × n`` matrix, ``n = Σ_b d_b²``, acting on the
        blocks flattened row by row and concatenated (``vec(A X B) = (A ⊗ Bᵀ) vec(X)``)."""
        ks, chans = self.sparse_matrices()
        dims = self.dims
        offsets = np.concatenate([[0], np.cumsum([d * d for d in dims])])
        n = int(offsets[-1])
        rows: list[list[Any]] = [[None] * len(dims) for _ in dims]
        for b, k in enumerate(ks):
            eye = sp.identity(dims[b], dtype=np.complex128, format="csr")
            rows[b][b] = -1j * sp.kron(k, eye, format="csr") + 1j * sp.kron(
                eye, k.conj(), format="csr"
            )
        for rate, lm, src, dst in chans:
            term = rate * sp.kron(lm, lm.conj(), format="csr")
            rows[dst][src] = term if rows[dst][src] is None else rows[dst][src] + term
        for b in range(len(dims)):
            for c in range(len(dims)):
                if rows[b][c] is None and b == c:
                    rows[b][c] = sp.csr_array((dims[b] ** 2, dims[b] ** 2), dtype=np.complex128)
        out = sp.csr_array(sp.block_array(rows, format="csr"))
        assert out.shape == (n, n)
        return out

    def diagonal(self) -> list[npt.NDArray[np.complex128]]:
        """The superoperator's diagonal, as one ``d_b × d_b`` array per block (entry
        ``(i, j)`` multiplies ``ρ_ij``)."""
        ks, chans = self.sparse_matrices()
        out = []
        for k in ks:
            kd = k.diagonal()
            out.append(-1j * kd[:, None] + 1j * kd.conj()[None, :])
        for rate, lm, src, dst in chans:
            if src == dst:
                ld = lm.diagonal()
                out[src] = out[src] + rate * ld[:, None] * ld.conj()[None, :]
        return out

    # -- flat real form of Hermitian blocks ---------------------------------------------

    def to_real(self, blocks: list[npt.NDArray[np.complex128]]) -> npt.NDArray[np.float64]:
        """Hermitian blocks as one real vector (``Re ρ + Im ρ`` of each, row by row)."""
        return np.concatenate([real_from_hermitian(b).ravel() for b in blocks])

    def from_real(self, x: npt.NDArray[np.float64]) -> list[npt.NDArray[np.complex128]]:
        """The inverse of :meth:`to_real`."""
        out = []
        start = 0
        for d in self.dims:
            out.append(hermitian_from_real(x[start : start + d * d].reshape(d, d)))
            start += d * d
        return out

    def trace(self, blocks: list[npt.NDArray[Any]]) -> complex:
        """``Tr ρ`` summed over blocks."""
        return complex(sum(np.trace(b) for b in blocks))


def _csr_parts(
    m: sp.csr_array,
) -> tuple[int, int, npt.NDArray[np.int64], npt.NDArray[np.int64], npt.NDArray[np.complex128]]:
    m = sp.csr_array(m)
    return (
        int(m.shape[0]),
        int(m.shape[1]),
        np.ascontiguousarray(m.indptr, dtype=np.int64),
        np.ascontiguousarray(m.indices, dtype=np.int64),
        np.ascontiguousarray(m.data, dtype=np.complex128),
    )


def real_from_hermitian(rho: npt.NDArray[np.complex128]) -> npt.NDArray[np.float64]:
    """``Re ρ + Im ρ``: the symmetric and antisymmetric parts in one real matrix (an
    isometry of Hermitian matrices onto real ones in the Frobenius norm)."""
    return rho.real + rho.imag  # type: ignore[no-any-return]


def hermitian_from_real(r: npt.NDArray[np.float64]) -> npt.NDArray[np.complex128]:
    """The inverse of :func:`real_from_hermitian`."""
    sym = 0.5 * (r + r.T)
    return sym + 1j * (0.5 * (r - r.T))  # type: ignore[no-any-return]


def _charge_of(expr: LadderExpr, weights: tuple[int, ...]) -> set[int]:
    out: set[int] = set()
    for _coef, key in expr.terms():
        out.add(sum(weights[m] * (p - q) for m, p, q in key))
    return out


def conserving_part(expr: LadderExpr, weights: tuple[int, ...]) -> LadderExpr:
    """The terms of ``expr`` that leave the weighted number of quanta unchanged."""
    return expr.filter(lambda _c, key: sum(weights[m] * (p - q) for m, p, q in key) == 0)


def sector_structure(
    hamiltonian: LadderExpr, jumps: list[Jump], space: FockSpace
) -> tuple[list[int], dict[int, int]] | None:
    """The charges of the number sectors and each jump's fixed charge change, when the
    block structure applies (see :func:`build_liouvillian`); else None."""
    if space.charges:
        return None
    weights = space.weights
    if _charge_of(hamiltonian, weights) - {0}:
        return None
    changes: dict[int, int] = {}
    for k, j in enumerate(jumps):
        charges = _charge_of(j.operator, weights)
        if len(charges) != 1:
            return None
        changes[k] = charges.pop()
    top = sum(w * c for w, c in zip(weights, space.cutoffs, strict=True))
    return list(range(top + 1)), changes


def _sector(space: FockSpace, n: int) -> FockSpace | None:
    try:
        return FockSpace(cutoff=list(space.cutoffs), total=n, weights=list(space.weights))
    except SpaceError:
        return None  # no state carries this charge (possible with weights)


def _compile(
    expr: LadderExpr,
    space: FockSpace,
    target: FockSpace | None,
    pool: Any,
    cache: dict[Any, Problem] | None = None,
) -> Problem:
    """``expr`` compiled from ``space`` (into ``target``); with a ``cache``, a jump
    compiled by an earlier call on the same spaces is reused."""
    key = None
    if cache is not None:
        key = (tuple(expr.terms()), space, target)
        found = cache.get(key)
        if found is not None:
            return found
    problem = Problem(expr, space, target=target)
    problem.pool = pool
    if key is not None:
        cache[key] = problem
    return problem


def build_liouvillian(
    hamiltonian: Any,
    space: Any,
    jumps: Any,
    *,
    split_sectors: bool | None = None,
    threads: int | None = None,
    memory_limit: int | None = None,
    jump_cache: dict[Any, Problem] | None = None,
) -> Liouvillian:
    """Compile ``H`` and the jumps once, on the whole space or on its number sectors.

    Parameters
    ----------
    hamiltonian : LadderExpr or Problem
        Hermitian ``H`` (a prepared problem carries its space; then ``space`` is None).
    space : FockSpace
        The truncated space of ``ρ``.
    jumps : sequence of Jump
        From :func:`fockmill.jump`, :func:`fockmill.loss`, ...
    split_sectors : bool or None
        Work on the diagonal number-sector blocks ``ρ_{N,N}`` only. None: whenever the
        structure applies (``space`` has no ``total``, ``H`` conserves the weighted
        number of quanta and each jump changes it by one fixed amount). True refuses
        when it does not apply.
    jump_cache : dict, optional
        Compiled jump operators (and their adjoints) kept between calls: a scan over
        parameters builds a Liouvillian per point, and its jumps, whose rates change but
        whose operators do not, are then compiled once.

    Raises
    ------
    NotHermitianError
        ``H`` is not Hermitian.
    ModeIndexError
        A jump acts on a mode the space does not have.
    ChargeError
        A jump leaves the space's sector (pass the space without ``total``).
    """
    problem = as_problem(hamiltonian, space, threads=threads, memory_limit=memory_limit)
    full = problem.space
    if not isinstance(full, FockSpace):
        raise TypeError(
            "open systems need a fm.FockSpace (symmetry sectors are not supported yet); got "
            f"{type(full).__name__}"
        )
    h = problem.expr
    check_hermitian(h)
    jumps = check_jumps(jumps, full.modes)
    active = [(k, j) for k, j in enumerate(jumps) if j.rate > 0]
    structure = sector_structure(h, jumps, full)
    if split_sectors and structure is None:
        raise ValueError(
            "split_sectors=True needs a space without total, a Hamiltonian that conserves "
            "the number of quanta and jumps that each change it by one fixed amount"
        )
    pool = problem.pool
    if structure is None or split_sectors is False:
        spaces = [full]
        hams = [problem]
        channels = []
        for k, j in active:
            try:
                fwd = _compile(j.operator, full, None, pool, jump_cache)
            except ChargeError as exc:
                raise ChargeError(
                    f"jumps[{k}] ({j.label}, L = {j.operator}) changes the conserved total "
                    f"of the space ({exc}). Pass the whole truncated space (fm.FockSpace "
                    "without total): the number sectors are then built internally"
                ) from None
            bwd = _compile(j.operator.adjoint(), full, None, pool, jump_cache)
            channels.append(_Channel(j.rate, fwd, bwd, 0, 0, j.label))
        return Liouvillian(full, spaces, None, hams, channels, jumps)
    charges, changes = structure
    sectors: list[int] = []
    spaces = []
    for n in charges:
        s = _sector(full, n)
        if s is not None:
            sectors.append(n)
            spaces.append(s)
    position = {n: b for b, n in enumerate(sectors)}
    hams = [_compile(h, s, None, pool) for s in spaces]
    channels = []
    for k, j in active:
        adjoint = j.operator.adjoint()
        for b, n in enumerate(sectors):
            d = position.get(n + changes[k])
            if d is None:
                continue  # L carries this sector outside the space: L = 0 there
            fwd = _compile(j.operator, spaces[b], None if d == b else spaces[d], pool, jump_cache)
            bwd = _compile(adjoint, spaces[d], None if d == b else spaces[b], pool, jump_cache)
            channels.append(_Channel(j.rate, fwd, bwd, b, d, j.label))
    return Liouvillian(full, spaces, sectors, hams, channels, jumps)


def check_density_matrix(
    space: FockSpace, rho: object, name: str = "rho0", tol: float = 1e-8
) -> npt.NDArray[np.complex128]:
    """A density matrix of ``space`` (Hermitian, unit trace, positive semidefinite) or a
    normalised state vector (turned into ``|ψ⟩⟨ψ|``), as a complex ``dim × dim`` array.

    Raises
    ------
    ValueError
        Wrong shape, NaN/inf, not Hermitian, trace not 1, a negative eigenvalue, or an
        unnormalised vector.
    """
    try:
        arr = np.asarray(rho, dtype=np.complex128)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a numeric array; got {type(rho).__name__}") from None
    d = space.dim
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} contains NaN or inf")
    if arr.shape == (d,):
        norm = float(np.linalg.norm(arr))
        if abs(norm - 1.0) > tol:
            raise ValueError(
                f"{name} is a state vector of norm {norm:.12g}, not 1; normalise it first"
            )
        return np.outer(arr, arr.conj())
    if arr.shape != (d, d):
        raise ValueError(
            f"{name} has shape {arr.shape}; give a density matrix of shape ({d}, {d}) or a "
            f"state vector of shape ({d},) (the space's dimension is {d})"
        )
    scale = max(1.0, float(np.max(np.abs(arr))))
    asym = float(np.max(np.abs(arr - arr.conj().T)))
    if asym > tol * scale:
        raise ValueError(
            f"{name} is not Hermitian (largest |ρ − ρ†| entry {asym:.3g}); a density matrix "
            "equals its conjugate transpose"
        )
    tr = float(np.trace(arr).real)
    if abs(tr - 1.0) > tol:
        raise ValueError(f"{name} has trace {tr:.12g}, not 1; divide it by its trace")
    try:
        np.linalg.cholesky(0.5 * (arr + arr.conj().T) + (tol * d) * np.eye(d))
    except np.linalg.LinAlgError:
        low = float(np.linalg.eigvalsh(0.5 * (arr + arr.conj().T))[0])
        raise ValueError(
            f"{name} is not positive semidefinite (smallest eigenvalue {low:.3g}); a density "
            "matrix has no negative eigenvalues"
        ) from None
    return arr


def split_blocks(
    liouvillian: Liouvillian, rho: npt.NDArray[np.complex128]
) -> list[npt.NDArray[np.complex128]]:
    """The diagonal blocks of a full-space ``ρ`` on the Liouvillian's block spaces."""
    return [rho[np.ix_(i, i)] for i in liouvillian.full_indices()]


def join_blocks(
    liouvillian: Liouvillian, blocks: list[npt.NDArray[np.complex128]], *, limit: int | None
) -> npt.NDArray[np.complex128]:
    """The full-space density matrix assembled from diagonal blocks."""
    d = liouvillian.full.dim
    need = 16 * d * d
    if limit is not None and need > limit:
        raise SizeLimitError(
            f"the whole density matrix ({d:,} × {d:,}) takes {need / 2**30:.2f} GiB; use "
            ".blocks (the number-sector blocks) instead"
        )
    if liouvillian.sectors is None:
        return blocks[0]
    out = np.zeros((d, d), dtype=np.complex128)
    for i, b in zip(liouvillian.full_indices(), blocks, strict=True):
        out[np.ix_(i, i)] = b
    return out


def block_observable(liouvillian: Liouvillian, op: Any) -> list[Problem] | None:
    """The observable compiled on each block (its charge-conserving part when split by
    sectors: the other terms have zero expectation in a block-diagonal ``ρ``); None
    when nothing is left."""
    e = as_expr(op)
    top = max(e.modes(), default=-1)
    if top >= liouvillian.full.modes:
        from fockmill.exceptions import ModeIndexError

        raise ModeIndexError(
            f"the observable {e} acts on mode {top} but the space has "
            f"{liouvillian.full.modes} modes"
        )
    if liouvillian.sectors is not None:
        e = conserving_part(e, liouvillian.full.weights)
        if e.is_zero():
            return None
    if e == liouvillian.hamiltonians[0].expr:  # Tr(ρH): H is compiled on every block
        return list(liouvillian.hamiltonians)
    pool = liouvillian.hamiltonians[0].pool
    return [_compile(e, s, None, pool) for s in liouvillian.spaces]


def trace_product(problem: Problem, rho: npt.NDArray[Any]) -> complex:
    """``Tr(O ρ)`` from the observable's CSR matrix (small) or a block product."""
    if problem.estimate.csr_bytes <= 64 * 2**20:
        m = problem.matrix()
        rows = np.repeat(np.arange(m.shape[0]), np.diff(m.indptr))
        return complex(np.sum(m.data * rho[m.indices, rows]))
    prod = problem.native.matmat(
        np.ascontiguousarray(rho, dtype=np.complex128), threads=problem.pool
    )
    return complex(np.trace(prod))
