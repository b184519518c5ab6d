"""Spectral functions S(ω) = −(1/π) Im ⟨ψ|A† (ω + E_ref + iη − H)⁻¹ A|ψ⟩ by the Lanczos
continued fraction, and the poles and weights behind it."""

from __future__ import annotations

import numbers
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.linalg as sla

from fockmill.algebra.expressions import LadderExpr, as_expr
from fockmill.dynamics.krylov import (
    MEMORY_BUDGET,
    as_float_array,
    as_float_grid,
    check_common,
    check_hermitian,
    check_positive,
    check_state,
    hermitian_map,
    lanczos_coefficients,
)
from fockmill.exceptions import ChargeError, ConvergenceError
from fockmill.problem.problem import Problem, prepare, problem_and_arguments
from fockmill.settings.progress import ProgressOption, make_progress
from fockmill.settings.signatures import options_were_positional

__all__ = [
    "SpectralPoles",
    "SpectralStart",
    "function_from_start",
    "poles_from_start",
    "spectral_function",
    "spectral_poles",
    "spectral_start",
]

#: Steps between two convergence checks of the continued fraction.
CHECK_EVERY = 10
#: Poles closer than this (relative to the spectrum's scale) are copies of one level.
MERGE_TOL = 1e-9


@dataclass(frozen=True)
class SpectralPoles:
    """Poles and weights of the Lanczos continued fraction (see :func:`spectral_poles`).

    Attributes
    ----------
    frequencies : numpy.ndarray
        Pole positions ``ε_k − E_ref``, ascending.
    weights : numpy.ndarray
        Weight of each pole; they sum to ``norm``.
    norm : float
        ``⟨ψ|A†A|ψ⟩``, the zeroth moment of S(ω).
    reference_energy : float
        ``E_ref``.
    steps : int
        Lanczos steps taken.
    exhausted : bool
        Whether the Krylov space closed (an invariant subspace): the poles are then the
        exact spectrum that ``A|ψ⟩`` sees.
    merged : int
        Copies of a level that Lanczos produced after losing orthogonality and that were
        merged into one pole (their weights summed); 0 when none.
    """

    frequencies: npt.NDArray[np.float64]
    weights: npt.NDArray[np.float64]
    norm: float
    reference_energy: float
    steps: int
    exhausted: bool
    merged: int = 0

    def evaluate(self, omegas: npt.ArrayLike, eta: float) -> npt.NDArray[np.float64]:
        """``S(ω)`` as the sum of Lorentzians of width ``eta`` at the poles."""
        w = np.asarray(omegas, dtype=np.float64)
        diff = w[..., np.newaxis] - self.frequencies
        lorentz = (eta / np.pi) / (diff * diff + eta * eta)
        return np.asarray(lorentz @ self.weights, dtype=np.float64)


def _continued_fraction(
    z: npt.NDArray[np.complex128],
    alpha: npt.NDArray[np.float64],
    beta: npt.NDArray[np.float64],
) -> npt.NDArray[np.complex128]:
    """``1 / (z − a₀ − b₀² / (z − a₁ − b₁² / ...))`` evaluated from the bottom."""
    g = np.zeros_like(z)
    for j in range(alpha.size - 1, -1, -1):
        coupling = beta[j] ** 2 if j < beta.size else 0.0
        g = 1.0 / (z - alpha[j] - coupling * g)
    return g


@dataclass(frozen=True)
class SpectralStart:
    """What a spectrum starts from: ``H`` on the target space (compiled once), the
    vector ``A|ψ⟩``, the reference energy and ``‖A|ψ⟩‖²``; shared by
    :func:`spectral_function` and :func:`spectral_poles` when both are wanted."""

    on_target: Problem
    phi: npt.NDArray[Any]
    reference_energy: float
    norm: float


