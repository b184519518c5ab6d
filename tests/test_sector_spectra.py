"""Operators between symmetry sectors and momentum-resolved spectra, against dense
matrices and projectors built here from permutation matrices, against the full number
sector, and against free fermions (hard-core bosons on a ring)."""

from __future__ import annotations

import cmath
import itertools
import math
from fractions import Fraction

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import SymmetryError
from reference import between_matrix, bose_hubbard_ring, sector_occupations

# -- dense references (independent of the package's sector code) ------------------------


def dense_between(expr: fm.LadderExpr, src: fm.FockSpace, dst: fm.FockSpace) -> np.ndarray:
    """``P_dst X P_src`` by acting with each monomial on each basis state by hand:
    ``a|n⟩ = √n|n−1⟩``, ``a†|n⟩ = √(n+1)|n+1⟩`` (Sakurai & Napolitano, Modern Quantum
    Mechanics, 2nd ed. 2011, Sec. 2.3)."""
    cols = sector_occupations(src.cutoffs, src.weights, src.total, src.modulus)
    rows = sector_occupations(dst.cutoffs, dst.weights, dst.total, dst.modulus)
    return between_matrix(expr, dst.cutoffs, cols, rows)


def permutation_matrix(images: tuple[int, ...], base: fm.FockSpace) -> np.ndarray:
    """``U_g|n⟩ = |g n⟩`` with ``(g n)_{images[i]} = n_i`` on the basis of ``base``."""
    states = sector_occupations(base.cutoffs, base.weights, base.total, base.modulus).tolist()
    where = {tuple(s): k for k, s in enumerate(states)}
    u = np.zeros((len(states), len(states)))
    for k, s in enumerate(states):
        moved = [0] * len(s)
        for i, j in enumerate(images):
            moved[j] = s[i]
        u[where[tuple(moved)], k] = 1.0
    return u


def group_with_phases(pairs) -> list[tuple[tuple[int, ...], Fraction]]:
    """Every element with its phase (turns) for the labels of ``pairs``; None when the
    labels make no one-dimensional representation."""
    m = pairs[0][0].modes
    ident = tuple(range(m))
    phases = {ident: Fraction(0)}
    todo = [ident]
    while todo:
        h = todo.pop()
        for g, q in pairs:
            product = tuple(g.images[h[i]] for i in range(m))
            phase = (phases[h] + Fraction(q, g.order)) % 1
            if product not in phases:
                phases[product] = phase
                todo.append(product)
            elif phases[product] != phase:
                return None
    return list(phases.items())


def projector(base: fm.FockSpace, pairs) -> np.ndarray:
    """``P_χ = |G|⁻¹ Σ_g χ(g)^* U_g`` onto ``g|ψ⟩ = χ(g)|ψ⟩`` (the character projection
    formula: Serre, Linear Representations of Finite Groups, 1977, §2.6, Thm. 8; from
    memory)."""
    elements = group_with_phases(pairs)
    p = sum(
        cmath.exp(-2j * cmath.pi * float(t)) * permutation_matrix(images, base)
        for images, t in elements
    )
    return p / len(elements)


def expansion(sector: fm.SymmetricSpace) -> np.ndarray:
    """Columns ``expand(e_j)``: the sector basis in the base space."""
    eye = np.eye(sector.dim, dtype=complex)
    return np.column_stack([sector.expand(eye[:, j]) for j in range(sector.dim)])


def density_wave(sites: int, k: int) -> fm.LadderExpr:
    return sum(
        (cmath.exp(2j * cmath.pi * k * j / sites) * fm.number(j) for j in range(sites)),
        fm.LadderExpr(),
    )


# -- operators between sectors -----------------------------------------------------------


