"""Tests for the bipartite product kernel against the dense numpy oracle.

The kernel splits the modes into a left group ``0..cut`` and a right group, and reads
the vector as rows of (left state) × (right state) with no permutation. Every cut is
checked (``cut=0`` is the row kernel) against two independent references: the dense
np.kron oracle of tests/reference.py restricted to the sector, and scipy's product
with the stored CSR matrix.
"""

from __future__ import annotations

import fockmill as fm
import numpy as np
from fockmill import _native
from hypothesis import given
from hypothesis import strategies as st
from reference import bose_hubbard_ring, dense_matrix, full_basis, restrict, sector_occupations

REAL = st.floats(-3, 3, allow_nan=False, allow_infinity=False).filter(lambda x: x != 0)
COMPLEX = st.builds(complex, REAL, REAL)


@st.composite
def spaces(draw: st.DrawFn) -> dict[str, object]:
    """Per-mode cutoffs 1..3 (1 = emitter) on 1..4 modes, weights 0..2, and an exact,
    modular or absent conserved total."""
    modes = draw(st.integers(1, 4))
    cutoffs = draw(st.lists(st.integers(1, 3), min_size=modes, max_size=modes))
    weights = draw(st.lists(st.integers(0, 2), min_size=modes, max_size=modes))
    kind = draw(st.sampled_from(["exact", "modulus", "free"]))
    reachable = sum(c * w for c, w in zip(cutoffs, weights, strict=True))
    if kind == "exact":
        return dict(cutoffs=cutoffs, weights=weights, total=draw(st.integers(0, reachable)))
    if kind == "modulus":
        modulus = draw(st.integers(2, 3))
        return dict(
            cutoffs=cutoffs,
            weights=weights,
            total=draw(st.integers(0, modulus - 1)),
            modulus=modulus,
        )
    return dict(cutoffs=cutoffs, weights=weights)


def conserves(spec: dict[str, object], factors: list[tuple[int, int, int]]) -> bool:
    weights = spec["weights"]
    assert isinstance(weights, list)
    charge = sum(weights[m] * (p - q) for m, p, q in factors)
    if "total" not in spec:
        return True
    modulus = spec.get("modulus")
    return charge == 0 if modulus is None else charge % int(modulus) == 0  # type: ignore[call-overload]


@st.composite
def cases(draw: st.DrawFn) -> tuple[dict[str, object], fm.LadderExpr]:
    """A space and a sum of up to five normal-ordered monomials (up to three modes each,
    powers up to 2) that conserve its charge; others are dropped."""
    spec = draw(spaces())
    cutoffs = spec["cutoffs"]
    assert isinstance(cutoffs, list)
    modes = len(cutoffs)
    coefficients = REAL if draw(st.booleans()) else REAL | COMPLEX
    expr = fm.LadderExpr()
    for _ in range(draw(st.integers(1, 5))):
        chosen = draw(st.lists(st.integers(0, modes - 1), min_size=0, max_size=3, unique=True))
        factors = [(m, draw(st.integers(0, 2)), draw(st.integers(0, 2))) for m in sorted(chosen)]
        if not conserves(spec, factors):
            continue
        term = fm.LadderExpr.scalar(draw(coefficients))
        for m, p, q in factors:
            term = term * fm.raising(m) ** p * fm.lowering(m) ** q
        expr = expr + term
    return spec, expr


def oracle(spec: dict[str, object], expr: fm.LadderExpr) -> np.ndarray:
    cutoffs = spec["cutoffs"]
    assert isinstance(cutoffs, list)
    if "total" not in spec:
        return dense_matrix(expr, cutoffs)
    return restrict(
        dense_matrix(expr, cutoffs),
        full_basis(cutoffs),
        sector_occupations(
            cutoffs,
            weights=spec["weights"],  # type: ignore[arg-type]
            total=spec["total"],  # type: ignore[arg-type]
            modulus=spec.get("modulus"),  # type: ignore[arg-type]
        ),
    )