def spectral_start(
    problem: Problem,
    psi: npt.ArrayLike,
    A: object,
    target: Any = None,
    reference_energy: object = None,
) -> SpectralStart:
    """The Hamiltonian on the target space (compiled once), ``A|ψ⟩`` and ``E_ref``."""
    check_hermitian(problem.expr)
    space = problem.space
    v = check_state(space, psi, "psi")
    a = as_expr(A)
    try:
        if target is not None and target != space:
            probe = prepare(a, space, target=target, threads=problem.threads)
        else:
            probe = Problem._from_parts(a, space, pool=problem.pool, threads=problem.threads)
    except ChargeError as error:
        if target is not None:
            raise
        raise ChargeError(
            f"{error}. A changes the conserved charge, so A|ψ⟩ lives in another sector: pass "
            "target= with the space it lands in (for example the same modes and cutoffs "
            "with the total changed by A's charge)"
        ) from None
    phi = probe.matvec(v)
    if probe.target == space:
        on_target = problem
    else:
        on_target = Problem._from_parts(
            problem.expr, probe.target, pool=problem.pool, threads=problem.threads
        )
        on_target.memory_limit = problem.memory_limit
    if reference_energy is None:
        ref = float(np.vdot(v, problem.matvec(v)).real)
    else:
        if isinstance(reference_energy, bool) or not isinstance(reference_energy, numbers.Real):
            raise TypeError(
                f"reference_energy must be a real number or None; got {reference_energy!r}"
            )
        ref = float(reference_energy)
        if not np.isfinite(ref):
            raise ValueError("reference_energy must be finite")
    phi = np.asarray(phi)
    return SpectralStart(on_target, phi, float(ref), float(np.vdot(phi, phi).real))


def _check_steps(max_steps: object) -> int | None:
    if max_steps is None:
        return None
    if isinstance(max_steps, bool) or not isinstance(max_steps, numbers.Integral) or max_steps < 1:
        raise ValueError(f"max_steps must be a positive integer or None; got {max_steps!r}")
    return int(max_steps)


@options_were_positional(5, ("eta", "target", "reference_energy"))
def spectral_function(
    H: LadderExpr | Problem,
    space: Any = None,
    psi: npt.ArrayLike | None = None,
    A: LadderExpr | None = None,
    omegas: npt.ArrayLike | None = None,
    *,
    eta: float = 0.05,
    target: Any = None,
    reference_energy: float | None = None,
    tol: float = 1e-6,
    max_steps: int | None = None,
    method: str = "auto",
    threads: int | None = None,
    memory_limit: int | None = None,
    progress: ProgressOption = None,
) -> npt.NDArray[np.float64]:
    """The spectral function ``S(ω) = −(1/π) Im ⟨ψ|A† (ω + E_ref + iη − H)⁻¹ A|ψ⟩``.

    Parameters
    ----------
    H : LadderExpr
        A Hermitian Hamiltonian; it acts on ``target`` (and on ``space`` for the default
        reference energy).
    space : FockSpace or SymmetricSpace
        The space of ``psi``.
    psi : array_like
        A normalised state of ``space`` (a ground state, say).
    A : LadderExpr
        The probe, carrying ``space`` into ``target`` (``fm.lowering(0)`` for the
        quantum-removal part of a single-particle spectral function).
    omegas : array_like
        Frequencies (any shape); the result has the same shape.
    eta : float
        Lorentzian broadening (> 0).
    target : FockSpace or SymmetricSpace, optional
        Where ``A`` lands (default: ``space``); same modes and cutoffs. On a symmetry
        sector, a probe with a definite character (a momentum component such as
        ``sector.component(fm.number(0), [q])``) lands in the sector
        ``space.target_for(A, base)``; :func:`fockmill.momentum_spectrum` gives every
        momentum at once.
    reference_energy : float, optional
        ``E_ref``; default ``⟨ψ|H|ψ⟩`` (the ground energy when ``psi`` is the ground
        state, so that ω is an excitation energy).
    tol : float
        Stop rule (see Notes).
    max_steps : int, optional
        Most Lanczos steps (default: the target's dimension, capped at 5000).
    method : {"auto", "csr", "operator"}
        Products on the stored matrix or matrix-free (``"auto"``: from memory).
    threads, memory_limit
        As for :func:`fockmill.ground_state`.
    progress : bool, callable or None
        Progress reports (see :func:`fockmill.lowest_levels`): a record after each
        Lanczos step.

    Returns
    -------
    numpy.ndarray
        ``S(ω)`` (float64), shaped like ``omegas``; its integral over all ω is
        ``⟨ψ|A†A|ψ⟩``.

    Raises
    ------
    ValueError
        ``eta <= 0``, an unnormalised or wrong-length ``psi``, bad frequencies.
    ChargeError
        ``A`` carries ``space`` outside ``target``.
    NotHermitianError
        ``H`` is not Hermitian.
    ConvergenceError
        The stop rule was not met within ``max_steps``.

    Notes
    -----
    Lanczos on ``H`` from ``A|ψ⟩/‖A|ψ⟩‖`` gives the continued fraction
    ``G(z) = ‖Aψ‖² / (z − a₀ − b₁² / (z − a₁ − b₂² / ...))`` (Haydock, Heine & Kelly
    1972, J. Phys. C 5, 2845; Gagliano & Balseiro 1987, Phys. Rev. Lett. 59, 2999),
    evaluated at ``z = ω + E_ref + iη``. Stop rule: every ``CHECK_EVERY`` steps the
    fraction is evaluated on the requested frequencies; the result is accepted when two
    successive checks both changed S by at most ``tol · max S`` everywhere on the grid,
    or when the Krylov space closes (then it is exact). The n-step fraction reproduces
    the first 2n moments of the spectrum, and the broadening η suppresses the remaining
    structure, so smaller η needs more steps. Only three vectors are kept (no
    reorthogonalisation: spurious copies of converged poles share their weight and
    leave S unchanged).

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> space = fm.FockSpace(modes=1, cutoff=4, total=None)
    >>> psi = np.eye(space.dim)[2]                    # |2⟩ of an oscillator, ω = 1
    >>> S = fm.spectral_function(fm.number(0), space, psi, fm.lowering(0),
    ...                          np.array([-1.0, 0.0]), eta=0.1)
    >>> S.round(3).tolist()                           # a peak of weight 2 at ω = −1
    [6.366, 0.063]
    """
    threads, memory_limit = check_common(threads, memory_limit)
    problem, (psi, A, omegas) = problem_and_arguments(
        H, space, (psi, A, omegas), threads=threads, memory_limit=memory_limit
    )
    if psi is None or A is None or omegas is None:
        raise TypeError("spectral_function needs psi=, A= and omegas=")
    eta = check_positive(eta, "eta", "0.05")
    tol = check_positive(tol, "tol", "1e-6")
    steps_cap = _check_steps(max_steps)
    # Checked before any work, naming the argument (numpy's own message would not).
    as_float_grid(omegas, "omegas")
    start = spectral_start(problem, psi, A, target, reference_energy)
    return function_from_start(
        start, omegas, eta=eta, tol=tol, max_steps=steps_cap, method=method, progress=progress
    )


