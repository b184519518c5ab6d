"""Tests for the ready-made model builders in ``fockmill.models``.

Every builder is checked twice: its pieces against expressions written out by hand
with the ladder-operator algebra, and its spectrum (dense ``numpy.linalg.eigvalsh`` on
``fm.build_matrix``) against a closed form.
"""

from __future__ import annotations

import itertools
import math

import fockmill as fm
import numpy as np
import pytest
from fockmill.models import (
    bose_hubbard,
    chain_edges,
    jaynes_cummings_hubbard,
    kerr_network,
    rectangular_edges,
    ring_edges,
    with_drives,
)
from fockmill.models.model import Model
from hypothesis import given, settings
from hypothesis import strategies as st

a = fm.lowering
ad = fm.raising
n = fm.number


def spectrum(model: Model, **values: float) -> np.ndarray:
    """All eigenvalues, ascending, from a dense reference diagonalisation."""
    matrix = fm.build_matrix(model.hamiltonian(**values), model.space).toarray()
    return np.linalg.eigvalsh(matrix)


def hop(i: int, j: int) -> fm.LadderExpr:
    return ad(i) * a(j) + ad(j) * a(i)


# -- lattice helpers ------------------------------------------------------------------


def test_chain_and_ring_edges() -> None:
    assert chain_edges(1) == []
    assert chain_edges(4) == [(0, 1), (1, 2), (2, 3)]
    assert ring_edges(3) == [(0, 1), (1, 2), (2, 0)]
    assert chain_edges(5, periodic=True) == ring_edges(5)


@pytest.mark.parametrize("sites", [1, 2])
def test_ring_needs_three_sites(sites: int) -> None:
    with pytest.raises(ValueError, match="at least 3 sites"):
        ring_edges(sites)


def test_rectangular_edges_counts_and_indices() -> None:
    open_edges = rectangular_edges(3, 4)
    # rows·(cols−1) horizontal + (rows−1)·cols vertical bonds (common practice, no source)
    assert len(open_edges) == 3 * 3 + 2 * 4
    assert (0, 1) in open_edges and (0, 4) in open_edges and (7, 11) in open_edges
    torus = rectangular_edges(3, 4, periodic=True)
    # A torus with both lengths >= 3 has exactly 2 bonds per site.
    assert len(torus) == 2 * 12
    assert len({frozenset(e) for e in torus}) == len(torus)
    # Lengths 1 and 2 add no wrapping bonds.
    assert rectangular_edges(2, 2, periodic=True) == rectangular_edges(2, 2)
    assert rectangular_edges(1, 4, periodic=True) == ring_edges(4)


# -- Bose–Hubbard ---------------------------------------------------------------------------


def test_bose_hubbard_pieces_match_hand_built() -> None:
    model = bose_hubbard([(0, 1, 0.5), (1, 2)], cutoff=2)
    assert model.name == "bose-hubbard"
    assert model.mode_labels == ("site 0", "site 1", "site 2")
    assert model.space == fm.FockSpace(3, 2)
    assert model.pieces["J"] == -(0.5 * hop(0, 1) + hop(1, 2))
    assert model.pieces["U"] == sum((0.5 * (n(i) * n(i) - n(i)) for i in range(3)), fm.LadderExpr())
    assert model.pieces["mu"] == -(n(0) + n(1) + n(2))
    assert dict(model.parameters) == {"J": 1.0, "U": 1.0, "mu": 0.0}
    h = model.hamiltonian(J=2.0, U=3.0, mu=0.25)
    hand = -2.0 * (0.5 * hop(0, 1) + hop(1, 2))
    for i in range(3):
        hand = hand + 1.5 * ad(i) ** 2 * a(i) ** 2 - 0.25 * n(i)
    assert h == hand


