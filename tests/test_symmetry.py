"""Symmetry sectors against dense references, closed forms and published results."""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import SymmetryError
from hypothesis import given
from hypothesis import strategies as st
from reference import dense_matrix, restrict, sector_occupations

# -- helpers ---------------------------------------------------------------------------


def hopping(edges: Sequence[tuple[int, int]], j: float = 1.0) -> fm.LadderExpr:
    h = fm.LadderExpr()
    for a, b in edges:
        term = fm.raising(a) * fm.lowering(b)
        h = h - j * (term + term.adjoint())
    return h


def kerr(modes: Sequence[int], u: float) -> fm.LadderExpr:
    h = fm.LadderExpr()
    for i in modes:
        h = h + 0.5 * u * fm.raising(i) ** 2 * fm.lowering(i) ** 2
    return h


def ring_edges(n: int) -> list[tuple[int, int]]:
    return [(i, (i + 1) % n) for i in range(n)]


def dense_spectrum(expr: fm.LadderExpr, space: fm.FockSpace) -> np.ndarray:
    """The oracle: np.kron matrix restricted to the brute-force sector basis."""
    full = dense_matrix(expr, space.cutoffs)
    occ_full = sector_occupations(space.cutoffs)
    occ = sector_occupations(space.cutoffs, space.weights, space.total, space.modulus)
    return np.linalg.eigvalsh(restrict(full, occ_full, occ))


def sector_spectrum(expr: fm.LadderExpr, sector: fm.SymmetricSpace) -> np.ndarray:
    if sector.dim == 0:
        return np.zeros(0)
    m = fm.build_matrix(expr, sector).toarray()
    np.testing.assert_allclose(m, m.conj().T, atol=1e-12)
    return np.linalg.eigvalsh(m)


def group_elements(gens: Sequence[fm.ModePermutation]) -> list[fm.ModePermutation]:
    ident = fm.ModePermutation(list(range(gens[0].modes)))
    seen = {ident}
    frontier = [ident]
    while frontier:
        nxt = []
        for h in frontier:
            for g in gens:
                p = g * h
                if p not in seen:
                    seen.add(p)
                    nxt.append(p)
        frontier = nxt
    return list(seen)


def symmetrised(expr: fm.LadderExpr, gens: Sequence[fm.ModePermutation]) -> fm.LadderExpr:
    out = fm.LadderExpr()
    for g in group_elements(gens):
        out = out + g.apply(expr)
    return out


def permutation_matrix(space: fm.FockSpace, g: fm.ModePermutation) -> np.ndarray:
    """The action of g on base vectors: (g n)_{images[i]} = n_i (built from occupations)."""
    occ = space.occupations().astype(np.int64)
    moved = np.empty_like(occ)
    moved[:, list(g.images)] = occ
    target = space.index(moved)
    p = np.zeros((space.dim, space.dim))
    p[target, np.arange(space.dim)] = 1.0
    return p


def assert_same_multiset(a: np.ndarray, b: np.ndarray, atol: float = 1e-9) -> None:
    assert a.size == b.size
    np.testing.assert_allclose(np.sort(a), np.sort(b), atol=atol)


def all_label_sectors(
    space: fm.FockSpace, gens: Sequence[fm.ModePermutation]
) -> list[fm.SymmetricSpace]:
    """Every sector whose labels form a one-dimensional representation."""
    out = []
    for labels in itertools.product(*(range(g.order) for g in gens)):
        try:
            out.append(fm.SymmetricSpace(space, list(zip(gens, labels, strict=True))))
        except SymmetryError:
            continue
    return out


# -- dimensions and spectra ---------------------------------------------------------------


