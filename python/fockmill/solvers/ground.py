"""Ground states and lowest levels from an expression and a space, or a prepared problem."""

from __future__ import annotations

import os
from typing import Any

import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr
from fockmill.problem.eigensolve import GroundState, Levels, Method, solve_ground, solve_levels
from fockmill.problem.problem import Problem, as_problem
from fockmill.settings.progress import ProgressOption
from fockmill.store.checkpoint import DEFAULT_CHECKPOINT_EVERY

__all__ = ["ground_state", "lowest_levels"]


def lowest_levels(
    expr: LadderExpr | Problem,
    space: Any = None,
    k: int = 4,
    *,
    method: Method = "auto",
    tol: float = 1e-9,
    v0: npt.ArrayLike | None = None,
    threads: int | None = None,
    seed: int = 0,
    max_iterations: int | None = None,
    memory_limit: int | None = None,
    store_matrix: bool | None = None,
    progress: ProgressOption = None,
    checkpoint: str | os.PathLike[str] | None = None,
    checkpoint_every: float = DEFAULT_CHECKPOINT_EVERY,
) -> Levels:
    """The ``k`` lowest eigenvalues and eigenvectors of a Hermitian expression.

    Parameters
    ----------
    expr : LadderExpr or Problem
        A Hermitian Hamiltonian, or a prepared problem (:func:`fockmill.prepare`; then
        ``space`` is omitted and its compiled operator is reused).
    space : FockSpace
        The basis (a sector, or the full truncated space).
    k : int
        Number of levels (1 <= k <= dim).
    method : {"auto", "dense", "csr", "operator", "lanczos"}
        ``"auto"`` chooses from the size and the free memory (see
        :func:`choose_method`). ``"lanczos"`` runs in Rust: for one level a four-vector
        Lanczos, for several a thick-restart Lanczos (Wu & Simon 2000) keeping
        ``2k + 9`` vectors that returns every copy of a degenerate level that fits in
        ``k``; both on a CSR matrix kept in Rust when it fits (``store_matrix``).
    tol : float
        Target relative accuracy; eigsh's ``tol``.
    v0 : array_like, optional
        Start vector (warm start from a nearby solution). It is normalised and mixed
        with seeded noise of relative weight ``START_NOISE`` (1e-4), so that a start
        vector without weight in the ground state's symmetry sector still converges to
        the true lowest levels.
    threads : int, optional
        Threads for builds and products (default: all cores).
    seed : int
        Seed of the start vector and of the noise: results are reproducible.
    max_iterations : int, optional
        Most matrix-vector products (approximately, for eigsh: it counts restarts of
        about ``max(2k+1, 20)`` products each).
    memory_limit : int, optional
        Bytes the solve may plan to use (default: available memory).
    store_matrix : bool or None
        For ``method="lanczos"``: run on a CSR matrix kept inside Rust instead of the
        matrix-free product; None uses the matrix-free product when it is as fast as a
        stored matrix (the bipartite kernel or a quadratic form read from its gathered
        hop table: ``Problem.native.fast_products``), and otherwise stores the matrix
        when it and the solver's vectors fit in the memory budget.
    progress : bool, callable or None
        Progress reports: None (default) draws a bar on stderr for runs longer than a
        few seconds in an interactive terminal (when tqdm is installed), True always,
        False never; a callable receives a :class:`~fockmill.ProgressRecord` after each
        step (Lanczos step, product) and at the end.
    checkpoint : str or path, optional
        A file where the run keeps its state (see Notes): written every
        ``checkpoint_every`` seconds and when the run finishes; a call with the same
        file continues where the last one stopped, or returns the finished result at
        once. A file written by another problem or other settings is refused.
    checkpoint_every : float
        Seconds between two writes of the state (default 300).

    Returns
    -------
    Levels

    Raises
    ------
    NotHermitianError
        When ``expr`` is not Hermitian.
    SizeLimitError
        When no method fits in memory.
    ConvergenceError
        When an iterative solver misses its tolerance: every returned level has
        ``‖Hv − Ev‖ <= 10·tol·max(1, |E|)``.
    CheckpointError
        When ``checkpoint`` holds another run's state (the difference is named) or is
        not a checkpoint.

    Notes
    -----
    With ``checkpoint=``, the Lanczos solvers in Rust (``method="lanczos"``, which
    ``"auto"`` picks above 500 states) save their resumable state: the ground state's
    three Lanczos vectors and coefficients at the end of a step, the levels' locked and
    kept basis at a thick restart. A resumed run repeats the arithmetic of an
    uninterrupted one and returns the same numbers. The other methods save only their
    result. The file is replaced atomically (temporary file, ``fsync``, rename), so a
    run killed at any moment leaves a usable checkpoint.

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=1, total=1)
    >>> h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    >>> fm.lowest_levels(h, space, k=2).energies.round(6).tolist()
    [-1.0, 1.0]
    """
    if isinstance(expr, Problem) and space is not None and not _is_space_like(space):
        # lowest_levels(problem, k) written positionally
        space, k = None, space
    problem = as_problem(expr, space, threads=threads, memory_limit=memory_limit)
    return solve_levels(
        problem,
        k,
        method=method,
        tol=tol,
        v0=v0,
        seed=seed,
        max_iterations=max_iterations,
        store_matrix=store_matrix,
        progress=progress,
        checkpoint=checkpoint,
        checkpoint_every=checkpoint_every,
    )