def test_bose_hubbard_complex_hopping_is_hermitian() -> None:
    phase = complex(math.cos(0.3), math.sin(0.3))
    model = bose_hubbard([(0, 1, phase)], total=1)
    assert model.pieces["J"] == -(phase * ad(0) * a(1) + phase.conjugate() * ad(1) * a(0))
    assert model.hamiltonian().is_hermitian()


def test_bose_hubbard_cutoff_defaults_to_total() -> None:
    model = bose_hubbard(ring_edges(6), total=6)
    assert model.space.cutoffs == (6,) * 6
    # Unit filling of 6 sites: C(11, 5) = 462 states (stars and bars: Feller, An
    # Introduction to Probability Theory vol. 1, 3rd ed. 1968, Sec. II.5; from memory).
    assert model.space.dim == math.comb(11, 5)
    assert not any(model.space.binding_cutoffs())
    assert bose_hubbard([], sites=2, total=0).space.dim == 1


@pytest.mark.parametrize(("hopping", "mu"), [(1.0, 0.0), (0.7, 0.3), (-1.3, -2.0)])
def test_two_sites_one_particle(hopping: float, mu: float) -> None:
    # The bonding and antibonding orbitals of a dimer sit at ∓J (two-state system with
    # coupling −J: Feynman, Leighton & Sands, The Feynman Lectures on Physics vol. III,
    # 1965, Chaps. 9–10; from memory for the chapters); the chemical potential shifts
    # both by −μ.
    model = bose_hubbard([(0, 1)], total=1, J=hopping, U=5.0)
    expected = np.sort([-hopping - mu, hopping - mu])
    np.testing.assert_allclose(spectrum(model, mu=mu), expected, atol=1e-12)


@pytest.mark.parametrize(("hopping", "interaction"), [(1.0, 2.0), (0.3, -1.5), (1.0, 20.0)])
def test_two_sites_two_particles(hopping: float, interaction: float) -> None:
    # Basis |2,0>, |1,1>, |0,2>: H = [[U, −√2 J, 0], [−√2 J, 0, −√2 J], [0, −√2 J, U]].
    # The antisymmetric (|2,0> − |0,2>)/√2 decouples at E = U; the symmetric pair gives
    # [[U, −2J], [−2J, 0]], so E = U/2 ± √(U²/4 + 4J²) (derived here; common practice).
    model = bose_hubbard([(0, 1)], total=2, J=hopping, U=interaction)
    root = math.sqrt(interaction**2 / 4 + 4 * hopping**2)
    expected = np.sort([interaction / 2 - root, interaction, interaction / 2 + root])
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-12)


def test_open_chain_single_particle_band() -> None:
    # Tight-binding chain of L sites: E_m = −2J cos(π m / (L + 1)), m = 1..L
    # (tight-binding band, Ashcroft & Mermin, Solid State Physics, 1976, Chap. 10, with
    # the standing-wave boundary condition of an open chain).
    sites = 7
    model = bose_hubbard(chain_edges(sites), total=1, J=0.8)
    m = np.arange(1, sites + 1)
    expected = np.sort(-2 * 0.8 * np.cos(np.pi * m / (sites + 1)))
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-12)


def test_torus_single_particle_band() -> None:
    # Square lattice with periodic boundaries: E = −2J (cos kx + cos ky) with
    # kx = 2π p / cols, ky = 2π q / rows (simple-cubic-type tight-binding band in two
    # dimensions: Ashcroft & Mermin, Solid State Physics, 1976, Chap. 10).
    rows, cols = 3, 4
    model = bose_hubbard(rectangular_edges(rows, cols, periodic=True), total=1)
    kx = 2 * np.pi * np.arange(cols) / cols
    ky = 2 * np.pi * np.arange(rows) / rows
    expected = np.sort((-2 * (np.cos(kx)[None, :] + np.cos(ky)[:, None])).ravel())
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-12)


