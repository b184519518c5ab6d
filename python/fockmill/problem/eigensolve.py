"""Ground states and lowest levels, with the method chosen from size and memory."""

from __future__ import annotations

import re
import time
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
import numpy.typing as npt
import scipy.sparse.linalg as sla
from scipy.sparse.linalg import LinearOperator

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import (
    ConvergenceError,
    NotHermitianError,
    SizeLimitError,
)
from fockmill.observables.observe import check_vector, top_level_weights
from fockmill.observables.truncation import warn_cutoff_weights
from fockmill.problem.memory import (
    MemoryEstimate,
    SolvePlan,
    resident_bytes,
    size_limit_message,
)
from fockmill.problem.runs import array_hash, hamiltonian_hash, native_hooks, open_checkpoint
from fockmill.settings.checks import (
    METHODS,
)
from fockmill.settings.progress import Progress, ProgressOption, make_progress
from fockmill.settings.solver import SolverSettings
from fockmill.settings.threads import blas_threads
from fockmill.store.checkpoint import DEFAULT_CHECKPOINT_EVERY, Checkpoint, CheckpointState

if TYPE_CHECKING:
    from fockmill.problem.problem import Problem

__all__ = [
    "GroundState",
    "Levels",
    "Method",
    "choose_method",
    "memory_plan",
    "solve_ground",
    "solve_levels",
]

Method = Literal["auto", "dense", "csr", "operator", "lanczos"]
_METHODS = METHODS
#: Spaces up to this dimension are diagonalised densely.
DENSE_MAX_DIM = 500
#: Fraction of the available memory a solve may plan to use.
MEMORY_BUDGET = 0.8


@dataclass(frozen=True)
class GroundState:
    """The lowest eigenpair of a Hamiltonian on a space.

    Attributes
    ----------
    energy : float
        Lowest eigenvalue.
    vector : numpy.ndarray
        Unit-norm eigenvector, shape ``(dim,)``, in the space's basis order.
    residual : float
        ``‖H v − E v‖``, measured after the solve.
    method : str
        ``"dense"``, ``"csr"`` (eigsh on the stored matrix), ``"operator"`` (eigsh on the
        matrix-free operator) or ``"lanczos"`` (low-memory Lanczos in Rust).
    products : int
        Matrix-vector products used (0 for dense).
    iterations : int
        Lanczos steps for ``"lanczos"``; equal to ``products`` for the eigsh methods.
    seconds : float
        Wall time of the solve, including any build.
    degeneracy : int or None
        How many computed levels equal the lowest within the tolerance (1: unique);
        None when the method computes a single vector (``"lanczos"``).
    converged : bool
        Always True: a solve that misses its tolerance raises
        :class:`~fockmill.exceptions.ConvergenceError` instead of returning.
    """

    energy: float
    vector: npt.NDArray[Any]
    residual: float
    method: str
    products: int
    iterations: int
    seconds: float
    degeneracy: int | None
    converged: bool


@dataclass(frozen=True)
class Levels:
    """The ``k`` lowest eigenpairs.

    Attributes
    ----------
    energies : numpy.ndarray
        Shape ``(k,)``, ascending.
    vectors : numpy.ndarray
        Shape ``(dim, k)``; column ``i`` belongs to ``energies[i]``.
    residuals : numpy.ndarray
        ``‖H v_i − E_i v_i‖`` for each level.
    method, products, seconds : as in :class:`GroundState`.
    degeneracies : tuple of int
        Sizes of the groups of equal energies, in ascending order of energy
        (``(2, 1, 1)``: a degenerate doublet then two single levels). The last group
        may continue beyond the ``k`` levels computed.
    gap : float
        ``energies[1] − energies[0]`` (property; 0 for a degenerate ground state,
        needs ``k >= 2``).
    """

    energies: npt.NDArray[np.float64]
    vectors: npt.NDArray[Any]
    residuals: npt.NDArray[np.float64]
    method: str
    products: int
    seconds: float
    degeneracies: tuple[int, ...]

    @property
    def gap(self) -> float:
        """``energies[1] − energies[0]`` (0 for a degenerate ground state)."""
        if self.energies.size < 2:
            raise ValueError("the gap needs at least two levels; ask for k >= 2")
        return float(self.energies[1] - self.energies[0])


