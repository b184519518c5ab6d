"""The prepared problem: an expression compiled on a space once, shared by every path.

Validating an expression against a space, compiling its terms, building its product
kernel, starting its thread pool and estimating its memory happen once, in
:func:`prepare`. Builds, matrix-free operators, products, solvers, observables and
sweeps all take the resulting :class:`Problem`, so a backend that calls products
thousands of times pays for the preparation once.
"""

from __future__ import annotations

import copy
from functools import cached_property
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator

import fockmill._native as _native
from fockmill.algebra.expressions import LadderExpr, as_expr
from fockmill.exceptions import SizeLimitError, SymmetryError
from fockmill.problem.compile import compile_operator
from fockmill.problem.eigensolve import choose_method, memory_plan, solve_ground, solve_levels
from fockmill.problem.memory import MemoryEstimate, SolvePlan, estimate_native
from fockmill.settings.checks import check_memory_limit, check_threads
from fockmill.spaces.checks import check_space
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

if TYPE_CHECKING:
    from fockmill.problem.eigensolve import GroundState, Levels

__all__ = [
    "LadderOperator",
    "Problem",
    "as_problem",
    "prepare",
    "prepare_observables",
    "problem_and_arguments",
]


class Problem:
    """An expression compiled on a space, with its thread pool and memory estimate.

    Create it with :func:`prepare`. Every public function that takes ``(expr, space)``
    also takes a ``Problem`` in their place and then reuses its compiled operator.

    Attributes
    ----------
    expr : LadderExpr
        The operator.
    space : FockSpace
        The space it acts on (columns).
    target : FockSpace
        The space products land in (rows); ``space`` unless given.
    threads : int or None
        Worker threads (None: all cores, or ``RAYON_NUM_THREADS``).
    memory_limit : int or None
        Bytes builds and solves may plan to use (None: the memory available then).
    pool : fockmill._native.NativePool
        The thread pool every native call of this problem runs on.
    native : fockmill._native.NativeOperator
        The compiled operator; its product kernel is built once and reused.
    shape : tuple of int
        ``(target.dim, space.dim)``.
    dtype : numpy.dtype
        ``float64`` when every coefficient is real, else ``complex128``.
    products : int
        Vectors multiplied through :meth:`matvec` / :meth:`matmat` so far.
    """

    def __init__(
        self,
        expr: Any,
        space: Any,
        *,
        target: Any = None,
        threads: int | None = None,
        memory_limit: int | None = None,
    ) -> None:
        self.expr: LadderExpr = as_expr(expr)
        self.space = check_space(space)
        # An equal target is the square case (same compiled operator, Hermitian checks).
        self.target = self.space if target is None or target == self.space else target
        self.threads = check_threads(threads)
        self.memory_limit = check_memory_limit(memory_limit)
        self.native = compile_operator(self.expr, self.space, target)
        self.pool = _native.NativePool(self.threads)
        self.shape: tuple[int, int] = (int(self.target.dim), int(self.space.dim))
        self.dtype = np.dtype(np.float64 if self.native.is_real else np.complex128)
        self.products = 0
        self._ready_matrix: sp.csr_array | None = None

    @classmethod
    def _from_parts(
        cls,
        expr: Any,
        space: Any,
        *,
        matrix: sp.csr_array | None = None,
        pool: Any = None,
        threads: int | None = None,
        estimate: MemoryEstimate | None = None,
    ) -> Problem:
        """Internal hook (sweeps): a problem built around parts made elsewhere.

        ``matrix``: its CSR matrix, ready-made (a sweep assembles it from the model's
        shared sparsity pattern); :meth:`matrix` returns it instead of building, and
        every stored-matrix method (dense, eigsh, the Rust Lanczos solvers) solves on
        it. ``pool``: a ``NativePool`` kept by the caller (with ``threads`` its size).
        ``estimate``: a memory estimate made once for many points. The expression is
        still validated and compiled (the matrix-free methods use it).
        """
        problem = cls(expr, space)  # threads=None: rayon's global pool, no new threads
        problem.threads = check_threads(threads)
        if pool is not None:
            problem.pool = pool
        elif problem.threads is not None:
            problem.pool = _native.NativePool(problem.threads)
        if matrix is not None:
            if matrix.shape != problem.shape:
                raise ValueError(
                    f"the matrix has shape {matrix.shape}, the problem {problem.shape}"
                )
            problem._ready_matrix = matrix
        if estimate is not None:
            problem.__dict__["estimate"] = estimate  # the cached_property's slot
        return problem

    def with_options(
        self, *, threads: int | None = None, memory_limit: int | None = None
    ) -> Problem:
        """A copy sharing the compiled operator, with other threads or memory limit."""
        clone = copy.copy(self)
        if threads is not None and check_threads(threads) != self.threads:
            # A new pool only for a different thread count: repeated calls with the
            # problem's own count reuse its threads.
            clone.threads = check_threads(threads)
            clone.pool = _native.NativePool(clone.threads)
        if memory_limit is not None:
            clone.memory_limit = check_memory_limit(memory_limit)
        clone.products = 0
        return clone

    # -- facts -------------------------------------------------------------------------

    @property
    def dim(self) -> int:
        """Dimension of ``space`` (the number of columns)."""
        return self.shape[1]

    @property
    def is_real(self) -> bool:
        """Whether every coefficient is real (matrices are then ``float64``)."""
        return bool(self.native.is_real)

    @property
    def is_square(self) -> bool:
        """Whether products land in the same space (``target`` is ``space``)."""
        return self.target is self.space

    @cached_property
    def is_hermitian(self) -> bool:
        """Whether the expression equals its adjoint (and the problem is square)."""
        return self.is_square and self.expr.is_hermitian()

    @cached_property
    def estimate(self) -> MemoryEstimate:
        """Sizes of the CSR matrix and of one vector, estimated once (see
        :func:`fockmill.estimate_memory`)."""
        return estimate_native(self.native, self.shape, 2048, self.pool)

    def memory_budget(self) -> int | None:
        """Bytes this problem may plan to use: ``memory_limit``, else the memory
        available now (None when unknown)."""
        if self.memory_limit is not None:
            return self.memory_limit
        from fockmill.problem.memory import available_memory

        return available_memory()

    # -- products ----------------------------------------------------------------------

    def _checked(self, x: npt.ArrayLike, block: bool) -> npt.NDArray[Any]:
        arr = np.asarray(x)
        if arr.dtype.kind not in "fciu" or arr.dtype.kind == "b":
            raise TypeError(
                f"products need a float or complex array; got dtype {arr.dtype}. Convert "
                "with numpy.asarray(x, dtype=float)"
            )
        n = self.shape[1]
        ok = arr.ndim == 2 and arr.shape[0] == n if block else arr.shape == (n,)
        if not ok:
            want = f"({n}, k)" if block else f"({n},)"
            raise ValueError(
                f"the vector has shape {arr.shape} but this operator needs shape {want}: "
                f"the space's dimension is {n}"
            )
        dtype = np.complex128 if arr.dtype.kind == "c" else np.float64
        return np.ascontiguousarray(arr, dtype=dtype)

    def matvec(self, x: npt.ArrayLike) -> npt.NDArray[Any]:
        """``H x`` for ``x`` of shape ``(dim,)``, float64 or complex128.

        Returns
        -------
        numpy.ndarray
            Shape ``(target.dim,)``; complex128 when ``x`` or the operator is complex.
        """
        v = self._checked(x, block=False)
        self.products += 1
        return self.native.matvec(v, threads=self.pool)  # type: ignore[no-any-return]

    def matmat(self, x: npt.ArrayLike) -> npt.NDArray[Any]:
        """``H X`` for a block ``X`` of shape ``(dim, k)``."""
        v = self._checked(x, block=True)
        self.products += v.shape[1]
        return self.native.matmat(v, threads=self.pool)  # type: ignore[no-any-return]

    # -- matrices and operators --------------------------------------------------------

    def check_build_fits(self) -> None:
        """Refuse (``SizeLimitError``) when the CSR build would exceed the budget."""
        estimate = self.estimate
        limit = self.memory_budget()
        if limit is not None and estimate.build_peak_bytes > limit:
            from fockmill.problem.memory import size_limit_message

            raise SizeLimitError(
                size_limit_message(
                    "building the sparse matrix",
                    estimate.build_peak_bytes,
                    limit,
                    "use fm.build_operator(...) for matrix-free products or "
                    "fm.ground_state(..., method='lanczos', store_matrix=False), or raise "
                    "memory_limit",
                    given=self.memory_limit is not None,
                    details=str(estimate),
                )
            )

    def matrix(self, *, index_dtype: type[np.int32] | type[np.int64] | None = None) -> sp.csr_array:
        """The matrix as a canonical ``scipy.sparse.csr_array`` (see
        :func:`fockmill.build_matrix`)."""
        if index_dtype not in (None, np.int32, np.int64):
            raise TypeError("index_dtype must be numpy.int32, numpy.int64 or None")
        ready = self._ready_matrix
        if ready is not None and index_dtype in (None, ready.indices.dtype.type):
            return ready
        self.check_build_fits()
        parts = self.native.build_csr(threads=self.pool, force_wide=index_dtype is np.int64)
        if index_dtype is np.int32 and parts.indices.dtype != np.int32:
            raise SizeLimitError(
                f"the matrix has {parts.indices.size:,} entries for dim {self.dim:,}: too many "
                "for int32 indices; use index_dtype=numpy.int64 or None"
            )
        matrix = sp.csr_array(
            (parts.data, parts.indices, parts.indptr), shape=self.shape, copy=False
        )
        matrix.has_sorted_indices = True
        matrix.has_canonical_format = True
        return matrix

    def operator(self) -> LadderOperator:
        """A matrix-free ``scipy.sparse.linalg.LinearOperator`` sharing this problem's
        compiled operator and thread pool."""
        return LadderOperator(self)

    # -- solvers -----------------------------------------------------------------------

    def choose_method(self, k: int = 1) -> str:
        """The method ``method="auto"`` uses for ``k`` levels (see
        :func:`fockmill.choose_method`)."""
        return choose_method(self.estimate, k, self.memory_limit)

    def memory_plan(
        self, k: int = 1, *, store_matrix: bool | None = None, v0_given: bool = False
    ) -> SolvePlan:
        """The memory plan of a Lanczos solve of ``k`` levels (``method="lanczos"``,
        which ``"auto"`` picks above 500 states) with this ``store_matrix``: the
        process's resident memory now plus what the solve adds, the numbers its
        stored-or-matrix-free choice compares with the memory limit.

        Examples
        --------
        >>> import fockmill as fm
        >>> space = fm.FockSpace(modes=3, cutoff=2, total=2)
        >>> h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
        >>> plan = fm.prepare(h, space).memory_plan(store_matrix=False)
        >>> plan.stored, plan.vector_bytes
        (False, 192)
        """
        return memory_plan(self, k, store_matrix, v0_given=v0_given)

    def ground_state(self, **options: Any) -> GroundState:
        """The lowest eigenpair; ``options`` as :func:`fockmill.ground_state`."""
        return solve_ground(self, **options)

    def lowest_levels(self, k: int = 4, **options: Any) -> Levels:
        """The ``k`` lowest eigenpairs; ``options`` as :func:`fockmill.lowest_levels`."""
        return solve_levels(self, k, **options)

    def __repr__(self) -> str:
        return (
            f"Problem({self.expr.term_count()} terms on {self.space!r}, shape={self.shape}, "
            f"dtype={self.dtype}, threads={self.threads})"
        )


