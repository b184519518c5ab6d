"""Stationary states of the Lindblad master equation: ``𝓛ρ = 0`` with ``Tr ρ = 1``."""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.dynamics.drive import TimeDependent
from fockmill.exceptions import ConvergenceError, NotUniqueError, SizeLimitError
from fockmill.lindblad.liouvillian import (
    Liouvillian,
    block_observable,
    build_liouvillian,
    join_blocks,
    trace_product,
)
from fockmill.lindblad.preconditioners import sector_sizes, sector_sylvester
from fockmill.problem.memory import available_memory
from fockmill.settings.progress import Progress, ProgressOption, make_progress

__all__ = ["StationaryState", "choose_stationary_method", "stationary_state"]

#: Dense Liouvillian (singular values for the null space, then a dense solve) up to this
#: many density-matrix entries ``n = Σ_b d_b²`` (a ``n × n`` complex matrix: 13 MB).
DENSE_MAX = 900
#: The Sylvester preconditioner (see ``_preconditioner``) while every block has at most
#: this many states; the diagonal one beyond.
SYLVESTER_MAX_DIM = 600
#: The sector Sylvester preconditioner (see ``fockmill.lindblad.preconditioners``) for
#: larger blocks while every number sector inside them has at most this many states (an
#: eigendecomposition of 2,128 states, the largest sector of 7 modes of cutoff 3, takes
#: about 20 s on one core; the diagonal preconditioner needs hundreds of iterations).
SECTORS_MAX_DIM = 3000
#: Singular values below this fraction of the largest count as zero (dense method).
NULL_TOL = 1e-9


@dataclass(frozen=True)
class StationaryState:
    """The result of :func:`stationary_state`: the blocks of ``ρ`` and what they give
    (``rho``, ``purity``, ``populations``, ``distribution(i)``, ``g2(i)``,
    ``number_variance(i)``, ``energy`` = ``Tr(ρH)``, ``expectation(op)``).

    Attributes
    ----------
    blocks : list of numpy.ndarray
        The density matrix's diagonal blocks, one per entry of ``spaces``.
    spaces : list of FockSpace
        The block spaces: the whole space, or its number sectors ``N = sectors[b]``.
    sectors : list of int or None
        The number of quanta of each block when the sector structure was used.
    space : FockSpace
        The space the problem was given on (``rho`` is in its basis).
    residual : float
        ``‖𝓛ρ‖`` (Frobenius norm), recomputed with the matrix-free products after the
        solve; compare it with the rates and energies of the model.
    method : str
        ``"dense"``, ``"sparse"``, ``"iterative (sylvester)"``,
        ``"iterative (sectors)"`` or ``"iterative (diagonal)"`` (the preconditioner used).
    iterations : int
        Iterations of the iterative solve (0 for the direct methods).
    null_dimension : int or None
        Zero singular values of the Liouvillian (dense method only; 1 when unique).
    products : int
        Block products made by the matrix-free Liouvillian.
    seconds : float
        Wall time.
    """

    blocks: list[npt.NDArray[np.complex128]]
    spaces: list[Any]
    sectors: list[int] | None
    space: Any
    residual: float
    method: str
    iterations: int
    null_dimension: int | None
    products: int
    seconds: float
    _liouvillian: Liouvillian = field(repr=False, compare=False)

    @property
    def rho(self) -> npt.NDArray[np.complex128]:
        """The whole density matrix in the basis of ``space`` (zero between sectors)."""
        return join_blocks(self._liouvillian, self.blocks, limit=available_memory())

    @property
    def purity(self) -> float:
        """``Tr ρ²``."""
        return float(sum(np.vdot(b, b).real for b in self.blocks))

    @property
    def populations(self) -> npt.NDArray[np.float64]:
        """Mean occupation ``⟨n_i⟩`` of every mode, shape ``(modes,)``."""
        out = np.zeros(self.space.modes)
        for s, b in zip(self.spaces, self.blocks, strict=True):
            out += np.diagonal(b).real @ s.occupations().astype(np.float64)
        return out

    def distribution(self, mode: int) -> npt.NDArray[np.float64]:
        """``P(n_mode = n)`` for ``n = 0 .. cutoff``."""
        if not 0 <= int(mode) < self.space.modes:
            raise IndexError(f"mode {mode} is not in 0 .. {self.space.modes - 1}")
        out = np.zeros(self.space.cutoffs[int(mode)] + 1)
        for s, b in zip(self.spaces, self.blocks, strict=True):
            np.add.at(out, s.occupations()[:, int(mode)].astype(np.int64), np.diagonal(b).real)
        return out

    def expectation(self, op: Any) -> float | complex:
        """``Tr(O ρ)`` (real when ``O`` is Hermitian). On number-sector blocks only the
        terms of ``O`` that conserve the number of quanta contribute: the stationary
        state has no coherence between sectors."""
        from fockmill.algebra.expressions import as_expr

        e = as_expr(op)
        problems = block_observable(self._liouvillian, e)
        if problems is None:
            return 0.0
        value = sum(trace_product(p, b) for p, b in zip(problems, self.blocks, strict=True))
        return float(value.real) if e.is_hermitian() else complex(value)

    def g2(self, mode: int) -> float:
        """``g⁽²⁾(0) = ⟨a†² a²⟩ / ⟨a† a⟩²`` of one mode (NaN when it is empty).

        ``a†² a² = n(n − 1)`` is diagonal in the Fock basis, so both moments come from
        :meth:`distribution` (nothing is compiled)."""
        p = self.distribution(mode)
        n = np.arange(p.size, dtype=np.float64)
        mean = float(p @ n)
        pairs = float(p @ (n * (n - 1.0)))
        return pairs / mean**2 if mean > 0 else float("nan")

    def number_variance(self, mode: int) -> float:
        """``⟨n²⟩ − ⟨n⟩²`` of one mode (from :meth:`distribution`)."""
        p = self.distribution(mode)
        n = np.arange(p.size, dtype=np.float64)
        mean = float(p @ n)
        return float(p @ n**2) - mean**2

    @property
    def energy(self) -> float:
        """``Tr(ρH)``, from the Hamiltonian's blocks compiled for the solve."""
        liou = self._liouvillian
        value = sum(
            trace_product(h, b) for h, b in zip(liou.hamiltonians, self.blocks, strict=True)
        )
        return float(np.real(value))