@given(
    sites=st.integers(2, 5),
    cutoff=st.integers(1, 3),
    total=st.integers(0, 5),
    reflect=st.booleans(),
)
def test_sector_dimensions_add_up(sites: int, cutoff: int, total: int, reflect: bool) -> None:
    # The projectors onto the characters of an abelian group sum to the identity, so
    # the sector dimensions add up to the space's (Schur orthogonality; common
    # practice, no source). With the reflection the group is dihedral: its
    # one-dimensional sectors miss the two-dimensional ones, so we check that the
    # translation sectors add up and that reflection splits k = 0 exactly.
    if total > sites * cutoff:
        total = sites * cutoff
    base = fm.FockSpace(modes=sites, cutoff=cutoff, total=total)
    t = fm.ring_translation(sites)
    dims = [fm.SymmetricSpace(base, [(t, k)]).dim for k in range(sites)]
    assert sum(dims) == base.dim
    if reflect and sites > 2:  # for two sites the reflection is the translation
        r = fm.ring_reflection(sites)
        split = [fm.SymmetricSpace(base, [(t, 0), (r, q)]).dim for q in (0, 1)]
        assert sum(split) == dims[0]


@given(cutoff=st.integers(1, 2), total=st.integers(0, 4))
def test_torus_sector_dimensions_add_up(cutoff: int, total: int) -> None:
    # Two commuting translations of a 2 x 3 torus: Z2 x Z3 characters (common practice).
    base = fm.FockSpace(modes=6, cutoff=cutoff, total=min(total, 6 * cutoff))
    tx, ty = fm.torus_translations(2, 3)
    assert sum(s.dim for s in all_label_sectors(base, [tx, ty])) == base.dim


@pytest.mark.parametrize("sites", [3, 4, 5])
def test_ring_spectra_union_is_full_spectrum(sites: int) -> None:
    # Block diagonalisation by the characters of the translation group: the union of
    # the sectors' spectra is the full spectrum as a multiset (common practice).
    base = fm.FockSpace(modes=sites, cutoff=3, total=sites)
    h = hopping(ring_edges(sites), 1.0) + kerr(range(sites), 2.3)
    t = fm.ring_translation(sites)
    parts = np.concatenate([sector_spectrum(h, s) for s in all_label_sectors(base, [t])])
    assert_same_multiset(parts, dense_spectrum(h, base))


def test_torus_spectra_union_is_full_spectrum() -> None:
    # 2 x 3 torus with nearest-neighbour hopping (common practice, no source).
    tx, ty = fm.torus_translations(2, 3)
    edges = {tuple(sorted((s, tx.images[s]))) for s in range(6)}
    edges |= {tuple(sorted((s, ty.images[s]))) for s in range(6)}
    h = hopping(sorted(edges), 0.8) + kerr(range(6), 1.5)
    base = fm.FockSpace(modes=6, cutoff=2, total=3)
    parts = np.concatenate([sector_spectrum(h, s) for s in all_label_sectors(base, [tx, ty])])
    assert_same_multiset(parts, dense_spectrum(h, base))


def test_non_lattice_group_with_a_relation() -> None:
    # g1 = (0 1 2)(3 4) has order 6 and g1^3 = (3 4) = g2, so only labels with
    # exp(2πi·3q1/6) = exp(2πi·q2/2) form a representation; the others are refused,
    # and the accepted sectors still cover the spectrum (common practice).
    g1 = fm.ModePermutation([1, 2, 0, 4, 3, 5])
    g2 = fm.ModePermutation([0, 1, 2, 4, 3, 5])
    rng = np.random.default_rng(7)
    raw = fm.LadderExpr()
    for a, b in itertools.combinations(range(6), 2):
        c = complex(rng.normal(), rng.normal())
        term = c * fm.raising(a) * fm.lowering(b)
        raw = raw + term + term.adjoint()
    raw = raw + kerr(range(6), 0.9) + 0.3 * fm.number(5)
    h = symmetrised(raw, [g1, g2])
    base = fm.FockSpace(modes=6, cutoff=2, total=3)
    sectors = all_label_sectors(base, [g1, g2])
    assert len(sectors) == 6
    for s in sectors:
        q1, q2 = s.symmetries[0][1], s.symmetries[1][1]
        assert q1 % 2 == q2
    parts = np.concatenate([sector_spectrum(h, s) for s in sectors])
    assert_same_multiset(parts, dense_spectrum(h, base))
    with pytest.raises(SymmetryError, match="one-dimensional representation"):
        fm.SymmetricSpace(base, [(g1, 1), (g2, 0)])