def cases():
    """(name, source base, target base, generators, local operator, label shifts)."""
    t4, r4 = fm.ring_translation(4), fm.ring_reflection(4)
    t5 = fm.ring_translation(5)
    tx, ty = fm.torus_translations(2, 3)
    b42 = fm.FockSpace(modes=4, cutoff=2, total=2)
    b53 = fm.FockSpace(modes=5, cutoff=2, total=3)
    b52 = fm.FockSpace(modes=5, cutoff=2, total=2)
    torus = fm.FockSpace(modes=6, cutoff=1, total=2)
    return [
        ("ring density", b42, b42, [t4], fm.number(0), [(p,) for p in range(4)]),
        ("ring removal", b53, b52, [t5], fm.lowering(0), [(p,) for p in range(5)]),
        (
            "ring complex removal",
            b42,
            fm.FockSpace(modes=4, cutoff=2, total=1),
            [t4],
            fm.raising(0) * fm.lowering(1) ** 2 + 0.3j * fm.lowering(0),
            [(p,) for p in range(4)],
        ),
        (
            "torus density",
            torus,
            torus,
            [tx, ty],
            fm.number(0),
            list(itertools.product(range(3), range(2))),
        ),
        (
            "ring with reflection",
            b42,
            b42,
            [t4, r4],
            fm.number(0) + 0.5 * fm.number(1),
            [(0, 0), (0, 1), (2, 0), (2, 1)],
        ),
    ]


@pytest.mark.parametrize("case", cases(), ids=lambda c: c[0])
def test_operators_between_sectors_match_dense_projections(case) -> None:
    # For every source label and every label shift p: the component O_p maps the
    # sector q into q + p (checked with the projectors P_χ built here), and the sector
    # matrix M satisfies expand_T(M v) = A expand_S(v) and M = E_T† A E_S.
    _, src_base, dst_base, gens, local, shifts = case
    a_full_cache = {}
    for source_labels in itertools.product(*(range(g.order) for g in gens)):
        pairs = list(zip(gens, source_labels, strict=True))
        if group_with_phases(pairs) is None:
            continue
        source = fm.SymmetricSpace(src_base, pairs)
        if source.dim == 0:
            continue
        e_s = expansion(source)
        p_s = projector(src_base, pairs)
        np.testing.assert_allclose(p_s @ e_s, e_s, atol=1e-12)
        for p in shifts:
            a = source.component(local, p)
            if a.is_zero():
                continue
            assert source.operator_labels(a) == tuple(p)
            target_pairs = [(g, (q + d) % g.order) for (g, q), d in zip(pairs, p, strict=True)]
            if group_with_phases(target_pairs) is None:
                continue
            target = fm.SymmetricSpace(dst_base, target_pairs)
            key = (p, str(a))
            if key not in a_full_cache:
                a_full_cache[key] = dense_between(a, src_base, dst_base)
            a_full = a_full_cache[key]
            p_t = projector(dst_base, target_pairs)
            # The label arithmetic, from projectors alone: A P_S = P_T A P_S.
            np.testing.assert_allclose(p_t @ a_full @ p_s, a_full @ p_s, atol=1e-12)
            if target.dim == 0:
                continue
            m = fm.build_matrix(a, source, target=target).toarray()
            assert m.shape == (target.dim, source.dim)
            e_t = expansion(target)
            np.testing.assert_allclose(m, e_t.conj().T @ a_full @ e_s, atol=1e-12)
            rng = np.random.default_rng(len(a_full_cache))
            v = rng.normal(size=source.dim) + 1j * rng.normal(size=source.dim)
            np.testing.assert_allclose(target.expand(m @ v), a_full @ source.expand(v), atol=1e-12)
            op = fm.build_operator(a, source, target=target)
            np.testing.assert_allclose(op @ v, m @ v, atol=1e-12)
            w = rng.normal(size=target.dim) + 1j * rng.normal(size=target.dim)
            np.testing.assert_allclose(op.H @ w, m.conj().T @ w, atol=1e-12)
            np.testing.assert_allclose(
                fm.prepare(a, source, target=target).matvec(v), m @ v, atol=1e-12
            )