def _check_hermitian(expr: LadderExpr) -> None:
    if not expr.is_hermitian():
        anti = (expr - expr.adjoint()) * 0.5
        raise NotHermitianError(
            "the Hamiltonian is not Hermitian (its anti-Hermitian part is "
            f"{anti}); add the Hermitian conjugate of each term, e.g. "
            "h + h.adjoint(), or use expr.hermitian_part()"
        )


def _degeneracy_groups(energies: npt.NDArray[np.float64], tol: float) -> tuple[int, ...]:
    groups: list[int] = []
    start = 0
    for i in range(1, energies.size + 1):
        if i == energies.size or energies[i] - energies[start] > tol * max(
            1.0, abs(float(energies[start]))
        ):
            groups.append(i - start)
            start = i
    return tuple(groups)


def _krylov_vectors(k: int) -> int:
    return max(2 * k + 1, 20) + 2


#: Relative weight of the seeded noise mixed into a user's start vector, so that a
#: ``v0`` without weight in the ground state's symmetry sector still reaches it.
START_NOISE = 1e-4


def choose_method(
    estimate: MemoryEstimate, k: int, memory_limit: int | None = None
) -> Literal["dense", "csr", "operator", "lanczos"]:
    """The method ``"auto"`` picks for ``k`` levels given a memory estimate.

    Dense for at most ``DENSE_MAX_DIM`` (500) states. Above that, the Lanczos solvers in
    Rust (four vectors for one level, a thick-restart basis of ``2k + 9`` for several;
    on a CSR matrix kept in Rust when it fits, see ``store_matrix``), which
    ``benchmarks/bench_methods.py`` measured as fastest or within noise of the fastest
    from about 1,700 states up (dense eigh already took 1.3 s at 1,716 states, Lanczos
    0.01 s). eigsh (stored, then matrix-free) only when the Lanczos vectors do not fit
    in ``MEMORY_BUDGET`` of the memory.

    Raises
    ------
    SizeLimitError
        When no method fits.
    """
    limit = memory_limit if memory_limit is not None else estimate.available_bytes
    budget = float("inf") if limit is None else MEMORY_BUDGET * limit
    krylov = estimate.krylov_bytes(_krylov_vectors(k))
    if estimate.dim <= DENSE_MAX_DIM:
        return "dense"
    if estimate.krylov_bytes(_lanczos_vectors(k)) <= budget:
        return "lanczos"
    if estimate.build_peak_bytes + krylov <= budget:
        return "csr"
    if krylov <= budget:
        return "operator"
    raise SizeLimitError(
        size_limit_message(
            "no solver fits in memory: even the four-vector Lanczos solver",
            estimate.krylov_bytes(4),
            budget,
            "use a smaller sector or cutoffs",
            given=memory_limit is not None,
            details=str(estimate),
        )
    )


def _check_fits(estimate: MemoryEstimate, method: str, k: int, memory_limit: int | None) -> None:
    """Refuse an explicitly chosen method whose vectors alone exceed the memory."""
    limit = memory_limit if memory_limit is not None else estimate.available_bytes
    if limit is None:
        return
    vectors = {
        "dense": estimate.dim * estimate.dim * estimate.value_dtype.itemsize * 3,
        "csr": estimate.krylov_bytes(_krylov_vectors(k)),
        "operator": estimate.krylov_bytes(_krylov_vectors(k)),
        "lanczos": estimate.krylov_bytes(_lanczos_vectors(k)),
    }[method]
    if vectors > limit:
        raise SizeLimitError(
            size_limit_message(
                f"method={method!r} (its vectors alone)",
                vectors,
                limit,
                "use a smaller sector or cutoffs, or method='lanczos' (four vectors)",
                given=memory_limit is not None,
                details=str(estimate),
            )
        )


def _start_vector(
    v0: npt.ArrayLike | None, problem: Problem, seed: int, *, mix_noise: bool = True
) -> npt.NDArray[Any] | None:
    """The user's start vector, normalised and mixed with ``START_NOISE`` of seeded
    noise (so that no symmetry sector is excluded), or None. The Rust Lanczos solvers
    mix the same noise themselves: they take ``mix_noise=False``."""
    if v0 is None:
        return None
    v = check_vector(problem.space, v0, "v0")
    if problem.is_real and v.dtype.kind == "c":
        v = np.ascontiguousarray(v.real)
        if not np.any(v):
            return None
    if not mix_noise:
        return v
    v = v / np.linalg.norm(v)
    noise = np.random.default_rng([seed, 0x5EED]).standard_normal(v.shape[0])
    mixed = v + START_NOISE * noise / np.linalg.norm(noise)
    return np.ascontiguousarray(mixed / np.linalg.norm(mixed))


