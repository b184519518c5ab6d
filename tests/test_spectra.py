"""Spectra of built matrices against closed-form results for textbook models.

Each matrix comes from fm.build_matrix and is diagonalised densely with
numpy.linalg.eigvalsh / eigh; the expected levels come from analytic formulas, with
their sources beside each test. All parameters are invented.
"""

from __future__ import annotations

import itertools
import math
from typing import Literal

import fockmill as fm
import numpy as np
import pytest

a, adag, n = fm.lowering, fm.raising, fm.number


def levels(expr: fm.LadderExpr, space: fm.FockSpace) -> np.ndarray:
    """All eigenvalues, ascending, of the built matrix (which must be Hermitian)."""
    dense = fm.build_matrix(expr, space).toarray()
    np.testing.assert_allclose(dense, dense.conj().T, atol=1e-13)
    return np.linalg.eigvalsh(dense)


# -- single harmonic oscillator -------------------------------------------------------


@pytest.mark.parametrize("cutoff", [1, 4, 12])
@pytest.mark.parametrize("omega", [1.0, 2.35])
def test_harmonic_oscillator_ladder(cutoff: int, omega: float) -> None:
    # H = ω (a†a + 1/2) has E_n = ω (n + 1/2), n = 0, 1, 2, ... (Sakurai & Napolitano,
    # Modern Quantum Mechanics, 2nd ed. 2011, Sec. 2.3; from memory, equation number not
    # re-checked). The number operator is diagonal, so every kept level is exact.
    space = fm.FockSpace(modes=1, cutoff=cutoff)
    expected = omega * (np.arange(cutoff + 1) + 0.5)
    np.testing.assert_allclose(levels(omega * n(0) + omega / 2, space), expected, atol=1e-12)
    # The symmetric form ω (a a† + a† a) / 2 normal-orders to the same operator, so it
    # must give the same ladder including the top level (a a† = a†a + 1, Dirac 1927).
    symmetric = omega / 2 * (a(0) * adag(0) + adag(0) * a(0))
    np.testing.assert_allclose(levels(symmetric, space), expected, atol=1e-12)


# -- two coupled oscillators ------------------------------------------------------------


def coupled_oscillators(omega1: float, omega2: float, coupling: float) -> fm.LadderExpr:
    return omega1 * n(0) + omega2 * n(1) + coupling * (adag(0) * a(1) + adag(1) * a(0))


@pytest.mark.parametrize(
    ("omega1", "omega2", "coupling", "quanta", "extra_cutoff"),
    [
        (1.0, 1.3, 0.2, 3, 0),
        (2.0, 0.5, -0.7, 4, 2),
        (1.0, 1.0, 0.4, 5, 0),
        (0.8, 1.9, 1.1, 2, 5),
    ],
)
def test_coupled_oscillators_normal_modes(
    omega1: float, omega2: float, coupling: float, quanta: int, extra_cutoff: int
) -> None:
    # The quadratic form diagonalises into normal modes with frequencies
    #   Ω± = (ω1 + ω2)/2 ± sqrt(((ω1 - ω2)/2)^2 + g^2),
    # and the N-quanta levels are m Ω+ + (N - m) Ω-, m = 0..N (common practice, no
    # source). Cutoffs >= N leave the sector untruncated.
    space = fm.FockSpace(modes=2, cutoff=quanta + extra_cutoff, total=quanta)
    mean = (omega1 + omega2) / 2
    split = math.sqrt(((omega1 - omega2) / 2) ** 2 + coupling**2)
    upper, lower = mean + split, mean - split
    expected = sorted(m * upper + (quanta - m) * lower for m in range(quanta + 1))
    found = levels(coupled_oscillators(omega1, omega2, coupling), space)
    np.testing.assert_allclose(found, expected, atol=1e-11)


