"""Time evolution (fm.evolve) against analytic results and scipy.linalg.expm."""

from __future__ import annotations

import math
import warnings

import fockmill as fm
import numpy as np
import pytest
import scipy.linalg as sla
from fockmill.exceptions import CutoffWarning, NotHermitianError
from hypothesis import given
from hypothesis import strategies as st
from reference import dense_matrix

REAL = st.floats(-2, 2, allow_nan=False, allow_infinity=False)
GENERATORS = st.sampled_from([fm.lowering, fm.raising, fm.number])


def coherent_state(alpha: complex, cutoff: int) -> np.ndarray:
    """|α⟩ = e^{−|α|²/2} Σ_n α^n/√(n!) |n⟩, truncated and renormalised."""
    n = np.arange(cutoff + 1)
    amplitudes = np.array([alpha**k / math.sqrt(math.factorial(k)) for k in n], dtype=complex)
    return amplitudes / np.linalg.norm(amplitudes)


def test_coherent_state_keeps_alpha_e_to_the_minus_i_omega_t():
    # Glauber 1963, Phys. Rev. 131, 2766: under H = ω a†a a coherent state stays
    # coherent with α(t) = α e^{−iωt}, so ⟨a(t)⟩ = α e^{−iωt}. Cutoff 40 for |α|² = 1.44
    # leaves a truncated weight ~1e-30, far below the tolerance.
    omega, alpha = 1.3, 1.2 * np.exp(0.4j)
    space = fm.FockSpace(modes=1, cutoff=40)
    times = np.linspace(0.0, 6.0, 13)
    ev = fm.evolve(
        omega * fm.number(0),
        space,
        coherent_state(alpha, 40),
        times,
        observables={"a": fm.lowering(0), "n": fm.number(0)},
    )
    np.testing.assert_allclose(ev.values["a"], alpha * np.exp(-1j * omega * times), atol=1e-9)
    assert ev.values["a"].dtype == np.complex128
    assert ev.values["n"].dtype == np.float64  # Hermitian observable: real
    np.testing.assert_allclose(ev.values["n"], abs(alpha) ** 2, atol=1e-9)
    assert ev.states is None


