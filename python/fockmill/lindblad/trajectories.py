"""Quantum-jump (Monte Carlo wave-function) trajectories of the Lindblad master equation.

Each trajectory evolves a state vector under the non-Hermitian ``K = H − (i/2) Σ_k γ_k
L_k† L_k`` (the same truncated product ``L_k† L_k`` as the master equation) until its
squared norm falls to a uniform random number ``r``; then jump ``k`` happens with
probability ``∝ γ_k ‖L_k ψ‖²``, the state becomes ``L_k ψ / ‖L_k ψ‖`` and a new ``r`` is
drawn (Dalibard, Castin & Mølmer, Phys. Rev. Lett. 68, 580 (1992); this waiting-time
form of their algorithm is the one reviewed by Plenio & Knight, Rev. Mod. Phys. 70,
101 (1998), Sec. III, cited from memory). Averages of ``⟨ψ|O|ψ⟩/⟨ψ|ψ⟩`` over
trajectories converge to ``Tr(O ρ(t))``.
"""

from __future__ import annotations

import concurrent.futures as cf
import math
import time
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp

from fockmill.algebra.expressions import as_expr
from fockmill.dynamics.drive import TimeDependent
from fockmill.dynamics.krylov import check_state, expectation_function, hermitian_map
from fockmill.exceptions import ChargeError, ConvergenceError
from fockmill.lindblad.evolution import check_times
from fockmill.lindblad.integrator import runge_kutta_8
from fockmill.lindblad.jumps import Jump, check_jumps
from fockmill.problem.problem import Problem, as_problem, prepare_observables
from fockmill.settings.checks import check_positive_int
from fockmill.settings.progress import ProgressOption, make_progress

__all__ = ["Trajectories", "sample_trajectories"]

#: Jump operators whose CSR matrix is at most this large are stored.
STORED_JUMP_BYTES = 256 * 2**20


@dataclass(frozen=True)
class Trajectories:
    """The result of :func:`sample_trajectories`.

    Attributes
    ----------
    times : numpy.ndarray
        The requested times.
    mean : dict of str to numpy.ndarray
        The average of ``⟨ψ|O|ψ⟩/⟨ψ|ψ⟩`` over the trajectories at each time.
    stderr : dict of str to numpy.ndarray
        Its standard error, ``std / sqrt(count)`` (sample standard deviation).
    samples : dict of str to numpy.ndarray
        Every trajectory's values, shape ``(count, len(times))``.
    jumps : numpy.ndarray
        Number of jumps of each trajectory.
    count : int
        Trajectories run.
    seed : int
        The seed; trajectory ``i`` draws from ``SeedSequence(seed, spawn_key=(i,))``.
    seconds : float
        Wall time.
    """

    times: npt.NDArray[np.float64]
    mean: dict[str, npt.NDArray[Any]]
    stderr: dict[str, npt.NDArray[Any]]
    samples: dict[str, npt.NDArray[Any]]
    jumps: npt.NDArray[np.int64]
    count: int
    seed: int
    seconds: float


@dataclass(frozen=True)
class _Task:
    """Everything a worker needs to run some trajectories (picklable)."""

    hamiltonian: Any
    space: Any
    jumps: tuple[Jump, ...]
    psi0: npt.NDArray[np.complex128]
    times: npt.NDArray[np.float64]
    observables: tuple[tuple[str, Any], ...]
    seed: int
    indices: tuple[int, ...]
    tol: float
    threads: int | None
    parts: tuple[tuple[Any, Any], ...] = ()  # time-dependent (H_k, f_k), if any