def choose_stationary_method(size: int) -> str:
    """The method ``"auto"`` picks for ``size = Σ_b d_b²`` density-matrix entries:
    ``"dense"`` up to ``DENSE_MAX``, else ``"iterative"``.

    The sparse LU is never picked: its fill-in made it slower than the iterative solve
    at every size measured (n = 4096: 4.4 s against 0.2 s; n = 10⁴: 12 s; n = 6 × 10⁴:
    over 5 minutes), see benchmarks/bench_lindblad.py."""
    if size <= DENSE_MAX:
        return "dense"
    return "iterative"


def _trace_vector(liou: Liouvillian) -> npt.NDArray[np.float64]:
    return np.concatenate([np.eye(d).ravel() for d in liou.dims])


def _blocks_from_vec(liou: Liouvillian, x: npt.NDArray[Any]) -> list[npt.NDArray[np.complex128]]:
    out = []
    start = 0
    for d in liou.dims:
        b = x[start : start + d * d].reshape(d, d)
        out.append(0.5 * (b + b.conj().T))
        start += d * d
    return out


def _normalised(liou: Liouvillian, blocks: list[npt.NDArray[np.complex128]]) -> list[Any]:
    tr = liou.trace(blocks).real
    if not np.isfinite(tr) or tr <= 0:
        raise ConvergenceError(
            f"the solve ended with Tr ρ = {tr:.3g}; no stationary state was found (it may not "
            "be unique: check that every part of the system is damped)"
        )
    return [b / tr for b in blocks]


def _solve_dense(liou: Liouvillian) -> tuple[list[Any], int]:
    import scipy.linalg as sla

    from fockmill.settings.threads import blas_threads

    lmat = liou.superoperator().toarray()
    with blas_threads(1):  # one BLAS thread: far faster at these sizes on a shared machine
        s = sla.svdvals(lmat)
    zero = int(np.sum(s <= NULL_TOL * max(float(s[0]), 1e-300)))
    if zero > 1:
        raise NotUniqueError(
            f"the stationary state is not unique: the Liouvillian has {zero} zero modes "
            f"(singular values below {NULL_TOL:g} of the largest). Add dissipation to every "
            "part of the system, or split it into the parts that do not talk to each other"
        )
    t = _trace_vector(liou)
    e = t / t.sum()
    scale = max(float(np.max(np.abs(lmat))), 1e-300)
    a = lmat + scale * np.outer(e, t)
    with blas_threads(1):
        x = np.linalg.solve(a, scale * e)
    return _blocks_from_vec(liou, x), zero