@settings(max_examples=25, deadline=None)
@given(
    st.integers(2, 5).flatmap(
        lambda sites: st.tuples(
            st.just(sites),
            st.lists(
                st.tuples(
                    st.integers(0, sites - 1),
                    st.integers(0, sites - 1),
                    st.floats(-2, 2, allow_nan=False),
                ).filter(lambda e: e[0] != e[1]),
                max_size=8,
                unique_by=lambda e: frozenset(e[:2]),
            ),
        )
    ),
    st.floats(-2, 2, allow_nan=False),
)
def test_single_particle_sector_is_weighted_adjacency(
    graph: tuple[int, list[tuple[int, int, float]]], hopping: float
) -> None:
    # With one particle the Bose–Hubbard matrix is −J times the weighted adjacency
    # matrix minus μ (first quantisation; common practice, no source).
    sites, edges = graph
    adjacency = np.zeros((sites, sites))
    for i, j, t in edges:
        adjacency[i, j] = adjacency[j, i] = t
    model = bose_hubbard(edges, sites=sites, total=1, J=hopping)
    expected = np.linalg.eigvalsh(-hopping * adjacency)
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-10)


@pytest.mark.parametrize(
    ("edges", "kwargs", "message"),
    [
        ([(0, 0)], {"cutoff": 1}, "self-loop"),
        ([(0, 1), (1, 0)], {"cutoff": 1}, "repeats edge 0"),
        ([(0, 1), (0, 1, 2.0)], {"cutoff": 1}, "repeats edge 0"),
        ([(0, 3)], {"sites": 3, "cutoff": 1}, "names site 3 but sites=3"),
        ([(0, 1)], {}, "give cutoff"),
        ([], {"cutoff": 1}, "no edges and no sites"),
        ([(0, 1, 2, 3)], {"cutoff": 1}, "2 entries"),
        ([(0, 1, float("nan"))], {"cutoff": 1}, "finite"),
        ([(-1, 1)], {"cutoff": 1}, "non-negative"),
    ],
)
def test_bose_hubbard_rejects_bad_graphs(
    edges: list[tuple[float, ...]], kwargs: dict[str, int], message: str
) -> None:
    with pytest.raises(ValueError, match=message):
        bose_hubbard(edges, **kwargs)  # type: ignore[arg-type]


def test_bose_hubbard_rejects_non_integer_sites() -> None:
    with pytest.raises(TypeError, match="site i of edge 0"):
        bose_hubbard([(0.5, 1)], cutoff=1)  # type: ignore[list-item]


# -- Jaynes–Cummings–Hubbard ----------------------------------------------------------------


def test_jaynes_cummings_hubbard_pieces_match_hand_built() -> None:
    model = jaynes_cummings_hubbard(2, cavity_cutoff=3, total=2, g=0.2, J=0.05)
    assert model.space == fm.FockSpace(4, [3, 1, 3, 1], 2)
    assert model.mode_labels == ("cavity 0", "emitter 0", "cavity 1", "emitter 1")
    assert model.pieces["wc"] == n(0) + n(2)
    assert model.pieces["we"] == n(1) + n(3)
    assert model.pieces["g"] == hop(0, 1) + hop(2, 3)
    assert model.pieces["J"] == -hop(0, 2)
    assert dict(model.parameters) == {"wc": 1.0, "we": 1.0, "g": 0.2, "J": 0.05}
    ring = jaynes_cummings_hubbard(3, cavity_cutoff=1, periodic=True)
    assert ring.pieces["J"] == -(hop(0, 2) + hop(2, 4) + hop(4, 0))
    assert ring.space.total is None
    assert jaynes_cummings_hubbard(1, cavity_cutoff=2).pieces["J"].is_zero()


@pytest.mark.parametrize("excitations", [1, 2, 3, 5])
def test_jaynes_cummings_resonant_doublets(excitations: int) -> None:
    # Resonant Jaynes–Cummings ladder: E = n ω ± g √n
    # (Jaynes & Cummings 1963, Proc. IEEE 51, 89).
    omega, g = 1.3, 0.17
    model = jaynes_cummings_hubbard(
        1,
        wc=omega,
        we=omega,
        g=g,
        cavity_cutoff=excitations,
        total=excitations,
    )
    root = g * math.sqrt(excitations)
    expected = [excitations * omega - root, excitations * omega + root]
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-12)