def function_from_start(
    start: SpectralStart,
    omegas: npt.ArrayLike,
    *,
    eta: float,
    tol: float,
    max_steps: int | None,
    method: str,
    progress: ProgressOption = None,
) -> npt.NDArray[np.float64]:
    """:func:`spectral_function` from a prepared :class:`SpectralStart`."""
    w = as_float_grid(omegas, "omegas")
    flat = as_float_array(w.reshape(-1), "omegas")
    steps_cap = max_steps
    on_target, phi, ref, norm_sq = start.on_target, start.phi, start.reference_energy, start.norm
    tgt = on_target.space
    if norm_sq == 0.0:
        return np.zeros(np.shape(omegas), dtype=np.float64)
    hmap = hermitian_map(on_target, vectors=4, method=method, complex_vectors=phi.dtype.kind == "c")
    z = flat + ref + 1j * eta
    limit = min(tgt.dim, 5000) if steps_cap is None else steps_cap
    history: list[npt.NDArray[np.float64]] = []
    quiet = [0]

    reporter = make_progress(progress, "spectral_function", unit="step")

    def converged(alpha: list[float], beta: list[float]) -> bool:
        n = len(alpha)
        if reporter is not None:
            reporter.update(step=n, products=hmap.products)
        if n % CHECK_EVERY:
            return False
        s = -norm_sq * _continued_fraction(z, np.asarray(alpha), np.asarray(beta)).imag / np.pi
        if history:
            change = float(np.max(np.abs(s - history[-1])))
            quiet[0] = quiet[0] + 1 if change <= tol * max(float(np.max(np.abs(s))), 1e-300) else 0
        history.append(s)
        return quiet[0] >= 2

    unit = phi / np.sqrt(norm_sq)
    try:
        alpha, beta, _ = lanczos_coefficients(hmap, unit, limit, done=converged)
    finally:
        if reporter is not None:
            reporter.close()
    closed = alpha.size < limit and quiet[0] < 2
    if quiet[0] < 2 and not closed and alpha.size < tgt.dim:
        raise ConvergenceError(
            f"the continued fraction did not settle to tol={tol} within {alpha.size} Lanczos "
            f"steps at eta={eta}; raise max_steps, eta or tol"
        )
    s = -norm_sq * _continued_fraction(z, alpha, beta).imag / np.pi
    return np.asarray(s.reshape(np.shape(omegas)), dtype=np.float64)