@pytest.mark.parametrize("coupling", [0.3, -0.3])
def test_coupled_oscillators_single_quantum_ground_state(coupling: float) -> None:
    # One quantum: H = [[ω1, g], [g, ω2]] on (|1,0>, |0,1>); the eigenvector of
    # Ω- is proportional to (g, Ω- - ω1) (2x2 eigenproblem, common practice, no
    # source). Its relative sign follows the sign of g, which the energies alone
    # cannot show.
    omega1, omega2 = 1.0, 1.4
    space = fm.FockSpace(modes=2, cutoff=1, total=1)
    dense = fm.build_matrix(coupled_oscillators(omega1, omega2, coupling), space).toarray()
    energies, vectors = np.linalg.eigh(dense)
    lower = (omega1 + omega2) / 2 - math.sqrt(((omega1 - omega2) / 2) ** 2 + coupling**2)
    assert energies[0] == pytest.approx(lower, abs=1e-12)
    expected = np.zeros(space.dim)
    expected[space.index([1, 0])] = coupling
    expected[space.index([0, 1])] = lower - omega1
    expected /= np.linalg.norm(expected)
    assert abs(expected @ vectors[:, 0]) == pytest.approx(1.0, abs=1e-12)


# -- Jaynes–Cummings -----------------------------------------------------------------


def jaynes_cummings(cavity: float, emitter: float, coupling: float) -> fm.LadderExpr:
    # Mode 0 is the cavity, mode 1 the two-level emitter (cutoff 1, so a1 = σ-).
    return cavity * n(0) + emitter * n(1) + coupling * (a(0) * adag(1) + adag(0) * a(1))


def dressed_levels(excitations: int, cavity: float, emitter: float, coupling: float) -> list:
    """The two levels with n excitations: n ω_c + Δ/2 ± sqrt(Δ^2 + 4 g^2 n)/2."""
    detuning = emitter - cavity
    rabi = math.sqrt(detuning**2 + 4 * coupling**2 * excitations)
    centre = excitations * cavity + detuning / 2
    return [centre - rabi / 2, centre + rabi / 2]


@pytest.mark.parametrize("excitations", [1, 2, 3, 6])
@pytest.mark.parametrize("extra_cutoff", [0, 3])
def test_jaynes_cummings_resonant_doublets(excitations: int, extra_cutoff: int) -> None:
    # On resonance the n-excitation doublet is n ω ± g sqrt(n) (Jaynes & Cummings
    # 1963, Proc. IEEE 51, 89; the dressed-state form as usually quoted, from
    # memory). The cavity cutoff >= n keeps |n, g> in the sector.
    omega, coupling = 5.0, 0.37
    space = fm.FockSpace(cutoff=[excitations + extra_cutoff, 1], total=excitations)
    assert space.dim == 2
    expected = [
        excitations * omega - coupling * math.sqrt(excitations),
        excitations * omega + coupling * math.sqrt(excitations),
    ]
    found = levels(jaynes_cummings(omega, omega, coupling), space)
    np.testing.assert_allclose(found, expected, atol=1e-12)


@pytest.mark.parametrize(
    ("cavity", "emitter", "coupling", "excitations"),
    [(5.0, 5.6, 0.2, 1), (5.0, 4.1, 0.45, 3), (3.0, 3.05, -0.8, 5)],
)
def test_jaynes_cummings_detuned_doublets(
    cavity: float, emitter: float, coupling: float, excitations: int
) -> None:
    # Detuned doublets split by the generalized Rabi frequency
    # sqrt(Δ^2 + 4 g^2 n), Δ = ω_emitter - ω_cavity, around n ω_c + Δ/2 (Jaynes &
    # Cummings 1963, Proc. IEEE 51, 89; form as usually quoted, from memory).
    space = fm.FockSpace(cutoff=[excitations, 1], total=excitations)
    found = levels(jaynes_cummings(cavity, emitter, coupling), space)
    expected = dressed_levels(excitations, cavity, emitter, coupling)
    np.testing.assert_allclose(found, expected, atol=1e-12)


def test_jaynes_cummings_full_truncated_space() -> None:
    # Without a sector the matrix is block diagonal in the excitation number: the
    # vacuum (0), the doublets for n = 1..C, and |C, e> alone at C ω_c + ω_e, whose
    # partner |C+1, g> lies above the cavity cutoff C (the one truncation artefact;
    # Jaynes & Cummings, Proc. IEEE 51, 89 (1963) for the doublets; form from memory).
    cavity, emitter, coupling, top = 4.0, 4.3, 0.25, 6
    space = fm.FockSpace(cutoff=[top, 1])
    expected = [0.0, top * cavity + emitter]
    for excitations in range(1, top + 1):
        expected += dressed_levels(excitations, cavity, emitter, coupling)
    found = levels(jaynes_cummings(cavity, emitter, coupling), space)
    np.testing.assert_allclose(found, sorted(expected), atol=1e-12)