def test_jaynes_cummings_detuned_doublet() -> None:
    # Detuned ladder: E = (n − ½) ω_c + ω_e/2 ± √(Δ²/4 + g² n), Δ = ω_e − ω_c
    # (Jaynes & Cummings 1963, Proc. IEEE 51, 89; form from memory, re-derived from the
    # 2×2 block [[n ω_c, g√n], [g√n, (n−1) ω_c + ω_e]]).
    wc, we, g, excitations = 1.0, 1.25, 0.1, 4
    model = jaynes_cummings_hubbard(1, wc=wc, we=we, g=g, cavity_cutoff=6, total=4)
    centre = (excitations - 0.5) * wc + we / 2
    root = math.sqrt((we - wc) ** 2 / 4 + g**2 * excitations)
    np.testing.assert_allclose(spectrum(model), [centre - root, centre + root], atol=1e-12)


def test_jaynes_cummings_hubbard_ring_one_excitation() -> None:
    # One excitation on a ring of L cavities: each Bloch mode k has photon energy
    # ε_k = ω_c − 2J cos k and mixes with the emitter at ω_e, giving
    # E = (ε_k + ω_e)/2 ± √((ε_k − ω_e)²/4 + g²) with k = 2π m / L (Bloch modes of the
    # ring: Ashcroft & Mermin, Solid State Physics, 1976, Chap. 10; each mixed with its
    # emitter as in Jaynes & Cummings, Proc. IEEE 51, 89 (1963), one excitation).
    sites, wc, we, g, hopping = 5, 1.0, 0.9, 0.08, 0.03
    model = jaynes_cummings_hubbard(
        sites,
        wc=wc,
        we=we,
        g=g,
        J=hopping,
        periodic=True,
        cavity_cutoff=1,
        total=1,
    )
    band = wc - 2 * hopping * np.cos(2 * np.pi * np.arange(sites) / sites)
    root = np.sqrt((band - we) ** 2 / 4 + g**2)
    expected = np.sort(np.concatenate([(band + we) / 2 - root, (band + we) / 2 + root]))
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-12)


def test_jaynes_cummings_hubbard_rejects_bad_input() -> None:
    with pytest.raises(ValueError, match="sites must be an integer >= 1"):
        jaynes_cummings_hubbard(0, cavity_cutoff=2)
    with pytest.raises(ValueError, match="at least 3 sites"):
        jaynes_cummings_hubbard(2, cavity_cutoff=2, periodic=True)
    with pytest.raises(ValueError, match="cavity_cutoff"):
        jaynes_cummings_hubbard(2, cavity_cutoff=0)


# -- Kerr networks ------------------------------------------------------------------------


def test_kerr_network_pieces_match_hand_built() -> None:
    model = kerr_network(
        [1.0, 1.5, 2.0],
        self_kerr=[-0.2, 0.0, 0.4],
        cross_kerr={(2, 0): 0.05},
        couplings={(0, 1): 0.1, (1, 2): 0.25j},
        cutoff=[2, 3, 2],
        total=3,
    )
    assert model.space == fm.FockSpace(3, [2, 3, 2], 3)
    assert model.pieces["frequency_scale"] == 1.0 * n(0) + 1.5 * n(1) + 2.0 * n(2)
    assert (
        model.pieces["kerr_scale"] == -0.1 * ad(0) ** 2 * a(0) ** 2 + 0.2 * ad(2) ** 2 * a(2) ** 2
    )
    assert model.pieces["cross_kerr_scale"] == 0.05 * n(0) * n(2)
    assert model.pieces["exchange_scale"] == 0.1 * hop(0, 1) + (
        0.25j * ad(1) * a(2) - 0.25j * ad(2) * a(1)
    )
    assert dict(model.parameters) == dict.fromkeys(
        ["frequency_scale", "kerr_scale", "cross_kerr_scale", "exchange_scale"], 1.0
    )
    assert model.hamiltonian().is_hermitian()
    empty = kerr_network([1.0], cutoff=2)
    assert empty.pieces["kerr_scale"].is_zero() and empty.pieces["exchange_scale"].is_zero()


