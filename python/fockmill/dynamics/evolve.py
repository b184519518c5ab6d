"""Time evolution ψ(t) = exp(−iHt) ψ(0) by Krylov (Lanczos) propagation with step-size
control from the Krylov error estimate."""

from __future__ import annotations

import numbers
import os
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.linalg as sla

from fockmill.algebra.expressions import LadderExpr
from fockmill.dynamics.cfqm import Counters, Integrator
from fockmill.dynamics.drive import TimeDependent
from fockmill.dynamics.krylov import (
    as_float_array,
    check_common,
    check_positive,
    check_state,
    expectation_function,
    hermitian_map,
    subtract_scaled,
    top_weights,
    vector_norm,
    warn_tolerance_not_met,
    warn_top_weights,
)
from fockmill.exceptions import (
    ChargeError,
    ConvergenceError,
    ModeIndexError,
    SizeLimitError,
    SymmetryError,
)
from fockmill.problem.problem import (
    Problem,
    as_problem,
    prepare,
    prepare_observables,
    problem_and_arguments,
)
from fockmill.problem.runs import array_hash, hamiltonian_hash, open_checkpoint
from fockmill.settings.progress import Progress, ProgressOption, make_progress
from fockmill.settings.signatures import options_were_positional
from fockmill.settings.threads import blas_threads
from fockmill.store.checkpoint import DEFAULT_CHECKPOINT_EVERY, Checkpoint, CheckpointState

__all__ = ["Evolution", "evolve"]

#: Krylov vectors per step by default (fewer when memory is short).
DEFAULT_KRYLOV_DIM = 50
#: Full reorthogonalisation when the Krylov basis has at most this many entries; beyond,
#: the three-term recurrence alone (its loss of orthogonality leaves the Krylov
#: exponential accurate: Druskin & Knizhnerman 1991, USSR Comput. Math. Math. Phys. 31, 20)
#: and the O(m² dim) cost of reorthogonalising would rival the products.
REORTHOGONALIZE_MAX = 20_000_000
#: Local error estimates below this are round-off: accepted whatever the step.
ROUNDOFF = 1e-15


@dataclass(frozen=True)
class Evolution:
    """The result of :func:`evolve`.

    Attributes
    ----------
    times : numpy.ndarray
        The requested times (non-decreasing, >= 0).
    values : dict of str to numpy.ndarray
        ``⟨ψ(t)|O|ψ(t)⟩`` at each time for each observable; real when ``O`` is
        Hermitian, else complex.
    states : numpy.ndarray or None
        ``(dim, len(times))`` complex states when ``keep_states=True``, else None.
    final : numpy.ndarray
        ψ at the last requested time (complex, shape ``(dim,)``).
    top_weights : numpy.ndarray
        For each mode, the largest weight on its highest kept level over the recorded
        times (the truncation diagnostic); NaN for modes whose cutoff does not truncate
        (the conserved total caps them there) and for spaces without modes.
    steps : int
        Krylov steps taken (each builds one Krylov space).
    products : int
        Products with ``H``.
    method : str
        ``"csr"`` (stored matrix) or ``"operator"`` (matrix-free).
    error_estimate : float
        Sum of the local Krylov error estimates over the steps (a bound on ``‖ψ − ψ_exact‖``
        in the usual a posteriori sense).
    seconds : float
        Wall time.
    """

    times: npt.NDArray[np.float64]
    values: dict[str, npt.NDArray[Any]]
    states: npt.NDArray[np.complex128] | None
    final: npt.NDArray[np.complex128]
    top_weights: npt.NDArray[np.float64]
    steps: int
    products: int
    method: str
    error_estimate: float
    seconds: float


def _check_krylov_options(krylov_dim: object, keep_states: object) -> None:
    """``krylov_dim`` (None or an integer >= 2) and ``keep_states`` (a bool)."""
    if krylov_dim is not None:
        if isinstance(krylov_dim, bool) or not isinstance(krylov_dim, numbers.Integral):
            raise TypeError(f"krylov_dim must be an integer >= 2 or None; got {krylov_dim!r}")
        if krylov_dim < 2:
            raise ValueError(f"krylov_dim must be >= 2; got {krylov_dim}")
    if not isinstance(keep_states, bool | np.bool_):
        raise TypeError(f"keep_states must be True or False; got {keep_states!r}")


def _check_times(times: object) -> npt.NDArray[np.float64]:
    t = as_float_array(times, "times")  # type: ignore[arg-type]
    if np.any(t < 0):
        raise ValueError(
            f"times must be >= 0 (the given state is the state at t = 0); got {t[t < 0][0]}"
        )
    if np.any(np.diff(t) < 0):
        k = int(np.nonzero(np.diff(t) < 0)[0][0])
        raise ValueError(
            f"times must be non-decreasing; times[{k}] = {t[k]} > times[{k + 1}] = {t[k + 1]}. "
            "Sort them first"
        )
    return t