def test_labels_follow_the_definition_on_dense_matrices() -> None:
    # g A g⁻¹ = exp(2πi p/L) A with U_g the permutation matrix: the label the package
    # reports for Σ_j e^{2πikj/L} n_j is −k mod L (definition; common practice, no
    # source), which is the shift a sector's momentum label undergoes.
    base = fm.FockSpace(modes=5, cutoff=2, total=2)
    t = fm.ring_translation(5)
    sector = fm.SymmetricSpace(base, [(t, 0)])
    u = permutation_matrix(t.images, base)
    for k in range(5):
        rho = density_wave(5, k)
        (p,) = sector.operator_labels(rho)
        a = dense_between(rho, base, base)
        np.testing.assert_allclose(u @ a @ u.T, cmath.exp(2j * cmath.pi * p / 5) * a, atol=1e-12)
        assert p == (-k) % 5
        assert sector.target_for(rho).symmetries[0][1] == (-k) % 5


def test_real_sectors_give_real_matrices() -> None:
    # With a reflection the characters are ±1: a real operator has a real matrix.
    base = fm.FockSpace(modes=4, cutoff=2, total=2)
    t, r = fm.ring_translation(4), fm.ring_reflection(4)
    source = fm.SymmetricSpace(base, [(t, 0), (r, 0)])
    staggered = sum((((-1) ** j) * fm.number(j) for j in range(4)), fm.LadderExpr())
    target = source.target_for(staggered)
    assert [q for _, q in target.symmetries] == [2, 1]
    m = fm.build_matrix(staggered, source, target=target)
    assert m.dtype == np.float64
    a = dense_between(staggered, base, base)
    np.testing.assert_allclose(
        m.toarray(), expansion(target).conj().T @ a @ expansion(source), atol=1e-12
    )


def test_refusals_name_what_is_expected() -> None:
    base = fm.FockSpace(modes=4, cutoff=2, total=2)
    t = fm.ring_translation(4)
    source = fm.SymmetricSpace(base, [(t, 1)])
    rho = density_wave(4, 1)  # label 3: sector 1 goes to 0
    wrong = fm.SymmetricSpace(base, [(t, 2)])
    with pytest.raises(SymmetryError, match=r"expected label 0, got 2"):
        fm.build_matrix(rho, source, target=wrong)
    with pytest.raises(SymmetryError, match="no definite character"):
        fm.build_matrix(fm.number(0), source, target=wrong)
    with pytest.raises(SymmetryError, match=r"labels \[0\]"):
        fm.build_matrix(rho, source)  # square: it names the sector to pass as target
    with pytest.raises(SymmetryError, match="the other is not"):
        fm.build_matrix(rho, source, target=base)
    other = fm.SymmetricSpace(base, [(fm.ring_reflection(4), 0)])
    with pytest.raises(SymmetryError, match="same generators"):
        fm.build_matrix(rho, source, target=other)


# -- spectra between sectors ------------------------------------------------------------


@pytest.fixture(scope="module")
def ring6():
    """The invented 6-site Bose–Hubbard ring (J = 1, U = 3), unit filling, cutoff 3."""
    h = bose_hubbard_ring(6, 1.0, 3.0)
    base = fm.FockSpace(modes=6, cutoff=3, total=6)
    t = fm.ring_translation(6)
    sector = fm.SymmetricSpace(base, [(t, 0)])
    ground = fm.ground_state(h, sector, method="dense", cutoff_warning=None)
    full_ground = fm.ground_state(h, base, method="dense", cutoff_warning=None)
    return h, base, t, sector, ground, full_ground