def test_single_kerr_oscillator_spectrum() -> None:
    # E_n = ω n + (K/2) n (n − 1) for a lone Kerr oscillator (common practice, no source).
    omega, kerr, cutoff = 1.0, 0.15, 9
    model = kerr_network([omega], self_kerr=kerr, cutoff=cutoff)
    levels = np.arange(cutoff + 1)
    expected = np.sort(omega * levels + kerr / 2 * levels * (levels - 1))
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-12)
    # The "kerr_scale" parameter scales the whole family.
    scaled = np.sort(omega * levels + 2 * kerr / 2 * levels * (levels - 1))
    np.testing.assert_allclose(spectrum(model, kerr_scale=2.0), scaled, atol=1e-12)
    # The old name is a deprecated alias for one release.
    with pytest.warns(DeprecationWarning, match="now called 'kerr_scale'"):
        old_name = spectrum(model, kerr=2.0)
    np.testing.assert_allclose(old_name, scaled, atol=1e-12)


def test_models_namespace_lists_only_builders() -> None:
    # dir() shows the public builders, not numpy or typing helpers (project contract).
    import fockmill.models as models_module

    assert set(dir(models_module)) == set(models_module.__all__)
    assert not {"np", "math", "cast", "Any"} & set(dir(models_module))


def test_cross_kerr_and_exchange_closed_forms() -> None:
    # Cross-Kerr is diagonal: E(n0, n1) = ω0 n0 + ω1 n1 + χ n0 n1 (common practice).
    model = kerr_network([1.0, 1.4], cross_kerr={(0, 1): -0.3}, cutoff=2)
    expected = sorted(1.0 * p + 1.4 * q - 0.3 * p * q for p in range(3) for q in range(3))
    np.testing.assert_allclose(spectrum(model), expected, atol=1e-12)
    # One quantum shared by two exchange-coupled modes: normal modes at
    # (ω0 + ω1)/2 ± √((ω0 − ω1)²/4 + |g|²) (common practice, no source).
    g = 0.2 - 0.1j
    pair = kerr_network([1.0, 1.4], couplings={(0, 1): g}, cutoff=1, total=1)
    root = math.sqrt((1.0 - 1.4) ** 2 / 4 + abs(g) ** 2)
    np.testing.assert_allclose(spectrum(pair), [1.2 - root, 1.2 + root], atol=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "error", "message"),
    [
        ({"frequencies": []}, ValueError, "frequencies is empty"),
        ({"self_kerr": [0.1]}, ValueError, "self_kerr has 1 entries"),
        ({"cross_kerr": {(0, 0): 0.1}}, ValueError, "itself"),
        ({"couplings": {(0, 1): 0.1, (1, 0): 0.1}}, ValueError, "repeats"),
        ({"couplings": {(0, 2): 0.1}}, ValueError, "has 2 modes"),
        ({"cross_kerr": {(0, 1): 1j}}, TypeError, "real number"),
        ({"frequencies": [1.0, math.inf]}, ValueError, "finite"),
    ],
)
def test_kerr_network_rejects_bad_input(
    kwargs: dict[str, object], error: type[Exception], message: str
) -> None:
    arguments: dict[str, object] = {"frequencies": [1.0, 2.0], "cutoff": 2}
    arguments.update(kwargs)
    with pytest.raises(error, match=message):
        kerr_network(**arguments)  # type: ignore[arg-type]