def prepare(
    expr: LadderExpr,
    space: Any,
    *,
    target: Any = None,
    threads: int | None = None,
    memory_limit: int | None = None,
) -> Problem:
    """Compile ``expr`` on ``space`` once, for every later build, product and solve.

    Parameters
    ----------
    expr : LadderExpr
        The operator (plain numbers mean multiples of the identity).
    space : FockSpace
        The basis it acts on.
    target : FockSpace, optional
        The space products land in (default: ``space``).
    threads : int, optional
        Worker threads for every build and product (None or 0: all cores). The pool is
        started once and kept.
    memory_limit : int, optional
        Bytes builds and solves may plan to use (default: the memory available then).

    Returns
    -------
    Problem

    Raises
    ------
    ChargeError
        A term changes the conserved charge of the space.
    ModeIndexError
        A term acts on a mode the space does not have.
    TypeError
        For arguments of the wrong type.

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> problem = fm.prepare(fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0), space)
    >>> problem.matvec(np.ones(space.dim)).round(3).tolist()
    [1.414, 2.828, 1.414]
    >>> round(problem.ground_state().energy, 6)
    -2.0
    """
    return Problem(expr, space, target=target, threads=threads, memory_limit=memory_limit)


def as_problem(
    expr: Any,
    space: Any = None,
    *,
    threads: int | None = None,
    memory_limit: int | None = None,
    target: Any = None,
) -> Problem:
    """``expr`` if it is a :class:`Problem` (then ``space`` must be omitted or the same),
    else ``prepare(expr, space, ...)``. Explicit ``threads``/``memory_limit`` given with a
    Problem override its own for this call only."""
    if isinstance(expr, Problem):
        if space is not None and space != expr.space:
            raise ValueError(
                "a prepared Problem already carries its space; pass the Problem alone or "
                "prepare the expression again on the other space"
            )
        if target is not None and target != expr.target:
            raise ValueError("a prepared Problem already carries its target space")
        if threads is None and memory_limit is None:
            return expr
        return expr.with_options(threads=threads, memory_limit=memory_limit)
    if space is None:
        raise TypeError(
            "missing the space: pass (expr, space) or a Problem from fm.prepare(expr, space)"
        )
    return prepare(expr, space, target=target, threads=threads, memory_limit=memory_limit)