def test_non_abelian_group_one_dimensional_sectors() -> None:
    # S3 permuting three equivalent modes: its one-dimensional representations are the
    # trivial and the sign one (common practice); each sector spectrum lies in the full
    # spectrum, and labels mixing the two are refused naming both generators.
    swap = fm.ModePermutation([1, 0, 2])
    cycle = fm.ModePermutation([1, 2, 0])
    h = hopping([(0, 1), (1, 2), (0, 2)], 1.0) + kerr(range(3), 1.1)
    base = fm.FockSpace(modes=3, cutoff=3, total=3)
    full = dense_spectrum(h, base)
    for labels in [(0, 0), (1, 0)]:
        s = fm.SymmetricSpace(base, [(swap, labels[0]), (cycle, labels[1])])
        for e in sector_spectrum(h, s):
            assert np.min(np.abs(full - e)) < 1e-9
    with pytest.raises(SymmetryError, match=r"generator 0.*generator 1"):
        fm.SymmetricSpace(base, [(swap, 0), (cycle, 1)])


def test_emitters_weights_and_parity_spaces() -> None:
    # A ring of cavity + emitter sites (two orbitals a site, cutoffs 2 and 1), on a
    # number sector and on a parity sector; union of spectra (common practice).
    sites = 3
    t = fm.ring_translation(sites, orbitals=2)
    h = fm.LadderExpr()
    for s in range(sites):
        c, e = 2 * s, 2 * s + 1
        jc = fm.raising(c) * fm.lowering(e)
        h = h + 1.0 * fm.number(c) + 0.9 * fm.number(e) + 0.2 * (jc + jc.adjoint())
    h = h + hopping([(2 * s, 2 * ((s + 1) % sites)) for s in range(sites)], 0.3)
    for base in [
        fm.FockSpace(cutoff=[2, 1] * sites, total=3),
        fm.FockSpace(cutoff=[2, 1] * sites, total=1, modulus=2),
        fm.FockSpace(cutoff=[2, 1] * sites, total=4, weights=[2, 1] * sites),
    ]:
        if base.modulus is not None or any(w != 1 for w in base.weights):
            hh = (
                h
                if base.modulus is None
                else h
                + 0.1 * sum(fm.raising(2 * s) ** 2 + fm.lowering(2 * s) ** 2 for s in range(sites))
            )
            if any(w != 1 for w in base.weights):
                # weights 2 (cavity) and 1 (emitter) conserve 2 n_c + n_e: exchange breaks it,
                # so keep the diagonal and cavity hopping only.
                hh = hopping([(2 * s, 2 * ((s + 1) % sites)) for s in range(sites)], 0.3) + kerr(
                    [2 * s for s in range(sites)], 0.7
                )
        else:
            hh = h
        parts = np.concatenate([sector_spectrum(hh, s) for s in all_label_sectors(base, [t])])
        assert_same_multiset(parts, dense_spectrum(hh, base))


# -- vectors ------------------------------------------------------------------------------