def _solve_sparse(liou: Liouvillian) -> list[Any]:
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    lmat = liou.superoperator()
    t = _trace_vector(liou)
    e = t / t.sum()
    scale = max(float(np.max(np.abs(lmat.data))), 1e-300) if lmat.nnz else 1.0
    # The rank-one trace term touches only the diagonal entries' columns: add it as a
    # sparse block (e on the rows of the diagonal entries, t on their columns).
    diag = np.nonzero(t)[0]
    rank_one = sp.csr_array(
        (
            np.repeat(scale * e[diag], diag.size),
            (np.repeat(diag, diag.size), np.tile(diag, diag.size)),
        ),
        shape=lmat.shape,
    )
    a = sp.csc_array(lmat + rank_one)
    try:
        lu = spla.splu(a)
    except RuntimeError as exc:
        raise NotUniqueError(
            f"the Liouvillian with the trace condition is singular ({exc}): the stationary "
            "state is not unique. Add dissipation to every part of the system"
        ) from None
    x = lu.solve(scale * e.astype(np.complex128))
    if not np.all(np.isfinite(x)):
        raise NotUniqueError(
            "the sparse solve gave NaN or inf: the stationary state is not unique (or the "
            "problem is too badly scaled); try method='dense' on a smaller cutoff to check"
        )
    # A second right-hand side with another trace-one matrix: if the stationary state
    # were not unique, the two solutions would differ (their difference is in the null
    # space of 𝓛).
    rng = np.random.default_rng(12345)
    other = rng.random(t.size) * t
    other /= other.sum()
    # Sherman–Morrison for A' = A + scale (other − e) tᵀ.
    u = scale * (other - e)
    au = lu.solve(u.astype(np.complex128))
    ab = lu.solve(scale * other.astype(np.complex128))
    x2 = ab - au * (t @ ab) / (1.0 + t @ au)
    if np.linalg.norm(x2 - x) > 1e-6 * max(np.linalg.norm(x), 1e-300):
        raise NotUniqueError(
            "the stationary state is not unique: two trace conditions give different "
            "solutions. Add dissipation to every part of the system"
        )
    return _blocks_from_vec(liou, x)