def test_spectral_function_between_sectors_equals_the_whole_number_sector(ring6) -> None:
    # The continued fraction from A|ψ⟩ is the same vector in the sector and in the
    # base space (expand is an isometry commuting with H), so S(ω) must agree
    # (common practice, no source).
    h, base, _t, sector, ground, _ = ring6
    omegas = np.linspace(-1.0, 14.0, 61)
    psi_full = sector.expand(ground.vector)
    for k in (1, 3):
        rho = density_wave(6, k)
        target = sector.target_for(rho)
        s_sector = fm.spectral_function(
            h, sector, ground.vector, rho, omegas, eta=0.2, target=target, tol=1e-9
        )
        s_full = fm.spectral_function(h, base, psi_full, rho, omegas, eta=0.2, tol=1e-9)
        np.testing.assert_allclose(s_sector, s_full, atol=1e-7 * s_full.max())
        poles = fm.spectral_poles(h, sector, ground.vector, rho, target=target)
        assert poles.exhausted and target.dim < base.dim / 4


def test_momentum_map_against_the_whole_number_sector(ring6) -> None:
    # Each row equals the whole-sector spectrum of the same component; summed over all
    # momenta the map is Σ_j S_{n_j}(ω), the local spectra of every site (Parseval over
    # the group's characters; common practice, no source). The ground state of the
    # sector is the ground state of the whole number sector (nondegenerate, k = 0).
    h, base, _t, sector, ground, full_ground = ring6
    assert abs(ground.energy - full_ground.energy) < 1e-9
    omegas = np.linspace(-1.0, 14.0, 76)
    m = fm.momentum_spectrum(h, sector, ground.vector, fm.number(0), omegas, eta=0.25, tol=1e-9)
    assert m.intensity.shape == (6, omegas.size)
    assert m.labels[:, 0].tolist() == list(range(6))
    np.testing.assert_allclose(
        m.momenta, [0, np.pi / 3, 2 * np.pi / 3, np.pi, -2 * np.pi / 3, -np.pi / 3]
    )
    psi_full = sector.expand(ground.vector)
    for row, (p,) in enumerate(m.labels):
        a = sector.component(fm.number(0), (int(p),))
        s_full = fm.spectral_function(h, base, psi_full, a, omegas, eta=0.25, tol=1e-9)
        np.testing.assert_allclose(m.intensity[row], s_full, atol=1e-7 * max(s_full.max(), 1))
    local = sum(
        fm.spectral_function(h, base, psi_full, fm.number(j), omegas, eta=0.25, tol=1e-9)
        for j in range(6)
    )
    np.testing.assert_allclose(m.intensity.sum(axis=0), local, atol=1e-6 * local.max())
    # Row weights are the static structure factor ⟨ψ|A_p†A_p|ψ⟩, here from dense matrices.
    for row, (p,) in enumerate(m.labels):
        a = dense_between(sector.component(fm.number(0), (int(p),)), base, base)
        assert abs(m.norms[row] - np.linalg.norm(a @ psi_full) ** 2) < 1e-9


def free_fermion_pairs(sites: int, particles: int, p: int) -> list[float]:
    """Particle–hole energies ε(k+q) − ε(k), k in the Fermi sea and k + q outside it,
    ε(k) = −2 cos k; fermion momenta periodic for odd N and antiperiodic for even N
    (Lieb, Schultz & Mattis 1961, Ann. Phys. 16, 407: hard-core bosons on a ring are
    free fermions after the Jordan–Wigner map, the boundary sign (−1)^{N−1}; from
    memory)."""
    shift = 0.0 if particles % 2 else 0.5
    ks = [2 * np.pi * (m + shift) / sites for m in range(sites)]
    energy = {m: -2 * np.cos(k) for m, k in enumerate(ks)}
    occupied = sorted(range(sites), key=lambda m: (energy[m], m))[:particles]
    q = (-p) % sites  # the component of n_0 with label p adds −2πp/L physically
    out = []
    for m in occupied:
        n = (m + q) % sites
        if n not in occupied:
            out.append(energy[n] - energy[m])
    return out


