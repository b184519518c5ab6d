"""Eigensolvers, memory planning, observables and truncation diagnostics against
outside references: dense numpy eigensolvers, closed forms and perturbation theory."""

from __future__ import annotations

import math
import warnings

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import CutoffWarning, NotHermitianError, SizeLimitError
from reference import sector_matrix, sector_occupations


def ring(sites: int, hopping: float, interaction: float, disorder: float = 0.0) -> fm.LadderExpr:
    """Bose–Hubbard ring; a small deterministic site potential breaks degeneracies."""
    h = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        h = h - hopping * (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 0.5 * interaction * fm.number(i) * (fm.number(i) - 1)
        h = h + disorder * math.sin(1.7 * i + 0.3) * fm.number(i)
    return h


@pytest.mark.parametrize("method", ["dense", "csr", "operator"])
def test_lowest_levels_match_dense_numpy(method: str) -> None:
    # Reference: numpy.linalg.eigh (LAPACK) of the matrix built by hand in
    # tests/reference.sector_matrix, independent of the package's builder.
    h = ring(6, 1.0, 2.5, disorder=0.3)
    space = fm.FockSpace(modes=6, cutoff=6, total=6)
    m = sector_matrix(h, [6] * 6, total=6).real
    reference = np.linalg.eigvalsh(m)[:4]
    levels = fm.lowest_levels(h, space, k=4, method=method, tol=1e-12)
    np.testing.assert_allclose(levels.energies, reference, atol=1e-9)
    assert levels.method == method
    assert np.all(levels.residuals < 1e-7)
    # Residuals are real: recompute one by hand.
    v = levels.vectors[:, 1]
    assert np.linalg.norm(m @ v - levels.energies[1] * v) == pytest.approx(
        levels.residuals[1], abs=1e-10
    )


@pytest.mark.parametrize("method", ["dense", "csr", "operator", "lanczos"])
def test_ground_state_matches_dense_numpy(method: str) -> None:
    h = ring(7, 1.0, 4.0, disorder=0.2)
    space = fm.FockSpace(modes=7, cutoff=3, total=7)
    reference = np.linalg.eigvalsh(sector_matrix(h, [3] * 7, total=7))[0]
    # Cutoff 3 below the total 7 truncates on purpose here.
    g = fm.ground_state(h, space, method=method, tol=1e-10, cutoff_warning=None)
    assert g.energy == pytest.approx(reference, abs=1e-8)
    assert g.converged and g.residual < 1e-7
    assert g.method == method
    assert np.linalg.norm(g.vector) == pytest.approx(1.0)
    assert fm.expectation(h, space, g.vector) == pytest.approx(g.energy, abs=1e-8)
    if method != "dense":
        assert g.products > 0


def test_degenerate_ground_state_is_reported() -> None:
    # Two free bosons on a 3-site ring with hopping +J: the single-particle levels are
    # 2J cos(2πk/3) = 2J, −J, −J (tight-binding ring: Ashcroft & Mermin, Solid State
    # Physics, 1976, Chap. 10, with periodic boundaries); both bosons in the
    # doubly degenerate orbital give a 3-fold degenerate ground level at −2J.
    h = fm.LadderExpr()
    for i in range(3):
        j = (i + 1) % 3
        h = h + (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    for method in ("dense", "csr", "operator"):
        g = fm.ground_state(h, space, method=method)
        assert g.energy == pytest.approx(-2.0, abs=1e-9)
        assert g.degeneracy == 3, method
    levels = fm.lowest_levels(h, space, k=4, method="dense")
    assert levels.degeneracies[0] == 3
    assert levels.energies[3] == pytest.approx(1.0, abs=1e-9)  # 2J − J


def test_single_particle_ring_degenerate_pairs_found_by_eigsh() -> None:
    # One particle on a ring of 12 sites, hopping −1: energies −2 cos(2πk/12), so every
    # level but the lowest and the highest comes in pairs (tight-binding ring: Ashcroft &
    # Mermin, Solid State Physics, 1976, Chap. 10).
    h = ring(12, 1.0, 0.0)
    space = fm.FockSpace(modes=12, cutoff=1, total=1)
    exact = np.sort(-2 * np.cos(2 * np.pi * np.arange(12) / 12))[:5]
    for method in ("csr", "operator"):
        levels = fm.lowest_levels(h, space, k=5, method=method, seed=3)
        np.testing.assert_allclose(levels.energies, exact, atol=1e-9)
        assert levels.degeneracies[:3] == (1, 2, 2)


def test_lanczos_matches_eigsh_on_a_mid_size_sector() -> None:
    # 9-site ring at unit filling (24,310 states): the four-vector Lanczos, on the
    # matrix-free product and on the stored matrix, against scipy's eigsh (ARPACK).
    h = ring(9, 1.0, 3.0, disorder=0.1)
    space = fm.FockSpace(modes=9, cutoff=9, total=9)
    reference = fm.ground_state(h, space, method="csr", tol=1e-12)
    free = fm.ground_state(h, space, method="lanczos", tol=1e-10, store_matrix=False)
    stored = fm.ground_state(h, space, method="lanczos", tol=1e-10, store_matrix=True)
    for g in (free, stored):
        assert g.energy == pytest.approx(reference.energy, abs=1e-9)
        assert g.residual <= 1e-10 * max(1.0, abs(g.energy))
        assert abs(np.vdot(g.vector, reference.vector)) == pytest.approx(1.0, abs=1e-8)
    # Same seed: the same result whatever the thread count.
    one = fm.ground_state(h, space, method="lanczos", threads=1, store_matrix=False)
    two = fm.ground_state(h, space, method="lanczos", threads=2, store_matrix=False)
    assert one.energy == two.energy
    np.testing.assert_array_equal(one.vector, two.vector)


def test_bose_hubbard_strong_coupling_second_order() -> None:
    # Mott insulator at unit filling, U ≫ J: second-order perturbation theory gives
    # E0 ≈ −(2 bonds per site) · |−J√2|² · 2 directions / U = −4 L J² / U for a ring
    # (virtual doublon–holon pairs; second-order non-degenerate perturbation theory,
    # Sakurai & Napolitano, Modern Quantum Mechanics, 2nd ed. 2011, Sec. 5.1; the
    # Bose–Hubbard numbers derived here). The error is
    # O(J⁴/U³), so doubling U must shrink the relative error about fourfold.
    sites = 6
    space = fm.FockSpace(modes=sites, cutoff=sites, total=sites)
    errors = []
    for u in (40.0, 80.0):
        e0 = fm.ground_state(ring(sites, 1.0, u), space, method="dense").energy
        e2 = -4 * sites / u
        errors.append(abs(e0 - e2) / abs(e2))
    assert errors[0] < 0.01
    assert 3.0 < errors[0] / errors[1] < 5.0


def test_displaced_oscillator_converges_to_completed_square() -> None:
    # H = ω n + ε (a + a†) = ω (a + ε/ω)†(a + ε/ω) − ε²/ω (completing the square,
    # common practice): ground energy −ε²/ω once the cutoff holds the coherent state.
    omega, eps = 1.3, 1.1
    h = omega * fm.number(0) + eps * (fm.lowering(0) + fm.raising(0))
    scan = fm.converge_cutoffs(
        h, fm.FockSpace(modes=1, cutoff=2), energy_tol=1e-12, weight_tol=1e-12, step=2
    )
    assert scan.converged
    assert scan.energies[-1] == pytest.approx(-(eps**2) / omega, abs=1e-10)
    assert list(scan.energies) == sorted(scan.energies, reverse=True)  # variational
    assert scan.cutoffs[0] == (2,) and scan.cutoffs[-1][0] > 2
    assert scan.top_weights[-1][0] < 1e-12


def test_cutoff_warning_only_for_truncating_cutoffs() -> None:
    h = 1.0 * fm.number(0) + 2.0 * (fm.lowering(0) + fm.raising(0))
    with pytest.warns(CutoffWarning, match="cutoff may be too low"):
        fm.ground_state(h, fm.FockSpace(modes=1, cutoff=3), method="dense")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fm.ground_state(h, fm.FockSpace(modes=1, cutoff=3), method="dense", cutoff_warning=None)
        # Hard-core bosons (cutoff 1) and cutoffs that the total makes exact never warn.
        fm.ground_state(ring(4, 1.0, 0.0), fm.FockSpace(modes=4, cutoff=1, total=2))
        fm.ground_state(ring(4, 1.0, 0.0), fm.FockSpace(modes=4, cutoff=4, total=4))


def test_two_mode_squeezed_vacuum_entropy() -> None:
    # |ψ⟩ = sqrt(1−λ²) Σ λⁿ |n, n⟩ with λ = tanh r has Schmidt weights (1−λ²)λ^{2n}, so
    # S = cosh²r ln cosh²r − sinh²r ln sinh²r (entropy of the Schmidt weights: Nielsen &
    # Chuang, Quantum Computation and Quantum Information, 2000, Secs. 2.5 and 11.3; the
    # closed form from memory, as in Barnett & Phoenix, Phys. Rev. A 40, 2404 (1989)).
    r = 0.7
    lam = math.tanh(r)
    cutoff = 60
    space = fm.FockSpace(modes=2, cutoff=cutoff)
    psi = np.zeros(space.dim)
    for n in range(cutoff + 1):
        psi[space.index([n, n])] = lam**n
    c2, s2 = math.cosh(r) ** 2, math.sinh(r) ** 2
    expected = c2 * math.log(c2) - s2 * math.log(s2)
    assert fm.entanglement_entropy(space, psi, [0]) == pytest.approx(expected, abs=1e-10)
    assert fm.entanglement_entropy(space, psi, [1]) == pytest.approx(expected, abs=1e-10)
    # A product state has zero entropy.
    product = np.zeros(space.dim)
    product[space.index([3, 5])] = 1.0
    assert fm.entanglement_entropy(space, product, [0]) == pytest.approx(0.0, abs=1e-14)


def test_entropy_in_a_sector_matches_dense_partial_trace() -> None:
    # Reference: reshape the state on the full product basis and take numpy's SVD.
    h = ring(4, 1.0, 1.5, disorder=0.4)
    space = fm.FockSpace(modes=4, cutoff=4, total=4)
    g = fm.ground_state(h, space, method="dense")
    full = np.zeros((5,) * 4)
    for k, occ in enumerate(space.occupations()):
        full[tuple(occ)] = g.vector[k]
    sv = np.linalg.svd(full.reshape(25, 25), compute_uv=False)
    p = sv**2
    p = p[p > 1e-300]
    assert fm.entanglement_entropy(space, g.vector, [0, 1]) == pytest.approx(
        float(-(p * np.log(p)).sum()), abs=1e-10
    )


def test_observables_against_dense_matrices() -> None:
    # Reference: expectation values of dense matrices built from the oracle basis.
    h = ring(5, 1.0, 2.0, disorder=0.5)
    space = fm.FockSpace(modes=5, cutoff=3, total=5)
    g = fm.ground_state(h, space, method="dense", cutoff_warning=None)
    v = g.vector
    occ = sector_occupations([3] * 5, total=5).astype(float)  # brute-force basis
    np.testing.assert_allclose(fm.populations(space, v), (v**2) @ occ, atol=1e-12)
    np.testing.assert_allclose(
        fm.number_variances(space, v), (v**2) @ occ**2 - ((v**2) @ occ) ** 2, atol=1e-12
    )
    g1 = fm.one_body_matrix(space, v)
    for i in range(5):
        for j in range(5):
            m = sector_matrix(fm.raising(i) * fm.lowering(j), space.cutoffs, total=space.total)
            assert g1[i, j] == pytest.approx(v @ (m.real @ v), abs=1e-12)
    assert np.trace(g1) == pytest.approx(5.0)
    dist = fm.occupation_distribution(space, v)
    np.testing.assert_allclose(dist.sum(axis=1), 1.0)
    np.testing.assert_allclose(fm.top_level_weights(space, v), dist[:, 3])
    # ⟨a_0⟩ leaves the sector: zero, not an error.
    assert fm.expectation(fm.lowering(0), space, v) == 0


def test_memory_estimate_and_refusal() -> None:
    h = ring(10, 1.0, 1.0)
    space = fm.FockSpace(modes=10, cutoff=10, total=10)
    estimate = fm.estimate_memory(h, space)
    actual = fm.build_matrix(h, space).nnz
    assert not estimate.nnz_exact
    assert abs(estimate.nnz - actual) / actual < 0.03
    small = fm.FockSpace(modes=6, cutoff=6, total=6)
    exact = fm.estimate_memory(ring(6, 1.0, 1.0), small)
    assert exact.nnz_exact and exact.nnz == fm.build_matrix(ring(6, 1.0, 1.0), small).nnz
    with pytest.raises(SizeLimitError, match="build_operator"):
        fm.build_matrix(h, space, memory_limit=1_000_000)
    # With only room for a few vectors the solver falls back to the Lanczos method.
    budget = 6 * estimate.vector_bytes / 0.8
    assert fm.choose_method(estimate, 1, memory_limit=int(budget)) == "lanczos"
    with pytest.raises(SizeLimitError, match="no solver fits"):
        fm.choose_method(estimate, 1, memory_limit=1000)


def test_non_hermitian_input_is_refused() -> None:
    space = fm.FockSpace(modes=2, cutoff=2, total=2)
    with pytest.raises(NotHermitianError, match="adjoint"):
        fm.ground_state(fm.raising(0) * fm.lowering(1), space)


def test_cutoff_warning_counts_the_modes_it_does_not_name() -> None:
    # Eight driven oscillators, cutoff 2: a displaced vacuum with |α|² = 4 per mode puts
    # most weight near n = 4, far above the top kept level (common practice, no source).
    modes = 8
    space = fm.FockSpace(modes=modes, cutoff=2)
    h = sum(fm.number(i) - 2.0 * (fm.raising(i) + fm.lowering(i)) for i in range(modes))
    with pytest.warns(fm.CutoffWarning, match=r"… and 2 more modes") as caught:
        fm.ground_state(h, space, method="lanczos")
    assert "cutoff_warning = false" in str(caught[0].message)