def _is_space_like(obj: object) -> bool:
    return hasattr(obj, "dim") and hasattr(obj, "modes")


def ground_state(
    expr: LadderExpr | Problem,
    space: Any = None,
    *,
    method: Method = "auto",
    tol: float = 1e-9,
    v0: npt.ArrayLike | None = None,
    threads: int | None = None,
    seed: int = 0,
    max_iterations: int | None = None,
    memory_limit: int | None = None,
    cutoff_warning: float | None = 1e-6,
    store_matrix: bool | None = None,
    progress: ProgressOption = None,
    checkpoint: str | os.PathLike[str] | None = None,
    checkpoint_every: float = DEFAULT_CHECKPOINT_EVERY,
) -> GroundState:
    """The lowest eigenpair of a Hermitian expression on a space.

    Parameters
    ----------
    expr : LadderExpr or Problem
        A Hermitian Hamiltonian, or a prepared problem (:func:`fockmill.prepare`; then
        ``space`` is omitted and its compiled operator is reused).
    space : FockSpace
        The basis.
    method : {"auto", "dense", "csr", "operator", "lanczos"}
        See :func:`lowest_levels`; ``"lanczos"`` keeps only four vectors in memory.
    tol : float
        Target: ``‖Hv − Ev‖ <= tol · max(1, |E|)`` (Lanczos), eigsh's ``tol`` otherwise.
    v0 : array_like, optional
        Start vector (warm start), mixed with a little seeded noise (see
        :func:`lowest_levels`).
    threads : int, optional
        Threads for builds and products (default: all cores).
    seed : int
        Seed of the start vector when ``v0`` is not given (results are reproducible
        for a given seed, whatever the thread count).
    max_iterations : int, optional
        Most matrix-vector products (see :func:`lowest_levels`).
    memory_limit : int, optional
        Bytes the solve may plan to use (default: available memory).
    store_matrix : bool or None
        For ``method="lanczos"``: run on a CSR matrix built and kept inside Rust
        instead of the matrix-free product. None (default) uses the matrix-free
        product when it is as fast as a stored matrix (the bipartite kernel or a
        quadratic form read from its gathered hop table: ``Problem.native.fast_products``;
        no build), and
        otherwise stores the matrix when it and four vectors fit in the memory budget
        (the plan :meth:`fockmill.Problem.memory_plan` gives).
    cutoff_warning : float or None
        Warn with :class:`~fockmill.exceptions.CutoffWarning` when a mode whose cutoff
        truncates (cutoff >= 2 and below what the total allows) holds more than this
        weight on its top level. Modes with cutoff 1 (two-level emitters, hard-core
        bosons) are never flagged. None disables the check.
    progress, checkpoint, checkpoint_every
        As for :func:`lowest_levels`: a checkpoint of a Lanczos run holds three vectors
        of the space's dimension (0.6 GB each at 77.6 M states).

    Returns
    -------
    GroundState

    Raises
    ------
    NotHermitianError, SizeLimitError, ConvergenceError, CheckpointError
        As for :func:`lowest_levels`.

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=1, total=1)
    >>> h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    >>> round(fm.ground_state(h, space).energy, 9)
    -1.0
    """
    problem = as_problem(expr, space, threads=threads, memory_limit=memory_limit)
    return solve_ground(
        problem,
        method=method,
        tol=tol,
        v0=v0,
        seed=seed,
        max_iterations=max_iterations,
        cutoff_warning=cutoff_warning,
        store_matrix=store_matrix,
        progress=progress,
        checkpoint=checkpoint,
        checkpoint_every=checkpoint_every,
    )