# -- hard-core bosons on an open chain ----------------------------------------------------


def open_chain(sites: int, hopping: float) -> fm.LadderExpr:
    """-t Σ_i (a_i† a_{i+1} + h.c.) on an open chain."""
    expr = fm.LadderExpr()
    for i in range(sites - 1):
        expr = expr - hopping * (adag(i) * a(i + 1) + adag(i + 1) * a(i))
    return expr


@pytest.mark.parametrize(
    ("sites", "particles", "hopping"),
    [(6, 3, 1.0), (7, 2, 0.8), (8, 4, 1.0), (5, 1, 1.5), (4, 4, 1.0)],
)
def test_hard_core_bosons_open_chain(sites: int, particles: int, hopping: float) -> None:
    # Cutoff 1 makes the bosons hard-core; on an open chain the Jordan–Wigner mapping
    # turns them into free fermions with no boundary term (Lieb, Schultz & Mattis 1961,
    # Ann. Phys. 16, 407). Single-particle energies -2t cos(kπ/(L+1)), k = 1..L (open
    # tight-binding chain: Ashcroft & Mermin, Solid State Physics, 1976, Chap. 10, with
    # the standing-wave boundary condition); the N-particle levels are the sums over all
    # N-subsets, and the ground energy is the sum of the N lowest.
    expr = open_chain(sites, hopping)
    space = fm.FockSpace(modes=sites, cutoff=1, total=particles)
    single = -2 * hopping * np.cos(np.arange(1, sites + 1) * np.pi / (sites + 1))
    subset_sums = sorted(sum(s) for s in itertools.combinations(single, particles))
    found = levels(expr, space)
    assert found[0] == pytest.approx(np.sort(single)[:particles].sum(), abs=1e-11)
    np.testing.assert_allclose(found, subset_sums, atol=1e-11)


def test_soft_core_bosons_differ_from_hard_core() -> None:
    # Negative control for the test above: with cutoff 2 double occupancy is allowed
    # and the ground energy drops below the free-fermion value (more states, same
    # hopping; Rayleigh–Ritz variational principle: Sakurai & Napolitano, Modern Quantum
    # Mechanics, 2nd ed. 2011, Sec. 5.4, from memory for the section number).
    sites, particles = 6, 3
    expr = open_chain(sites, 1.0)
    single = -2 * np.cos(np.arange(1, sites + 1) * np.pi / (sites + 1))
    fermions = np.sort(single)[:particles].sum()
    soft = levels(expr, fm.FockSpace(modes=sites, cutoff=2, total=particles))[0]
    assert soft < fermions - 0.1


# -- displaced oscillator -------------------------------------------------------------------


@pytest.mark.parametrize("epsilon", [0.9, -0.6])
def test_displaced_oscillator_converges_with_cutoff(epsilon: float) -> None:
    # H = ω a†a + ε (a + a†) = ω (a + ε/ω)†(a + ε/ω) - ε²/ω by completing the square,
    # so E_k = ω k - ε²/ω and the ground state is the coherent state with
    # <a> = -ε/ω (common practice, no source). The truncated matrix is P H P, a
    # Rayleigh–Ritz restriction: E0 never goes below the exact value and does not rise
    # as the cutoff grows (Cauchy interlacing: Horn & Johnson, Matrix Analysis, 2nd ed.
    # 2013, Sec. 4.3; from memory for the section).
    omega = 1.3
    exact = -(epsilon**2) / omega
    expr = omega * n(0) + epsilon * (a(0) + adag(0))
    ground = []
    for cutoff in [1, 2, 4, 8, 16, 32]:
        ground.append(levels(expr, fm.FockSpace(modes=1, cutoff=cutoff))[0])
    assert all(e >= exact - 1e-12 for e in ground)
    assert all(later <= earlier + 1e-12 for earlier, later in itertools.pairwise(ground))
    assert ground[0] - exact > 1e-3  # cutoff 1 is visibly truncated
    assert ground[-1] == pytest.approx(exact, abs=1e-11)

    space = fm.FockSpace(modes=1, cutoff=40)
    dense = fm.build_matrix(expr, space).toarray()
    energies, vectors = np.linalg.eigh(dense)
    np.testing.assert_allclose(energies[:4], omega * np.arange(4) + exact, atol=1e-9)
    ground_vector = vectors[:, 0]
    lowering_matrix = fm.build_matrix(a(0), space).toarray()
    displacement = ground_vector.conj() @ lowering_matrix @ ground_vector
    assert displacement == pytest.approx(-epsilon / omega, abs=1e-10)