class _Runner:
    """The compiled pieces of one task: ``H``, each ``L`` and ``L†``, the observables."""

    def __init__(self, task: _Task, problem: Problem | None = None) -> None:
        self.task = task
        self.problem = problem or as_problem(task.hamiltonian, task.space, threads=task.threads)
        self.h = hermitian_map(self.problem, vectors=24, method="auto")
        space, pool = self.problem.space, self.problem.pool
        self.drive = TimeDependent(0.0, list(task.parts)) if task.parts else None
        self.part_maps = [
            hermitian_map(Problem._from_parts(h, space, pool=pool), vectors=24, method="auto")
            for h, _f in task.parts
        ]
        compiled = []
        for j in task.jumps:
            if j.rate == 0:
                continue
            fwd = Problem._from_parts(j.operator, space, pool=pool)
            bwd = Problem._from_parts(j.operator.adjoint(), space, pool=pool)
            compiled.append((j.rate, fwd, bwd, _stored(fwd), _stored(bwd)))
        self.decay = _decay_diagonal([(r, fm, bm) for r, _f, _b, fm, bm in compiled])
        # With the decay as a diagonal, L† is never applied: it is not kept.
        self.channels = [
            (r, _apply(f, fm), None if self.decay is not None else _apply(b, bm))
            for r, f, b, fm, bm in compiled
        ]
        obs = prepare_observables(dict(task.observables), self.problem)
        self.measure = {name: expectation_function(o) for name, o in obs.items()}
        self.hermitian = {name: o.expr.is_hermitian() for name, o in obs.items()}

    def rhs(self, now: float, psi: npt.NDArray[np.complex128]) -> npt.NDArray[np.complex128]:
        hpsi = self.h(psi)
        if self.drive is not None:
            for h, c in zip(self.part_maps, self.drive.coefficients(now), strict=True):
                if c != 0.0:
                    hpsi += c * h(psi)
        out = -1j * hpsi
        if self.decay is not None:
            out -= self.decay * psi
            return out  # type: ignore[no-any-return]
        for rate, fwd, bwd in self.channels:
            out -= (0.5 * rate) * bwd(fwd(psi))
        return out  # type: ignore[no-any-return]

    def run(self, index: int) -> tuple[dict[str, npt.NDArray[np.complex128]], int]:
        """One trajectory; its values at every time and its number of jumps."""
        from fockmill.settings.threads import blas_threads

        # Many small vector operations per step: one BLAS thread (see evolve).
        with blas_threads(1):
            return self._run(index)

    def _run(self, index: int) -> tuple[dict[str, npt.NDArray[np.complex128]], int]:
        task = self.task
        t = task.times
        rng = np.random.default_rng(np.random.SeedSequence(task.seed, spawn_key=(index,)))
        values = {name: np.zeros(t.size, dtype=np.complex128) for name in self.measure}
        psi = task.psi0.copy()
        now = 0.0
        k = 0
        jumps = 0

        def record(state: npt.NDArray[np.complex128]) -> None:
            nonlocal k
            norm2 = float(np.vdot(state, state).real)
            for name, f in self.measure.items():
                values[name][k] = f(state) / norm2
            k += 1

        while k < t.size and t[k] <= now:
            record(psi)
        t_end = float(t[-1])
        # A time-dependent H: one integrator per stretch between the coefficients' kinks.
        stops = [b for b in (self.drive.breakpoints() if self.drive else []) if 0 < b < t_end]
        threshold = rng.random()
        while k < t.size:
            bound = next((b for b in stops if b > now), t_end)
            jumped = False
            with runge_kutta_8(self.rhs, now, psi, bound, task.tol) as solver:
                while solver.status == "running":
                    message = solver.step()
                    if solver.status == "failed":
                        raise ConvergenceError(
                            f"trajectory {index}: the integrator failed: {message}"
                        )
                    t_old, t_new = solver.t_old, solver.t
                    norm_new = float(np.vdot(solver.y, solver.y).real)
                    jumps_here = norm_new < threshold
                    if not jumps_here and not (k < t.size and t[k] < t_new):
                        # Nothing to interpolate in this step: the dense output (extra
                        # stages and long-vector work, 40% of a trajectory) is not built.
                        while k < t.size and t[k] == t_new:
                            record(solver.y)
                        continue
                    dense = solver.dense_output()
                    t_jump = math.inf
                    if jumps_here:
                        t_jump = _crossing(dense, threshold, t_old, t_new)
                    while k < t.size and t[k] <= min(t_new, t_jump):
                        record(solver.y if t[k] == t_new else dense(float(t[k])))
                    if t_jump < math.inf:
                        psi = self._jump(dense(t_jump), rng, index)
                        now = t_jump
                        jumps += 1
                        threshold = rng.random()
                        jumped = True
                        break
                if not jumped:
                    psi, now = solver.y, bound
            if not jumped and bound >= t_end:
                break
        return values, jumps

    def _jump(
        self, psi: npt.NDArray[np.complex128], rng: np.random.Generator, index: int
    ) -> npt.NDArray[np.complex128]:
        """The normalised state after a jump from ``psi``: channel ``k`` is chosen with
        probability ``∝ γ_k ‖L_k ψ‖²``."""
        weights = np.array(
            [rate * float(np.vdot(y, y).real) for rate, fwd, _ in self.channels for y in [fwd(psi)]]
        )
        if weights.sum() <= 0:
            raise ConvergenceError(f"trajectory {index}: the norm decayed but no jump can happen")
        choice = int(rng.choice(len(weights), p=weights / weights.sum()))
        out = self.channels[choice][1](psi)
        return out / np.linalg.norm(out)  # type: ignore[no-any-return]


