"""Fock spaces that fix several conserved charges at once (``charges=[fm.Charge(...)]``).

References are outside the package: brute-force enumeration of the product basis with
``itertools.product`` / ``tests/reference.py`` (common practice, no source), Hamiltonians
from explicit Kronecker products of single-mode ladder matrices (sparse, so that the
4096 states of six modes stay cheap) or from acting with each monomial on each kept state
by hand (``reference.between_matrix``, ``reference.sector_matrix``), and the real-space
Bose–Hubbard ring in its translation sectors for the momentum-space ring.
"""

from __future__ import annotations

import functools
import itertools
import pickle

import fockmill as fm
import numpy as np
import pytest
import scipy.sparse as sparse
from fockmill import _native
from fockmill.exceptions import ChargeError, SizeLimitError, SpaceError
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import (
    between_matrix,
    bose_hubbard_ring,
    dense_matrix,
    full_basis,
    restrict,
    sector_matrix,
    single_mode_matrices,
)


def keeps(occ: np.ndarray, charges: list[fm.Charge]) -> np.ndarray:
    """Rows of ``occ`` that keep every charge (brute force)."""
    mask = np.ones(len(occ), dtype=bool)
    for c in charges:
        w = np.broadcast_to(np.asarray(c.weights, dtype=np.int64), (occ.shape[1],))
        q = occ @ w
        mask &= (q - c.total) % c.modulus == 0 if c.modulus else q == c.total
    return mask


def brute_states(cutoffs: list[int], charges: list[fm.Charge]) -> np.ndarray:
    basis = full_basis(cutoffs)
    return basis[keeps(basis, charges)]


# -- sector sizes, ranking ---------------------------------------------------------------


@st.composite
def charge_specs(draw: st.DrawFn) -> tuple[list[int], list[fm.Charge]]:
    """1..4 modes with cutoffs 1..3 and two or three charges with weights 0..3, each
    exact (total up to the largest reachable value + 1) or modulo 2..4."""
    modes = draw(st.integers(1, 4))
    cutoffs = draw(st.lists(st.integers(1, 3), min_size=modes, max_size=modes))
    charges = []
    for _ in range(draw(st.integers(2, 3))):
        weights = draw(st.lists(st.integers(0, 3), min_size=modes, max_size=modes))
        if draw(st.booleans()):
            top = sum(c * w for c, w in zip(cutoffs, weights, strict=True))
            charges.append(fm.Charge(weights, draw(st.integers(0, top + 1))))
        else:
            modulus = draw(st.integers(2, 4))
            charges.append(fm.Charge(weights, draw(st.integers(0, 6)), modulus))
    return cutoffs, charges