@pytest.mark.parametrize(("sites", "particles"), [(8, 4), (9, 3)])
def test_hard_core_density_spectrum_is_the_particle_hole_continuum(sites, particles) -> None:
    # S(q, ω) of hard-core bosons is the free-fermion one (LSM 1961): poles only at
    # particle–hole energies, inside [ε_min(q), ε_max(q)], each pair with weight 1/L,
    # total weight S(q) = (number of pairs)/L.
    hop = sum((fm.raising(j) * fm.lowering((j + 1) % sites) for j in range(sites)), fm.LadderExpr())
    h = -(hop + hop.adjoint())
    base = fm.FockSpace(modes=sites, cutoff=1, total=particles)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(sites), 0)])
    ground = fm.ground_state(h, sector, method="dense", cutoff_warning=None)
    sea = sum(
        sorted(
            e
            for e in [
                -2 * np.cos(2 * np.pi * (m + (0 if particles % 2 else 0.5)) / sites)
                for m in range(sites)
            ]
        )[:particles]
    )
    assert abs(ground.energy - sea) < 1e-9
    omegas = np.linspace(0.0, 4.5, 10)
    m = fm.momentum_spectrum(
        h, sector, ground.vector, fm.number(0), omegas, eta=0.1, poles=True, max_steps=400
    )
    for row, (p,) in enumerate(m.labels):
        poles = m.poles[row]
        if p == 0:
            # Σ_j n_j = N on the state: all weight N²/L at ω = 0.
            assert abs(m.norms[row] - particles**2 / sites) < 1e-9
            continue
        pairs = free_fermion_pairs(sites, particles, int(p))
        assert abs(m.norms[row] - len(pairs) / sites) < 1e-9
        strong = poles.weights > 1e-9
        low, high = min(pairs), max(pairs)
        assert np.all(poles.frequencies[strong] > low - 1e-7)
        assert np.all(poles.frequencies[strong] < high + 1e-7)
        for f, w in zip(poles.frequencies[strong], poles.weights[strong], strict=True):
            same = [e for e in pairs if abs(e - f) < 1e-6]
            assert same, f"pole {f} is no particle-hole energy at p={p}"
            assert abs(w - len(same) / sites) < 1e-7


def test_momentum_map_on_a_torus_and_with_listed_labels() -> None:
    # Two translations of a 2 × 3 torus: six rows, each equal to the whole-sector
    # spectrum of its component (common practice, no source); a listed subset gives the
    # same rows.
    tx, ty = fm.torus_translations(2, 3)
    edges = set()
    for site in range(6):
        edges.add(tuple(sorted((site, tx.images[site]))))
        edges.add(tuple(sorted((site, ty.images[site]))))
    h = fm.LadderExpr()
    for a, b in sorted(edges):
        term = fm.raising(a) * fm.lowering(b)
        h = h - (term + term.adjoint())
    h = h + sum((fm.raising(i) ** 2 * fm.lowering(i) ** 2 for i in range(6)), fm.LadderExpr())
    base = fm.FockSpace(modes=6, cutoff=2, total=3)
    sector = fm.SymmetricSpace(base, [(tx, 0), (ty, 0)])
    ground = fm.ground_state(h, sector, method="dense", cutoff_warning=None)
    omegas = np.linspace(-1, 10, 23)
    m = fm.momentum_spectrum(h, sector, ground.vector, fm.number(0), omegas, eta=0.3, tol=1e-9)
    assert m.intensity.shape == (6, 23) and m.momenta.shape == (6, 2)
    psi = sector.expand(ground.vector)
    for row, p in enumerate(m.labels):
        a = sector.component(fm.number(0), tuple(int(v) for v in p))
        s_full = fm.spectral_function(h, base, psi, a, omegas, eta=0.3, tol=1e-9)
        np.testing.assert_allclose(m.intensity[row], s_full, atol=1e-7 * max(s_full.max(), 1))
    some = fm.momentum_spectrum(
        h, sector, ground.vector, fm.number(0), omegas, eta=0.3, tol=1e-9, labels=[(1, 1), (2, 0)]
    )
    for row, p in enumerate(some.labels):
        full_row = next(k for k, q in enumerate(m.labels) if tuple(q) == tuple(p))
        np.testing.assert_allclose(some.intensity[row], m.intensity[full_row], atol=1e-10)