def test_jaynes_cummings_vacuum_rabi_oscillation():
    # Jaynes & Cummings 1963, Proc. IEEE 51, 89: on resonance, an excited emitter in an
    # empty cavity has P_e(t) = cos²(g t) (one excitation: the {|0,e⟩, |1,g⟩} doublet).
    omega, g = 2.0, 0.35
    space = fm.FockSpace(cutoff=[3, 1], total=1)  # cavity mode 0, emitter mode 1
    h = (
        omega * fm.number(0)
        + omega * fm.number(1)
        + g * (fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    )
    psi0 = np.zeros(space.dim)
    psi0[space.index([0, 1])] = 1.0
    times = np.linspace(0.0, 20.0, 41)
    ev = fm.evolve(h, space, psi0, times, observables={"excited": fm.number(1)})
    np.testing.assert_allclose(ev.values["excited"], np.cos(g * times) ** 2, atol=1e-9)


def test_two_coupled_resonators_exchange_one_photon():
    # Two resonators coupled by J(a0†a1 + a1†a0), one photon started in resonator 0:
    # n0(t) = cos²(Jt) (two-level Rabi problem; common practice, no source).
    j = 0.8
    space = fm.FockSpace(modes=2, cutoff=3, total=1)
    h = 1.5 * (fm.number(0) + fm.number(1)) + j * (
        fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    )
    psi0 = np.zeros(space.dim)
    psi0[space.index([1, 0])] = 1.0
    times = np.linspace(0.0, 10.0, 51)
    for method in ("csr", "operator"):
        ev = fm.evolve(h, space, psi0, times, observables={"n0": fm.number(0)}, method=method)
        np.testing.assert_allclose(ev.values["n0"], np.cos(j * times) ** 2, atol=1e-9)


@st.composite
def hermitian_cases(draw: st.DrawFn):
    """A random Hermitian expression (X + X†) on a full space of at most 36 states."""
    cutoffs = draw(st.lists(st.integers(1, 3), min_size=1, max_size=2))
    modes = len(cutoffs)
    expr = fm.LadderExpr()
    for _ in range(draw(st.integers(1, 3))):
        term = fm.LadderExpr.scalar(complex(draw(REAL), draw(REAL)))
        factors = st.tuples(GENERATORS, st.integers(0, modes - 1), st.integers(0, 2))
        for generator, mode, power in draw(st.lists(factors, max_size=3)):
            term = term * generator(mode) ** power
        expr = expr + term
    expr = expr + expr.adjoint()
    seed = draw(st.integers(0, 2**31))
    return expr, cutoffs, seed


@pytest.mark.slow
@given(hermitian_cases())
def test_evolution_equals_scipy_expm_on_random_hermitian_expressions(case):
    # Reference: ψ(t) = expm(−iHt) ψ(0) with the dense np.kron matrix of
    # tests/reference.py and scipy.linalg.expm (Padé, Al-Mohy & Higham 2009).
    expr, cutoffs, seed = case
    space = fm.FockSpace(cutoff=cutoffs)
    dense = dense_matrix(expr, cutoffs)
    rng = np.random.default_rng(seed)
    psi0 = rng.standard_normal(space.dim) + 1j * rng.standard_normal(space.dim)
    psi0 /= np.linalg.norm(psi0)
    times = np.array([0.0, 0.3, 0.3, 1.7, 4.0])
    ev = fm.evolve(expr, space, psi0, times, keep_states=True, tol=1e-10, cutoff_warning=None)
    assert ev.states is not None and ev.states.shape == (space.dim, times.size)
    for k, t in enumerate(times):
        np.testing.assert_allclose(ev.states[:, k], sla.expm(-1j * dense * t) @ psi0, atol=1e-8)
    np.testing.assert_array_equal(ev.final, ev.states[:, -1])


def test_the_given_state_is_the_state_at_time_zero():
    # Whatever times[0] is, psi0 is ψ(0); ψ(1) = expm(−iH) ψ(0) (scipy reference).
    space = fm.FockSpace(modes=2, cutoff=2)
    h = fm.number(0) + 0.4 * (fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    psi0 = np.zeros(space.dim)
    psi0[1] = 1.0
    ev = fm.evolve(h, space, psi0, [1.0])
    expected = sla.expm(-1j * fm.build_matrix(h, space).toarray()) @ psi0
    np.testing.assert_allclose(ev.final, expected, atol=1e-9)


def test_cutoff_weight_is_reported_and_warned():
    # A drive i(a† − a) displaces the vacuum: with cutoff 3 the top level fills up.
    space = fm.FockSpace(modes=1, cutoff=3)
    h = 1j * (fm.raising(0) - fm.lowering(0))
    psi0 = np.eye(space.dim)[0]
    with pytest.warns(CutoffWarning, match="mode 0"):
        ev = fm.evolve(h, space, psi0, [0.0, 1.0, 2.0])
    assert ev.top_weights[0] > 1e-3
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fm.evolve(h, space, psi0, [0.0, 1.0, 2.0], cutoff_warning=None)


@pytest.mark.parametrize(
    ("times", "match"),
    [([-1.0, 0.5], "times must be >= 0"), ([0.0, 2.0, 1.0], "non-decreasing"), ([], "non-empty")],
)
def test_bad_times_are_refused(times, match):
    space = fm.FockSpace(modes=1, cutoff=2)
    with pytest.raises(ValueError, match=match):
        fm.evolve(fm.number(0), space, np.eye(3)[0], times)


def test_bad_states_and_hamiltonians_are_refused():
    space = fm.FockSpace(modes=1, cutoff=2)
    with pytest.raises(ValueError, match="norm"):
        fm.evolve(fm.number(0), space, np.ones(3), [1.0])
    with pytest.raises(ValueError, match=r"shape \(3,\)"):
        fm.evolve(fm.number(0), space, np.ones(4) / 2, [1.0])
    with pytest.raises(NotHermitianError):
        fm.evolve(fm.raising(0), space, np.eye(3)[0], [1.0])
    with pytest.raises(ValueError, match="tol"):
        fm.evolve(fm.number(0), space, np.eye(3)[0], [1.0], tol=0.0)