@settings(max_examples=150, deadline=None)
@given(charge_specs())
def test_sector_size_and_order_equal_brute_force(spec) -> None:
    # Common practice, no source: enumerate the product basis and keep what conserves.
    cutoffs, charges = spec
    expected = brute_states(cutoffs, charges)
    if len(expected) == 0:
        with pytest.raises(SpaceError, match="charge"):
            fm.FockSpace(cutoff=cutoffs, charges=charges)
        return
    space = fm.FockSpace(cutoff=cutoffs, charges=charges)
    assert space.dim == len(expected)
    occ = space.occupations().astype(np.int64)
    np.testing.assert_array_equal(occ, expected)
    # Ranking and unranking round-trip, and states outside are refused.
    np.testing.assert_array_equal(space.index(expected), np.arange(space.dim))
    for k in range(0, space.dim, max(1, space.dim // 7)):
        assert space.state(k) == tuple(expected[k])
    basis = full_basis(cutoffs)
    outside = basis[~keeps(basis, charges)]
    if len(outside):
        assert (space.index(outside, strict=False) == -1).all()
        with pytest.raises(ValueError, match="charge"):
            space.index(outside[0])


def test_number_and_momentum_sector_sizes_add_up() -> None:
    # The momentum sectors of N bosons on L sites partition the N-boson space: their
    # sizes add to C(N + L - 1, N) (stars and bars; common practice, no source).
    for sites, n in [(5, 4), (6, 3), (4, 6)]:
        sizes = [
            fm.FockSpace(
                cutoff=[n] * sites,
                charges=[fm.Charge(1, n), fm.Charge(list(range(sites)), k, sites)],
            ).dim
            for k in range(sites)
        ]
        assert sum(sizes) == fm.FockSpace(modes=sites, cutoff=n, total=n).dim
        assert sum(sizes) == len(list(itertools.combinations(range(n + sites - 1), n)))


def test_one_charge_is_the_keyword_space() -> None:
    a = fm.FockSpace(modes=3, cutoff=3, total=5, weights=[1, 2, 3], modulus=4)
    b = fm.FockSpace(cutoff=[3, 3, 3], charges=[fm.Charge([1, 2, 3], 5, 4)])
    assert a == b and hash(a) == hash(b)
    assert b.total == 1 and b.modulus == 4 and b.weights == (1, 2, 3)
    assert b.charges == (fm.Charge((1, 2, 3), 1, 4),)
    assert fm.FockSpace(cutoff=[2, 2], charges=[]).dim == 9
    assert fm.FockSpace(modes=2, cutoff=2).charges == ()


def test_several_charges_attributes_pickle_and_repr() -> None:
    charges = [fm.Charge(1, 3), fm.Charge([0, 1, 2, 3], 6, 4)]
    space = fm.FockSpace(cutoff=[3] * 4, charges=charges)
    assert space.several
    assert space.charges == (fm.Charge((1, 1, 1, 1), 3), fm.Charge((0, 1, 2, 3), 2, 4))
    for name in ("total", "weights", "modulus"):
        with pytest.raises(SpaceError, match=rf"no single `{name}`.*space\.charges"):
            getattr(space, name)
    again = pickle.loads(pickle.dumps(space))
    assert again == space and again.dim == space.dim
    assert "charges=[Charge(weights=[1, 1, 1, 1], total=3)" in repr(space)
    assert space.with_cutoffs(2).charges == space.charges
    assert fm.FockSpace(cutoff=[3] * 4, charges=[{"weights": 1, "total": 3}, charges[1]]) == space
    # A cutoff at or above what the exact number allows does not truncate.
    assert space.binding_cutoffs() == (False,) * 4
    assert space.conserves({0: -1, 1: 1, 2: 1, 3: -1})
    assert not space.conserves({0: -1, 1: 1})


@pytest.mark.parametrize(
    ("kwargs", "error", "message"),
    [
        (dict(charges=[fm.Charge(1, 1)], total=1), SpaceError, "either charges"),
        (dict(charges=[fm.Charge([1, 1], 1), fm.Charge(1, 1)]), SpaceError, "charges.0. has 2"),
        (dict(charges=[fm.Charge(1, 1), {"weight": 1, "total": 1}]), SpaceError, "keys weights"),
        (dict(charges=[fm.Charge(1, 1), (1, 1)]), TypeError, r"charges\[1\] must be"),
        (dict(charges=fm.Charge(1, 1)), TypeError, "list of fm.Charge"),
        (dict(charges=[fm.Charge(1, 1), fm.Charge(1, 3)]), SpaceError, "no state"),
        (dict(charges=[fm.Charge(1, 9), fm.Charge(1, 1)]), SpaceError, "charge 0 equal to 9"),
    ],
)
def test_bad_charges_are_refused(kwargs, error, message) -> None:
    with pytest.raises(error, match=message):
        fm.FockSpace(cutoff=[2, 2, 2], **kwargs)


def test_bad_charge_fields_are_refused() -> None:
    with pytest.raises(SpaceError, match=r"Charge\.weights\[1\] must be >= 0"):
        fm.Charge([1, -1], 0)
    with pytest.raises(SpaceError, match=r"Charge\.modulus must be >= 2"):
        fm.Charge(1, 0, 1)
    with pytest.raises(SpaceError, match=r"Charge\.total must be >= 0"):
        fm.Charge(1, -2)
    with pytest.raises(TypeError, match=r"Charge\.total"):
        fm.Charge(1, 1.5)  # type: ignore[arg-type]


def test_too_large_tables_are_refused_with_the_estimate() -> None:
    # 8192 x 8192 residue classes: 2^26 per occupation, refused before allocating.
    with pytest.raises(SizeLimitError, match=r"8192 x 8192.*needs \d+"):
        fm.FockSpace(
            cutoff=[10] * 8,
            charges=[fm.Charge(1, 0, 8192), fm.Charge(list(range(8)), 0, 8192)],
        )


# -- physics: momentum-space ring, two species -------------------------------------------


def momentum_ring(sites: int, hopping: float, interaction: float) -> fm.LadderExpr:
    """The Bose–Hubbard ring in momentum space from arrays: with
    a_j = L^{-1/2} Σ_k e^{2πikj/L} b_k, the hopping becomes Σ_k −2J cos(2πk/L) n_k and
    (U/2) Σ_j n_j(n_j − 1) becomes (U/2L) Σ_{k,p,q} b†_{k+q} b†_{p−q} b_p b_k (momenta mod
    L; the standard plane-wave substitution, common practice, no source)."""
    k = np.arange(sites)
    dispersion = np.diag(-2.0 * hopping * np.cos(2 * np.pi * k / sites))
    rows = [
        ((a + q) % sites, (p - q) % sites, p, a)
        for a in range(sites)
        for p in range(sites)
        for q in range(sites)
    ]
    values = np.full(len(rows), interaction / sites)
    return fm.quadratic_form(dispersion) + fm.pair_interaction((np.array(rows), values))


def momentum_space(sites: int, n: int, k: int) -> fm.FockSpace:
    return fm.FockSpace(
        cutoff=[n] * sites,
        charges=[fm.Charge(1, n), fm.Charge(list(range(sites)), k, sites)],
    )


@pytest.mark.parametrize(("sites", "n"), [(5, 4), (6, 3), (4, 4)])
def test_momentum_ring_equals_real_space_translation_sectors(sites: int, n: int) -> None:
    j, u = 1.0, 2.7  # invented parameters
    h_k = momentum_ring(sites, j, u)
    h_x = bose_hubbard_ring(sites, j, u)
    base = fm.FockSpace(modes=sites, cutoff=n, total=n)
    # Dense numpy reference: the real-space ring acted on by hand on the N-boson sector
    # (tests/reference.py); its spectrum is the union of the momentum sectors'.
    dense_x = sector_matrix(h_x, [n] * sites, total=n)
    union = []
    t = fm.ring_translation(sites)
    for k in range(sites):
        space = momentum_space(sites, n, k)
        matrix = fm.build_matrix(h_k, space).toarray()
        np.testing.assert_allclose(matrix, matrix.conj().T, atol=1e-12)
        levels = np.linalg.eigvalsh(matrix)
        union.extend(levels)
        # The same momentum in real space: translation label k (or −k; the ring is
        # reflection symmetric, so both carry the same levels).
        sector = fm.SymmetricSpace(base, [(t, k)])
        assert sector.dim == space.dim
        real = np.linalg.eigvalsh(fm.build_matrix(h_x, sector).toarray())
        np.testing.assert_allclose(levels, real, atol=1e-10)
        # The lowest levels through the solvers agree too.
        low_k = fm.lowest_levels(h_k, space, k=min(3, space.dim)).energies
        low_x = fm.lowest_levels(h_x, sector, k=min(3, space.dim)).energies
        np.testing.assert_allclose(low_k, low_x, atol=1e-8)
    np.testing.assert_allclose(np.sort(union), np.linalg.eigvalsh(dense_x), atol=1e-10)


def species_chain(sites: int, ja: float, jb: float, ua: float, ub: float, uab: float):
    """Two-species Bose–Hubbard chain (open ends): modes 0..L−1 species A, L..2L−1
    species B; hopping within each species, on-site repulsion, A–B density coupling."""
    h = fm.LadderExpr()
    for s, (hop, u) in enumerate([(ja, ua), (jb, ub)]):
        o = s * sites
        for i in range(sites - 1):
            h = h - hop * (fm.raising(o + i) * fm.lowering(o + i + 1))
            h = h - hop * (fm.raising(o + i + 1) * fm.lowering(o + i))
        for i in range(sites):
            h = h + 0.5 * u * fm.number(o + i) * (fm.number(o + i) - 1)
    for i in range(sites):
        h = h + uab * fm.number(i) * fm.number(sites + i)
    return h


@functools.cache
def species_dense(sites: int, cutoff: int, ja, jb, ua, ub, uab) -> sparse.csr_array:
    """The same chain from explicit Kronecker products of single-mode matrices, on the
    whole product space (sparse; the same for every test, so built once)."""
    modes = 2 * sites
    a1 = sparse.csr_array(single_mode_matrices(cutoff)[0])
    eye = sparse.identity(cutoff + 1, format="csr")

    def ladder(i: int) -> sparse.csr_array:
        out = sparse.csr_array(np.ones((1, 1)))
        for k in range(modes):
            out = sparse.kron(out, a1 if k == i else eye, format="csr")
        return out

    a = [ladder(i) for i in range(modes)]
    n = [x.T @ x for x in a]
    one = sparse.identity(n[0].shape[0], format="csr")
    h = sparse.csr_array(n[0].shape)
    for s, (hop, u) in enumerate([(ja, ua), (jb, ub)]):
        o = s * sites
        for i in range(sites - 1):
            h = h - hop * (a[o + i].T @ a[o + i + 1] + a[o + i + 1].T @ a[o + i])
        for i in range(sites):
            h = h + 0.5 * u * n[o + i] @ (n[o + i] - one)
    for i in range(sites):
        h = h + uab * n[i] @ n[sites + i]
    return sparse.csr_array(h)


@pytest.mark.parametrize(("na", "nb"), [(2, 1), (2, 2), (3, 0), (1, 3)])
def test_two_species_chain_matches_kronecker_reference(na: int, nb: int) -> None:
    sites, cutoff = 3, 3
    params = (1.0, 0.6, 2.0, 3.1, 1.3)  # invented
    charges = [fm.Charge([1] * sites + [0] * sites, na), fm.Charge([0] * sites + [1] * sites, nb)]
    space = fm.FockSpace(cutoff=[cutoff] * (2 * sites), charges=charges)
    h = species_chain(sites, *params)
    # full_basis lists the product space in np.kron order (mode 0 most significant).
    kept = np.flatnonzero(keeps(full_basis([cutoff] * (2 * sites)), charges))
    dense = species_dense(sites, cutoff, *params)[kept][:, kept].toarray()
    np.testing.assert_allclose(fm.build_matrix(h, space).toarray(), dense, atol=1e-12)
    ground = fm.ground_state(h, space)
    assert ground.energy == pytest.approx(np.linalg.eigvalsh(dense)[0], abs=1e-8)
    # Observables see both numbers fixed.
    total_a = sum(
        complex(fm.expectation(fm.number(i), space, ground.vector)).real for i in range(sites)
    )
    assert total_a == pytest.approx(na, abs=1e-9)
    # A term changing one species' number is refused, naming the charge.
    with pytest.raises(ChargeError, match="charge 1 of 2"):
        fm.build_matrix(fm.raising(sites), space)


def test_lowering_between_two_species_sectors() -> None:
    # a_0 takes (N_A, N_B) = (2, 1) to (1, 1): a|n⟩ = √n|n−1⟩ (Sakurai & Napolitano
    # 2011, Sec. 2.3; from memory), checked against the Kronecker reference.
    sites, cutoff = 2, 2
    full = full_basis([cutoff] * 4)

    def sector(na: int, nb: int) -> tuple[fm.FockSpace, np.ndarray]:
        charges = [fm.Charge([1, 1, 0, 0], na), fm.Charge([0, 0, 1, 1], nb)]
        return fm.FockSpace(cutoff=[cutoff] * 4, charges=charges), full[keeps(full, charges)]

    (src, src_states), (dst, dst_states) = sector(2, 1), sector(1, 1)
    dense = restrict(dense_matrix(fm.lowering(0), [cutoff] * 4), full, full)
    index = {tuple(s): k for k, s in enumerate(full)}
    expected = dense[
        np.ix_([index[tuple(s)] for s in dst_states], [index[tuple(s)] for s in src_states])
    ]
    got = fm.build_matrix(fm.lowering(0), src, target=dst).toarray()
    np.testing.assert_allclose(got, expected, atol=1e-12)
    with pytest.raises(ChargeError):
        fm.build_matrix(fm.lowering(2), src, target=dst)
    del sites


# -- kernels -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("make", "space"),
    [
        (lambda: momentum_ring(5, 1.0, 2.3), lambda: momentum_space(5, 4, 2)),
        (lambda: momentum_ring(6, 0.7, 1.1), lambda: momentum_space(6, 3, 0)),
        (
            lambda: species_chain(3, 1.0, 0.6, 2.0, 3.1, 1.3),
            lambda: fm.FockSpace(
                cutoff=[3] * 6,
                charges=[fm.Charge([1, 1, 1, 0, 0, 0], 2), fm.Charge([0, 0, 0, 1, 1, 1], 2)],
            ),
        ),
    ],
)
def test_bipartite_and_many_term_kernels_equal_the_plain_build(make, space) -> None:
    # Every cut of the bipartite product and the row kernel (which indexes the momentum
    # ring's L^3 pair terms by the quanta they remove) against the dense reference.
    h, s = make(), space()
    cutoffs = list(s.cutoffs)
    states = brute_states(cutoffs, list(s.charges))
    dense = between_matrix(h, cutoffs, states, states)
    stored = fm.build_matrix(h, s)
    np.testing.assert_allclose(stored.toarray(), dense, atol=1e-12)
    rng = np.random.default_rng(5)
    x = rng.standard_normal(s.dim) + 1j * rng.standard_normal(s.dim)
    for cut in range(s.modes + 1):
        op = _native.NativeOperator.on_space(s.native, h.to_native(), cut=cut)
        np.testing.assert_allclose(op.matvec(x), dense @ x, atol=1e-10)
    xr = x.real.copy()
    np.testing.assert_allclose(fm.build_operator(h, s).matvec(xr), dense @ xr, atol=1e-10)


def test_symmetric_sector_of_a_two_species_space() -> None:
    # Translating both species together keeps both numbers: the sectors of every
    # momentum together carry the whole spectrum (common practice, no source).
    sites = 4
    charges = [fm.Charge([1] * sites + [0] * sites, 2), fm.Charge([0] * sites + [1] * sites, 1)]
    base = fm.FockSpace(cutoff=[2] * (2 * sites), charges=charges)
    shift = [(i + 1) % sites for i in range(sites)] + [
        sites + (i + 1) % sites for i in range(sites)
    ]
    t = fm.ModePermutation(shift)
    h = fm.LadderExpr()
    for s in (0, sites):
        for i in range(sites):
            j = (i + 1) % sites
            h = h - (
                fm.raising(s + i) * fm.lowering(s + j) + fm.raising(s + j) * fm.lowering(s + i)
            )
    for i in range(sites):
        h = h + 1.7 * fm.number(i) * fm.number(sites + i)
    levels = []
    for k in range(sites):
        sector = fm.SymmetricSpace(base, [(t, k)])
        levels.extend(np.linalg.eigvalsh(fm.build_matrix(h, sector).toarray()))
    whole = np.linalg.eigvalsh(fm.build_matrix(h, base).toarray())
    np.testing.assert_allclose(np.sort(levels), whole, atol=1e-10)
    # Swapping the species maps modes of different charges: refused, naming the weights.
    swap = fm.ModePermutation([sites + i for i in range(sites)] + list(range(sites)))
    with pytest.raises(fm.exceptions.SymmetryError, match="every conserved charge"):
        fm.SymmetricSpace(base, [(swap, 0)])