def _residuals(op: Any, energies: npt.NDArray[Any], vectors: npt.NDArray[Any]) -> Any:
    hv = op @ vectors
    return np.linalg.norm(hv - vectors * energies[np.newaxis, :], axis=0)


def _converged(residual: float, energy: float, tol: float) -> bool:
    """The one convergence rule of the iterative methods."""
    return residual <= 10 * max(tol, 1e-12) * max(1.0, abs(energy))


class _ProductLimit(Exception):
    """Raised inside eigsh when the product budget (``max_iterations``) is spent."""


class _Counted(LinearOperator):  # type: ignore[misc]
    """A Hermitian operator (CSR matrix or matrix-free) that counts its products and
    stops the solver (:class:`_ProductLimit`) before it exceeds ``limit`` of them:
    eigsh's own ``maxiter`` counts restarts, each of many products."""

    def __init__(
        self, inner: Any, limit: int | None = None, reporter: Progress | None = None
    ) -> None:
        self.inner = inner
        self.products = 0
        self.limit = limit
        self.reporter = reporter
        super().__init__(dtype=np.dtype(inner.dtype), shape=inner.shape)

    def _spend(self, count: int) -> None:
        if self.limit is not None and self.products + count > self.limit:
            raise _ProductLimit
        self.products += count
        if self.reporter is not None:
            self.reporter.update(step=self.products, products=self.products)

    def _matvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self._spend(1)
        return self.inner @ x  # type: ignore[no-any-return]

    def _matmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self._spend(x.shape[1])
        return self.inner @ x  # type: ignore[no-any-return]

    _rmatvec = _matvec
    _rmatmat = _matmat

    def _adjoint(self) -> _Counted:
        return self


def _eigsh_levels(
    problem: Problem,
    k: int,
    method: str,
    tol: float,
    v0: npt.ArrayLike | None,
    max_iterations: int | None,
    seed: int,
    reporter: Progress | None = None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any], npt.NDArray[np.float64], _Counted | None]:
    """Energies, vectors, residuals and the (counting) operator used, for the eigsh and
    dense methods (the operator is None for dense)."""
    dim = problem.dim
    if method == "dense":
        dense = problem.matrix().toarray()
        with blas_threads(problem.threads, dim):
            energies, vectors = np.linalg.eigh(dense)
            energies, vectors = energies[:k], vectors[:, :k]
            residuals = np.linalg.norm(dense @ vectors - vectors * energies, axis=0)
        return energies, vectors, residuals, None
    if dim - 1 <= k:
        raise ValueError(
            f"k={k} levels need a space with more than {k + 1} states for an iterative "
            f"method; this one has {dim}: use method='dense'"
        )
    inner = problem.matrix() if method == "csr" else problem.operator()
    target = _Counted(inner, max_iterations, reporter)
    start = _start_vector(v0, problem, seed)
    if start is None:
        start = np.random.default_rng(seed).standard_normal(dim)
    # eigsh's maxiter counts restarts; ours counts products (about ncv per restart).
    ncv = min(dim, max(2 * k + 1, 20))
    maxiter = None if max_iterations is None else max(1, max_iterations // ncv)
    try:
        energies, vectors = sla.eigsh(target, k=k, which="SA", tol=tol, v0=start, maxiter=maxiter)
        order = np.argsort(energies)
        energies, vectors = energies[order], vectors[:, order]
        energies, vectors = _recover_missed_copies(target, energies, vectors, tol, seed, maxiter)
    except sla.ArpackNoConvergence as exc:
        raise ConvergenceError(
            f"eigsh ({method}) did not converge to tol={tol} for k={k} levels "
            f"({len(exc.eigenvalues)} converged, {target.products} products); raise "
            "max_iterations or tol, or pass v0"
        ) from exc
    except _ProductLimit:
        raise ConvergenceError(
            f"eigsh ({method}) did not converge to tol={tol} for k={k} levels within "
            f"max_iterations={max_iterations} matrix-vector products; raise max_iterations "
            "or tol, or pass v0"
        ) from None
    except sla.ArpackError as exc:
        found = re.search(r"error (-?\d+)", str(exc))
        code = found.group(1) if found else "?"
        raise ConvergenceError(
            f"the eigensolver broke down: eigsh ({method}) could not build its Krylov basis "
            f"(ARPACK error {code}), which happens when matrix elements are so large that "
            "products overflow double precision (parameters near 1e300, say). Use moderate "
            "parameter values, or method='dense' on a small space"
        ) from exc
    residuals = _residuals(inner, energies, vectors)
    return energies, vectors, residuals, target


def _lowest_outside(
    target: LinearOperator,
    basis: npt.NDArray[Any],
    sigma: float,
    tol: float,
    rng: np.random.Generator,
    maxiter: int | None,
) -> tuple[float, npt.NDArray[Any]]:
    """Lowest eigenpair of ``H + σ B B†``: with ``σ`` above the spread of the levels in
    ``B``, the lowest level of ``H`` not yet in ``B``."""
    dim = target.shape[0]

    def shifted(x: npt.NDArray[Any]) -> Any:
        x = np.asarray(x).reshape(-1)
        return target.matvec(x).reshape(-1) + sigma * (basis @ (basis.conj().T @ x))

    op = LinearOperator((dim, dim), matvec=shifted, rmatvec=shifted, dtype=basis.dtype)
    e, v = sla.eigsh(op, k=1, which="SA", tol=tol, v0=rng.standard_normal(dim), maxiter=maxiter)
    w = v[:, 0] - basis @ (basis.conj().T @ v[:, 0])
    return float(e[0]), w / np.linalg.norm(w)


def _recover_missed_copies(
    target: LinearOperator,
    energies: npt.NDArray[np.float64],
    vectors: npt.NDArray[Any],
    tol: float,
    seed: int,
    maxiter: int | None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any]]:
    """Find degenerate copies a single-vector Krylov method skipped.

    A Krylov space grown from one vector holds one vector per eigenspace, so eigsh can
    miss the second copy of a degenerate level. Shift the levels found out of the way
    (:func:`_lowest_outside` on all but the highest) and ask for the lowest remaining
    level: anything below the highest level found is a missed copy and replaces it.
    Repeat until none is left.
    """
    dim = target.shape[0]
    k = energies.size
    if k < 2 or k >= dim - 1:
        return energies, vectors
    rng = np.random.default_rng(seed + 1)
    for _ in range(k):
        scale = max(1.0, float(np.max(np.abs(energies))))
        sigma = float(energies[-1] - energies[0]) + scale
        e, w = _lowest_outside(target, vectors[:, :-1], sigma, tol, rng, maxiter)
        if e >= energies[-1] - max(1e3 * tol, 1e-9) * scale:
            break
        energies = np.append(energies[:-1], e)
        vectors = np.column_stack([vectors[:, :-1], w])
        order = np.argsort(energies)
        energies, vectors = energies[order], vectors[:, order]
    return energies, vectors


