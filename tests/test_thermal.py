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


# -- the edges of the temperature axis ---------------------------------------------------------

EDGE_TEMPERATURES = np.array([1e-300, 1e-16, 1e-10, 1.0, 1e10])


def ring_of_four() -> tuple[fm.LadderExpr, fm.FockSpace]:
    """Invented example: 4-site Bose–Hubbard ring (t = 1, U = 3) holding 6 bosons (dim 84)."""
    h = fm.LadderExpr()
    for i in range(4):
        j = (i + 1) % 4
        h = h - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 1.5 * fm.number(i) * (fm.number(i) - 1)
    return h, fm.FockSpace(4, 6, total=6)


def dense_limits(h, space, observable):
    """Reference from numpy.linalg.eigh of the dense matrix: the T → 0 limit is the
    average over the ground manifold (canonical ensemble; common practice, no source)
    and T → ∞ the plain trace average, ⟨H⟩ → Tr H / d with T²C → Tr H²/d − (Tr H/d)²
    (high-temperature expansion of ln Z to second order; common practice, no source)."""
    hm = fm.build_matrix(h, space).toarray()
    om = fm.build_matrix(observable, space).toarray()
    energies, vectors = np.linalg.eigh(hm)
    ground = np.abs(energies - energies[0]) < 1e-9
    diag = np.einsum("ij,ij->j", vectors.conj(), om @ vectors).real
    d = len(hm)
    mean = np.trace(hm).real / d
    variance = np.trace(hm @ hm).real / d - mean**2
    return {
        "e0": energies[0],
        "o0": diag[ground].mean(),
        "e_inf": mean,
        "var_inf": variance,
        "o_inf": np.trace(om).real / d,
        "energies": energies,
        "diag": diag,
    }


def canonical(ref, t):
    """Plain Boltzmann sums at a moderate temperature (shifted by E0)."""
    w = np.exp(-(ref["energies"] - ref["e0"]) / t)
    p = w / w.sum()
    e = p @ ref["energies"]
    return e, (p @ ref["energies"] ** 2 - e**2) / t**2, p @ ref["diag"]


def test_exact_thermal_is_finite_and_right_on_the_whole_axis():
    h, space = ring_of_four()
    hop = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    ref = dense_limits(h, space, hop)
    th = fm.thermal(h, space, EDGE_TEMPERATURES, observables={"hop": hop}, method="exact")
    assert np.all(np.isfinite(th.energy)) and np.all(np.isfinite(th.heat_capacity))
    for k in range(3):  # T = 1e-300, 1e-16, 1e-10: the zero-temperature limit
        assert th.energy[k] == pytest.approx(ref["e0"], abs=1e-9)
        assert th.heat_capacity[k] == pytest.approx(0.0, abs=1e-12)
        assert th.values["hop"][k] == pytest.approx(ref["o0"], abs=1e-9)
    e1, c1, o1 = canonical(ref, 1.0)
    assert th.energy[3] == pytest.approx(e1, rel=1e-10)
    assert th.heat_capacity[3] == pytest.approx(c1, rel=1e-8)
    assert th.values["hop"][3] == pytest.approx(o1, rel=1e-9, abs=1e-12)
    t = EDGE_TEMPERATURES[4]
    assert th.energy[4] == pytest.approx(ref["e_inf"] - ref["var_inf"] / t, rel=1e-12)
    assert th.heat_capacity[4] == pytest.approx(ref["var_inf"] / t**2, rel=1e-6)
    assert th.values["hop"][4] == pytest.approx(ref["o_inf"], abs=1e-8)


def test_exact_thermal_heat_capacity_vanishes_where_t_squared_underflows():
    # T = 1e-200: T² = 0 in floating point; C must be 0, not NaN (issue 17).
    h, space = ring_of_four()
    th = fm.thermal(h, space, [1e-200, 1e-170], method="exact")
    np.testing.assert_array_equal(th.heat_capacity, 0.0)


def test_ftlm_is_finite_and_right_on_the_whole_axis():
    # Reference: the dense eigh limits above; FTLM (Jaklič & Prelovšek 1994) agrees
    # within its jackknife error bar (five standard deviations).
    h, space = ring_of_four()
    hop = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    ref = dense_limits(h, space, hop)
    th = fm.thermal(
        h,
        space,
        EDGE_TEMPERATURES,
        observables={"hop": hop, "n0": fm.number(0)},
        method="ftlm",
        samples=30,
    )
    for array in (th.energy, th.heat_capacity, th.values["hop"], th.values["n0"]):
        assert np.all(np.isfinite(array))
    for array in (th.errors, th.heat_capacity_errors, th.value_errors["hop"]):
        assert np.all(np.isfinite(array))
    hop_err = th.value_errors["hop"]
    for k in range(3):  # the zero-temperature limit: the ground-state values themselves
        assert th.energy[k] == pytest.approx(ref["e0"], abs=1e-9)
        assert th.heat_capacity[k] == pytest.approx(0.0, abs=1e-9)
        assert th.values["hop"][k] == pytest.approx(ref["o0"], abs=1e-8)
        # ⟨n0⟩ = 6/4 in every eigenstate of the clean ring (translation symmetry).
        assert th.values["n0"][k] == pytest.approx(1.5, abs=1e-8)
        assert hop_err[k] <= 1e-8
    e1, c1, o1 = canonical(ref, 1.0)
    assert abs(th.energy[3] - e1) <= 5 * th.errors[3] + 1e-9
    assert abs(th.heat_capacity[3] - c1) <= 5 * th.heat_capacity_errors[3] + 1e-9
    assert abs(th.values["hop"][3] - o1) <= 5 * hop_err[3] + 1e-9
    t = EDGE_TEMPERATURES[4]
    assert abs(th.energy[4] - (ref["e_inf"] - ref["var_inf"] / t)) <= 5 * th.errors[4] + 1e-9
    assert abs(th.values["hop"][4] - ref["o_inf"]) <= 5 * hop_err[4] + 1e-9
    assert 0 <= th.heat_capacity[4] * t**2 <= 5 * ref["var_inf"]


def test_exact_thermal_is_refused_up_front_when_the_dense_matrix_does_not_fit(monkeypatch):
    from fockmill.exceptions import SizeLimitError

    h, space = ring_of_four()
    built = []
    import fockmill.problem.builders as builders

    original = builders.build_matrix
    monkeypatch.setattr(
        builders, "build_matrix", lambda *a, **k: built.append(1) or original(*a, **k)
    )
    with pytest.raises(SizeLimitError, match=r"'exact'.*GiB.*method='ftlm'"):
        fm.thermal(h, space, [1.0], method="exact", memory_limit=2**16)
    assert built == []  # refused before building the matrix
    th = fm.thermal(h, space, [1.0], method="ftlm", memory_limit=2**26)
    assert np.isfinite(th.energy[0])
