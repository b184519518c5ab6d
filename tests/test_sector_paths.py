"""Every sector kernel path against dense projector references.

Rings of 5-8 sites take the packed run-of-zeros path, translations of a torus along its
rows the packed path without it, and tori with both translations (and reflections) the
general permutation path. Each sector matrix is compared with ``V† H V``, where the
columns of ``V`` are the symmetrised basis states ``Σ_g χ(g)* g|r⟩`` of the
representatives, normalised (projection onto a one-dimensional representation; common
practice, no source); ``H`` is the hand-built oracle ``reference.sector_matrix``.
Products and builds must be bit-identical on 1 and 2 threads.
"""

from __future__ import annotations

import cmath
import itertools
from collections.abc import Sequence

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import SymmetryError
from reference import sector_matrix


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


def check_every_label(
    base: fm.FockSpace, h: fm.LadderExpr, gens: Sequence[fm.ModePermutation]
) -> int:
    """Check each sector of ``gens`` that carries a one-dimensional representation;
    returns how many there were."""
    full = sector_matrix(h, base.cutoffs, total=base.total)
    elements = group_with_characters([(x, 0) for x in gens])
    mats = {g: permutation_matrix(base, g) for g, _ in elements}
    checked = 0
    for labels in itertools.product(*(range(g.order) for g in gens)):
        pairs = list(zip(gens, labels, strict=True))
        try:
            sector = fm.SymmetricSpace(base, pairs)
        except SymmetryError:
            continue
        checked += 1
        projector = sum(chi.conjugate() * mats[g] for g, chi in group_with_characters(pairs))
        v = projector[:, sector.representatives()]
        v = v / np.linalg.norm(v, axis=0)
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
