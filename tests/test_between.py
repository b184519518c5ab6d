"""Operators between two spaces (build_matrix / build_operator with target=) against the
dense np.kron oracle of tests/reference.py, restricted to the two sectors."""

from __future__ import annotations

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import ChargeError, SizeLimitError, SpaceError
from hypothesis import given
from hypothesis import strategies as st
from reference import dense_matrix, full_basis, sector_occupations

REAL = st.floats(-3, 3, allow_nan=False, allow_infinity=False).filter(lambda x: x != 0)
COEFFICIENTS = REAL | st.builds(complex, REAL, REAL)
GENERATORS = st.sampled_from([fm.lowering, fm.raising, fm.number])


def rectangular_reference(expr, cutoffs, source_occ, target_occ):
    """Rows of the target's states, columns of the source's, cut from the full matrix."""
    full = dense_matrix(expr, cutoffs)
    position = {tuple(row): k for k, row in enumerate(full_basis(cutoffs).tolist())}
    rows = [position[tuple(r)] for r in np.asarray(target_occ).tolist()]
    cols = [position[tuple(c)] for c in np.asarray(source_occ).tolist()]
    return full[np.ix_(rows, cols)]


@st.composite
def monomial(draw: st.DrawFn, modes: int) -> fm.LadderExpr:
    """A coefficient times up to three generator powers: a single charge change."""
    product = fm.LadderExpr.scalar(draw(COEFFICIENTS))
    factors = st.tuples(GENERATORS, st.integers(0, modes - 1), st.integers(0, 2))
    for generator, mode, power in draw(st.lists(factors, max_size=3)):
        product = product * generator(mode) ** power
    return product


@st.composite
def between_cases(draw: st.DrawFn):
    """An expression of one charge change Δ, a source sector and a target it lands in."""
    cutoffs = draw(st.lists(st.integers(1, 3), min_size=1, max_size=3))
    modes = len(cutoffs)
    first = draw(monomial(modes))
    delta_values = first.charge([1] * modes)
    delta = int(next(iter(delta_values))) if delta_values else 0
    # A second monomial with the same Δ: multiply the first by a number operator.
    expr = first + draw(COEFFICIENTS) * fm.number(draw(st.integers(0, modes - 1))) * first
    kind = draw(st.sampled_from(["exact", "parity", "full"]))
    largest = sum(cutoffs)
    if kind == "exact":
        lo, hi = max(0, -delta), min(largest, largest - delta)
        if lo > hi:
            kind = "full"
        else:
            n = draw(st.integers(lo, hi))
            return expr, cutoffs, (n, None), (n + delta, None)
    if kind == "parity":
        n = draw(st.integers(0, 1))
        return expr, cutoffs, (n, 2), ((n + delta) % 2, 2)
    n = draw(st.integers(0, largest))
    return expr, cutoffs, (n, None), (None, None)


@given(between_cases())
def test_matrix_equals_dense_kron_restricted_to_both_sectors(case):
    # Oracle: np.kron of single-mode blocks on the full truncated space
    # (tests/reference.py), rows cut to the target sector and columns to the source.
    expr, cutoffs, (s_total, s_mod), (t_total, t_mod) = case
    source = fm.FockSpace(cutoff=cutoffs, total=s_total, modulus=s_mod)
    target = fm.FockSpace(cutoff=cutoffs, total=t_total, modulus=t_mod)
    matrix = fm.build_matrix(expr, source, target=target)
    assert matrix.shape == (target.dim, source.dim)
    expected = rectangular_reference(
        expr,
        cutoffs,
        sector_occupations(cutoffs, total=s_total, modulus=s_mod),
        sector_occupations(cutoffs, total=t_total, modulus=t_mod),
    )
    np.testing.assert_allclose(matrix.toarray(), expected, atol=1e-12)
    # Matrix-free products and the adjoint agree with the same reference.
    op = fm.build_operator(expr, source, target=target)
    x = np.linspace(-1.0, 1.0, source.dim) + 0.3j
    np.testing.assert_allclose(op @ x, expected @ x, atol=1e-10)
    y = np.linspace(0.5, -0.5, target.dim)
    np.testing.assert_allclose(op.H @ y, expected.conj().T @ y, atol=1e-10)
    block = np.stack([x, 2 * x], axis=1)
    np.testing.assert_allclose(op @ block, expected @ block, atol=1e-10)