def _crossing(dense: Any, threshold: float, t_old: float, t_new: float) -> float:
    """The time in ``[t_old, t_new]`` where the squared norm of the dense output falls
    to ``threshold``."""
    from scipy.optimize import brentq

    def gap(tt: float) -> float:
        y = dense(tt)
        return float(np.vdot(y, y).real) - threshold

    return float(brentq(gap, t_old, t_new, xtol=1e-12 * max(1.0, t_new)))


def _decay_diagonal(decays: list[tuple[float, Any, Any]]) -> Any:
    """``½ Σ_k γ_k L_k† L_k`` (product of the truncated matrices) as the vector of its
    diagonal when it is diagonal (loss, pumping, dephasing of single modes: each
    ``L_k† L_k`` is a function of the occupations), else None (then each channel is
    applied in turn). One multiply per evaluation instead of two sparse products per
    jump. ``decays``: each rate with the stored matrices of ``L`` and ``L†`` (None when
    too large to store)."""
    if not decays or any(m is None for _r, f, b in decays for m in (f, b)):
        return None
    total = None
    for rate, fwd, bwd in decays:
        term = (0.5 * rate) * (bwd @ fwd)
        total = term if total is None else total + term
    total = sp.csr_array(total)
    diagonal = total.diagonal()
    if np.count_nonzero(total.data) != np.count_nonzero(diagonal):
        return None
    return diagonal


def _stored(problem: Problem) -> sp.csr_array | None:
    """The operator's complex CSR matrix when it takes at most ``STORED_JUMP_BYTES``."""
    if problem.estimate.csr_bytes <= STORED_JUMP_BYTES:
        return problem.matrix().astype(np.complex128)
    return None


def _apply(problem: Problem, matrix: sp.csr_array | None) -> Any:
    """``x -> L x``: the stored matrix, else the native matrix-free product."""
    if matrix is not None:
        return lambda x: matrix @ x
    native, pool = problem.native, problem.pool
    return lambda x: native.matvec(np.ascontiguousarray(x), threads=pool)


def _run_task(task: _Task) -> list[tuple[int, dict[str, npt.NDArray[np.complex128]], int]]:
    """Executor task: run the task's trajectories in order."""
    runner = _Runner(task)
    return [(i, *runner.run(i)) for i in task.indices]


def mean_and_stderr(samples: npt.NDArray[Any]) -> tuple[npt.NDArray[Any], npt.NDArray[Any]]:
    """The mean over trajectories (axis 0) and its standard error ``std / sqrt(count)``
    (sample standard deviation; real and imaginary parts separately); NaN for a single
    trajectory."""
    count = samples.shape[0]
    mean = samples.mean(axis=0)
    if count < 2:
        return mean, np.full(samples.shape[1:], np.nan)
    spread = np.std(samples.real, axis=0, ddof=1)
    if np.iscomplexobj(samples):
        spread = spread + 1j * np.std(samples.imag, axis=0, ddof=1)
    return mean, spread / math.sqrt(count)