def _probe_degeneracy(
    target: LinearOperator,
    dim: int,
    energies: npt.NDArray[np.float64],
    vectors: npt.NDArray[Any],
    tol: float,
    degeneracy_tol: float,
    seed: int,
    maxiter: int | None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any]]:
    """Add the ground level's degenerate copies (found by deflation), up to 16.

    The probe can also find a level *below* the one the solver returned (when the solver
    stalled on an excited level): the levels are kept sorted, so the lowest found is
    always reported first.
    """
    rng = np.random.default_rng(seed + 1)
    while energies.size < min(16, dim - 2):
        scale = max(1.0, abs(float(energies[0])))
        spread = float(energies[-1] - energies[0])
        e, w = _lowest_outside(target, vectors, spread + scale, tol, rng, maxiter)
        if e - energies[0] > degeneracy_tol * scale:
            break
        energies = np.append(energies, e)
        vectors = np.column_stack([vectors, w])
        order = np.argsort(energies, kind="stable")
        energies, vectors = energies[order], vectors[:, order]
    return energies, vectors


def _validate(
    k: int,
    method: str,
    tol: float,
    problem: Problem,
    v0: npt.ArrayLike | None = None,
    seed: object = 0,
    max_iterations: object = None,
) -> None:
    # One set of checks and messages for solvers, sweeps, model files and the CLI.
    SolverSettings(method=method, tol=tol, seed=seed, max_iterations=max_iterations)
    if v0 is not None:
        check_vector(problem.space, v0, "v0")
    if isinstance(k, bool) or not isinstance(k, int | np.integer):
        raise TypeError(f"k must be an integer; got {k!r}")
    if problem.dim == 0:
        from fockmill.spaces.checks import check_not_empty

        check_not_empty(problem.space, "an eigenvalue problem")
    if k < 1 or k > problem.dim:
        raise ValueError(f"k must be between 1 and the space's dimension {problem.dim}; got {k}")
    if not problem.is_square:
        raise ValueError(
            "eigenvalues need an operator from a space to itself; this problem maps "
            "between two spaces (drop target=)"
        )
    if not problem.is_hermitian:
        _check_hermitian(problem.expr)


