"""Every sector kernel path against dense projector references.

Rings of 5-8 sites take the packed run-of-zeros path, translations of a torus along its
rows (or of a ring of two-mode sites) the packed path without it, rings of 33 modes the
128-bit packed strings, a parity space the packed path without packed ranks (a space
with no total ranks packed strings with no weights), and tori with both translations
(and reflections) or rings with their modes renumbered the general permutation path;
each with and without the orbit table. Each sector matrix is compared with ``V† H V``,
where the columns of ``V`` are the symmetrised basis states ``Σ_g χ(g)* g|r⟩`` of the
representatives, normalised (projection onto a one-dimensional representation; common
practice, no source); ``H`` is the hand-built oracle ``reference.sector_matrix``.
Products and builds must be bit-identical on 1 and 2 threads.
"""

from __future__ import annotations

import cmath
import itertools
from collections.abc import Iterator, Mapping, Sequence

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import SymmetryError
from reference import between_matrix, sector_matrix, sector_occupations


def lattice_model(modes: int, bonds: Sequence[tuple[int, int]]) -> fm.LadderExpr:
    """Hopping, Kerr, density-density and pair hopping on ``bonds`` (invented values)."""
    h = fm.LadderExpr()
    for i in range(modes):
        h = h + 0.65 * fm.raising(i) ** 2 * fm.lowering(i) ** 2
    for a, b in bonds:
        hop = fm.raising(a) * fm.lowering(b)
        pair = fm.raising(a) ** 2 * fm.lowering(b) ** 2
        h = h - (hop + hop.adjoint()) + 0.3 * fm.number(a) * fm.number(b)
        h = h + 0.2 * (pair + pair.adjoint())
    return h


def torus_bonds(rows: int, cols: int) -> list[tuple[int, int]]:
    def site(r: int, c: int) -> int:
        return (r % rows) * cols + c % cols

    return [
        pair
        for r in range(rows)
        for c in range(cols)
        for pair in ((site(r, c), site(r, c + 1)), (site(r, c), site(r + 1, c)))
    ]


def torus_map(rows: int, cols: int, f: object) -> fm.ModePermutation:
    images = []
    for i in range(rows * cols):
        r, c = f(*divmod(i, cols))  # type: ignore[operator]
        images.append((r % rows) * cols + c % cols)
    return fm.ModePermutation(images)


def permutation_matrix(space: fm.FockSpace, g: fm.ModePermutation) -> np.ndarray:
    """g on base vectors, (g n)_{images[i]} = n_i, built from occupations."""
    occ = space.occupations().astype(np.int64)
    moved = np.empty_like(occ)
    moved[:, list(g.images)] = occ
    p = np.zeros((space.dim, space.dim))
    p[space.index(moved), np.arange(space.dim)] = 1.0
    return p


def group_with_characters(
    gens: Sequence[tuple[fm.ModePermutation, int]],
) -> list[tuple[fm.ModePermutation, complex]]:
    """The group closed from the generators, each element with its character."""
    ident = fm.ModePermutation(list(range(gens[0][0].modes)))
    elems = [(ident, 1.0 + 0j)]
    seen = {ident}
    k = 0
    while k < len(elems):
        h, chi = elems[k]
        for g, q in gens:
            p = g * h
            if p not in seen:
                seen.add(p)
                elems.append((p, chi * cmath.exp(2j * cmath.pi * q / g.order)))
        k += 1
    return elems


def every_sector(
    base: fm.FockSpace, gens: Sequence[fm.ModePermutation], orbit_table: bool | None = None
) -> Iterator[tuple[list[tuple[fm.ModePermutation, int]], fm.SymmetricSpace]]:
    """Each ``(generator, label)`` list of ``gens`` that makes a one-dimensional
    representation, with its sector."""
    for labels in itertools.product(*(range(g.order) for g in gens)):
        pairs = list(zip(gens, labels, strict=True))
        try:
            yield pairs, fm.SymmetricSpace(base, pairs, orbit_table=orbit_table)
        except SymmetryError:
            continue