def _krylov_space(
    apply: Callable[[npt.NDArray[Any]], npt.NDArray[Any]],
    psi: npt.NDArray[np.complex128],
    m: int,
    basis: npt.NDArray[np.complex128],
    reorthogonalize: bool,
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], float, int]:
    """Lanczos (optionally with one full reorthogonalisation per step): fills
    ``basis[:n]``, returns the diagonal, the off-diagonal, the next coupling ``beta_n``
    (0 on an invariant subspace) and ``n``."""
    np.multiply(psi, 1.0 / vector_norm(psi), out=basis[0])
    alpha = np.zeros(m)
    beta = np.zeros(m)
    n = m
    for j in range(m):
        w = np.asarray(apply(basis[j]), dtype=np.complex128)
        alpha[j] = float(np.vdot(basis[j], w).real)
        # In place, without temporaries: the vectors are the memory traffic of a step.
        subtract_scaled(w, alpha[j], basis[j])
        if j > 0:
            subtract_scaled(w, beta[j - 1], basis[j - 1])
        if reorthogonalize:
            # ⟨v_i|w⟩ as conj(v_i · conj(w)): no conjugated copy of the basis.
            w -= basis[: j + 1].T @ (basis[: j + 1] @ w.conj()).conj()
        b = vector_norm(w)
        beta[j] = b
        scale = max(float(np.max(np.abs(alpha[: j + 1]))), float(np.max(beta[: j + 1])), 1e-300)
        if b <= 1e-13 * scale:
            # Invariant subspace: the propagation in it is exact.
            return alpha[: j + 1], beta[:j], 0.0, j + 1
        if j + 1 < m:
            np.multiply(w, 1.0 / b, out=basis[j + 1])
    return alpha[:n], beta[: n - 1], float(beta[n - 1]), n