@pytest.mark.parametrize("labels", [(0, 0), (0, 1), (2, 0), (1, None), (3, None)])
def test_expanded_eigenvectors_have_the_right_character(labels: tuple[int, int | None]) -> None:
    # An eigenvector of the sector matrix expands to an eigenvector of the full matrix
    # with g ψ = exp(2πi q / order) ψ for every generator (definition of the sector).
    sites = 4
    base = fm.FockSpace(modes=sites, cutoff=2, total=3)
    t, r = fm.ring_translation(sites), fm.ring_reflection(sites)
    gens = [(t, labels[0])] + ([] if labels[1] is None else [(r, labels[1])])
    s = fm.SymmetricSpace(base, gens)
    h = hopping(ring_edges(sites), 1.0) + kerr(range(sites), 0.7)
    full = dense_matrix(h, base.cutoffs)
    full = restrict(full, sector_occupations(base.cutoffs), base.occupations())
    energies, vectors = np.linalg.eigh(fm.build_matrix(h, s).toarray())
    for e, v in zip(energies, vectors.T, strict=True):
        w = s.expand(v)
        assert np.linalg.norm(w) == pytest.approx(1.0)
        np.testing.assert_allclose(full @ w, e * w, atol=1e-10)
        for g, q in gens:
            chi = np.exp(2j * np.pi * q / g.order)
            np.testing.assert_allclose(permutation_matrix(base, g) @ w, chi * w, atol=1e-12)


@given(k=st.integers(0, 4), seed=st.integers(0, 2**32 - 1))
def test_expand_and_project_are_adjoint(k: int, seed: int) -> None:
    # <expand v, w> = <v, project w>, norms preserved, project(expand(v)) = v
    # (an isometry and its adjoint; common practice).
    base = fm.FockSpace(modes=5, cutoff=2, total=4)
    s = fm.SymmetricSpace(base, [(fm.ring_translation(5), k)])
    rng = np.random.default_rng(seed)
    v = rng.normal(size=s.dim) + 1j * rng.normal(size=s.dim)
    w = rng.normal(size=base.dim) + 1j * rng.normal(size=base.dim)
    ev = s.expand(v)
    assert np.vdot(ev, w) == pytest.approx(np.vdot(v, s.project(w)), abs=1e-10)
    assert np.linalg.norm(ev) == pytest.approx(np.linalg.norm(v))
    np.testing.assert_allclose(s.project(ev), v, atol=1e-12)


# -- published and closed-form results ----------------------------------------------------


@pytest.mark.parametrize("sites", [5, 6, 8])
def test_one_particle_dispersion(sites: int) -> None:
    # One particle on a ring: ε(k) = −2J cos(2πk/L) in momentum sector k (Bloch's
    # theorem for a tight-binding ring; common practice, no source).
    j = 0.7
    base = fm.FockSpace(modes=sites, cutoff=1, total=1)
    d = fm.momentum_levels(hopping(ring_edges(sites), j), base, fm.ring_translation(sites))
    expected = -2 * j * np.cos(2 * np.pi * np.arange(sites) / sites)
    np.testing.assert_allclose(d.energies[:, 0], expected, atol=1e-12)
    assert list(d.dims) == [1] * sites


@pytest.mark.parametrize(("sites", "particles"), [(6, 2), (6, 3), (7, 3), (5, 2)])
def test_hard_core_bosons_are_free_fermions(sites: int, particles: int) -> None:
    # Hard-core bosons hopping on a ring map to free fermions (Jordan–Wigner) whose
    # boundary condition is periodic for an odd and antiperiodic for an even particle
    # number: energies Σ −2J cos(2π(m + φ)/L) over N distinct m, φ = 0 (N odd) or 1/2
    # (N even), total momentum Σ (m + φ) mod L (Lieb, Schultz & Mattis 1961, Ann. Phys.
    # 16, 407).
    j = 1.0
    phi = 0.0 if particles % 2 else 0.5
    base = fm.FockSpace(modes=sites, cutoff=1, total=particles)
    t = fm.ring_translation(sites)
    h = hopping(ring_edges(sites), j)
    by_label: dict[int, list[float]] = {q: [] for q in range(sites)}
    for ms in itertools.combinations(range(sites), particles):
        energy = sum(-2 * j * math.cos(2 * math.pi * (m + phi) / sites) for m in ms)
        label = round(sum(m + phi for m in ms)) % sites
        by_label[label].append(energy)
    for q in range(sites):
        s = fm.SymmetricSpace(base, [(t, q)])
        assert_same_multiset(sector_spectrum(h, s), np.array(by_label[q]))