def permutation_matrices(
    base: fm.FockSpace, gens: Sequence[fm.ModePermutation]
) -> dict[fm.ModePermutation, np.ndarray]:
    """Every element of the group ``gens`` generate, as a matrix on ``base``."""
    return {
        g: permutation_matrix(base, g) for g, _ in group_with_characters([(x, 0) for x in gens])
    }


def projected_basis(
    mats: Mapping[fm.ModePermutation, np.ndarray],
    pairs: Sequence[tuple[fm.ModePermutation, int]],
    sector: fm.SymmetricSpace,
) -> np.ndarray:
    """Columns ``P|r⟩`` for the representatives ``r``, normalised, with the projector
    ``P = Σ_g χ(g)* g`` onto the representation (``mats``: the group's matrices)."""
    reps = sector.representatives()
    v = sum(chi.conjugate() * mats[g][:, reps] for g, chi in group_with_characters(pairs))
    return v / np.linalg.norm(v, axis=0)


def check_every_label(
    base: fm.FockSpace,
    h: fm.LadderExpr,
    gens: Sequence[fm.ModePermutation],
    states: np.ndarray | None = None,
) -> int:
    """Check each sector of ``gens`` that carries a one-dimensional representation;
    returns how many there were. ``states``: the base space's states in basis order,
    when the product space is too large to filter."""
    if states is None:
        full = sector_matrix(h, base.cutoffs, total=base.total, modulus=base.modulus)
    else:
        full = between_matrix(h, base.cutoffs, states, states)
    mats = permutation_matrices(base, gens)
    checked = 0
    for pairs, sector in every_sector(base, gens):
        labels = [q for _, q in pairs]
        checked += 1
        v = projected_basis(mats, pairs, sector)
        want = v.conj().T @ full @ v
        one = fm.build_matrix(h, sector, threads=1)
        two = fm.build_matrix(h, sector, threads=2)
        np.testing.assert_allclose(one.toarray(), want, atol=1e-10, err_msg=str(labels))
        assert np.array_equal(one.indptr, two.indptr)
        assert np.array_equal(one.indices, two.indices)
        assert np.array_equal(one.data, two.data)
        x = np.random.default_rng(sector.dim).normal(size=(sector.dim, 3))
        x = x + (0j if not sector.is_real else 0.0)
        y1 = fm.build_operator(h, sector, threads=1) @ x[:, 0]
        y2 = fm.build_operator(h, sector, threads=2) @ x[:, 0]
        assert np.array_equal(y1, y2)
        # The orbit table (kept by default at these sizes) and the search for the
        # smallest image give the same sector, matrix and products to the bit.
        assert sector.orbit_table_bytes > 0
        plain = fm.SymmetricSpace(base, pairs, orbit_table=False)
        assert plain.orbit_table_bytes == 0
        assert np.array_equal(plain.representatives(), sector.representatives())
        other = fm.build_matrix(h, plain, threads=2)
        assert np.array_equal(other.indptr, one.indptr)
        assert np.array_equal(other.indices, one.indices)
        assert np.array_equal(other.data, one.data)
        assert np.array_equal(fm.build_operator(h, plain, threads=2) @ x[:, 0], y1)
        np.testing.assert_allclose(y1, want @ x[:, 0], atol=1e-10)
        np.testing.assert_allclose(
            fm.build_operator(h, sector, threads=2) @ x, want @ x, atol=1e-10
        )
    return checked