def test_quantum_removal_map_lands_in_one_quantum_fewer() -> None:
    # A(k, ω<0) of one particle on a ring: a_0's components remove the particle; only
    # the row whose momentum matches the state's carries weight 1/L·L = 1 (Bloch;
    # common practice, no source).
    sites = 5
    hop = sum((fm.raising(j) * fm.lowering((j + 1) % sites) for j in range(sites)), fm.LadderExpr())
    h = -(hop + hop.adjoint())
    base = fm.FockSpace(modes=sites, cutoff=2, total=1)
    t = fm.ring_translation(sites)
    sector = fm.SymmetricSpace(base, [(t, 2)])
    ground = fm.ground_state(h, sector, method="dense", cutoff_warning=None)
    empty = fm.FockSpace(modes=sites, cutoff=2, total=0)
    m = fm.momentum_spectrum(
        h, sector, ground.vector, fm.lowering(0), np.array([0.0]), eta=0.1, base=empty
    )
    weights = dict(zip(m.labels[:, 0].tolist(), m.norms.tolist(), strict=True))
    # Only the shift that brings label 2 to the vacuum's label 0 survives.
    assert abs(weights[3] - 1.0) < 1e-12
    assert all(abs(w) < 1e-12 for p, w in weights.items() if p != 3)


def test_momentum_spectrum_refusals() -> None:
    base = fm.FockSpace(modes=4, cutoff=1, total=2)
    h = fm.number(0) + fm.number(1) + fm.number(2) + fm.number(3)
    psi = np.zeros(base.dim)
    psi[0] = 1.0
    with pytest.raises(TypeError, match="symmetry sector"):
        fm.momentum_spectrum(h, base, psi, fm.number(0), [0.0])
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(4), 0)])
    v = np.ones(sector.dim) / math.sqrt(sector.dim)
    with pytest.raises(SymmetryError, match="one label per generator"):
        fm.momentum_spectrum(h, sector, v, fm.number(0), [0.0], labels=[(1, 2)])
    with pytest.raises(SymmetryError, match="carries labels"):
        fm.momentum_spectrum(h, sector, v, lambda p: density_wave(4, 1), [0.0], labels=[1])


# -- model files, the command line and the figure -------------------------------------------

MAP_MODEL = """
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 5
total = 5
cutoff = 3
[parameters]
J = 1.0
U = 3.0
[units]
energy = "J"
[solver]
cutoff_warning = false
[symmetry]
translation = 0
[spectrum]
operator = "number(site 0)"
momenta = MOMENTA
omegas = { start = -1.0, stop = 12.0, num = 27 }
eta = 0.3
"""


def test_model_file_momentum_map_equals_the_library_call() -> None:
    # The [spectrum] form runs fm.momentum_spectrum from the sector's ground state.
    spec = fm.parse_model_text(MAP_MODEL.replace("MOMENTA", '"all"'))
    result = fm.run_spectrum(spec)
    base = fm.FockSpace(modes=5, cutoff=3, total=5)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(5), 0)])
    h = bose_hubbard_ring(5, 1.0, 3.0)
    ground = fm.ground_state(h, sector, method="dense", cutoff_warning=None)
    omegas = np.linspace(-1.0, 12.0, 27)
    m = fm.momentum_spectrum(h, sector, ground.vector, fm.number(0), omegas, eta=0.3, poles=True)
    np.testing.assert_allclose(result.arrays["S"], m.intensity, atol=1e-6 * m.intensity.max())
    np.testing.assert_allclose(result.arrays["norms"], m.norms, atol=1e-9)
    assert result.arrays["labels"].shape == (5, 1)
    assert result.arrays["pole_rows"].size == result.arrays["pole_weights"].size
    some = fm.run_spectrum(fm.parse_model_text(MAP_MODEL.replace("MOMENTA", "[1, 3]")))
    np.testing.assert_allclose(some.arrays["S"], result.arrays["S"][[1, 3]], atol=1e-9)