def _is_space(obj: object) -> bool:
    return isinstance(obj, FockSpace | SymmetricSpace)


def problem_and_arguments(
    first: Any,
    space: Any,
    rest: tuple[Any, ...],
    *,
    threads: int | None = None,
    memory_limit: int | None = None,
    target: Any = None,
) -> tuple[Problem, tuple[Any, ...]]:
    """The prepared problem of a public call ``f(H, space, *rest)`` or ``f(problem, *rest)``.

    A :class:`Problem` carries its space, so ``f(problem, a, b)`` written positionally
    puts ``a`` in the ``space`` slot: the essential arguments move one place left.
    ``rest`` holds the essential arguments after the space, in order (None where not
    given); the returned tuple is ``rest`` realigned.
    """
    if isinstance(first, Problem) and space is not None and not _is_space(space):
        if rest and rest[-1] is not None:
            raise TypeError(
                "too many positional arguments after a Problem (it carries its space); pass "
                "the options by keyword"
            )
        rest = (space, *rest[:-1])
        space = None
    problem = as_problem(first, space, threads=threads, memory_limit=memory_limit, target=target)
    return problem, rest


def _invariant(space: SymmetricSpace, expr: LadderExpr) -> bool:
    try:
        space.check_invariant(expr)
    except SymmetryError:
        return False
    return True