def _default_krylov_dim(dim: int, memory_limit: int | None) -> int:
    """``DEFAULT_KRYLOV_DIM``, or fewer vectors when they would take more than a quarter
    of the memory budget (never below 10)."""
    from fockmill.dynamics.krylov import MEMORY_BUDGET
    from fockmill.problem.memory import available_memory

    limit = memory_limit if memory_limit is not None else available_memory()
    if limit is None:
        return DEFAULT_KRYLOV_DIM
    fits = int(0.25 * MEMORY_BUDGET * limit // (16 * max(dim, 1)))
    return max(10, min(DEFAULT_KRYLOV_DIM, fits))


class _Recorder:
    """The observables, states and top-level weights an evolution records at the
    requested times (the same for time-independent and time-dependent ``H``)."""

    def __init__(
        self, obs: Mapping[str, Any], space: Any, dim: int, count: int, keep_states: bool
    ) -> None:
        self.space = space
        self.hermitian = {name: o.expr.is_hermitian() for name, o in obs.items()}
        self.measure = {name: expectation_function(o) for name, o in obs.items()}
        self.raw: dict[str, list[complex]] = {name: [] for name in obs}
        self.states = np.zeros((dim, count), dtype=np.complex128) if keep_states else None
        self.weights_max: npt.NDArray[np.float64] | None = None

    def record(self, k: int, state: npt.NDArray[np.complex128], pool: Any) -> None:
        for name, f in self.measure.items():
            self.raw[name].append(f(state))
        if self.states is not None:
            self.states[:, k] = state
        w = top_weights(self.space, state, pool)
        self.weights_max = w if self.weights_max is None else np.fmax(self.weights_max, w)

    def values(self) -> dict[str, npt.NDArray[Any]]:
        """Each observable's series: real for a Hermitian observable, else complex."""
        out: dict[str, npt.NDArray[Any]] = {}
        for name, series in self.raw.items():
            arr = np.asarray(series, dtype=np.complex128)
            out[name] = arr.real.copy() if self.hermitian[name] else arr
        return out

    def finish(self, cutoff_warning: float | None) -> npt.NDArray[np.float64]:
        """The largest top-level weights over the times, warned about if too large."""
        assert self.weights_max is not None
        warn_top_weights(self.space, self.weights_max, cutoff_warning, "the evolving state")
        return self.weights_max

    def saved(self, k: int) -> dict[str, npt.NDArray[Any]]:
        """What has been recorded at the first ``k`` times, for a checkpoint."""
        out: dict[str, npt.NDArray[Any]] = {}
        for i, series in enumerate(self.raw.values()):
            out[f"raw.{i}"] = np.asarray(series, dtype=np.complex128)
        if self.weights_max is not None:
            out["weights"] = self.weights_max
        if self.states is not None:
            out["states"] = self.states[:, :k]
        return out

    def restore(self, saved: CheckpointState, k: int) -> None:
        """Take back what :meth:`saved` wrote."""
        for i, name in enumerate(self.raw):
            self.raw[name] = saved.load(f"raw.{i}").tolist()
        if "weights" in saved.vectors:
            self.weights_max = saved.load("weights")
        if self.states is not None and k > 0:
            self.states[:, :k] = saved.array("states")


class _Propagator:
    """``exp(−iτT) e₁`` in one Krylov space and its a posteriori error estimate."""

    def __init__(
        self, alpha: npt.NDArray[np.float64], beta: npt.NDArray[np.float64], beta_next: float
    ) -> None:
        if alpha.size > 1:
            self.lam, self.u = sla.eigh_tridiagonal(alpha, beta)
        else:
            self.lam, self.u = alpha.copy(), np.ones((1, 1))
        self.first = self.u[0, :]
        self.last = self.u[-1, :] * self.first
        self.beta_next = beta_next

    def coefficients(self, tau: float) -> npt.NDArray[np.complex128]:
        """Coordinates of ψ(τ) in the Krylov basis."""
        return self.u @ (np.exp(-1j * tau * self.lam) * self.first)  # type: ignore[no-any-return]

    def error(self, tau: float) -> float:
        """``β_m |[exp(−iτT)]_{m,1}|``."""
        return self.beta_next * abs(np.dot(self.last, np.exp(-1j * tau * self.lam)))


@options_were_positional(4, ("observables", "keep_states", "tol"))
def evolve(
    H: LadderExpr | Problem | TimeDependent,
    space: Any = None,
    psi0: npt.ArrayLike | None = None,
    times: npt.ArrayLike | None = None,
    *,
    observables: Mapping[str, LadderExpr] | None = None,
    keep_states: bool = False,
    tol: float = 1e-10,
    krylov_dim: int | None = None,
    method: str = "auto",
    threads: int | None = None,
    memory_limit: int | None = None,
    cutoff_warning: float | None = 1e-6,
    max_step: float | None = None,
    progress: ProgressOption = None,
    checkpoint: str | os.PathLike[str] | None = None,
    checkpoint_every: float = DEFAULT_CHECKPOINT_EVERY,
    _fixed_step: float | None = None,
) -> Evolution:
    """Propagate ``ψ(t) = exp(−iHt) ψ(0)`` (ħ = 1) and record observables.

    Parameters
    ----------
    H : LadderExpr, Problem or TimeDependent
        A Hermitian Hamiltonian that conserves the space's sector, or a prepared problem
        (:func:`fockmill.prepare`; then ``space`` is omitted and its compiled operator,
        thread pool and memory limit are reused: ``evolve(problem, psi0=..., times=...)``),
        or a time-dependent Hamiltonian ``H(t) = H0 + Σ_k f_k(t) H_k``
        (:class:`fockmill.TimeDependent`; see Notes). ``H(t)`` is evaluated at the
        absolute time ``t`` measured from the state ``psi0`` at ``t = 0``.
    space : FockSpace or SymmetricSpace
        The basis of the state.
    psi0 : array_like
        The normalised state at t = 0 (whatever ``times[0]`` is), shape ``(dim,)``.
    times : array_like
        Non-decreasing times >= 0 at which to record.
    observables : dict of str to LadderExpr, optional
        Recorded as ``⟨ψ(t)|O|ψ(t)⟩`` at each time, e.g. ``{"n0": fm.number(0)}``.
    keep_states : bool
        Also return every recorded state (``(dim, len(times))`` complex; memory!).
    tol : float
        Target accuracy of ψ at the last time, in norm (see Notes).
    krylov_dim : int, optional
        Largest Krylov space per step (memory: ``krylov_dim + 4`` complex vectors).
        Default: ``DEFAULT_KRYLOV_DIM`` = 50 (larger spaces take longer steps and fewer
        products overall), lowered to what fits in a quarter of the memory budget.
    method : {"auto", "csr", "operator"}
        Products on the stored matrix or matrix-free; ``"auto"`` stores the matrix when
        it and the Krylov vectors fit in the memory budget.
    threads : int, optional
        Threads for builds and products.
    memory_limit : int, optional
        Bytes the computation may plan to use (default: the available memory).
    cutoff_warning : float or None
        Warn (:class:`~fockmill.exceptions.CutoffWarning`) when a truncating cutoff
        carries more than this weight at any recorded time; None disables it.
    max_step : float, optional
        Longest time step of a time-dependent ``H`` (default: none; the step control
        alone decides). Use it when a coefficient has features narrower than the steps
        the control would otherwise take (a short pulse between two smooth stretches).
        Refused for a time-independent ``H``, whose steps are exact up to the Krylov
        estimate.
    progress : bool, callable or None
        Progress reports (see :func:`fockmill.lowest_levels`): a record after each
        Krylov step (a time-dependent ``H``: after each recorded time or breakpoint) with
        the time reached; the bar runs from 0 to the last time.
    checkpoint : str or path, optional
        A file where the evolution keeps its state (ψ, the time reached, the values
        recorded so far): written every ``checkpoint_every`` seconds at the end of a
        step, and with the result when the run finishes. A call with the same file
        continues from the saved state and records the same values as an uninterrupted
        run, or returns the finished result at once; a file written for another
        Hamiltonian, state, times or settings is refused (:class:`CheckpointError`
        naming the difference).
    checkpoint_every : float
        Seconds between two writes of the state (default 300).
    _fixed_step : float, optional
        Private (convergence studies and tests): a time-dependent ``H`` is propagated
        with steps of this length, shortened evenly to land on the recorded times and
        breakpoints, without step control; ``error_estimate`` then holds the Krylov
        estimates only.

    Returns
    -------
    Evolution

    Raises
    ------
    ValueError
        Negative or unsorted times, a wrong-length or unnormalised state, a bad ``tol``;
        a coefficient of a time-dependent ``H`` returning NaN, inf or a non-real value
        (the part is named).
    NotHermitianError
        ``H`` is not Hermitian.
    SymmetryError
        A part of a time-dependent ``H`` is not invariant on the symmetry sector (named).
    ConvergenceError
        The time step of a time-dependent ``H`` shrank to round-off (a jump in a
        coefficient without a breakpoint, or ``tol`` far too small).
    SizeLimitError
        The Krylov vectors (or the kept states) do not fit in memory.

    Warns
    -----
    AccuracyWarning
        ``tol`` lies below what round-off allows (about ``1e-15`` per step): the result
        is as accurate as it can be and ``error_estimate`` says how accurate.

    Notes
    -----
    Each step builds a Krylov space ``K_m(H, ψ)`` by Lanczos (with full
    reorthogonalisation while the basis has at most ``REORTHOGONALIZE_MAX`` entries)
    and propagates inside it, ``ψ(t + τ) ≈ V exp(−iτT) e₁``
    (Park & Light 1986, J. Chem. Phys. 85, 5870). The step ``τ`` is the largest for
    which the a posteriori error estimate ``β_m |[exp(−iτT)]_{m,1}|`` (Hochbruck &
    Lubich 1997, SIAM J. Numer. Anal. 34, 1911; Saad 1992, SIAM J. Numer. Anal. 29, 209)
    stays below ``tol · τ / t_end``, so the estimates add up to at most ``tol`` over
    ``[0, t_end]``. Requested times inside a step are read off the same Krylov space
    without further products.

    A :class:`~fockmill.TimeDependent` ``H`` is propagated by the fourth-order
    commutator-free exponential integrator of Blanes & Moan (2006, Appl. Numer. Math. 56,
    1519) in the form of Alvermann & Fehske (2011, J. Comput. Phys. 230, 5930): per step
    ``h``, ``ψ ← exp(−ihA2) exp(−ihA1) ψ`` with ``A1``, ``A2`` fixed combinations of
    ``H`` at the two Gauss nodes of the step (``fockmill.dynamics.cfqm``). Each part is
    compiled once; ``A ψ`` is ``Σ_k c_k (H_k ψ)`` from the parts' products, and each
    exponential is a Krylov exponential grown until its estimate is below
    ``0.05 · tol · h / t_end``. The step is controlled by step doubling: one step of
    ``h`` against two of ``h/2``, whose difference over ``2⁴ − 1`` estimates the error
    of the two half steps (Hairer, Nørsett & Wanner 1993, Sec. II.4), which are kept
    when that estimate is at most ``0.5 · tol · h / t_end``; the next step is
    ``h · min(4, 0.9 (allowed/estimate)^(1/4))``. Steps end exactly on every requested
    time and on every breakpoint of the coefficients (:func:`fockmill.piecewise_linear`).
    ``steps`` counts accepted steps, ``products`` the products with ``H(t)`` (each one
    product with every part whose coefficient is not zero), including rejected steps;
    ``error_estimate`` sums the step-doubling and Krylov estimates.

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=1, total=1)
    >>> h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    >>> psi0 = np.array([0.0, 1.0])          # one photon in resonator 0
    >>> ev = fm.evolve(h, space, psi0, [0.0, np.pi / 4], observables={"n0": fm.number(0)})
    >>> ev.values["n0"].round(6).tolist()     # cos²(Jt)
    [1.0, 0.5]
    """
    t_start = time.perf_counter()
    threads, memory_limit = check_common(threads, memory_limit)
    if isinstance(H, TimeDependent):
        return _evolve_time_dependent(
            H,
            space,
            psi0,
            times,
            observables=observables,
            keep_states=keep_states,
            tol=tol,
            krylov_dim=krylov_dim,
            method=method,
            threads=threads,
            memory_limit=memory_limit,
            cutoff_warning=cutoff_warning,
            max_step=max_step,
            fixed_step=_fixed_step,
            t_start=t_start,
            progress=progress,
            checkpoint=checkpoint,
            checkpoint_every=checkpoint_every,
        )
    if max_step is not None or _fixed_step is not None:
        raise TypeError(
            "max_step applies to a time-dependent Hamiltonian (fm.TimeDependent) only; "
            "the steps of a time-independent one are set by the Krylov error estimate"
        )
    problem, (psi0, times) = problem_and_arguments(
        H, space, (psi0, times), threads=threads, memory_limit=memory_limit
    )
    space, memory_limit = problem.space, problem.memory_limit
    if psi0 is None or times is None:
        raise TypeError("evolve needs psi0= (the state at t = 0) and times=")
    t = _check_times(times)
    tol = check_positive(tol, "tol", "1e-10")
    _check_krylov_options(krylov_dim, keep_states)
    psi = check_state(space, psi0, "psi0").astype(np.complex128)
    obs = prepare_observables(observables, problem)
    dim = psi.shape[0]
    ck = open_checkpoint(
        checkpoint,
        checkpoint_every,
        task="evolve",
        space=space,
        hamiltonian=hamiltonian_hash(problem.expr),
        settings=_evolve_settings(t, psi, obs, tol, krylov_dim, keep_states, method),
    )
    if ck is not None and ck.finished is not None:
        return _evolution_from(ck.finished, t, obs, space, cutoff_warning, t_start)
    resumed = None if ck is None else ck.running("evolve")
    if resumed is not None:
        krylov_dim = resumed.integers["krylov_dim"]
    elif krylov_dim is None:
        krylov_dim = _default_krylov_dim(dim, memory_limit)
    m = int(min(krylov_dim, dim))
    kept = dim * t.size * 16 if keep_states else 0
    hmap = hermitian_map(problem, vectors=m + 4 + -(-kept // max(16 * dim, 1)), method=method)
    recorder = _Recorder(obs, space, dim, t.size, keep_states)
    try:
        basis = np.zeros((m, dim), dtype=np.complex128)
    except MemoryError:
        raise SizeLimitError(
            f"the Krylov basis of {m} vectors of {dim:,} states does not fit; lower krylov_dim"
        ) from None

    def record(k: int, state: npt.NDArray[np.complex128]) -> None:
        recorder.record(k, state, problem.pool)

    t_end = float(t[-1])
    now = 0.0
    k = 0
    steps = 0
    error_sum = 0.0
    if resumed is not None:
        psi = resumed.load("psi").astype(np.complex128)
        now, error_sum = resumed.numbers["now"][0], resumed.numbers["error"][0]
        k, steps = resumed.integers["k"], resumed.integers["steps"]
        hmap.products = resumed.integers["products"]
        recorder.restore(resumed, k)
    while k < t.size and t[k] <= now:
        record(k, psi)
        k += 1
    reorthogonalize = m * dim <= REORTHOGONALIZE_MAX
    reporter = make_progress(progress, "evolve", total=t_end, unit="time")
    # Many memory-bound vector operations: one BLAS thread (fockmill.settings.threads).
    with blas_threads(1), _Closing(reporter, ck):
        while k < t.size:
            alpha, beta, beta_next, n = _krylov_space(hmap, psi, m, basis, reorthogonalize)
            steps += 1
            step = _Propagator(alpha, beta, beta_next)
            coefficients, error = step.coefficients, step.error
            remaining = t_end - now
            allowed = tol / t_end
            # The estimate cannot resolve values below round-off (its eigenbasis sum
            # cancels there), so anything under ROUNDOFF counts as converged.
            if error(remaining) <= max(allowed * remaining, ROUNDOFF):
                tau = remaining
            else:
                # Largest τ with error(τ) <= allowed·τ; error(τ)/τ grows like τ^(m−1).
                lo, hi = 0.0, remaining
                for _ in range(60):
                    mid = 0.5 * (lo + hi)
                    if error(mid) <= max(allowed * mid, ROUNDOFF):
                        lo = mid
                    else:
                        hi = mid
                tau = lo
                if tau <= 1e-14 * max(t_end, 1.0):
                    raise ConvergenceError(
                        f"the Krylov step shrank to {tau:.3e} at t = {now:.6g}; raise tol or "
                        "krylov_dim"
                    )
            error_sum += error(tau)
            # Requested times inside this step come from the same Krylov space.
            while k < t.size and t[k] <= now + tau:
                record(k, coefficients(float(t[k]) - now) @ basis[:n])
                k += 1
            psi = coefficients(tau) @ basis[:n]
            now += tau
            if reporter is not None:
                reporter.update(step=steps, products=hmap.products, time_reached=now)
            if ck is not None and k < t.size and ck.due():
                ck.save(
                    status="running",
                    solver="evolve",
                    integers={"k": k, "steps": steps, "products": hmap.products, "krylov_dim": m},
                    numbers={"now": [now], "error": [error_sum]},
                    vectors={"psi": psi, **recorder.saved(k)},
                )
    values = recorder.values()
    weights_max = recorder.finish(cutoff_warning)
    warn_tolerance_not_met(tol, error_sum, "evolve")
    # The propagation ends exactly at the last requested time.
    final = recorder.states[:, -1].copy() if recorder.states is not None else psi
    result = Evolution(
        times=t,
        values=values,
        states=recorder.states,
        final=final,
        top_weights=weights_max,
        steps=steps,
        products=hmap.products,
        method=hmap.method,
        error_estimate=error_sum,
        seconds=time.perf_counter() - t_start,
    )
    _save_evolution(ck, result)
    return result


class _Closing:
    """Close the progress bar and drop a half-written checkpoint on the way out."""

    def __init__(self, reporter: Progress | None, ck: Checkpoint | None) -> None:
        self.reporter, self.ck = reporter, ck

    def __enter__(self) -> None:
        return None

    def __exit__(self, *exc: object) -> None:
        if self.ck is not None:
            self.ck.abort()
        if self.reporter is not None:
            self.reporter.close()


def _evolve_settings(
    t: npt.NDArray[np.float64],
    psi: npt.NDArray[Any],
    obs: Mapping[str, Any],
    tol: float,
    krylov_dim: int | None,
    keep_states: bool,
    method: str,
    **more: Any,
) -> dict[str, Any]:
    """The settings an evolution's checkpoint must match."""
    return {
        "times": array_hash(t),
        "psi0": array_hash(psi),
        "observables": {name: hamiltonian_hash(o.expr) for name, o in obs.items()},
        "tol": tol,
        "krylov_dim": krylov_dim,
        "keep_states": bool(keep_states),
        "method": method,
        **more,
    }


def _save_evolution(ck: Checkpoint | None, result: Evolution) -> None:
    """Keep the finished result in the checkpoint."""
    if ck is None:
        return
    vectors = {f"value.{i}": v for i, v in enumerate(result.values.values())}
    vectors["final"] = result.final
    vectors["top_weights"] = result.top_weights
    if result.states is not None:
        vectors["states"] = result.states
    ck.save(
        status="finished",
        solver="result",
        integers={"steps": result.steps, "products": result.products},
        numbers={"error": [result.error_estimate]},
        texts={"method": result.method},
        vectors=vectors,
    )


def _evolution_from(
    saved: CheckpointState,
    t: npt.NDArray[np.float64],
    obs: Mapping[str, Any],
    space: Any,
    cutoff_warning: float | None,
    t_start: float,
) -> Evolution:
    """The finished evolution kept in a checkpoint."""
    weights = saved.array("top_weights")
    warn_top_weights(space, weights, cutoff_warning, "the evolving state")
    return Evolution(
        times=t,
        values={name: saved.array(f"value.{i}") for i, name in enumerate(obs)},
        states=saved.array("states") if "states" in saved.vectors else None,
        final=saved.array("final"),
        top_weights=weights,
        steps=saved.integers["steps"],
        products=saved.integers["products"],
        method=saved.texts["method"],
        error_estimate=float(saved.numbers["error"][0]),
        seconds=time.perf_counter() - t_start,
    )


# -- time-dependent Hamiltonians ------------------------------------------------------------


def _driven_space(H: TimeDependent, space: Any) -> Any:
    """The space of a time-dependent call: ``space``, else that of a prepared part."""
    if space is not None:
        return space
    for part in (H.H0, *(p for p, _ in H.parts)):
        if isinstance(part, Problem):
            return part.space
    raise TypeError(
        "missing the space: evolve(fm.TimeDependent(...), space, psi0=..., times=...) "
        "(or prepare one of the parts with fm.prepare(expr, space))"
    )


def _compile_part(
    part: Any,
    what: str,
    space: Any,
    host: Problem | None,
    threads: int | None = None,
    memory_limit: int | None = None,
) -> Problem:
    """One part compiled on ``space`` (once; a prepared part is reused), sharing the
    thread pool of ``host``; a part leaving the sector is refused, naming the part."""
    from fockmill.spaces.symmetry import SymmetricSpace

    if isinstance(part, Problem):
        if part.space != space:
            raise ValueError(
                f"{what} is prepared on another space ({part.space!r}) than the state's "
                f"({space!r}); prepare every part on the same space"
            )
        return part
    if isinstance(space, SymmetricSpace):
        try:
            space.check_invariant(part)
        except SymmetryError as error:
            raise SymmetryError(
                f"{what} is not invariant under the symmetry of the sector, so H(t) would "
                f"leave it: {error}"
            ) from None
    try:
        if host is None:  # the constant part: it starts the thread pool the others share
            return prepare(part, space, threads=threads, memory_limit=memory_limit)
        return Problem._from_parts(part, space, pool=host.pool, threads=host.threads)
    except (ChargeError, ModeIndexError) as error:
        raise type(error)(f"{what}: {error}") from None


def _driven_maps(
    problems: list[Problem], vectors: int, method: str, memory_limit: int | None
) -> list[Any]:
    """The parts' products, all stored or all matrix-free (decided on their sum)."""
    from fockmill.dynamics.krylov import MEMORY_BUDGET, SMALL_KRYLOV_DIM
    from fockmill.problem.memory import available_memory

    if method not in ("auto", "csr", "operator"):
        raise ValueError(f"method must be 'auto', 'csr' or 'operator'; got {method!r}")
    if method == "auto":
        dim = problems[0].dim
        limit = memory_limit if memory_limit is not None else available_memory()
        budget = float("inf") if limit is None else MEMORY_BUDGET * limit
        stored = sum(p.estimate.csr_bytes for p in problems)
        peak = max(p.estimate.build_peak_bytes - p.estimate.csr_bytes for p in problems)
        fits = stored + peak + vectors * 16 * dim <= budget
        # The rule of the time-independent products (krylov.hermitian_map): where the
        # bipartite kernel serves every part, its parallel matrix-free product beats a
        # stored matrix, so nothing is stored.
        fast = dim >= SMALL_KRYLOV_DIM and all(p.native.fast_products for p in problems)
        method = "csr" if fits and not fast else "operator"
    return [hermitian_map(p, vectors=vectors, method=method) for p in problems]


def _evolve_time_dependent(
    H: TimeDependent,
    space: Any,
    psi0: Any,
    times: Any,
    *,
    observables: Mapping[str, LadderExpr] | None,
    keep_states: bool,
    tol: float,
    krylov_dim: int | None,
    method: str,
    threads: int | None,
    memory_limit: int | None,
    cutoff_warning: float | None,
    max_step: float | None,
    fixed_step: float | None,
    t_start: float,
    progress: ProgressOption = None,
    checkpoint: object = None,
    checkpoint_every: float = DEFAULT_CHECKPOINT_EVERY,
) -> Evolution:
    """:func:`evolve` for ``H(t) = H0 + Σ_k f_k(t) H_k`` (see its Notes)."""
    from fockmill.spaces.checks import check_space

    space = check_space(_driven_space(H, space))
    if psi0 is None or times is None:
        raise TypeError("evolve needs psi0= (the state at t = 0) and times=")
    t = _check_times(times)
    tol = check_positive(tol, "tol", "1e-10")
    if max_step is not None:
        max_step = check_positive(max_step, "max_step", "0.1")
    if fixed_step is not None:
        fixed_step = check_positive(fixed_step, "_fixed_step", "0.01")
    _check_krylov_options(krylov_dim, keep_states)
    # Every coefficient is evaluated once before any work, so a bad one fails at once.
    H.coefficients(0.0)
    if isinstance(H.H0, Problem):
        if H.H0.space != space:
            raise ValueError(
                f"H0 (the constant part) is prepared on another space ({H.H0.space!r}) than "
                f"the state's ({space!r}); prepare every part on the same space"
            )
        host = as_problem(H.H0, space, threads=threads, memory_limit=memory_limit)
    else:
        host = _compile_part(H.H0, "H0 (the constant part)", space, None, threads, memory_limit)
    problems = [host]
    for k, (part, _) in enumerate(H.parts, start=1):
        what = f"part {k} (H_{k}) of the time-dependent Hamiltonian"
        problems.append(_compile_part(part, what, space, host))
    memory_limit = host.memory_limit
    psi = check_state(space, psi0, "psi0").astype(np.complex128)
    obs = prepare_observables(observables, host)
    dim = psi.shape[0]
    ck = open_checkpoint(
        checkpoint,
        checkpoint_every,
        task="evolve",
        space=space,
        hamiltonian=hamiltonian_hash(host.expr),
        settings=_evolve_settings(
            t,
            psi,
            obs,
            tol,
            krylov_dim,
            keep_states,
            method,
            parts=[hamiltonian_hash(p.expr) for p in problems[1:]],
            coefficients=_coefficients_identity(H, t),
            max_step=max_step,
            fixed_step=fixed_step,
        ),
    )
    if ck is not None and ck.finished is not None:
        return _evolution_from(ck.finished, t, obs, space, cutoff_warning, t_start)
    resumed = None if ck is None else ck.running("evolve")
    if resumed is not None:
        krylov_dim = resumed.integers["krylov_dim"]
    elif krylov_dim is None:
        krylov_dim = _default_krylov_dim(dim, memory_limit)
    m = int(min(krylov_dim, dim))
    # Krylov basis, ψ and the three trial states of a doubled step, products in flight.
    kept = dim * t.size * 16 if keep_states else 0
    vectors = m + 8 + -(-kept // max(16 * dim, 1))
    # Parts that are zero (say H0 = 0) cost no products.
    used = [k for k, p in enumerate(problems) if not p.expr.is_zero()]
    maps = _driven_maps([problems[k] for k in used], vectors, method, memory_limit)
    recorder = _Recorder(obs, space, dim, t.size, keep_states)

    def record(k: int, state: npt.NDArray[np.complex128]) -> None:
        recorder.record(k, state, host.pool)

    def coefficients(time_: float) -> list[float]:
        every = [1.0, *H.coefficients(time_)]
        return [every[k] for k in used]

    t_end = float(t[-1])
    stops = sorted({float(x) for x in t if x > 0} | {b for b in H.breakpoints() if 0 < b < t_end})
    try:
        integrator = Integrator(
            maps,
            coefficients,
            dim=dim,
            krylov_dim=m,
            tol=tol,
            t_end=max(t_end, 1e-300),
            max_step=max_step,
            fixed_step=fixed_step,
            reorthogonalize=m * dim <= REORTHOGONALIZE_MAX,
        )
    except MemoryError:
        raise SizeLimitError(
            f"the Krylov basis of {m} vectors of {dim:,} states does not fit; lower krylov_dim"
        ) from None
    now = 0.0
    k = 0
    first = 0
    if resumed is not None:
        psi = resumed.load("psi").astype(np.complex128)
        k, first = resumed.integers["k"], resumed.integers["stop"]
        now = stops[first - 1] if first > 0 else 0.0
        h = resumed.numbers["h"]
        integrator.h = h[0] if h else None
        integrator.count = Counters(
            steps=resumed.integers["steps"],
            rejected=resumed.integers["rejected"],
            products=resumed.integers["products"],
            exponentials=resumed.integers["exponentials"],
            error=resumed.numbers["error"][0],
        )
        recorder.restore(resumed, k)
    while k < t.size and t[k] <= now:
        record(k, psi)
        k += 1
    reporter = make_progress(progress, "evolve", total=t_end, unit="time")
    # Many small vector operations: see fockmill.settings.threads.
    with blas_threads(1), _Closing(reporter, ck):
        for i in range(first, len(stops)):
            stop = stops[i]
            psi = integrator.advance(psi, now, stop)
            now = stop
            while k < t.size and t[k] <= now:
                record(k, psi)
                k += 1
            count = integrator.count
            if reporter is not None:
                reporter.update(step=count.steps, products=count.products, time_reached=now)
            if ck is not None and i + 1 < len(stops) and ck.due():
                ck.save(
                    status="running",
                    solver="evolve",
                    integers={
                        "k": k,
                        "stop": i + 1,
                        "krylov_dim": m,
                        "steps": count.steps,
                        "rejected": count.rejected,
                        "products": count.products,
                        "exponentials": count.exponentials,
                    },
                    numbers={
                        "h": [] if integrator.h is None else [integrator.h],
                        "error": [count.error],
                    },
                    vectors={"psi": psi, **recorder.saved(k)},
                )
    values = recorder.values()
    weights_max = recorder.finish(cutoff_warning)
    count = integrator.count
    if fixed_step is None:
        warn_tolerance_not_met(tol, count.error, "evolve")
    result = Evolution(
        times=t,
        values=values,
        states=recorder.states,
        final=psi.copy(),
        top_weights=weights_max,
        steps=count.steps,
        products=count.products,
        method=maps[0].method if maps else "operator",
        error_estimate=float(count.error),
        seconds=time.perf_counter() - t_start,
    )
    _save_evolution(ck, result)
    return result


def _coefficients_identity(H: TimeDependent, t: npt.NDArray[np.float64]) -> list[str]:
    """What identifies the coefficients of a time-dependent ``H`` in a checkpoint: a
    piecewise-linear table by its values, a callable by its name and its values at the
    recorded times (its code itself is not compared)."""
    out = []
    for _, f in H.parts:
        name = f"{getattr(f, '__module__', '')}.{getattr(f, '__qualname__', type(f).__name__)}"
        values = np.array([float(f(float(x))) for x in t])
        out.append(f"{name}:{array_hash(values)}")
    return out