# -- drives --------------------------------------------------------------------------------


def test_with_drives_pieces_and_spaces() -> None:
    base = kerr_network([1.0, 1.0], couplings={(0, 1): 0.1}, cutoff=4, total=3)
    coherent = with_drives(base, coherent={1: 0.3})
    assert coherent.pieces["drive"] == 0.3 * (a(1) + ad(1))
    assert coherent.space == fm.FockSpace(2, 4)
    assert coherent.parameters["drive"] == 1.0
    assert coherent.pieces["exchange_scale"] == base.pieces["exchange_scale"]
    assert coherent.name == "driven kerr-network"

    squeezed = with_drives(base, two_photon={0: 0.2j})
    assert squeezed.pieces["two_photon"] == 0.2j * ad(0) ** 2 - 0.2j * a(0) ** 2
    assert squeezed.space == fm.FockSpace(2, 4, 1, modulus=2)
    assert "drive" not in squeezed.pieces

    both = with_drives(base, coherent={0: 0.1}, two_photon={0: 0.1}, cutoff=6)
    assert both.space == fm.FockSpace(2, 6)
    full = kerr_network([1.0], cutoff=4)
    assert with_drives(full, two_photon={0: 0.1}).space == full.space


def test_with_drives_rejects_bad_input() -> None:
    base = kerr_network([1.0], cutoff=4, total=2)
    with pytest.raises(ValueError, match="give coherent"):
        with_drives(base)
    with pytest.raises(ValueError, match="has 1 modes"):
        with_drives(base, coherent={1: 0.1})
    with pytest.raises(ValueError, match="already has drive"):
        with_drives(with_drives(base, coherent={0: 0.1}), two_photon={0: 0.1})
    with pytest.raises(ValueError, match="finite"):
        with_drives(base, two_photon={0: math.nan})


def test_coherent_drive_ground_energy_converges() -> None:
    # ω a†a + ε (a + a†) = ω (a + ε/ω)†(a + ε/ω) − ε²/ω: a displaced oscillator with
    # ground energy −ε²/ω (completing the square; common practice, no source).
    omega, epsilon = 1.0, 0.8
    exact = -(epsilon**2) / omega
    errors = []
    for cutoff in (1, 3, 6, 12, 24):
        model = with_drives(kerr_network([omega], cutoff=cutoff, total=0), coherent={0: epsilon})
        assert model.space.total is None
        errors.append(spectrum(model)[0] - exact)
    # Truncation only raises the variational ground energy, shrinking as the cutoff grows.
    assert all(e >= -1e-12 for e in errors)
    assert all(later <= earlier + 1e-15 for earlier, later in itertools.pairwise(errors))
    assert errors[0] > 1e-2
    assert abs(errors[-1]) < 1e-10


@pytest.mark.parametrize(("parity", "level"), [(0, 0), (1, 1)])
def test_two_photon_drive_parity_sectors(parity: int, level: int) -> None:
    # ω a†a + λ (a†² + a²) = (ω/2 + λ) x² + (ω/2 − λ) p² − ω/2 with a = (x + ip)/√2, an
    # oscillator of frequency Ω = √(ω² − 4λ²): E_k = Ω (k + ½) − ω/2 for |2λ| < ω
    # (a Bogoliubov transformation: Bogoliubov, J. Phys. USSR 11, 23 (1947); from memory
    # for the reference). Even k live in the even sector, odd k in the odd one.
    omega, amplitude = 1.0, 0.2
    model = with_drives(kerr_network([omega], cutoff=60, total=parity), two_photon={0: amplitude})
    assert model.space.modulus == 2 and model.space.total == parity
    big_omega = math.sqrt(omega**2 - 4 * amplitude**2)
    lowest = spectrum(model)[:3]
    expected = [big_omega * (k + 0.5) - omega / 2 for k in (level, level + 2, level + 4)]
    np.testing.assert_allclose(lowest, expected, atol=1e-9)