def _pick(problem: Problem, k: int, method: str) -> str:
    if method == "auto":
        return choose_method(problem.estimate, k, problem.memory_limit)
    _check_fits(problem.estimate, method, k, problem.memory_limit)
    return method


def _store_matrix(problem: Problem, store_matrix: bool | None, k: int = 1) -> bool:
    """Whether the Rust Lanczos solvers would run on a stored matrix for ``k`` levels.

    The core decides (``NativeOperator.stores_matrix``, the same decision the solvers
    make): ``store_matrix`` True or False is obeyed; None stays matrix-free on the
    bipartite kernel (``cut > 0``, measured as fast as a stored matrix, whose build then
    costs extra: benchmarks/results/methods.txt, bench_matvec.txt) and otherwise stores
    the matrix when its build peak plus the solver's vectors fit in ``MEMORY_BUDGET`` of
    the memory limit."""
    return bool(
        problem.native.stores_matrix(
            levels=k,
            store=store_matrix,
            memory_limit=problem.memory_limit,
            threads=problem.pool,
        )
    )


def memory_plan(
    problem: Problem, k: int = 1, store_matrix: bool | None = None, *, v0_given: bool = False
) -> SolvePlan:
    """The memory plan of the Rust Lanczos solve of ``k`` levels (``method="lanczos"``,
    which ``"auto"`` picks above 500 states): the process's resident memory now plus
    what the core plans to add, from the same numbers its stored-or-matrix-free choice
    uses (``NativeOperator.memory_plan``). Preparing the plan prepares the operator's
    product tables, so that they count as resident. ``v0_given``: a start vector will
    be passed (held while a matrix is built)."""
    stored, matrix, build, vectors = _lanczos_target(problem).memory_plan(
        levels=k,
        store=store_matrix,
        memory_limit=problem.memory_limit,
        held=int(v0_given),
        threads=problem.pool,
    )
    return SolvePlan(
        stored=bool(stored),
        resident_bytes=resident_bytes(),
        matrix_bytes=int(matrix),
        build_bytes=int(build),
        vector_bytes=int(vectors),
    )


def native_csr(matrix: Any) -> Any:
    """A scipy CSR matrix copied into a native operator (products on the library's
    threads, without the GIL)."""
    import fockmill._native as _native

    data = np.ascontiguousarray(matrix.data)
    return _native.NativeOperator.from_csr(matrix.indptr, matrix.indices, data)


def _lanczos_target(problem: Problem) -> Any:
    """The operator the Rust solvers run on: a matrix handed to the problem
    (``Problem._from_parts``: sweeps), else the compiled operator."""
    ready = problem._ready_matrix
    return problem.native if ready is None else native_csr(ready)