@pytest.mark.parametrize("sites", [5, 6, 7, 8])
@pytest.mark.parametrize("reflect", [False, True])
def test_rings_every_label(sites: int, reflect: bool) -> None:
    base = fm.FockSpace(modes=sites, cutoff=2, total=sites // 2 + 1)
    h = lattice_model(sites, [(i, (i + 1) % sites) for i in range(sites)])
    gens = [fm.ring_translation(sites)] + ([fm.ring_reflection(sites)] if reflect else [])
    # Momenta 0..L-1; with the reflection only k = 0 (and L/2) with either parity.
    expected = (4 if sites % 2 == 0 else 2) if reflect else sites
    assert check_every_label(base, h, gens) == expected


@pytest.mark.parametrize(("rows", "cols", "total"), [(3, 3, 3), (2, 4, 4)])
@pytest.mark.parametrize("kind", ["translations", "reflections", "rows only", "diagonal"])
def test_tori_every_label(rows: int, cols: int, total: int, kind: str) -> None:
    base = fm.FockSpace(modes=rows * cols, cutoff=2, total=total)
    h = lattice_model(rows * cols, torus_bonds(rows, cols))
    tx, ty = fm.torus_translations(rows, cols)
    rx = torus_map(rows, cols, lambda r, c: (r, cols - c))
    ry = torus_map(rows, cols, lambda r, c: (rows - r, c))
    if kind == "translations":
        assert check_every_label(base, h, [tx, ty]) == rows * cols
    elif kind == "reflections":
        assert check_every_label(base, h, [tx, ty, rx, ry]) >= 4
    elif kind == "rows only":
        # A translation along the rows alone rotates the mode order by `cols`.
        assert check_every_label(base, h, [ty]) == rows
    else:
        if rows != cols:
            pytest.skip("the diagonal reflection needs a square torus")
        d = torus_map(rows, cols, lambda r, c: (c, r))
        assert check_every_label(base, h, [tx, ty, d]) >= 2


def test_square_torus_space_group_holds_the_ground_state() -> None:
    """3 × 3 torus, 3 bosons, with both translations, the rotation by 90° and a mirror
    (72 elements; no rotation of the mode order, so the orbit table is found by one scan
    of the base space). The Bose–Hubbard Hamiltonian has non-positive off-diagonal
    elements in the occupation basis and a connected hopping graph, so its ground state
    is unique with positive amplitudes (Perron–Frobenius) and lies in the trivial
    representation: the sector's lowest level equals the number sector's (dense numpy
    reference; common practice, no source)."""
    rows = cols = 3
    base = fm.FockSpace(modes=9, cutoff=3, total=3)
    h = fm.LadderExpr()
    for a, b in torus_bonds(rows, cols):
        hop = fm.raising(a) * fm.lowering(b)
        h = h - (hop + hop.adjoint())
    for i in range(9):
        h = h + 0.5 * 2.0 * fm.number(i) * (fm.number(i) - 1)
    tx, ty = fm.torus_translations(rows, cols)
    rot = torus_map(rows, cols, lambda r, c: (c, -r))
    mirror = torus_map(rows, cols, lambda r, c: (r, -c))
    sector = fm.SymmetricSpace(base, [(tx, 0), (ty, 0), (rot, 0), (mirror, 0)])
    assert sector.group_order == 72
    assert sector.orbit_table_bytes > 0
    plain = fm.SymmetricSpace(base, [(tx, 0), (ty, 0), (rot, 0), (mirror, 0)], orbit_table=False)
    assert np.array_equal(plain.representatives(), sector.representatives())
    full = np.linalg.eigvalsh(fm.build_matrix(h, base).toarray())
    mat = fm.build_matrix(h, sector).toarray()
    assert np.array_equal(mat, fm.build_matrix(h, plain).toarray())
    assert abs(np.linalg.eigvalsh(mat)[0] - full[0]) < 1e-10
    # Every sector level is a level of the number sector.
    for e in np.linalg.eigvalsh(mat):
        assert np.min(np.abs(full - e)) < 1e-9


def test_orbit_table_choice_is_checked() -> None:
    base = fm.FockSpace(modes=130, cutoff=1, total=1)
    gens = [(fm.ring_translation(130), 0), (fm.ring_reflection(130), 0)]
    with pytest.raises(TypeError, match="orbit_table must be True, False or None"):
        fm.SymmetricSpace(base, gens, orbit_table="yes")  # type: ignore[arg-type]
    # 260 elements do not fit the table's one byte per state: refused when insisted on,
    # skipped when automatic.
    with pytest.raises(ValueError, match="at most 256 elements"):
        fm.SymmetricSpace(base, gens, orbit_table=True)
    auto = fm.SymmetricSpace(base, gens)
    assert auto.orbit_table_bytes == 0
    assert auto.dim == 1


# -- the remaining packed paths, the general path on rings, operators between sectors,
# -- and ground energies over every label


def ring_bonds(sites: int) -> list[tuple[int, int]]:
    return [(i, (i + 1) % sites) for i in range(sites)]


def test_packed_paths_beyond_the_plain_ring() -> None:
    # 33 modes of cutoff 2 take 66 bits (the 128-bit strings); a parity space has no
    # packed ranks, a space with no total ranks without weights; two modes a site make
    # the translation a rotation by two modes (packed, no run-of-zeros shortcut). Same
    # references as above.
    wide = fm.FockSpace(modes=33, cutoff=2, total=2)
    gens = [fm.ring_translation(33), fm.ring_reflection(33)]
    pairs = sorted(
        tuple(int(i == a) + int(i == b) for i in range(33))
        for a, b in itertools.combinations_with_replacement(range(33), 2)
    )  # two quanta on 33 modes, in basis order (mode 0 most significant)
    states = np.array(pairs)
    assert np.array_equal(states, wide.occupations())
    assert check_every_label(wide, lattice_model(33, ring_bonds(33)), gens, states) >= 2
    for base in (
        fm.FockSpace(modes=6, cutoff=1, total=1, modulus=2),
        fm.FockSpace(modes=5, cutoff=1),
    ):
        m = base.modes
        gens = [fm.ring_translation(m), fm.ring_reflection(m)]
        assert check_every_label(base, lattice_model(m, ring_bonds(m)), gens[:1]) == m
        assert check_every_label(base, lattice_model(m, ring_bonds(m)), gens) >= 2
    sites = 4
    bonds = [(2 * s + o, 2 * ((s + 1) % sites) + o) for s in range(sites) for o in (0, 1)]
    bonds += [(2 * s, 2 * s + 1) for s in range(sites)]
    base = fm.FockSpace(modes=2 * sites, cutoff=2, total=3)
    t = fm.ring_translation(sites, orbitals=2)
    r = fm.ring_reflection(sites, orbitals=2)
    assert check_every_label(base, lattice_model(2 * sites, bonds), [t]) == sites
    assert check_every_label(base, lattice_model(2 * sites, bonds), [t, r]) == 4


def renumbered(g: fm.ModePermutation, new: Sequence[int]) -> fm.ModePermutation:
    """``g`` after renaming mode ``i`` to ``new[i]``: ``π g π⁻¹``."""
    images = [0] * g.modes
    for i, j in enumerate(g.images):
        images[new[i]] = new[j]
    return fm.ModePermutation(images)


@pytest.mark.parametrize("sites", [5, 6, 7, 8])
@pytest.mark.parametrize("reflect", [False, True])
def test_rings_with_renumbered_modes_take_the_general_path(sites: int, reflect: bool) -> None:
    """A ring whose sites are numbered out of order is the same lattice, but its
    translation is no rotation of the mode order: the general permutation path. Each
    sector's matrix matches its projector reference, and its spectrum the ring path's
    for the same labels (a renaming of the modes is a unitary map between the two
    sectors; common practice, no source)."""
    # Sites 1 and 2 swap numbers (a renumbering i -> a i + b would keep the translation a
    # rotation of the mode order, the packed path).
    new = [0, 2, 1, *range(3, sites)]
    base = fm.FockSpace(modes=sites, cutoff=2, total=sites // 2 + 1)
    bonds = ring_bonds(sites)
    gens = [fm.ring_translation(sites)] + ([fm.ring_reflection(sites)] if reflect else [])
    moved_gens = [renumbered(g, new) for g in gens]
    shift = [(j - i) % sites for i, j in enumerate(moved_gens[0].images)]
    assert len(set(shift)) > 1  # no rotation of the mode order
    moved_h = lattice_model(sites, [(new[a], new[b]) for a, b in bonds])
    expected = (4 if sites % 2 == 0 else 2) if reflect else sites
    assert check_every_label(base, moved_h, moved_gens) == expected
    h = lattice_model(sites, bonds)
    for pairs, ring in every_sector(base, gens):
        labels = [q for _, q in pairs]
        general = fm.SymmetricSpace(
            base, list(zip(moved_gens, labels, strict=True)), orbit_table=False
        )
        assert general.dim == ring.dim
        np.testing.assert_allclose(
            np.linalg.eigvalsh(fm.build_matrix(moved_h, general).toarray()),
            np.linalg.eigvalsh(fm.build_matrix(h, ring).toarray()),
            atol=1e-10,
            err_msg=str(labels),
        )


def lattices() -> list[tuple[str, int, int, int, int, bool]]:
    """(name, rows, cols, cutoff, total, with point-group elements): rings as 1 × L."""
    rings = [(f"ring{n}", 1, n, 2, n // 2 + 1, r) for n in (5, 6, 7, 8) for r in (False, True)]
    tori = [
        ("torus3x3 hard-core", 3, 3, 1, 3, False),
        ("torus3x3 two bosons", 3, 3, 2, 2, True),
        ("torus2x4", 2, 4, 2, 3, False),
        ("torus2x4", 2, 4, 2, 3, True),
    ]
    return rings + tori


def lattice_group(rows: int, cols: int, point: bool) -> list[fm.ModePermutation]:
    """Translations (both directions on a torus), and with ``point`` reflections: the
    ring's, or the torus's two mirrors (with a 90° rotation when square)."""
    if rows == 1:
        return [fm.ring_translation(cols)] + ([fm.ring_reflection(cols)] if point else [])
    tx, ty = fm.torus_translations(rows, cols)
    gens = [tx, ty]
    if point:
        gens += [
            torus_map(rows, cols, lambda r, c: (r, -c)),
            torus_map(rows, cols, lambda r, c: (-r, c)),
        ]
        if rows == cols:
            gens.append(torus_map(rows, cols, lambda r, c: (c, -r)))
    return gens


@pytest.mark.parametrize(
    ("rows", "cols", "cutoff", "total", "point"),
    [c[1:] for c in lattices()],
    ids=[f"{c[0]}{'+points' if c[5] else ''}" for c in lattices()],
)
def test_sector_levels_over_every_label_give_the_full_spectrum(
    rows: int, cols: int, cutoff: int, total: int, point: bool
) -> None:
    """Block diagonalisation by the group's one-dimensional representations
    (A. W. Sandvik, AIP Conf. Proc. 1297, 135 (2010), the section on momentum states):
    every sector level is a level of the number sector, with translations alone the
    sectors' spectra together are the number sector's spectrum as a multiset, and the
    lowest sector level over all labels is its minimum (with point-group elements too:
    the Bose–Hubbard-like ground state with non-positive hopping is the symmetric one,
    Perron–Frobenius; common practice, no source). The reference spectrum is numpy's
    ``eigvalsh`` of the hand-built number-sector matrix. Each sector's lowest level is
    also found by the native Lanczos solver on the stored matrix with the orbit table
    and matrix-free without it."""
    modes = rows * cols
    base = fm.FockSpace(modes=modes, cutoff=cutoff, total=total)
    bonds = ring_bonds(cols) if rows == 1 else torus_bonds(rows, cols)
    h = lattice_model(modes, bonds)
    full = np.linalg.eigvalsh(sector_matrix(h, base.cutoffs, total=base.total))
    gens = lattice_group(rows, cols, point)
    levels = []
    lowest = []
    for pairs, sector in every_sector(base, gens, orbit_table=True):
        labels = [q for _, q in pairs]
        if sector.dim == 0:
            continue
        plain = fm.SymmetricSpace(base, pairs, orbit_table=False)
        mat = fm.build_matrix(h, sector).toarray()
        here = np.linalg.eigvalsh(mat)
        np.testing.assert_allclose(
            np.linalg.eigvalsh(fm.build_matrix(h, plain).toarray()), here, atol=1e-10
        )
        levels.append(here)
        lowest.append(here[0])
        for space, store in ((sector, True), (plain, False)):
            found = fm.prepare(h, space).native.lanczos_ground(tol=1e-10, store=store)
            assert abs(found.energy - here[0]) < 1e-8, (labels, store)
    every = np.concatenate(levels)
    assert all(np.min(np.abs(full - e)) < 1e-9 for e in every)
    if not point:
        assert every.size == full.size
        np.testing.assert_allclose(np.sort(every), full, atol=1e-9)
    assert abs(min(lowest) - full[0]) < 1e-9


@pytest.mark.parametrize(
    ("rows", "cols", "point"), [(1, 6, False), (1, 6, True), (3, 3, False), (2, 4, True)]
)
def test_operators_between_sectors_with_and_without_the_orbit_table(
    rows: int, cols: int, point: bool
) -> None:
    """The lowering operator at one site, its component of each label shift, from every
    sector of three quanta into the sector of two quanta it lands in: the sector matrix
    equals ``V_T† A V_S`` with projector references as above (common practice, no
    source), the same to the bit with and without the orbit table, and the matrix-free
    product equals the stored one."""
    modes = rows * cols
    src_base = fm.FockSpace(modes=modes, cutoff=2, total=3)
    dst_base = fm.FockSpace(modes=modes, cutoff=2, total=2)
    gens = lattice_group(rows, cols, point)
    src_mats = permutation_matrices(src_base, gens)
    dst_mats = permutation_matrices(dst_base, gens)
    dense: dict[tuple[int, ...], np.ndarray] = {}
    checked = 0
    for pairs, source in every_sector(src_base, gens):
        labels = [q for _, q in pairs]
        plain_source = fm.SymmetricSpace(src_base, pairs, orbit_table=False)
        v_s = projected_basis(src_mats, pairs, source)
        for shift in itertools.product(*(range(g.order) for g in gens)):
            target_pairs = [(g, (q + d) % g.order) for (g, q), d in zip(pairs, shift, strict=True)]
            try:
                a = source.component(fm.lowering(0), shift)
                target = fm.SymmetricSpace(dst_base, target_pairs)
            except SymmetryError:
                continue
            if a.is_zero() or target.dim == 0 or source.dim == 0:
                continue
            plain_target = fm.SymmetricSpace(dst_base, target_pairs, orbit_table=False)
            m = fm.build_matrix(a, source, target=target)
            other = fm.build_matrix(a, plain_source, target=plain_target)
            assert np.array_equal(m.indptr, other.indptr)
            assert np.array_equal(m.indices, other.indices)
            assert np.array_equal(m.data, other.data)
            if shift not in dense:  # the component depends on the shift alone
                dense[shift] = dense_between(a, src_base, dst_base)
            v_t = projected_basis(dst_mats, target_pairs, target)
            np.testing.assert_allclose(
                m.toarray(), v_t.conj().T @ dense[shift] @ v_s, atol=1e-10, err_msg=str(labels)
            )
            x = np.random.default_rng(checked).normal(size=source.dim)
            y = fm.build_operator(a, plain_source, target=plain_target) @ x
            np.testing.assert_allclose(y, m @ x, atol=1e-12)
            checked += 1
    assert checked >= len(gens)


def dense_between(expr: fm.LadderExpr, src: fm.FockSpace, dst: fm.FockSpace) -> np.ndarray:
    """``expr`` from the number sector ``src`` into ``dst``, acting by hand
    (``reference.between_matrix``)."""
    return between_matrix(
        expr,
        src.cutoffs,
        sector_occupations(src.cutoffs, total=src.total),
        sector_occupations(dst.cutoffs, total=dst.total),
    )