def prepare_observables(
    observables: Any, problem: Problem, *, what: str = "observables"
) -> dict[str, Problem]:
    """Each observable compiled once on ``problem``'s space, sharing its thread pool.

    On a symmetry sector an observable that the group does not leave invariant (the
    occupation of one site in a momentum sector) is replaced by its group average, which
    has the same expectation value in every sector state.

    Raises
    ------
    TypeError
        ``observables`` is not a mapping of names to expressions.
    ChargeError, SymmetryError, ModeIndexError
        An observable leaves the space's sector or acts on a missing mode.
    """
    from collections.abc import Mapping

    if observables is None:
        return {}
    if not isinstance(observables, Mapping):
        raise TypeError(
            f"{what} must be a mapping of names to expressions, e.g. "
            "{'n0': fm.number(0)}; got " + type(observables).__name__
        )
    out: dict[str, Problem] = {}
    for name, expr in observables.items():
        if not isinstance(name, str):
            raise TypeError(f"observable names must be strings; got {name!r}")
        if isinstance(expr, Problem):  # already compiled (e.g. the Hamiltonian itself)
            out[name] = as_problem(expr, problem.space)
            continue
        e = as_expr(expr)
        space = problem.space
        if isinstance(space, SymmetricSpace) and not _invariant(space, e):
            # In a sector state a non-invariant observable has the expectation of its
            # group average, which is invariant (SymmetricSpace.symmetrize).
            e = space.symmetrize(e)
        out[name] = Problem._from_parts(e, space, pool=problem.pool, threads=problem.threads)
    return out


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
        y = self.problem.native.matvec(self._vector(x).reshape(-1), threads=self.problem.pool)
        return y.reshape(-1, 1) if x.ndim == 2 else y  # type: ignore[no-any-return]

    def _matmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self.problem.native.matmat(self._vector(x), threads=self.problem.pool)  # type: ignore[no-any-return]

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
                from fockmill.problem.between import compile_between

                self._adjoint_op = compile_between(
                    adj, self.problem.target, self.problem.space, project=True
                )
        return self._adjoint_op

    def _rmatvec(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += 1
        y = self._adjoint_native().matvec(self._vector(x).reshape(-1), threads=self.problem.pool)
        return y.reshape(-1, 1) if x.ndim == 2 else y  # type: ignore[no-any-return]

    def _rmatmat(self, x: npt.NDArray[Any]) -> npt.NDArray[Any]:
        self.products += x.shape[1]
        return self._adjoint_native().matmat(self._vector(x), threads=self.problem.pool)  # type: ignore[no-any-return]

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
