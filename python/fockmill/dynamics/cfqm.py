"""A fourth-order commutator-free exponential integrator for ``i dψ/dt = H(t) ψ`` with
``H(t) = Σ_k f_k(t) H_k``, each exponential a Krylov (Lanczos) exponential, and
step-size control by step doubling.

The scheme (two exponentials, Gauss nodes) is

    ψ(t + h) = exp(−i h A2) exp(−i h A1) ψ(t),
    A1 = a1 H(t + c1 h) + a2 H(t + c2 h),   A2 = a2 H(t + c1 h) + a1 H(t + c2 h),
    c1,2 = 1/2 ∓ √3/6,   a1,2 = 1/4 ± √3/6,

the fourth-order commutator-free Magnus-type method of Blanes & Moan (2006, Appl. Numer.
Math. 56, 1519) as written by Alvermann & Fehske (2011, J. Comput. Phys. 230, 5930; their
two-exponential fourth-order "CFET4:2" scheme, with α1 = (3 − 2√3)/12 on the earlier
node in the exponential applied last). The equation numbers of those papers are not
quoted here: they were not at hand when this was written. The coefficients were checked
instead against the order conditions: both exponentials together weigh each Gauss node
by 1/2 (Gauss quadrature of ∫H, order 4), and for ``H(s) = H0 + s H1`` the
Baker-Campbell-Hausdorff term ``½[−ihA2, −ihA1]`` equals the second Magnus term
``(h³/12)[H0, H1]`` exactly when the mean node time of A2 exceeds that of A1 by 1/3
(here 5/12 − 1/12); the measured order (tests/test_time_dependent.py) is 4.

Each exponential ``exp(−iτA) ψ`` is built in a Krylov space of ``A`` grown until the a
posteriori estimate ``β_m |[exp(−iτT_m)]_{m,1}|`` (Saad 1992, SIAM J. Numer. Anal. 29,
209) is below its share of the tolerance; ``A ψ`` is ``Σ_k c_k (H_k ψ)`` from the parts'
compiled products, so nothing is compiled per step.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.linalg as sla

from fockmill.exceptions import ConvergenceError

__all__ = ["CFQM_A", "CFQM_C", "Integrator"]

_S3 = math.sqrt(3.0)
#: Gauss nodes of the scheme (fractions of the step).
CFQM_C = (0.5 - _S3 / 6.0, 0.5 + _S3 / 6.0)
#: Weights: A1 = a1 H(c1) + a2 H(c2), A2 = a2 H(c1) + a1 H(c2).
CFQM_A = (0.25 + _S3 / 6.0, 0.25 - _S3 / 6.0)
#: Order of the scheme (its local error grows like h^5).
ORDER = 4
#: Share of each step's error allowance given to the time discretisation; each of the
#: Krylov exponentials gets KRYLOV_SHARE (four of them make the accepted state).
TIME_SHARE = 0.5
KRYLOV_SHARE = 0.05
#: Estimates below this are round-off and count as converged.
ROUNDOFF = 1e-15
#: Step growth and shrink limits per step, and the safety factor (common practice:
#: Hairer, Nørsett & Wanner, Solving ODEs I, 2nd ed. 1993, Sec. II.4).
GROW, SHRINK, SAFETY = 4.0, 0.2, 0.9


class _KrylovFailed(Exception):
    """The Krylov space reached its largest size before the estimate met the target."""


@dataclass
class Counters:
    """Work done so far: accepted and rejected steps, products with H(t), exponentials."""

    steps: int = 0
    rejected: int = 0
    products: int = 0
    exponentials: int = 0
    error: float = 0.0


class Integrator:
    """Advance ``ψ`` under ``H(t) = Σ_k coefficient_k(t) H_k`` from one time to another.

    Parameters
    ----------
    parts : sequence of callables
        ``x -> H_k x`` for every part (the constant part included).
    coefficients : callable
        ``t -> [c_0(t), c_1(t), ...]``, one real number per part.
    dim : int
        Dimension of the states.
    krylov_dim : int
        Largest Krylov space per exponential.
    tol : float
        Accuracy of ψ at ``t_end`` in norm: each step of length ``h`` may err by
        ``tol · h / t_end``.
    t_end : float
        The last time the caller will ask for (> 0).
    max_step : float or None
        Longest step.
    fixed_step : float or None
        Take steps of this length (shortened evenly to land on each target), without
        step control; ``error`` then counts the Krylov estimates only.
    reorthogonalize : bool
        Fully reorthogonalise each Krylov vector (one classical Gram-Schmidt pass).
    """

    def __init__(
        self,
        parts: Sequence[Callable[[npt.NDArray[Any]], npt.NDArray[Any]]],
        coefficients: Callable[[float], Sequence[float]],
        *,
        dim: int,
        krylov_dim: int,
        tol: float,
        t_end: float,
        max_step: float | None = None,
        fixed_step: float | None = None,
        reorthogonalize: bool = True,
    ) -> None:
        self.parts = list(parts)
        self.coefficients = coefficients
        self.m = max(2, min(krylov_dim, dim))
        self.tol = tol
        self.t_end = t_end
        self.max_step = max_step
        self.fixed_step = fixed_step
        self.reorthogonalize = reorthogonalize
        self.basis = np.zeros((self.m, dim), dtype=np.complex128)
        self.count = Counters()
        self.h: float | None = None  # the proposed next step (set on the first call)

    # -- products and exponentials ---------------------------------------------------

    def _combination(
        self, weights: Sequence[float]
    ) -> Callable[[npt.NDArray[np.complex128]], npt.NDArray[np.complex128]]:
        active = [(c, apply) for c, apply in zip(weights, self.parts, strict=True) if c != 0.0]

        def apply(x: npt.NDArray[np.complex128]) -> npt.NDArray[np.complex128]:
            self.count.products += 1
            y: npt.NDArray[np.complex128] | None = None
            for c, part in active:
                z = np.asarray(part(x), dtype=np.complex128)
                if y is None:
                    y = z if c == 1.0 else c * z
                else:
                    y += c * z
            return np.zeros_like(x) if y is None else y

        return apply

    def _node_weights(self, t: float, h: float) -> tuple[list[float], list[float]]:
        """The coefficients of every part in A1 and A2 for the step ``[t, t + h]``."""
        f1 = self.coefficients(t + CFQM_C[0] * h)
        f2 = self.coefficients(t + CFQM_C[1] * h)
        a1, a2 = CFQM_A
        first = [a1 * x + a2 * y for x, y in zip(f1, f2, strict=True)]
        second = [a2 * x + a1 * y for x, y in zip(f1, f2, strict=True)]
        return first, second

    def _exponential(
        self,
        apply: Callable[[npt.NDArray[np.complex128]], npt.NDArray[np.complex128]],
        psi: npt.NDArray[np.complex128],
        tau: float,
        target: float,
    ) -> tuple[npt.NDArray[np.complex128], float]:
        """``exp(−iτA) ψ`` and its error estimate, or :class:`_KrylovFailed`."""
        self.count.exponentials += 1
        basis = self.basis
        norm = float(np.linalg.norm(psi))
        if norm == 0.0:
            return psi.copy(), 0.0
        basis[0] = psi / norm
        alpha = np.zeros(self.m)
        beta = np.zeros(self.m)
        scale = 1e-300
        for j in range(self.m):
            w = apply(basis[j])
            alpha[j] = float(np.vdot(basis[j], w).real)
            w -= alpha[j] * basis[j]
            if j > 0:
                w -= beta[j - 1] * basis[j - 1]
            if self.reorthogonalize:
                # ⟨v_i|w⟩ as conj(v_i · conj(w)): no conjugated copy of the basis.
                w -= basis[: j + 1].T @ (basis[: j + 1] @ w.conj()).conj()
            b = float(np.linalg.norm(w))
            beta[j] = b
            scale = max(scale, abs(alpha[j]), b)
            n = j + 1
            if n > 1:
                lam, u = sla.eigh_tridiagonal(alpha[:n], beta[: n - 1])
            else:
                lam, u = alpha[:1].copy(), np.ones((1, 1))
            phase = np.exp(-1j * tau * lam) * u[0, :]
            invariant = b <= 1e-13 * scale
            error = 0.0 if invariant else norm * b * abs(np.dot(u[-1, :], phase))
            if invariant or error <= max(target, ROUNDOFF):
                coefficients = (u @ phase) * norm
                return coefficients @ basis[:n], error
            if n < self.m:
                basis[n] = w / b
        raise _KrylovFailed

    def _step(
        self, psi: npt.NDArray[np.complex128], t: float, h: float, target: float
    ) -> tuple[npt.NDArray[np.complex128], float]:
        """One step of the scheme: ``exp(−ihA2) exp(−ihA1) ψ`` and its Krylov error."""
        first, second = self._node_weights(t, h)
        mid, e1 = self._exponential(self._combination(first), psi, h, target)
        out, e2 = self._exponential(self._combination(second), mid, h, target)
        return out, e1 + e2

    # -- stepping ----------------------------------------------------------------------

    def _allowed(self, h: float) -> float:
        return self.tol * h / self.t_end

    def _first_step(self, psi: npt.NDArray[np.complex128], t: float, span: float) -> float:
        """A first trial step ``0.5 / ‖H(t) ψ‖`` (the scale of ψ's phase rotation)."""
        weights = list(self.coefficients(t))
        rate = float(np.linalg.norm(self._combination(weights)(psi)))
        return span if rate == 0.0 else min(span, 0.5 / rate)

    def advance(
        self, psi: npt.NDArray[np.complex128], start: float, stop: float
    ) -> npt.NDArray[np.complex128]:
        """ψ at ``stop`` from ψ at ``start`` (``stop >= start``), ending exactly there.

        Raises
        ------
        ConvergenceError
            The step shrank to round-off (a coefficient jumping without a breakpoint, or
            ``tol`` far too small).
        """
        span = stop - start
        if span <= 0.0:
            return psi
        if self.fixed_step is not None:
            return self._advance_fixed(psi, start, stop)
        if self.h is None:
            self.h = self._first_step(psi, start, span)
        now = start
        while now < stop:
            h = self.h
            if self.max_step is not None:
                h = min(h, self.max_step)
            remaining = stop - now
            last = remaining <= 1.05 * h
            if last:
                h = remaining
            allowed = self._allowed(h)
            krylov_target = KRYLOV_SHARE * allowed
            try:
                full, _ = self._step(psi, now, h, krylov_target)
                half, e1 = self._step(psi, now, 0.5 * h, krylov_target)
                two, e2 = self._step(half, now + 0.5 * h, 0.5 * h, krylov_target)
            except _KrylovFailed:
                self.count.rejected += 1
                self.h = 0.5 * h
                self._check_not_stuck(now)
                continue
            # Step doubling (Richardson): the two half steps err by about
            # ‖two − full‖ / (2^p − 1) for a method of order p (Hairer, Nørsett & Wanner
            # 1993, Sec. II.4).
            error = float(np.linalg.norm(two - full)) / (2.0**ORDER - 1.0)
            share = TIME_SHARE * allowed
            if error <= max(share, ROUNDOFF):
                psi = two
                now = stop if last else now + h
                self.count.steps += 1
                self.count.error += error + e1 + e2
                factor = GROW if error <= ROUNDOFF else SAFETY * (share / error) ** (1 / ORDER)
                proposal = h * min(GROW, factor)
                # A step cut short to land on ``stop`` does not lower the next proposal.
                self.h = max(self.h, proposal) if last else proposal
            else:
                self.count.rejected += 1
                self.h = h * max(SHRINK, SAFETY * (share / error) ** (1 / ORDER))
                self._check_not_stuck(now)
        return psi

    def _advance_fixed(
        self, psi: npt.NDArray[np.complex128], start: float, stop: float
    ) -> npt.NDArray[np.complex128]:
        assert self.fixed_step is not None
        n = max(1, math.ceil((stop - start) / self.fixed_step - 1e-9))
        h = (stop - start) / n
        for i in range(n):
            try:
                psi, e = self._step(psi, start + i * h, h, KRYLOV_SHARE * self._allowed(h))
            except _KrylovFailed:
                raise ConvergenceError(
                    f"a Krylov exponential did not converge in {self.m} vectors for the fixed "
                    f"step {h:.3g} at t = {start + i * h:.6g}; take a shorter step or raise "
                    "krylov_dim"
                ) from None
            self.count.steps += 1
            self.count.error += e
        return psi

    def _check_not_stuck(self, now: float) -> None:
        assert self.h is not None
        if self.h <= 1e-12 * max(self.t_end, 1.0):
            raise ConvergenceError(
                f"the time step shrank to {self.h:.3e} at t = {now:.6g}: the Hamiltonian "
                "changes too abruptly there (a coefficient with a jump or a kink needs a "
                "breakpoint: use fm.piecewise_linear or give the callable a breakpoints "
                "attribute), or tol is below round-off; raise tol"
            )