@pytest.mark.parametrize("sites", [4, 5, 6])
def test_unit_filled_bose_hubbard_ground_state_is_symmetric(sites: int) -> None:
    # Real non-positive hopping: the ground state is unique with positive amplitudes
    # (Perron–Frobenius), so it is invariant under every permutation of the lattice:
    # momentum 0, reflection-even (common practice, no source). Cutoff 2 keeps the
    # dense oracle small; the argument holds for any cutoff.
    base = fm.FockSpace(modes=sites, cutoff=2, total=sites)
    h = hopping(ring_edges(sites), 1.0) + kerr(range(sites), 3.0)
    t, r = fm.ring_translation(sites), fm.ring_reflection(sites)

    def lowest(labels: list[tuple[fm.ModePermutation, int]]) -> float:
        sector = fm.SymmetricSpace(base, labels)
        return fm.ground_state(h, sector, cutoff_warning=None).energy

    symmetric = lowest([(t, 0), (r, 0)])
    others = [lowest([(t, 0), (r, 1)])] + [lowest([(t, k)]) for k in range(1, sites)]
    assert symmetric < min(others) - 1e-6
    assert symmetric == pytest.approx(dense_spectrum(h, base)[0], abs=1e-9)


# -- every solver and observable on a sector ----------------------------------------------


def test_solvers_agree_on_a_sector() -> None:
    sites = 7
    base = fm.FockSpace(modes=sites, cutoff=3, total=sites)
    h = hopping(ring_edges(sites), 1.0) + kerr(range(sites), 2.0)
    s = fm.SymmetricSpace(base, [(fm.ring_translation(sites), 2)])
    assert fm.build_matrix(h, s).dtype == np.complex128
    energies = [
        fm.ground_state(h, s, method=m, store_matrix=stored, cutoff_warning=None).energy
        for m, stored in [("dense", None), ("csr", None), ("operator", None), ("lanczos", True)]
    ]
    energies.append(
        fm.ground_state(h, s, method="lanczos", store_matrix=False, cutoff_warning=None).energy
    )
    assert np.ptp(energies) < 1e-9
    reference = np.linalg.eigvalsh(fm.build_matrix(h, s).toarray())
    for method in ("operator", "lanczos"):
        levels = fm.lowest_levels(h, s, k=3, method=method)
        np.testing.assert_allclose(levels.energies, reference[:3], atol=1e-8)
    op = fm.build_operator(h, s)
    x = np.random.default_rng(1).normal(size=s.dim)
    np.testing.assert_allclose(op @ x, fm.build_matrix(h, s) @ x, atol=1e-12)
    even = fm.SymmetricSpace(
        base, [(fm.ring_translation(sites), 0), (fm.ring_reflection(sites), 0)]
    )
    assert fm.build_matrix(h, even).dtype == np.float64


def test_observables_on_a_sector_equal_those_of_the_expanded_state() -> None:
    sites = 5
    base = fm.FockSpace(modes=sites, cutoff=3, total=4)
    h = hopping(ring_edges(sites), 1.0) + kerr(range(sites), 1.0)
    s = fm.SymmetricSpace(base, [(fm.ring_translation(sites), 1)])
    v = fm.ground_state(h, s, cutoff_warning=None).vector
    w = s.expand(v)
    # A translation eigenstate has uniform density N/L (common practice).
    np.testing.assert_allclose(fm.populations(s, v), 4 / sites, atol=1e-12)
    np.testing.assert_allclose(fm.one_body_matrix(s, v), fm.one_body_matrix(base, w), atol=1e-12)
    odd = fm.raising(0) * fm.lowering(2)  # not invariant: fine for an expectation
    assert fm.expectation(odd, s, v) == pytest.approx(fm.expectation(odd, base, w))
    assert fm.entanglement_entropy(s, v, [0, 1]) == pytest.approx(
        fm.entanglement_entropy(base, w, [0, 1])
    )
    np.testing.assert_allclose(fm.number_variances(s, v), fm.number_variances(base, w))
    np.testing.assert_allclose(fm.top_level_weights(s, v), fm.top_level_weights(base, w))


