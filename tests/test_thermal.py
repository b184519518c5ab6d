"""Thermal averages (fm.thermal) against dense numpy/scipy, the truncated oscillator,
Bose–Einstein, the two-level Schottky heat capacity, and FTLM against exact."""

from __future__ import annotations

import warnings

import fockmill as fm
import numpy as np
import pytest
import scipy.linalg as sla
from fockmill.exceptions import CutoffWarning, NotHermitianError

TEMPERATURES = np.array([0.05, 0.3, 1.0, 2.5, 10.0, 100.0])


def dense_thermal(h, space, observable, temperature):
    """Tr(O ρ), ⟨H⟩ and Var(H)/T² with ρ = e^{−H/T}/Z from scipy.linalg.expm
    (shifted by the lowest diagonal element against overflow)."""
    hm = fm.build_matrix(h, space).toarray()
    om = fm.build_matrix(observable, space).toarray()
    shift = np.min(np.linalg.eigvalsh(hm))
    rho = sla.expm(-(hm - shift * np.eye(len(hm))) / temperature)
    rho /= np.trace(rho)
    energy = np.trace(rho @ hm).real
    energy2 = np.trace(rho @ hm @ hm).real
    return np.trace(rho @ om), energy, (energy2 - energy**2) / temperature**2


def test_exact_method_equals_dense_numpy_at_all_temperatures(bose_hubbard_ring):
    # Reference: the canonical density matrix e^{−H/T}/Z from scipy.linalg.expm
    # (no eigendecomposition), heat capacity as the energy variance over T²
    # (Landau & Lifshitz, Statistical Physics Part 1, 3rd ed. 1980, §112; from memory).
    h, space = bose_hubbard_ring
    hop = fm.raising(0) * fm.lowering(1)
    th = fm.thermal(
        h, space, TEMPERATURES, observables={"n0": fm.number(0), "hop": hop}, cutoff_warning=None
    )
    assert th.method == "exact"
    np.testing.assert_array_equal(th.errors, 0.0)
    for k, t in enumerate(TEMPERATURES):
        n0, energy, heat = dense_thermal(h, space, fm.number(0), t)
        hop_value, _, _ = dense_thermal(h, space, hop, t)
        np.testing.assert_allclose(th.energy[k], energy, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(th.heat_capacity[k], heat, rtol=1e-7, atol=1e-9)
        np.testing.assert_allclose(th.values["n0"][k], n0.real, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(th.values["hop"][k], hop_value, rtol=1e-9, atol=1e-9)
    assert th.values["n0"].dtype == np.float64
    assert th.values["hop"].dtype == np.complex128


@pytest.mark.parametrize("cutoff", [3, 8])
def test_truncated_oscillator_is_the_finite_geometric_sum(cutoff):
    # ⟨n⟩ = Σ_{n≤c} n xⁿ / Σ_{n≤c} xⁿ = x/(1−x) − (c+1)x^{c+1}/(1−x^{c+1}), x = e^{−ω/T}
    # (geometric series and its derivative; common practice, no source).
    omega = 1.3
    space = fm.FockSpace(modes=1, cutoff=cutoff)
    th = fm.thermal(
        omega * fm.number(0),
        space,
        TEMPERATURES,
        observables={"n": fm.number(0)},
        cutoff_warning=None,
    )
    x = np.exp(-omega / TEMPERATURES)
    expected = x / (1 - x) - (cutoff + 1) * x ** (cutoff + 1) / (1 - x ** (cutoff + 1))
    np.testing.assert_allclose(th.values["n"], expected, rtol=1e-10, atol=1e-14)
    np.testing.assert_allclose(th.energy, omega * expected, rtol=1e-10, atol=1e-14)


def test_oscillator_tends_to_bose_einstein_as_the_cutoff_grows():
    # Bose 1924, Z. Phys. 26, 178: ⟨n⟩ = 1/(e^{ω/T} − 1) for the untruncated oscillator.
    omega, temperatures = 1.0, np.array([0.2, 1.0, 3.0])
    bose = 1 / np.expm1(omega / temperatures)
    gaps = []
    for cutoff in (4, 16, 120):
        space = fm.FockSpace(modes=1, cutoff=cutoff)
        th = fm.thermal(
            omega * fm.number(0),
            space,
            temperatures,
            observables={"n": fm.number(0)},
            cutoff_warning=None,
        )
        gaps.append(np.max(np.abs(th.values["n"] - bose)))
    assert gaps[0] > gaps[1] > gaps[2]
    assert gaps[2] < 1e-12


def test_two_level_schottky_heat_capacity():
    # Two levels split by Δ: C = (Δ/T)² e^{Δ/T} / (1 + e^{Δ/T})² (Schottky anomaly;
    # Kittel & Kroemer, Thermal Physics, 2nd ed. 1980, ch. 3; from memory).
    delta = 0.7
    space = fm.FockSpace(modes=1, cutoff=1)
    th = fm.thermal(delta * fm.number(0), space, TEMPERATURES)
    r = delta / TEMPERATURES
    np.testing.assert_allclose(
        th.heat_capacity, r**2 * np.exp(r) / (1 + np.exp(r)) ** 2, rtol=1e-9, atol=1e-300
    )


def test_ftlm_agrees_with_exact_within_its_error_bar(bose_hubbard_ring):
    # Jaklič & Prelovšek 1994, Phys. Rev. B 49, 5065: FTLM is unbiased up to Lanczos
    # truncation, its statistical error shrinks as 1/√R; the reported error is a
    # jackknife over the random vectors. Allow 4 standard errors (fixed seed).
    h, space = bose_hubbard_ring
    temperatures = np.array([0.5, 1.0, 3.0, 10.0])
    observables = {"n0": fm.number(0)}
    exact = fm.thermal(
        h, space, temperatures, observables=observables, method="exact", cutoff_warning=None
    )
    ftlm = fm.thermal(
        h,
        space,
        temperatures,
        observables=observables,
        method="ftlm",
        samples=40,
        seed=7,
        cutoff_warning=None,
    )
    assert ftlm.method == "ftlm" and ftlm.samples == 40
    assert np.all(ftlm.errors > 0)
    assert np.all(np.abs(ftlm.energy - exact.energy) <= 4 * ftlm.errors)
    assert np.all(np.abs(ftlm.heat_capacity - exact.heat_capacity) <= 4 * ftlm.heat_capacity_errors)
    assert np.all(np.abs(ftlm.values["n0"] - exact.values["n0"]) <= 4 * ftlm.value_errors["n0"])
    again = fm.thermal(
        h,
        space,
        temperatures,
        observables=observables,
        method="ftlm",
        samples=40,
        seed=7,
        cutoff_warning=None,
    )
    np.testing.assert_array_equal(again.energy, ftlm.energy)  # reproducible


def test_ftlm_top_weights_follow_the_exact_ones():
    # A free space: every cutoff truncates, so the top-level weight is reported.
    space = fm.FockSpace(modes=2, cutoff=3)
    h = (
        fm.number(0)
        + 0.5 * fm.number(1)
        + 0.3 * (fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    )
    temperatures = np.array([1.0, 4.0])
    exact = fm.thermal(h, space, temperatures, method="exact", cutoff_warning=None)
    ftlm = fm.thermal(h, space, temperatures, method="ftlm", samples=60, cutoff_warning=None)
    assert exact.top_weights.shape == (2, 2)
    np.testing.assert_allclose(ftlm.top_weights, exact.top_weights, atol=0.05)


def test_cutoff_weight_warns():
    space = fm.FockSpace(modes=1, cutoff=3)
    with pytest.warns(CutoffWarning, match="thermal ensemble"):
        th = fm.thermal(fm.number(0), space, [5.0])
    assert th.top_weights[0, 0] > 0.1
    # A cutoff that the total caps is no truncation: NaN, and no warning.
    capped = fm.FockSpace(modes=2, cutoff=2, total=2)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        th = fm.thermal(fm.number(0), capped, [5.0])
    assert np.isnan(th.top_weights).all()


def test_bad_input_is_refused():
    space = fm.FockSpace(modes=1, cutoff=2)
    with pytest.raises(ValueError, match="temperatures must be > 0"):
        fm.thermal(fm.number(0), space, [1.0, 0.0])
    with pytest.raises(ValueError, match="temperatures must be > 0"):
        fm.thermal(fm.number(0), space, [-1.0])
    with pytest.raises(ValueError, match="method"):
        fm.thermal(fm.number(0), space, [1.0], method="magic")
    with pytest.raises(ValueError, match="samples"):
        fm.thermal(fm.number(0), space, [1.0], method="ftlm", samples=0)
    with pytest.raises(NotHermitianError):
        fm.thermal(fm.raising(0), space, [1.0])