@given(cases())
def test_every_cut_equals_the_dense_oracle_and_the_stored_matrix(
    case: tuple[dict[str, object], fm.LadderExpr],
) -> None:
    spec, expr = case
    try:
        space = fm.FockSpace(
            cutoff=spec["cutoffs"], **{k: v for k, v in spec.items() if k != "cutoffs"}
        )  # type: ignore[arg-type]
    except fm.exceptions.SpaceError:
        return  # an empty sector: nothing to multiply
    dense = oracle(spec, expr)
    stored = fm.build_matrix(expr, space)
    rng = np.random.default_rng(7)
    x = rng.standard_normal(space.dim) + 1j * rng.standard_normal(space.dim)
    block = rng.standard_normal((space.dim, 3))
    scale = max(1.0, float(np.abs(dense).max(initial=0.0))) * 1e-12 * space.dim
    for cut in range(space.modes + 1):
        op = _native.NativeOperator.on_space(space.native, expr.to_native(), cut=cut)
        assert op.cut == cut
        np.testing.assert_allclose(op.matvec(x), dense @ x, atol=scale, rtol=0)
        np.testing.assert_allclose(op.matvec(x), stored @ x, atol=scale, rtol=0)
        np.testing.assert_allclose(op.matmat(block), dense @ block, atol=scale, rtol=0)
        if op.is_real:
            np.testing.assert_allclose(op.matvec(x.real), dense.real @ x.real, atol=scale, rtol=0)


def test_thread_count_does_not_change_a_single_bit() -> None:
    # Each output row is summed by one thread in a fixed order (common practice, no
    # source). Invented parameters; 8 sites, 8 quanta: 6,435 states.
    h = bose_hubbard_ring(8, 0.8, 1.7)
    space = fm.FockSpace(modes=8, cutoff=8, total=8)
    x = np.random.default_rng(3).standard_normal(space.dim)
    for cut in (2, 4, 6):
        op = _native.NativeOperator.on_space(space.native, h.to_native(), cut=cut)
        one = op.matvec(x, threads=_native.NativePool(1))
        two = op.matvec(x, threads=_native.NativePool(2))
        assert np.array_equal(one, two)
        assert np.array_equal(op.matvec(x, threads=2), two)


def test_automatic_cut_is_balanced_and_matches_the_matrix() -> None:
    # Ring of 10 sites at unit filling: 92,378 states (stars and bars, C(19, 9); common
    # practice, no source). Any cut crosses two bonds; the automatic one avoids the
    # lopsided ends.
    h = bose_hubbard_ring(10, 1.0, 1.0)
    space = fm.FockSpace(modes=10, cutoff=10, total=10)
    assert space.dim == 92_378
    op = _native.NativeOperator.on_space(space.native, h.to_native())
    assert 3 <= op.cut <= 7
    x = np.random.default_rng(5).standard_normal(space.dim)
    np.testing.assert_allclose(op.matvec(x), fm.build_matrix(h, space) @ x, atol=1e-11)


def test_bad_cut_is_refused() -> None:
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    h = fm.number(0)
    try:
        _native.NativeOperator.on_space(space.native, h.to_native(), cut=4)
    except ValueError as error:
        assert "cut=4" in str(error)
    else:
        raise AssertionError("cut above the number of modes was accepted")


@given(cases())
def test_build_from_every_cut_equals_the_row_kernel_build(
    case: tuple[dict[str, object], fm.LadderExpr],
) -> None:
    # Same canonical pattern entry for entry; values equal up to the grouping of sums
    # of several diagonal terms (a few ulp). The row kernel (cut 0) is the reference.
    spec, expr = case
    options = {k: v for k, v in spec.items() if k != "cutoffs"}
    try:
        space = fm.FockSpace(cutoff=spec["cutoffs"], **options)  # type: ignore[arg-type]
    except fm.exceptions.SpaceError:
        return
    reference = _native.NativeOperator.on_space(space.native, expr.to_native(), cut=0).build_csr()
    dense = oracle(spec, expr)
    for cut in range(1, space.modes + 1):
        parts = _native.NativeOperator.on_space(space.native, expr.to_native(), cut=cut).build_csr()
        indptr, indices, data = parts.indptr, parts.indices, parts.data
        np.testing.assert_array_equal(indptr, reference.indptr)
        np.testing.assert_array_equal(indices, reference.indices)
        assert data.dtype == reference.data.dtype
        np.testing.assert_allclose(data, reference.data, rtol=1e-14, atol=1e-14)
        rows = np.repeat(np.arange(space.dim), np.diff(indptr))
        np.testing.assert_allclose(dense[rows, indices], data, rtol=1e-12, atol=1e-12)