def test_empty_sector_is_allowed() -> None:
    # Unit filling with cutoff 1 has the single state |1111>, invariant under T:
    # every k != 0 sector is empty (not an error).
    base = fm.FockSpace(modes=4, cutoff=1, total=4)
    s = fm.SymmetricSpace(base, [(fm.ring_translation(4), 1)])
    assert s.dim == 0
    assert fm.build_matrix(hopping(ring_edges(4)), s).shape == (0, 0)
    assert s.expand(np.zeros(0)).shape == (base.dim,)


def test_pickling_rebuilds_the_sector() -> None:
    import pickle

    base = fm.FockSpace(modes=4, cutoff=2, total=2)
    s = fm.SymmetricSpace(base, [(fm.ring_translation(4), 1)])
    s2 = pickle.loads(pickle.dumps(s))
    assert s2 == s and s2.dim == s.dim


# -- errors ------------------------------------------------------------------------------


def test_refusals() -> None:
    base = fm.FockSpace(modes=4, cutoff=2, total=2)
    t, r = fm.ring_translation(4), fm.ring_reflection(4)
    with pytest.raises(SymmetryError, match="bijection"):
        fm.ModePermutation([0, 0, 1])
    with pytest.raises(TypeError):
        fm.ModePermutation("0123")
    with pytest.raises(TypeError):
        fm.ModePermutation([0, 1.0])
    with pytest.raises(SymmetryError, match=r"labels run over 0\.\.3"):
        fm.SymmetricSpace(base, [(t, 4)])
    with pytest.raises(SymmetryError, match="permutes 3 modes"):
        fm.SymmetricSpace(base, [(fm.ModePermutation([1, 2, 0]), 0)])
    with pytest.raises(SymmetryError, match="cutoff"):
        fm.SymmetricSpace(fm.FockSpace(cutoff=[1, 2, 2]), [(fm.ModePermutation([1, 2, 0]), 0)])
    with pytest.raises(SymmetryError, match="weight"):
        fm.SymmetricSpace(
            fm.FockSpace(cutoff=2, modes=2, total=2, weights=[1, 2]),
            [(fm.ModePermutation([1, 0]), 0)],
        )
    with pytest.raises(SymmetryError, match=r"generator 0.*generator 1"):
        fm.SymmetricSpace(base, [(t, 1), (r, 0)])
    with pytest.raises(TypeError):
        fm.SymmetricSpace("space", [(t, 0)])  # type: ignore[arg-type]
    with pytest.raises(TypeError):
        fm.SymmetricSpace(base, [t])  # type: ignore[list-item]
    with pytest.raises(TypeError):
        fm.SymmetricSpace(base, [(t, 0.5)])  # type: ignore[list-item]
    with pytest.raises(TypeError):
        fm.SymmetricSpace(base, [([1, 2, 3, 0], 0)])  # type: ignore[list-item]


def test_non_invariant_hamiltonian_is_refused_naming_term_and_generator() -> None:
    base = fm.FockSpace(modes=4, cutoff=2, total=2)
    t = fm.ring_translation(4)
    s = fm.SymmetricSpace(base, [(t, 0)])
    chain = hopping([(0, 1), (1, 2), (2, 3)])  # open chain: the bond 3-0 is missing
    for call in (
        lambda: fm.build_matrix(chain, s),
        lambda: fm.build_operator(chain, s),
        lambda: fm.ground_state(chain, s),
        lambda: fm.lowest_levels(chain, s, k=2),
    ):
        with pytest.raises(SymmetryError, match=r"generator 0 .*a\d†? a\d"):
            call()
    # Observables accept any expression.
    v = np.ones(s.dim)
    assert np.isfinite(fm.expectation(chain, s, v))