@pytest.mark.parametrize(
    ("momenta", "words"),
    [
        ('"some"', "non-empty list of label shifts"),
        ("[[1, 2]]", "one label shift per generator"),
        ("[7]", "out of range"),
    ],
)
def test_model_file_momentum_map_refusals(momenta: str, words: str) -> None:
    with pytest.raises(fm.ModelFileError, match=words) as caught:
        fm.parse_model_text(MAP_MODEL.replace("MOMENTA", momenta))
    assert "spectrum.momenta" in str(caught.value)
    without = MAP_MODEL.replace("MOMENTA", '"all"').replace("[symmetry]\ntranslation = 0\n", "")
    assert without != MAP_MODEL.replace("MOMENTA", '"all"')
    with pytest.raises(fm.ModelFileError, match=r"add \[symmetry\]"):
        fm.parse_model_text(without)
    scanning = MAP_MODEL.replace("MOMENTA", '"all"').replace(
        "translation = 0", 'translation = "all"'
    )
    with pytest.raises(fm.ModelFileError, match='label "all"'):
        fm.parse_model_text(scanning)


def test_cli_prints_and_plots_a_momentum_map(tmp_path, capsys) -> None:
    import io

    import fockmill.cli.commands as cli

    model = tmp_path / "map.toml"
    model.write_text(MAP_MODEL.replace("MOMENTA", '"all"'))
    out = tmp_path / "map.sqlite"
    argv = ["spectrum", str(model), "--out", str(out)]
    have_plot = True
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        have_plot = False
    if have_plot:
        argv += ["--plot", str(tmp_path / "map.png")]
    buffer = io.StringIO()
    assert cli.main(argv, out=buffer) == 0, capsys.readouterr().err
    text = buffer.getvalue()
    assert "resolved in momentum" in text and "q a/π" in text and "strongest pole" in text
    assert (
        len(
            [
                line
                for line in text.splitlines()
                if line.lstrip().startswith(("0 ", "1 ", "2 ", "3 ", "4 "))
            ]
        )
        >= 5
    )
    buffer = io.StringIO()
    assert cli.main(["show", str(out), "--format", "csv"], out=buffer) == 0
    rows = buffer.getvalue().splitlines()
    assert rows[0] == "label_0,q_0,omega,S"
    assert len([r for r in rows[1:] if r and r[0].isdigit()]) >= 5 * 27
    if have_plot:
        assert (tmp_path / "map.png").read_bytes()[:4] == b"\x89PNG"


def test_momentum_figure_has_a_colour_bar_in_the_model_units(tmp_path) -> None:
    pytest.importorskip("matplotlib", reason="plots need matplotlib (extra plot)")
    from fockmill.plots.spectra import momentum_figure

    h = bose_hubbard_ring(4, 1.0, 2.0)
    sector = fm.SymmetricSpace(
        fm.FockSpace(modes=4, cutoff=2, total=4), [(fm.ring_translation(4), 0)]
    )
    ground = fm.ground_state(h, sector, method="dense", cutoff_warning=None)
    m = fm.momentum_spectrum(
        h, sector, ground.vector, fm.number(0), np.linspace(-1, 8, 19), eta=0.3, poles=True
    )
    figure = momentum_figure(m, unit="J", title="invented ring")
    axes = figure.get_axes()
    assert len(axes) == 2  # the map and its colour bar
    # The unit J is the hopping parameter, shown as its symbol.
    assert "($J$)" in axes[0].get_ylabel() and "q\\,a/\\pi" in axes[0].get_xlabel()
    assert "1/$J$" in axes[1].get_ylabel()
    path = fm.plot_momentum_spectrum(m, tmp_path / "m.png", unit="J")
    assert path.read_bytes()[:4] == b"\x89PNG"