@options_were_positional(4, ("target", "reference_energy"))
def spectral_poles(
    H: LadderExpr | Problem,
    space: Any = None,
    psi: npt.ArrayLike | None = None,
    A: LadderExpr | None = None,
    *,
    target: Any = None,
    reference_energy: float | None = None,
    max_steps: int | None = None,
    method: str = "auto",
    threads: int | None = None,
    memory_limit: int | None = None,
) -> SpectralPoles:
    """Poles and weights of the Lanczos continued fraction of the spectral function.

    Same arguments as :func:`spectral_function` (without frequencies and η).
    ``S(ω) = Σ_k w_k δ(ω − ω_k)`` before broadening; ``SpectralPoles.evaluate(ω, η)``
    broadens it with Lorentzians.

    Lanczos runs until the Krylov space closes or ``max_steps`` (default: the target's
    dimension, capped at 300). When the basis fits in a quarter of the memory budget it
    is kept and every vector reorthogonalised, so the poles are free of spurious copies;
    when the space closes the poles and weights are the exact ``E_k − E_ref`` and
    ``|⟨E_k|A|ψ⟩|²``.

    Returns
    -------
    SpectralPoles
    """

    threads, memory_limit = check_common(threads, memory_limit)
    problem, (psi, A) = problem_and_arguments(
        H, space, (psi, A), threads=threads, memory_limit=memory_limit
    )
    if psi is None or A is None:
        raise TypeError("spectral_poles needs psi= and A=")
    steps_cap = _check_steps(max_steps)
    start = spectral_start(problem, psi, A, target, reference_energy)
    return poles_from_start(start, max_steps=steps_cap, method=method)


def poles_from_start(start: SpectralStart, *, max_steps: int | None, method: str) -> SpectralPoles:
    """:func:`spectral_poles` from a prepared :class:`SpectralStart`."""
    from fockmill.problem.memory import available_memory

    steps_cap = max_steps
    on_target, phi, ref, norm_sq = start.on_target, start.phi, start.reference_energy, start.norm
    tgt = on_target.space
    memory_limit = on_target.memory_limit
    if norm_sq == 0.0:
        empty = np.zeros(0)
        return SpectralPoles(empty, empty, 0.0, ref, 0, True)
    limit = min(tgt.dim, 300) if steps_cap is None else min(steps_cap, tgt.dim)
    hmap = hermitian_map(on_target, vectors=4, method=method, complex_vectors=phi.dtype.kind == "c")
    avail = memory_limit if memory_limit is not None else available_memory()
    basis_bytes = limit * tgt.dim * phi.itemsize
    keep = avail is None or basis_bytes <= 0.25 * MEMORY_BUDGET * avail
    alpha, beta, _ = lanczos_coefficients(hmap, phi / np.sqrt(norm_sq), limit, keep_basis=keep)
    if alpha.size > 1:
        energies, vectors = sla.eigh_tridiagonal(alpha, beta)
    else:
        energies, vectors = alpha.copy(), np.ones((1, 1))
    weights = norm_sq * vectors[0, :] ** 2
    energies, weights, merged = _merge_copies(energies, weights)
    return SpectralPoles(
        frequencies=energies - ref,
        weights=weights,
        norm=norm_sq,
        reference_energy=ref,
        steps=int(alpha.size),
        exhausted=bool(alpha.size < limit or alpha.size == tgt.dim),
        merged=merged,
    )


def _merge_copies(
    energies: npt.NDArray[np.float64], weights: npt.NDArray[np.float64]
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64], int]:
    """Poles closer than ``MERGE_TOL`` (relative to the spectrum's scale) as one pole
    carrying their summed weight, and how many copies were merged.

    Without full reorthogonalisation, Lanczos repeats a converged Ritz value once
    orthogonality is lost (Paige 1976; Cullum & Willoughby 1985): the copies share the
    pole's weight, so S(ω) is right but the pole list shows the level twice.
    """
    if energies.size < 2:
        return energies, weights, 0
    scale = max(float(np.max(np.abs(energies))), float(np.ptp(energies)), 1e-300)
    keep_e = [float(energies[0])]
    keep_w = [float(weights[0])]
    merged = 0
    for e, w in zip(energies[1:], weights[1:], strict=True):
        if e - keep_e[-1] <= MERGE_TOL * scale:
            # The weight-weighted position keeps the first moment of the pair.
            total = keep_w[-1] + w
            if total > 0:
                keep_e[-1] = (keep_e[-1] * keep_w[-1] + e * w) / total
            keep_w[-1] = total
            merged += 1
        else:
            keep_e.append(float(e))
            keep_w.append(float(w))
    return np.asarray(keep_e), np.asarray(keep_w), merged