def _preconditioner(
    liou: Liouvillian, choice: str, single_precision: bool = False
) -> tuple[Any, float, str, Any, bool]:
    """``x -> M⁻¹ x`` on the real form of Hermitian blocks, the Liouvillian's scale,
    the kind used, the order of each block's states it works in (None: as given) and
    whether it runs in single precision (``single_precision`` allows it for the sector
    preconditioner; the solver must then be flexible).

    ``"sylvester"`` inverts the no-jump part ``ρ -> −i(Kρ − ρK†)`` exactly on each block
    from the eigendecomposition ``K = V Λ V⁻¹`` (``X = V [(V⁻¹ Y V⁻†) / (−i(λ_i − λ̄_j))]
    V†``): what is left, ``1 + 𝓚⁻¹𝓙``, has its spectrum clustered, and GMRES needs
    5 to 9 times fewer iterations than with the diagonal (measured in
    benchmarks/bench_lindblad.py). Its cost, ``O(d³)`` per block and application, pays
    while blocks have at most ``SYLVESTER_MAX_DIM`` states. ``"sectors"`` does the same
    with the number-conserving part of ``K`` (block-diagonal in the number sectors, so
    cheap on one large block, see :mod:`fockmill.lindblad.preconditioners`).
    ``"diagonal"`` divides by the Liouvillian's diagonal (Jacobi). All keep ``M⁻¹ Y``
    Hermitian for Hermitian ``Y``.
    """
    import scipy.linalg as sla

    from fockmill.settings.threads import blas_threads

    if choice == "auto":
        # Number-sector blocks: the sector preconditioner is the Sylvester one plus the
        # jumps of one direction (11 against 33 iterations, pumped 5 × 3 chain).
        if liou.sectors is None and max(liou.dims) <= SYLVESTER_MAX_DIM:
            choice = "sylvester"
        elif max(sector_sizes(liou)) <= SECTORS_MAX_DIM:
            choice = "sectors"
        else:
            choice = "diagonal"
    if choice == "sectors":
        made = sector_sylvester(liou, single_precision)
        if made is not None:
            return made[0], made[1], "sectors", made[2], made[3]
        choice = "diagonal"  # a (nearly) defective sector: no stable inverse
    if choice == "sylvester":
        ks, _chans = liou.sparse_matrices()
        parts = []
        with blas_threads(1):
            for k in ks:
                lam, vec = sla.eig(k.toarray())
                if np.linalg.cond(vec) > 1e10:  # K (nearly) defective: no stable inverse
                    return _preconditioner(liou, "diagonal")
                parts.append((vec, np.linalg.inv(vec), -1j * (lam[:, None] - lam.conj()[None, :])))
        scale = max(float(np.max(np.abs(d))) for _, _, d in parts)
        floor = 1e-3 * max(scale, 1e-300)
        parts = [(v, vi, np.where(np.abs(d) < floor, -floor, d)) for v, vi, d in parts]

        def sylvester(x: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
            out = []
            for y, (v, vi, d) in zip(liou.from_real(np.asarray(x).reshape(-1)), parts, strict=True):
                out.append(v @ ((vi @ y @ vi.conj().T) / d) @ v.conj().T)
            return liou.to_real(out)

        return sylvester, scale, "sylvester", None, False
    if choice != "diagonal":
        raise ValueError(
            f"preconditioner must be 'auto', 'sylvester', 'sectors' or 'diagonal'; got {choice!r}"
        )
    diag = liou.diagonal()
    scale = max(float(max(np.max(np.abs(d)) for d in diag)), 1e-300)
    dtotal = sum(liou.dims)
    precond = []
    for d, dg in zip(liou.dims, diag, strict=True):
        p = dg + (scale / dtotal) * np.eye(d)
        floor = 1e-3 * scale
        precond.append(np.where(np.abs(p) < floor, -floor, p))

    def jacobi(x: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
        blocks = liou.from_real(np.asarray(x).reshape(-1))
        return liou.to_real([b / p for b, p in zip(blocks, precond, strict=True)])

    return jacobi, scale, "diagonal", None, False


def _solve_iterative(
    liou: Liouvillian,
    tol: float,
    max_iterations: int,
    restart: int,
    guess: Any,
    preconditioner: str = "auto",
    reporter: Progress | None = None,
    room_for_images: bool = False,
) -> tuple[list[Any], int, str]:
    from fockmill.lindblad.gmres import gmres

    dims = liou.dims
    dtotal = sum(dims)
    # E = I / D (Hermitian, trace one) scaled like the Liouvillian.
    e_blocks = [np.eye(d, dtype=np.complex128) / dtotal for d in dims]
    e = liou.to_real(e_blocks)
    solve_precond, scale, kind, orders, single = _preconditioner(
        liou, preconditioner, single_precision=room_for_images
    )
    product = liou.native() if orders is None else liou.native_in_order(orders)

    # E is a multiple of the identity: the trace term touches the diagonal entries only.
    diagonal = np.flatnonzero(e)

    def apply(x: npt.NDArray[np.float64], out: npt.NDArray[np.float64]) -> None:
        liou.products += 1
        trace = float(x[diagonal].sum())
        product.apply_real(x, threads=liou.pool, out=out)
        out[diagonal] += (scale * trace) * e[diagonal]

    x0 = (
        solve_precond(scale * e).copy()
        if guess is None
        else _reorder(liou, liou.to_real(guess), orders)
    )
    count = 0

    def callback(res: float) -> None:
        nonlocal count
        count += 1
        if reporter is not None:
            reporter.update(step=count, products=liou.products, residual=float(res))

    x, iterations, rel = gmres(
        apply,
        scale * e,
        x0,
        precondition=solve_precond,
        rtol=tol,
        restart=restart,
        max_iterations=max_iterations,
        callback=callback,
        flexible=single,
    )
    if rel > tol:
        raise ConvergenceError(
            f"no stationary state found: GMRES stopped after {iterations} iterations with "
            f"relative residual {rel:.3g} > tol={tol:g}. The stationary state may not be unique "
            "(check a smaller cutoff with method='dense'), or raise max_iterations / loosen tol"
        )
    if orders is not None:
        x = _reorder(liou, x, [np.argsort(o) for o in orders])
    return liou.from_real(x), iterations, kind


def _reorder(liou: Liouvillian, x: npt.NDArray[np.float64], orders: Any) -> Any:
    """The real form ``x`` with the states of block ``b`` listed as ``orders[b]``."""
    if orders is None:
        return x
    out = np.empty_like(x)
    start = 0
    for d, o in zip(liou.dims, orders, strict=True):
        out[start : start + d * d] = x[start : start + d * d].reshape(d, d)[np.ix_(o, o)].ravel()
        start += d * d
    return out


def stationary_state(
    H: Any,
    space: Any = None,
    jumps: Any = None,
    *,
    method: str = "auto",
    tol: float = 1e-9,
    max_iterations: int = 2000,
    restart: int = 40,
    split_sectors: bool | None = None,
    guess: Any = None,
    preconditioner: str = "auto",
    threads: int | None = None,
    memory_limit: int | None = None,
    jump_cache: dict[Any, Any] | None = None,
    progress: ProgressOption = None,
) -> StationaryState:
    """The stationary state ``𝓛ρ = 0``, ``Tr ρ = 1`` of a Lindblad master equation.

    Parameters
    ----------
    H : LadderExpr or Problem
        Hermitian Hamiltonian, or a prepared problem (then ``space`` is omitted and the
        jumps may come second: ``stationary_state(problem, jumps)``).
    space : FockSpace
        The whole truncated space (without ``total`` when jumps change the number of
        quanta: the sectors are built here).
    jumps : sequence of Jump
        ``[fm.loss(0, kappa), fm.pump(1, gamma), ...]``.
    method : {"auto", "dense", "sparse", "iterative"}
        See Notes.
    tol : float
        Relative residual of the iterative solve.
    max_iterations : int
        Liouvillian applications the iterative solve may use.
    restart : int
        Krylov vectors kept by GMRES before it restarts (memory: ``restart + 1`` real
        vectors of ``Σ_b d_b²``).
    split_sectors : bool or None
        Use only the number-sector blocks ``ρ_{N,N}`` (None: whenever it applies).
    guess : list of arrays, optional
        Starting blocks for the iterative solve (e.g. a previous point of a scan).
    preconditioner : {"auto", "sylvester", "sectors", "diagonal"}
        Of the iterative solve: ``"sylvester"`` inverts the no-jump part
        ``−i(Kρ − ρK†)`` exactly per block by an eigendecomposition of ``K`` (few
        iterations, ``O(d³)`` per block); ``"sectors"`` inverts it with the
        number-conserving part of ``K`` only, block-diagonal in the number sectors
        (``O(d Σ_N d_N²)``: a coherent drive that mixes the sectors of one large block
        is left to GMRES), together with the jumps that all lower (or all raise) the
        number, solved sector pair by sector pair from the top down;
        ``"diagonal"`` divides by the Liouvillian's diagonal. ``"auto"``: Sylvester
        for one block (no number-sector split) of at most 600 states, else sectors
        while every number sector has at most 3000, else diagonal.
    threads, memory_limit
        As for :func:`fockmill.prepare`.
    jump_cache : dict, optional
        A dict (empty at first) that keeps the compiled jump operators between calls on
        the same space, e.g. along a scan of one model (sweeps pass one).
    progress : bool, callable or None
        Progress reports (see :func:`fockmill.lowest_levels`): a record after each GMRES
        iteration (with its preconditioned residual) and at the end.

    Returns
    -------
    StationaryState

    Raises
    ------
    NotUniqueError
        The Liouvillian has more than one zero mode (dense and sparse methods).
    ConvergenceError
        The iterative solve did not reach ``tol`` (which is also what a non-unique
        stationary state looks like to it).
    NotHermitianError, ModeIndexError, ChargeError, ValueError, TypeError
        Bad Hamiltonian, jumps or options.

    Notes
    -----
    Methods: ``"dense"`` builds the Liouvillian as a dense matrix, counts its zero
    singular values (more than one: :class:`~fockmill.exceptions.NotUniqueError`) and
    solves ``(𝓛 + s e tᵀ) ρ = s e`` where ``t`` is the trace functional and ``e`` the
    identity divided by the dimension (the trace of ``𝓛ρ`` vanishes, so the solution
    has ``Tr ρ = 1`` and ``𝓛ρ = 0``); ``"sparse"`` (only on request) solves the same
    system by sparse LU and checks uniqueness with a second trace condition;
    ``"iterative"`` runs
    preconditioned GMRES (see ``preconditioner``) on the real space
    of Hermitian matrices, with every Liouvillian application done by the native
    matrix-free product (Rust, row-parallel), never storing the superoperator.
    ``"auto"`` picks by the number of density-matrix entries ``n = Σ_b d_b²``: dense
    up to ``DENSE_MAX`` = 900, iterative beyond (the sparse LU's fill-in made it slower
    at every size measured).
    The iterative method cannot prove uniqueness: a non-unique stationary state shows
    as a solve that does not converge (:class:`~fockmill.exceptions.ConvergenceError`)
    or converges to one of the stationary states; check a smaller cutoff with
    ``method="dense"`` when in doubt.

    Number sectors: when ``H`` conserves the weighted number of quanta ``N`` and every
    jump changes it by a fixed amount ``c_k``, the Liouvillian commutes with the
    superoperator ``ρ -> e^{iφN} ρ e^{−iφN}``. A unique stationary state is therefore
    invariant under it, which leaves only the diagonal blocks ``ρ_{N,N}``: ``Σ_N d_N²``
    unknowns instead of ``(Σ_N d_N)²`` (for 6 modes of cutoff 3, 1.70 × 10⁶ instead of
    1.68 × 10⁷, 9.8 times fewer, and every product runs on blocks of at most 580 states).

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=1, cutoff=12)
    >>> h = fm.number(0) + 0.3 * (fm.lowering(0) + fm.raising(0))  # invented values
    >>> ss = fm.stationary_state(h, space, [fm.loss(0, 1.0)])
    >>> round(float(ss.populations[0]), 6)    # |F / (Δ − iκ/2)|² = 0.09 / 1.25
    0.072
    """
    from fockmill.problem.problem import Problem, _is_space

    t0 = time.perf_counter()
    if isinstance(H, Problem) and space is not None and not _is_space(space):
        if jumps is not None:
            raise TypeError("stationary_state(problem, jumps): too many positional arguments")
        space, jumps = None, space
    if isinstance(H, TimeDependent):
        raise TypeError(
            "stationary_state needs a time-independent Hamiltonian; got a TimeDependent. "
            "Pass its constant part (H.H0) or the Hamiltonian at a fixed time, or follow "
            "the time dependence with fm.evolve_density"
        )
    if jumps is None:
        raise TypeError("stationary_state needs jumps=[fm.loss(i, rate), ...]")
    if method not in ("auto", "dense", "sparse", "iterative"):
        raise ValueError(f"method must be 'auto', 'dense', 'sparse' or 'iterative'; got {method!r}")
    if not (isinstance(tol, float | int) and np.isfinite(tol) and 0 < tol < 1):
        raise ValueError(f"tol must be a number in (0, 1), e.g. 1e-9; got {tol!r}")
    liou = build_liouvillian(
        H,
        space,
        jumps,
        split_sectors=split_sectors,
        threads=threads,
        memory_limit=memory_limit,
        jump_cache=jump_cache,
    )
    chosen = choose_stationary_method(liou.size) if method == "auto" else method
    budget = memory_limit if memory_limit is not None else available_memory()
    if chosen == "dense" and budget is not None and 3 * 16 * liou.size**2 > budget:
        raise SizeLimitError(
            f"the dense Liouvillian of {liou.size:,} × {liou.size:,} entries needs "
            f"{3 * 16 * liou.size**2 / 2**30:.2f} GiB; use method='iterative'"
        )
    # The flexible solve (single-precision sector preconditioner) keeps twice the
    # vectors: allowed only when they fit.
    room_for_images = (
        budget is None or 8 * liou.size * (2 * restart + 8) + 16 * liou.size * 6 <= 0.8 * budget
    )
    if chosen == "iterative" and budget is not None:
        need = 8 * liou.size * (restart + 8) + 16 * liou.size * 6
        if need > 0.8 * budget:
            raise SizeLimitError(
                f"the iterative solve keeps about {need / 2**30:.2f} GiB of vectors; lower "
                "restart=, the cutoffs, or raise memory_limit"
            )
    null_dim: int | None = None
    iterations = 0
    reporter = make_progress(progress, "stationary_state", unit="iteration")
    try:
        if chosen == "dense":
            blocks, null_dim = _solve_dense(liou)
        elif chosen == "sparse":
            blocks = _solve_sparse(liou)
        else:
            blocks, iterations, used = _solve_iterative(
                liou,
                float(tol),
                max_iterations,
                restart,
                guess,
                preconditioner,
                reporter,
                room_for_images,
            )
            chosen = f"iterative ({used})"
        blocks = _normalised(liou, blocks)
        residual = liou.residual(blocks)
        if reporter is not None:
            reporter.update(step=iterations, products=liou.products, residual=residual)
    finally:
        if reporter is not None:
            reporter.close()
    return StationaryState(
        blocks=blocks,
        spaces=liou.spaces,
        sectors=liou.sectors,
        space=liou.full,
        residual=residual,
        method=chosen,
        iterations=iterations,
        null_dimension=null_dim,
        products=liou.products,
        seconds=time.perf_counter() - t0,
        _liouvillian=liou,
    )
