"""Spectral functions (fm.spectral_function, fm.spectral_poles) against dense
eigendecompositions, sum rules and the harmonic oscillator."""

from __future__ import annotations

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import ChargeError, NotHermitianError


@pytest.fixture(scope="module")
def ring_probe(bose_hubbard_ring):
    """Ground state of the invented 5-site ring (conftest), a0 from N = 5 into N = 4."""
    h, space = bose_hubbard_ring
    removed = fm.FockSpace(modes=5, cutoff=5, total=4)
    ground = fm.ground_state(h, space, method="dense")
    return h, space, removed, ground


def dense_poles(h, space, psi, a, target):
    """Exact poles E_k − E_ref and weights |⟨E_k|A|ψ⟩|² (numpy.linalg.eigh reference)."""
    energies, vectors = np.linalg.eigh(fm.build_matrix(h, target).toarray())
    phi = fm.build_matrix(a, space, target=target) @ psi
    reference = fm.expectation(h, space, psi)
    return energies - reference, np.abs(vectors.conj().T @ phi) ** 2


def test_poles_and_weights_equal_the_dense_eigendecomposition(ring_probe):
    # The continued fraction's poles are the eigenvalues of H on the Krylov space of
    # A|ψ⟩; when that space closes they are the exact levels A|ψ⟩ overlaps, with
    # weights |⟨E_k|Aψ⟩|² (Haydock, Heine & Kelly 1972, J. Phys. C 5, 2845).
    h, space, removed, ground = ring_probe
    poles = fm.spectral_poles(h, space, ground.vector, fm.lowering(0), target=removed)
    assert poles.exhausted
    freq, weight = dense_poles(h, space, ground.vector, fm.lowering(0), removed)
    seen = weight > 1e-9
    for f in freq[seen]:
        near_dense = np.abs(freq - f) < 1e-7
        near_pole = np.abs(poles.frequencies - f) < 1e-7
        assert near_pole.any(), f"no pole at {f}"
        np.testing.assert_allclose(
            poles.weights[near_pole].sum(), weight[near_dense].sum(), atol=1e-9
        )
    # Poles that carry weight are all real levels.
    for f in poles.frequencies[poles.weights > 1e-9]:
        assert np.min(np.abs(freq - f)) < 1e-7


def test_zeroth_moment_is_the_norm_of_a_psi(ring_probe):
    # Sum rule ∫ S(ω) dω = ⟨ψ|A†A|ψ⟩ (the resolvent's 1/z tail; Haydock, Heine & Kelly
    # 1972). Lorentzian tails beyond ±L lose (2/π)·η/L of the weight: 1.6e-4 here.
    h, space, removed, ground = ring_probe
    a = fm.lowering(0)
    expected = fm.expectation(a.adjoint() * a, space, ground.vector)
    poles = fm.spectral_poles(h, space, ground.vector, a, target=removed)
    np.testing.assert_allclose(poles.weights.sum(), expected, rtol=1e-12)
    np.testing.assert_allclose(poles.norm, expected, rtol=1e-12)
    omegas = np.linspace(-200.0, 200.0, 80_001)
    s = fm.spectral_function(h, space, ground.vector, a, omegas, eta=0.05, target=removed)
    integral = float(np.sum(s) * (omegas[1] - omegas[0]))
    np.testing.assert_allclose(integral, expected, rtol=5e-4)


def test_continued_fraction_equals_the_dense_resolvent(ring_probe):
    # S(ω) = −(1/π) Im Σ_k w_k / (ω + E_ref + iη − E_k) from numpy.linalg.eigh.
    h, space, removed, ground = ring_probe
    omegas = np.linspace(-8.0, 6.0, 280).reshape(7, 40)
    for eta in (0.5, 0.05):
        s = fm.spectral_function(
            h, space, ground.vector, fm.lowering(0), omegas, eta=eta, target=removed, tol=1e-10
        )
        assert s.shape == omegas.shape and s.dtype == np.float64
        freq, weight = dense_poles(h, space, ground.vector, fm.lowering(0), removed)
        expected = -(weight / (omegas[..., None] - freq + 1j * eta)).sum(-1).imag / np.pi
        np.testing.assert_allclose(s, expected, atol=1e-7 * expected.max())


def test_harmonic_oscillator_removal_and_addition():
    # H = ω a†a on |n⟩: a|n⟩ = √n|n−1⟩ gives one pole at −ω of weight n, and
    # a†|n⟩ = √(n+1)|n+1⟩ one at +ω of weight n + 1 (Dirac 1958, §34; from memory).
    omega, n = 1.7, 2
    space = fm.FockSpace(modes=1, cutoff=6)
    psi = np.eye(space.dim)[n]
    h = omega * fm.number(0)
    for probe, where, weight in ((fm.lowering(0), -omega, n), (fm.raising(0), omega, n + 1)):
        poles = fm.spectral_poles(h, space, psi, probe)
        big = poles.weights > 1e-12
        np.testing.assert_allclose(poles.frequencies[big], [where], atol=1e-12)
        np.testing.assert_allclose(poles.weights[big], [weight], atol=1e-12)
        eta = 0.1
        s = fm.spectral_function(h, space, psi, probe, [where, 0.0], eta=eta)
        lorentz = weight * (eta / np.pi) / (np.array([0.0, where]) ** 2 + eta**2)
        np.testing.assert_allclose(s, lorentz, rtol=1e-10)


def test_reference_energy_shifts_the_frequencies():
    space = fm.FockSpace(modes=1, cutoff=4)
    psi = np.eye(space.dim)[1]
    poles = fm.spectral_poles(fm.number(0), space, psi, fm.raising(0), reference_energy=0.0)
    np.testing.assert_allclose(poles.frequencies[poles.weights > 1e-12], [2.0], atol=1e-12)


def test_a_probe_that_annihilates_the_state_gives_zero():
    space = fm.FockSpace(modes=1, cutoff=3)
    s = fm.spectral_function(fm.number(0), space, np.eye(4)[0], fm.lowering(0), [0.0, 1.0])
    np.testing.assert_array_equal(s, [0.0, 0.0])


def test_bad_input_is_refused(ring_probe):
    h, space, removed, ground = ring_probe
    psi = ground.vector
    with pytest.raises(ValueError, match="eta"):
        fm.spectral_function(h, space, psi, fm.lowering(0), [0.0], eta=0.0, target=removed)
    with pytest.raises(ChargeError, match="a0†"):
        fm.spectral_function(h, space, psi, fm.raising(0), [0.0], target=removed)
    with pytest.raises(ValueError, match="norm"):
        fm.spectral_function(h, space, 2 * psi, fm.lowering(0), [0.0], target=removed)
    with pytest.raises(NotHermitianError):
        fm.spectral_function(fm.raising(0) * fm.lowering(1), space, psi, fm.number(0), [0.0])
    with pytest.raises(ValueError, match="NaN"):
        fm.spectral_function(h, space, psi, fm.number(0), [np.nan])