# -- the solvers against the same closed forms ---------------------------------------------


def closed_form_cases() -> list[tuple[str, fm.LadderExpr, fm.FockSpace, list[float]]]:
    """Models above with their exact lowest levels (sources as in the tests above)."""
    sites, particles = 8, 4
    single = -2 * np.cos(np.arange(1, sites + 1) * np.pi / (sites + 1))
    chain_levels = sorted(sum(s) for s in itertools.combinations(single, particles))
    cavity, emitter, coupling, top = 4.0, 4.3, 0.25, 6
    jc_levels = [0.0, top * cavity + emitter]
    for excitations in range(1, top + 1):
        jc_levels += dressed_levels(excitations, cavity, emitter, coupling)
    omega, epsilon = 1.3, 0.9
    return [
        # Lieb, Schultz & Mattis 1961: levels 3 and 4 are a degenerate pair.
        (
            "hard-core chain",
            open_chain(sites, 1.0),
            fm.FockSpace(modes=sites, cutoff=1, total=particles),
            chain_levels,
        ),
        # Jaynes & Cummings, Proc. IEEE 51, 89 (1963) (form from memory), full space.
        (
            "Jaynes–Cummings",
            jaynes_cummings(cavity, emitter, coupling),
            fm.FockSpace(cutoff=[top, 1]),
            sorted(jc_levels),
        ),
        # Completing the square (common practice), cutoff 32 converged to 1e-11.
        (
            "displaced oscillator",
            omega * n(0) + epsilon * (a(0) + adag(0)),
            fm.FockSpace(modes=1, cutoff=32),
            list(omega * np.arange(33) - epsilon**2 / omega),
        ),
    ]


@pytest.mark.parametrize("method", ["dense", "csr", "operator"])
@pytest.mark.parametrize("case", range(3), ids=["hard-core chain", "Jaynes–Cummings", "displaced"])
def test_lowest_levels_match_closed_forms(
    method: Literal["dense", "csr", "operator"], case: int
) -> None:
    # fm.lowest_levels must return the k lowest levels counted with multiplicity. A
    # single-vector Krylov start can miss one copy of a degenerate level (the hard-core
    # chain's 3rd and 4th), and which start it gets must not depend on earlier calls, so
    # the call is repeated (a solver that misses the copy one time in four, as scipy's
    # eigsh with ARPACK's own start vector does here, fails this with probability ~97%).
    _, expr, space, exact = closed_form_cases()[case]
    k = 4
    expected = np.array(exact[:k])
    expected_groups = tuple(
        len(list(group)) for _, group in itertools.groupby(np.round(expected, 8))
    )
    for _ in range(12):
        result = fm.lowest_levels(expr, space, k=k, method=method)
        assert result.method == method
        np.testing.assert_allclose(result.energies, expected, rtol=0, atol=1e-8)
        assert result.degeneracies == expected_groups
        assert result.gap == pytest.approx(expected[1] - expected[0], abs=1e-8)


@pytest.mark.parametrize("case", range(3), ids=["hard-core chain", "Jaynes–Cummings", "displaced"])
def test_lanczos_ground_state_matches_closed_forms(case: int) -> None:
    _, expr, space, exact = closed_form_cases()[case]
    ground = fm.ground_state(expr, space, method="lanczos")
    assert ground.method == "lanczos"
    assert ground.converged
    assert ground.energy == pytest.approx(exact[0], abs=1e-8)
    assert np.linalg.norm(ground.vector) == pytest.approx(1.0, abs=1e-12)