def _check_picklable(parts: tuple[tuple[Any, Any], ...]) -> None:
    """A process pool sends each task with pickle: name the coefficient it cannot send."""
    import pickle

    for k, (_h, f) in enumerate(parts, start=1):
        try:
            pickle.dumps(f)
        except (pickle.PicklingError, AttributeError, TypeError):
            raise TypeError(
                f"the coefficient f_{k} of part {k} ({f!r}) cannot be sent to a process "
                "pool (it is not picklable, e.g. a lambda or a local function); use "
                "fm.piecewise_linear or a function defined at module level, or run with "
                "a Dask client (which sends closures) or executor=None"
            ) from None


def sample_trajectories(
    H: Any,
    space: Any = None,
    psi0: Any = None,
    times: Any = None,
    jumps: Any = None,
    *,
    observables: Mapping[str, Any] | None = None,
    count: int = 100,
    seed: int = 0,
    executor: Any = None,
    chunk: int | None = None,
    tol: float = 1e-8,
    threads: int | None = None,
    progress: ProgressOption = None,
) -> Trajectories:
    """Average observables over quantum-jump trajectories.

    Parameters
    ----------
    H : LadderExpr, Problem or TimeDependent
        Hermitian Hamiltonian (a prepared problem carries its space: ``space=None``), or
        a :class:`fockmill.TimeDependent` ``H(t) = H0 + Σ_k f_k(t) H_k`` (each part
        compiled once per chunk; the integrator ends a step on every breakpoint of the
        coefficients; on a process pool the coefficients must be picklable, e.g.
        :func:`fockmill.piecewise_linear` or module-level functions).
    space : FockSpace
        The space of the state vectors; every jump must map it into itself (a space
        without ``total`` for loss or pumping).
    psi0 : array_like
        The normalised initial state, shape ``(dim,)``.
    times : array_like
        Non-decreasing times >= 0 to record.
    jumps : sequence of Jump
        The dissipation channels.
    observables : dict of str to LadderExpr
        Recorded as ``⟨ψ|O|ψ⟩ / ⟨ψ|ψ⟩`` on each trajectory.
    count : int
        Number of trajectories.
    seed : int
        Trajectory ``i`` draws its random numbers from
        ``numpy.random.SeedSequence(seed, spawn_key=(i,))``, so the result is the same
        for any executor and any number of workers.
    executor : concurrent.futures.Executor or dask.distributed.Client, optional
        Runs chunks of trajectories (``executor.submit(fn, task)``); None runs them here,
        one after the other. Workers compile the problem once per chunk.
    chunk : int, optional
        Trajectories per submitted task (default: ``count`` split into about 16 tasks).
    tol : float
        Relative and absolute tolerance of the integrator (DOP853) between jumps.
    threads : int, optional
        Native threads per product (in executor workers default 1).
    progress : bool, callable or None
        Progress reports (see :func:`fockmill.lowest_levels`): a record after each
        trajectory (with an executor: after each finished chunk); the bar counts
        trajectories.

    Returns
    -------
    Trajectories

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> space = fm.FockSpace(modes=1, cutoff=1)
    >>> tr = fm.sample_trajectories(fm.number(0), space, np.array([0.0, 1.0]), [0.0, 1.0],
    ...                             [fm.loss(0, 1.0)], observables={"n": fm.number(0)},
    ...                             count=400, seed=1)
    >>> bool(abs(tr.mean["n"][1] - np.exp(-1.0)) < 3 * tr.stderr["n"][1])  # e^{−γt}
    True
    """
    t_start = time.perf_counter()
    if psi0 is None or times is None or jumps is None:
        raise TypeError("sample_trajectories needs psi0=, times= and jumps=")
    count = check_positive_int("count", count)
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise TypeError(f"seed must be a non-negative integer; got {seed!r}")
    if not (isinstance(tol, float | int) and np.isfinite(tol) and 0 < tol < 1):
        raise ValueError(f"tol must be a number in (0, 1), e.g. 1e-8; got {tol!r}")
    drive = H if isinstance(H, TimeDependent) else None
    problem = as_problem(drive.H0 if drive else H, space, threads=threads)
    parts = tuple(
        (h.expr if isinstance(h, Problem) else h, f) for h, f in (drive.parts if drive else ())
    )
    for k, (h, _f) in enumerate(parts, start=1):
        try:
            Problem._from_parts(h, problem.space, pool=problem.pool)
        except ChargeError as exc:
            raise ChargeError(
                f"part {k} (H_{k}) of the time-dependent Hamiltonian leaves the space's "
                f"sector ({exc}); pass fm.FockSpace without total"
            ) from None
    jump_list = check_jumps(jumps, problem.space.modes)
    for k, j in enumerate(jump_list):
        try:
            Problem._from_parts(j.operator, problem.space, pool=problem.pool)
        except ChargeError as exc:
            raise ChargeError(
                f"jumps[{k}] ({j.label}) leaves the space's sector ({exc}); trajectories "
                "need a space every jump maps into itself: pass fm.FockSpace without total"
            ) from None
    psi = check_state(problem.space, psi0, "psi0").astype(np.complex128)
    t = check_times(times)
    obs = tuple((name, as_expr(op)) for name, op in (observables or {}).items())
    prepare_observables(dict(obs), problem)  # checks names, types and modes up front
    if chunk is None:
        chunk = max(1, math.ceil(count / 16))
    chunk = check_positive_int("chunk", chunk)
    groups = [tuple(range(i, min(i + chunk, count))) for i in range(0, count, chunk)]

    def task(indices: tuple[int, ...], worker_threads: int | None) -> _Task:
        return _Task(
            problem.expr,
            problem.space,
            tuple(jump_list),
            psi,
            t,
            obs,
            int(seed),
            indices,
            float(tol),
            worker_threads,
            parts,
        )

    results: list[tuple[int, dict[str, npt.NDArray[np.complex128]], int]] = []
    if executor is not None and not hasattr(executor, "submit"):
        raise TypeError(
            "executor must have a submit method (a concurrent.futures.Executor or a "
            f"dask.distributed.Client); got {type(executor).__name__}"
        )
    reporter = make_progress(progress, "sample_trajectories", total=count, unit="trajectory")
    try:
        if executor is None:
            runner = _Runner(task((), problem.threads), problem)
            for i in range(count):
                results.append((i, *runner.run(i)))
                if reporter is not None:
                    reporter.update(step=len(results))
        else:
            worker_threads = 1 if threads is None else threads
            if isinstance(executor, cf.ProcessPoolExecutor):
                _check_picklable(parts)
            futures = [executor.submit(_run_task, task(g, worker_threads)) for g in groups]
            for f in futures:
                results.extend(f.result())
                if reporter is not None:
                    reporter.update(step=len(results))
    finally:
        if reporter is not None:
            reporter.close()
    results.sort(key=lambda r: r[0])
    names = [name for name, _ in obs]
    hermitian = {name: e.is_hermitian() for name, e in obs}
    samples: dict[str, npt.NDArray[Any]] = {}
    mean: dict[str, npt.NDArray[Any]] = {}
    stderr: dict[str, npt.NDArray[Any]] = {}
    for name in names:
        arr = np.array([r[1][name] for r in results])
        if hermitian[name]:
            arr = arr.real.copy()
        samples[name] = arr
        mean[name], stderr[name] = mean_and_stderr(arr)
    return Trajectories(
        times=t,
        mean=mean,
        stderr=stderr,
        samples=samples,
        jumps=np.array([r[2] for r in results], dtype=np.int64),
        count=count,
        seed=int(seed),
        seconds=time.perf_counter() - t_start,
    )