def test_lowering_from_n_to_n_minus_one():
    # a|n⟩ = √n |n−1⟩ (Dirac, The Principles of Quantum Mechanics, 4th ed. 1958, §34;
    # from memory). Two modes, N = 2: {02, 11, 20} -> N = 1: {01, 10}.
    n2 = fm.FockSpace(modes=2, cutoff=2, total=2)
    n1 = fm.FockSpace(modes=2, cutoff=2, total=1)
    m = fm.build_matrix(fm.lowering(0), n2, target=n1).toarray()
    np.testing.assert_allclose(m, [[0, 1, 0], [0, 0, np.sqrt(2)]])


def test_pair_creation_from_n_to_n_plus_two():
    # a0† a1† |n0, n1⟩ = √((n0+1)(n1+1)) |n0+1, n1+1⟩ (same source as above).
    n1 = fm.FockSpace(modes=2, cutoff=3, total=1)
    n3 = fm.FockSpace(modes=2, cutoff=3, total=3)
    m = fm.build_matrix(fm.raising(0) * fm.raising(1), n1, target=n3).toarray()
    # n1: {01, 10}; n3: {03, 12, 21, 30}: 01 -> 12 (√(1·2)), 10 -> 21 (√(2·1)).
    expected = np.zeros((4, 2))
    expected[1, 0] = np.sqrt(2)
    expected[2, 1] = np.sqrt(2)
    np.testing.assert_allclose(m, expected)


def test_into_the_full_space_and_the_default_target():
    n2 = fm.FockSpace(modes=2, cutoff=2, total=2)
    full = fm.FockSpace(modes=2, cutoff=2)
    m = fm.build_matrix(fm.raising(0), n2, target=full)
    assert m.shape == (9, 3)
    same = fm.build_matrix(fm.number(0), n2, target=n2)
    np.testing.assert_array_equal(same.toarray(), fm.build_matrix(fm.number(0), n2).toarray())


def test_a_term_that_leaves_the_target_is_refused_naming_it_and_both_charges():
    n2 = fm.FockSpace(modes=2, cutoff=2, total=2)
    n1 = fm.FockSpace(modes=2, cutoff=2, total=1)
    with pytest.raises(ChargeError, match=r"a0†.*total = 2.*total = 1"):
        fm.build_matrix(fm.lowering(0) + fm.raising(0), n2, target=n1)
    with pytest.raises(ChargeError):
        fm.build_operator(fm.raising(1), n2, target=n1)
    full = fm.FockSpace(modes=2, cutoff=2)
    with pytest.raises(ChargeError, match="full truncated space"):
        fm.build_matrix(fm.number(0), full, target=n2)


def test_spaces_must_share_modes_and_cutoffs():
    n2 = fm.FockSpace(modes=2, cutoff=2, total=2)
    with pytest.raises(SpaceError, match="cutoffs"):
        fm.build_matrix(fm.lowering(0), n2, target=fm.FockSpace(modes=2, cutoff=3, total=1))
    with pytest.raises(SpaceError, match="modes"):
        fm.build_matrix(fm.lowering(0), n2, target=fm.FockSpace(modes=3, cutoff=2, total=1))
    with pytest.raises(TypeError, match="target"):
        fm.build_matrix(fm.lowering(0), n2, target="N=1")


def test_a_build_beyond_the_memory_limit_is_refused_up_front():
    n6 = fm.FockSpace(modes=6, cutoff=6, total=6)
    n5 = fm.FockSpace(modes=6, cutoff=6, total=5)
    with pytest.raises(SizeLimitError, match="build_operator"):
        fm.build_matrix(fm.lowering(0), n6, target=n5, memory_limit=1000)


def test_a_prepared_problem_between_sectors():
    # Same oracle as above: the kron construction cut to rows N = 2 and columns N = 3.
    cutoffs = [3, 3, 3]
    n3 = fm.FockSpace(cutoff=cutoffs, total=3)
    n2 = fm.FockSpace(cutoff=cutoffs, total=2)
    expr = 0.5 * fm.lowering(1) + (1 - 2j) * fm.raising(0) * fm.lowering(2) ** 2
    problem = fm.prepare(expr, n3, target=n2)
    assert problem.shape == (n2.dim, n3.dim) and not problem.is_square
    expected = rectangular_reference(
        expr, cutoffs, sector_occupations(cutoffs, total=3), sector_occupations(cutoffs, total=2)
    )
    x = np.arange(n3.dim, dtype=float)
    np.testing.assert_allclose(problem.matvec(x), expected @ x, atol=1e-12)
    np.testing.assert_allclose(problem.matrix().toarray(), expected, atol=1e-12)
    assert problem.estimate.nnz == np.count_nonzero(expected)
    # An equal target is the square case.
    assert fm.prepare(fm.number(0), n3, target=fm.FockSpace(cutoff=cutoffs, total=3)).is_square