def _native_ground(
    problem: Problem,
    tol: float,
    v0: npt.ArrayLike | None,
    seed: int,
    max_iterations: int | None,
    store_matrix: bool | None,
    hooks: Mapping[str, Any] | None = None,
) -> tuple[float, npt.NDArray[Any], float, int, int]:
    """The four-vector Lanczos in Rust: (energy, vector, residual, steps, products).
    Stored or matrix-free as the core decides from ``store_matrix`` and the memory
    limit (see :func:`_store_matrix`). ``hooks``: progress, snapshots and a resumed
    state (:func:`fockmill.problem.runs.native_hooks`)."""
    start = _start_vector(v0, problem, seed, mix_noise=False)
    # Each Lanczos step costs about two products (the second pass regenerates the
    # Krylov vectors), so a product budget allows half as many steps.
    max_steps = 400 if max_iterations is None else max(2, min(400, max_iterations // 2))
    restarts = 8 if max_iterations is None else max(0, max_iterations // (2 * max_steps) - 1)
    found = _lanczos_target(problem).lanczos_ground(
        tol=tol,
        max_steps=max_steps,
        max_restarts=restarts,
        seed=seed,
        start=start,
        threads=problem.pool,
        store=store_matrix,
        memory_limit=problem.memory_limit,
        **(hooks or {}),
    )
    if not found.converged:
        raise ConvergenceError(
            f"Lanczos reached a residual of {found.residual:.3e} after {found.products} "
            f"products, short of tol={tol}; raise max_iterations or tol, or pass v0"
        )
    return (
        float(found.energy),
        found.vector,
        float(found.residual),
        int(found.steps),
        int(found.products),
    )


def _lanczos_vectors(k: int) -> int:
    """Vectors the Rust Lanczos solvers hold at once (the core's ``solver_vectors``):
    four for one level; the thick-restart basis (``2k + 8``) plus one for several."""
    return 4 if k == 1 else 2 * k + 9


def _native_levels(
    problem: Problem,
    k: int,
    tol: float,
    v0: npt.ArrayLike | None,
    seed: int,
    max_iterations: int | None,
    store_matrix: bool | None,
    hooks: Mapping[str, Any] | None = None,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[Any], npt.NDArray[np.float64], int]:
    """Thick-restart Lanczos in Rust for ``k >= 2`` levels (every degenerate copy that
    fits in ``k``): (energies, vectors, residuals, products). Stored or matrix-free as
    for :func:`_native_ground`."""
    start = _start_vector(v0, problem, seed, mix_noise=False)
    # The native solver may finish a restart cycle with up to k more products (the
    # residual check of its k Ritz vectors) after its budget; keep that within
    # max_iterations, which counts every product.
    max_products = 20_000 if max_iterations is None else max(1, int(max_iterations) - k)
    found = _lanczos_target(problem).lanczos_levels(
        k,
        tol=tol,
        max_products=max_products,
        seed=seed,
        start=start,
        threads=problem.pool,
        store=store_matrix,
        memory_limit=problem.memory_limit,
        **(hooks or {}),
    )
    energies, residuals = found.energies, found.residuals
    if not found.converged:
        worst = int(np.argmax(residuals / np.maximum(1.0, np.abs(energies))))
        raise ConvergenceError(
            f"Lanczos (k={k}) reached a residual of {float(residuals[worst]):.3e} on level "
            f"{worst} after {found.products} products, short of tol={tol}; raise "
            "max_iterations or tol, or pass v0"
        )
    return (
        np.asarray(energies, dtype=np.float64),
        found.vectors,
        np.asarray(residuals),
        int(found.products),
    )


def _require_converged(
    method: str, energies: npt.NDArray[Any], residuals: npt.NDArray[Any], tol: float
) -> None:
    if method == "dense":
        return
    for i, (e, r) in enumerate(zip(energies, residuals, strict=True)):
        if not _converged(float(r), float(e), tol):
            raise ConvergenceError(
                f"{method}: level {i} (E = {float(e):.10g}) has residual ‖Hv − Ev‖ = "
                f"{float(r):.3e}, above 10·tol·max(1, |E|) for tol={tol}; raise "
                "max_iterations or tol"
            )


def _run_settings(
    method: str,
    tol: float,
    v0: npt.ArrayLike | None,
    seed: int,
    max_iterations: int | None,
    store_matrix: bool | None,
    **more: Any,
) -> dict[str, Any]:
    """The settings a checkpoint must match (everything that changes the numbers)."""
    return {
        "method": method,
        "tol": tol,
        "seed": seed,
        "max_iterations": max_iterations,
        "store_matrix": store_matrix,
        "v0": array_hash(v0),
        **more,
    }


def _checkpoint(
    problem: Problem,
    task: str,
    checkpoint: object,
    checkpoint_every: float,
    settings: Mapping[str, Any],
) -> Checkpoint | None:
    if checkpoint is None:
        return None
    if problem._ready_matrix is not None:
        raise ValueError(
            "checkpoint= needs a problem compiled from an expression (fm.prepare or "
            "expr, space); this one carries a matrix made elsewhere"
        )
    return open_checkpoint(
        checkpoint,
        checkpoint_every,
        task=task,
        space=problem.space,
        hamiltonian=hamiltonian_hash(problem.expr),
        settings=settings,
    )


def _levels_from(saved: CheckpointState, t0: float) -> Levels:
    """The finished result kept in a checkpoint."""
    energies = np.asarray(saved.numbers["energies"], dtype=np.float64)
    return Levels(
        energies=energies,
        vectors=saved.array("vectors"),
        residuals=np.asarray(saved.numbers["residuals"], dtype=np.float64),
        method=saved.texts["method"],
        products=saved.integers["products"],
        seconds=time.perf_counter() - t0,
        degeneracies=tuple(int(g) for g in saved.numbers["degeneracies"]),
    )


def _save_levels(checkpoint: Checkpoint | None, levels: Levels) -> None:
    if checkpoint is None:
        return
    checkpoint.save(
        status="finished",
        solver="result",
        integers={"products": levels.products},
        numbers={
            "energies": levels.energies,
            "residuals": levels.residuals,
            "degeneracies": np.asarray(levels.degeneracies, dtype=np.float64),
        },
        texts={"method": levels.method},
        vectors={"vectors": levels.vectors},
    )


def solve_levels(
    problem: Problem,
    k: int = 4,
    *,
    method: Method = "auto",
    tol: float = 1e-9,
    v0: npt.ArrayLike | None = None,
    seed: int = 0,
    max_iterations: int | None = None,
    store_matrix: bool | None = None,
    progress: ProgressOption = None,
    checkpoint: object = None,
    checkpoint_every: float = DEFAULT_CHECKPOINT_EVERY,
) -> Levels:
    """:func:`lowest_levels` on a prepared problem."""
    t0 = time.perf_counter()
    _validate(k, method, tol, problem, v0, seed, max_iterations)
    settings = _run_settings(method, tol, v0, seed, max_iterations, store_matrix, k=int(k))
    ck = _checkpoint(problem, "lowest_levels", checkpoint, checkpoint_every, settings)
    if ck is not None and ck.finished is not None:
        return _levels_from(ck.finished, t0)
    reporter = make_progress(progress, "lowest_levels")
    try:
        levels = _solve_levels(
            problem, k, method, tol, v0, seed, max_iterations, store_matrix, reporter, ck, t0
        )
    finally:
        if ck is not None:
            ck.abort()
        if reporter is not None:
            reporter.close()
    _save_levels(ck, levels)
    return levels


def _solve_levels(
    problem: Problem,
    k: int,
    method: str,
    tol: float,
    v0: npt.ArrayLike | None,
    seed: int,
    max_iterations: int | None,
    store_matrix: bool | None,
    reporter: Progress | None,
    ck: Checkpoint | None,
    t0: float,
) -> Levels:
    solver = "ground" if k == 1 else "levels"
    resuming = ck is not None and ck.running(solver) is not None
    chosen = "lanczos" if resuming else _pick(problem, k, method)
    if chosen == "lanczos":
        hooks = native_hooks(reporter, ck, solver)
        if k == 1:
            energy, vector, residual, _, products = _native_ground(
                problem, tol, v0, seed, max_iterations, store_matrix, hooks
            )
            energies = np.array([energy])
            vectors = vector[:, np.newaxis]
            residuals = np.array([residual])
        else:
            energies, vectors, residuals, products = _native_levels(
                problem, k, tol, v0, seed, max_iterations, store_matrix, hooks
            )
        if reporter is not None:
            reporter.update(step=products, products=products, residual=float(np.max(residuals)))
        return Levels(
            energies=energies,
            vectors=vectors,
            residuals=residuals,
            method="lanczos",
            products=products,
            seconds=time.perf_counter() - t0,
            degeneracies=_degeneracy_groups(energies, max(1e3 * tol, 1e-9)),
        )
    energies, vectors, residuals, target = _eigsh_levels(
        problem, k, chosen, tol, v0, max_iterations, seed, reporter
    )
    _require_converged(chosen, energies, residuals, tol)
    products = 0 if target is None else target.products
    degeneracy_tol = max(1e3 * tol, 1e-9)
    return Levels(
        energies=np.asarray(energies, dtype=np.float64),
        vectors=vectors,
        residuals=np.asarray(residuals, dtype=np.float64),
        method=chosen,
        products=products,
        seconds=time.perf_counter() - t0,
        degeneracies=_degeneracy_groups(np.asarray(energies), degeneracy_tol),
    )


def _warn_cutoff(space: Any, vector: npt.NDArray[Any], threshold: float | None) -> None:
    if threshold is None or not hasattr(space, "binding_cutoffs"):
        return
    # Only truncating cutoffs (>= 2, below what the total allows) can be flagged: with
    # none, the weights are not computed at all (one pass over the space saved).
    if not any(b and c >= 2 for b, c in zip(space.binding_cutoffs(), space.cutoffs, strict=True)):
        return
    weights = top_level_weights(space, vector)
    warn_cutoff_weights(space, weights, threshold, "the ground state", stacklevel=4)


def _ground_from(saved: CheckpointState, t0: float) -> GroundState:
    """The finished result kept in a checkpoint."""
    degeneracy = saved.integers["degeneracy"]
    return GroundState(
        energy=float(saved.numbers["energy"][0]),
        vector=saved.array("vector"),
        residual=float(saved.numbers["residual"][0]),
        method=saved.texts["method"],
        products=saved.integers["products"],
        iterations=saved.integers["iterations"],
        seconds=time.perf_counter() - t0,
        degeneracy=None if degeneracy < 0 else degeneracy,
        converged=True,
    )


def _save_ground(checkpoint: Checkpoint | None, found: GroundState) -> None:
    if checkpoint is None:
        return
    checkpoint.save(
        status="finished",
        solver="result",
        integers={
            "products": found.products,
            "iterations": found.iterations,
            "degeneracy": -1 if found.degeneracy is None else found.degeneracy,
        },
        numbers={"energy": [found.energy], "residual": [found.residual]},
        texts={"method": found.method},
        vectors={"vector": found.vector},
    )


def solve_ground(
    problem: Problem,
    *,
    method: Method = "auto",
    tol: float = 1e-9,
    v0: npt.ArrayLike | None = None,
    seed: int = 0,
    max_iterations: int | None = None,
    cutoff_warning: float | None = 1e-6,
    store_matrix: bool | None = None,
    progress: ProgressOption = None,
    checkpoint: object = None,
    checkpoint_every: float = DEFAULT_CHECKPOINT_EVERY,
) -> GroundState:
    """:func:`ground_state` on a prepared problem."""
    t0 = time.perf_counter()
    _validate(1, method, tol, problem, v0, seed, max_iterations)
    settings = _run_settings(method, tol, v0, seed, max_iterations, store_matrix)
    ck = _checkpoint(problem, "ground_state", checkpoint, checkpoint_every, settings)
    if ck is not None and ck.finished is not None:
        found = _ground_from(ck.finished, t0)
    else:
        reporter = make_progress(progress, "ground_state")
        try:
            found = _solve_ground(
                problem, method, tol, v0, seed, max_iterations, store_matrix, reporter, ck, t0
            )
        finally:
            if ck is not None:
                ck.abort()
            if reporter is not None:
                reporter.close()
        _save_ground(ck, found)
    _warn_cutoff(problem.space, found.vector, cutoff_warning)
    return found


def _solve_ground(
    problem: Problem,
    method: str,
    tol: float,
    v0: npt.ArrayLike | None,
    seed: int,
    max_iterations: int | None,
    store_matrix: bool | None,
    reporter: Progress | None,
    ck: Checkpoint | None,
    t0: float,
) -> GroundState:
    resuming = ck is not None and ck.running("ground") is not None
    chosen = "lanczos" if resuming else _pick(problem, 1, method)
    if chosen == "lanczos":
        energy, vector, residual, steps, products = _native_ground(
            problem,
            tol,
            v0,
            seed,
            max_iterations,
            store_matrix,
            native_hooks(reporter, ck, "ground"),
        )
        if reporter is not None:
            reporter.update(step=steps, products=products, residual=residual)
        return GroundState(
            energy=energy,
            vector=vector,
            residual=residual,
            method="lanczos",
            products=products,
            iterations=steps,
            seconds=time.perf_counter() - t0,
            degeneracy=None,
            converged=True,
        )
    degeneracy_tol = max(1e3 * tol, 1e-9)
    products = 0
    if chosen == "dense":
        energies, vectors, residuals, _ = _eigsh_levels(
            problem, min(17, problem.dim), chosen, tol, v0, max_iterations, seed
        )
    else:
        energies, vectors, _, target = _eigsh_levels(
            problem, 1, chosen, tol, v0, max_iterations, seed, reporter
        )
        assert target is not None
        ncv = min(problem.dim, 20)
        maxiter = None if max_iterations is None else max(1, max_iterations // ncv)
        energies, vectors = _probe_degeneracy(
            target, problem.dim, energies, vectors, tol, degeneracy_tol, seed, maxiter
        )
        residuals = _residuals(target.inner, energies, vectors)
        products = target.products
    _require_converged(chosen, energies[:1], residuals[:1], tol)
    degeneracy = _degeneracy_groups(energies, degeneracy_tol)[0]
    if reporter is not None:
        reporter.update(step=products, products=products, residual=float(residuals[0]))
    return GroundState(
        energy=float(energies[0]),
        vector=vectors[:, 0],
        residual=float(residuals[0]),
        method=chosen,
        products=products,
        iterations=products,
        seconds=time.perf_counter() - t0,
        degeneracy=int(degeneracy),
        converged=True,
    )