def test_momentum_map_compiles_each_piece_once(monkeypatch) -> None:
    # H is compiled once on each sector a row lands in (never again on the prepared
    # source sector) and each component once, poles included (common practice, no source).
    import collections

    import fockmill.problem.problem as problem_module

    counts: collections.Counter[tuple[str, str, str]] = collections.Counter()
    original = problem_module.compile_operator

    def counting(expr: object, space: object, target: object = None) -> object:
        counts[(str(expr), repr(space), repr(target))] += 1
        return original(expr, space, target)

    monkeypatch.setattr(problem_module, "compile_operator", counting)
    h = bose_hubbard_ring(4, 1.0, 2.0)
    sector = fm.SymmetricSpace(
        fm.FockSpace(modes=4, cutoff=2, total=4), [(fm.ring_translation(4), 0)]
    )
    problem = fm.prepare(h, sector)
    psi = fm.ground_state(problem, cutoff_warning=None).vector
    counts.clear()
    fm.momentum_spectrum(problem, psi=psi, A=fm.number(0), omegas=[0.0, 1.0], poles=True)
    on_h = {key: n for key, n in counts.items() if key[0] == str(h)}
    assert (str(h), repr(sector), "None") not in on_h
    # Rows 1 and 2 land in sectors of their own; row 3 = −1 copies row 1 (time reversal).
    assert len(on_h) == 2 and set(on_h.values()) == {1}, on_h
    others = {key: n for key, n in counts.items() if key[0] != str(h)}
    assert len(others) == 3 and set(others.values()) == {1}, others


def flux_ring(sites: int, phase: float) -> fm.LadderExpr:
    """The invented ring threaded by a flux: hopping −J e^{iφ} a_{j+1}† a_j + h.c."""
    h = bose_hubbard_ring(sites, 0.0, 2.0)
    for j in range(sites):
        hop = cmath.exp(1j * phase) * fm.raising((j + 1) % sites) * fm.lowering(j)
        h = h - (hop + hop.adjoint())
    return h


def test_time_reversal_pairs_rows_only_when_it_holds(ring6) -> None:
    # Real H, real probe, real ψ: S(−p, ω) = S(p, ω) (time reversal; common practice, no
    # source), so rows −p are copies of rows p, and each equals the row computed alone.
    h, base, _t, sector, ground, _ = ring6
    omegas = np.linspace(-1.0, 14.0, 41)
    m = fm.momentum_spectrum(h, sector, ground.vector, fm.number(0), omegas, eta=0.25, tol=1e-9)
    for p in (1, 2):
        np.testing.assert_array_equal(m.intensity[p], m.intensity[6 - p])
        assert m.norms[p] == m.norms[6 - p] and m.dims[p] == m.dims[6 - p]
        alone = fm.momentum_spectrum(
            h, sector, ground.vector, fm.number(0), omegas, eta=0.25, tol=1e-9, labels=[6 - p]
        )
        np.testing.assert_allclose(
            alone.intensity[0], m.intensity[p], atol=1e-7 * m.intensity.max()
        )
    # A global phase on ψ changes nothing.
    phased = fm.momentum_spectrum(
        h, sector, 1j * ground.vector, fm.number(0), omegas, eta=0.25, tol=1e-9
    )
    np.testing.assert_allclose(phased.intensity, m.intensity, atol=1e-7 * m.intensity.max())
    # A flux breaks time reversal: rows ±p differ, and each must still match the whole
    # number sector's spectrum of the same component (computed independently there).
    flux = flux_ring(6, 0.4)
    low = fm.ground_state(flux, sector, method="dense", cutoff_warning=None)
    f = fm.momentum_spectrum(flux, sector, low.vector, fm.number(0), omegas, eta=0.25, tol=1e-9)
    assert np.abs(f.intensity[1] - f.intensity[5]).max() > 1e-3 * f.intensity.max()
    psi_full = sector.expand(low.vector)
    for p in (1, 5):
        a = sector.component(fm.number(0), (p,))
        s_full = fm.spectral_function(flux, base, psi_full, a, omegas, eta=0.25, tol=1e-9)
        np.testing.assert_allclose(f.intensity[p], s_full, atol=1e-7 * max(s_full.max(), 1))
