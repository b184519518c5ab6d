"""Tests for fm.build_matrix against the dense numpy oracle (tests/reference.py).

The oracle builds every normal-ordered monomial on the full truncated product space
with np.kron, exactly and independently of the Rust core; sectors are cut out of it by
brute-force enumeration.
"""

from __future__ import annotations

import re

import fockmill as fm
import numpy as np
import pytest
import scipy.sparse as sp
from fockmill.exceptions import ChargeError, ModeIndexError, SizeLimitError
from hypothesis import given
from hypothesis import strategies as st
from reference import dense_matrix, full_basis, restrict, sector_occupations

ATOL = 1e-12

# Coefficients: real or complex, of moderate size (no cancellation games).
REAL = st.floats(-3, 3, allow_nan=False, allow_infinity=False).filter(lambda x: x != 0)
COMPLEX = st.builds(complex, REAL, REAL)
COEFFICIENTS = REAL | COMPLEX
GENERATORS = st.sampled_from([fm.lowering, fm.raising, fm.number])


@st.composite
def cutoff_lists(draw: st.DrawFn) -> list[int]:
    """Cutoffs 1..3 for 1..3 modes."""
    return draw(st.lists(st.integers(1, 3), min_size=1, max_size=3))


@st.composite
def ladder_monomials(draw: st.DrawFn, modes: int) -> fm.LadderExpr:
    """A coefficient times a product of up to three generator powers on ``modes`` modes."""
    product = fm.LadderExpr.scalar(draw(COEFFICIENTS))
    factors = st.tuples(GENERATORS, st.integers(0, modes - 1), st.integers(0, 2))
    for generator, mode, power in draw(st.lists(factors, min_size=0, max_size=3)):
        product = product * generator(mode) ** power
    return product


@st.composite
def expressions_on(draw: st.DrawFn, modes: int) -> fm.LadderExpr:
    """A sum of up to three random monomials."""
    parts = draw(st.lists(ladder_monomials(modes), min_size=1, max_size=3))
    return sum(parts, fm.LadderExpr())


@st.composite
def full_space_cases(draw: st.DrawFn) -> tuple[fm.LadderExpr, list[int]]:
    cutoffs = draw(cutoff_lists())
    return draw(expressions_on(len(cutoffs))), cutoffs


def conserving_generator(modes: int, pairs: bool) -> st.SearchStrategy[fm.LadderExpr]:
    """Hopping a_i† a_j and number operators (and a_i† a_j†, a_i a_j when ``pairs``)."""
    mode = st.integers(0, modes - 1)
    hopping = st.builds(lambda i, j: fm.raising(i) * fm.lowering(j), mode, mode)
    options = [hopping, st.builds(fm.number, mode)]
    if pairs:
        options.append(st.builds(lambda i, j: fm.raising(i) * fm.raising(j), mode, mode))
        options.append(st.builds(lambda i, j: fm.lowering(i) * fm.lowering(j), mode, mode))
    return st.one_of(options)


@st.composite
def sector_cases(draw: st.DrawFn) -> tuple[fm.LadderExpr, list[int], int, int | None]:
    """A unit-weight sector (total N, or parity N mod 2) and an expression conserving it.

    Products of up to two generators that each conserve the sector's charge, so the
    product conserves it too.
    """
    cutoffs = draw(cutoff_lists())
    modes = len(cutoffs)
    parity = draw(st.booleans())
    total = draw(st.integers(0, 1 if parity else sum(cutoffs)))
    generator = conserving_generator(modes, pairs=parity)
    expr = fm.LadderExpr()
    for _ in range(draw(st.integers(1, 3))):
        term = fm.LadderExpr.scalar(draw(COEFFICIENTS))
        for factor in draw(st.lists(generator, min_size=1, max_size=2)):
            term = term * factor
        expr = expr + term
    return expr, cutoffs, total, 2 if parity else None


def has_only_real_coefficients(expr: fm.LadderExpr) -> bool:
    return all(coefficient.imag == 0 for coefficient, _ in expr.terms())


def assert_canonical_csr(matrix: sp.csr_array) -> None:
    """Sorted, duplicate-free column indices in each row and no stored zeros.

    Checked directly on the arrays: the ``has_canonical_format`` flag alone is only
    what the producer claims.
    """
    assert matrix.has_canonical_format
    assert np.all(matrix.data != 0)
    indptr, indices = matrix.indptr, matrix.indices
    assert indptr[0] == 0
    assert indptr[-1] == indices.size == matrix.data.size
    assert np.all(np.diff(indptr) >= 0)
    assert np.all((indices >= 0) & (indices < matrix.shape[1]))
    for row in range(matrix.shape[0]):
        assert np.all(np.diff(indices[indptr[row] : indptr[row + 1]]) > 0)


def hermitian_gap(matrix: sp.csr_array) -> float:
    difference = (matrix - matrix.conj().T).toarray()
    return float(np.abs(difference).max(initial=0.0))


# -- the full truncated space against the dense oracle -------------------------------


@given(full_space_cases())
def test_full_space_matrix_equals_dense_oracle(case: tuple[fm.LadderExpr, list[int]]) -> None:
    # Dense reference: Kronecker products of exactly restricted single-mode blocks.
    expr, cutoffs = case
    matrix = fm.build_matrix(expr, fm.FockSpace(cutoff=cutoffs))
    expected = dense_matrix(expr, cutoffs)
    assert matrix.shape == expected.shape
    np.testing.assert_allclose(matrix.toarray(), expected, rtol=1e-12, atol=ATOL)
    assert matrix.dtype == (np.float64 if has_only_real_coefficients(expr) else np.complex128)
    assert_canonical_csr(matrix)


@given(sector_cases())
def test_sector_matrix_equals_restricted_dense_oracle(
    case: tuple[fm.LadderExpr, list[int], int, int | None],
) -> None:
    # The sector block of the dense matrix, rows and columns in brute-force order.
    expr, cutoffs, total, modulus = case
    space = fm.FockSpace(cutoff=cutoffs, total=total, modulus=modulus)
    matrix = fm.build_matrix(expr, space)
    expected = restrict(
        dense_matrix(expr, cutoffs),
        full_basis(cutoffs),
        sector_occupations(cutoffs, total=total, modulus=modulus),
    )
    np.testing.assert_allclose(matrix.toarray(), expected, rtol=1e-12, atol=ATOL)
    assert matrix.dtype == (np.float64 if has_only_real_coefficients(expr) else np.complex128)
    assert_canonical_csr(matrix)


def test_weighted_sector_equals_restricted_dense_oracle() -> None:
    # Invented example: mode 1 counts twice (weights 1, 2, 1), so a0†^2 a1 and its
    # adjoint conserve the charge; the sector is cut out of the dense oracle.
    cutoffs, weights, total = [4, 2, 2], [1, 2, 1], 4
    a, adag, n = fm.lowering, fm.raising, fm.number
    expr = (
        0.7 * adag(0) ** 2 * a(1)
        + 0.7 * adag(1) * a(0) ** 2
        - 1.3j * adag(1) * a(2) ** 2
        + 1.3j * adag(2) ** 2 * a(1)
        + 0.4 * n(0) * n(1)
        - 0.25 * adag(0) * a(2)
        - 0.25 * adag(2) * a(0)
    )
    space = fm.FockSpace(cutoff=cutoffs, total=total, weights=weights)
    expected = restrict(
        dense_matrix(expr, cutoffs),
        full_basis(cutoffs),
        sector_occupations(cutoffs, weights=weights, total=total),
    )
    matrix = fm.build_matrix(expr, space)
    np.testing.assert_allclose(matrix.toarray(), expected, rtol=1e-12, atol=ATOL)
    assert hermitian_gap(matrix) < ATOL
    assert_canonical_csr(matrix)


def test_cancelling_entries_are_not_stored() -> None:
    # n0 - n1 vanishes on every state with n0 == n1; those diagonal entries must not
    # be stored as explicit zeros. Worked by hand: 3 of the 9 states of cutoffs (2, 2).
    matrix = fm.build_matrix(fm.number(0) - fm.number(1), fm.FockSpace(modes=2, cutoff=2))
    assert matrix.nnz == 6
    assert_canonical_csr(matrix)
    np.testing.assert_array_equal(matrix.diagonal(), [0, -1, -2, 1, 0, -1, 2, 1, 0])


def test_zero_expression_builds_an_empty_matrix() -> None:
    matrix = fm.build_matrix(fm.LadderExpr(), fm.FockSpace(modes=2, cutoff=2))
    assert matrix.shape == (9, 9)
    assert matrix.nnz == 0
    assert matrix.dtype == np.float64


# -- index types ---------------------------------------------------------------------


@given(full_space_cases())
def test_int64_indices_give_the_same_matrix(case: tuple[fm.LadderExpr, list[int]]) -> None:
    expr, cutoffs = case
    space = fm.FockSpace(cutoff=cutoffs)
    narrow = fm.build_matrix(expr, space)
    wide = fm.build_matrix(expr, space, index_dtype=np.int64)
    assert narrow.indices.dtype == narrow.indptr.dtype == np.int32
    assert wide.indices.dtype == wide.indptr.dtype == np.int64
    np.testing.assert_array_equal(narrow.indptr, wide.indptr)
    np.testing.assert_array_equal(narrow.indices, wide.indices)
    np.testing.assert_array_equal(narrow.data, wide.data)
    assert_canonical_csr(wide)


def test_explicit_int32_request_is_honoured(
    bose_hubbard_ring: tuple[fm.LadderExpr, fm.FockSpace],
) -> None:
    expr, space = bose_hubbard_ring
    matrix = fm.build_matrix(expr, space, index_dtype=np.int32)
    assert matrix.indices.dtype == np.int32
    assert (matrix != fm.build_matrix(expr, space)).nnz == 0


# -- algebraic identities at matrix level --------------------------------------------


@given(full_space_cases())
def test_symmetrised_expression_builds_a_hermitian_matrix(
    case: tuple[fm.LadderExpr, list[int]],
) -> None:
    # X + X† is Hermitian, and the restriction P (X + X†) P keeps that (common
    # practice, no source). The anti-Hermitian part i(X + X†) must come out
    # anti-Hermitian, which a build that conjugated nothing would fail.
    expr, cutoffs = case
    space = fm.FockSpace(cutoff=cutoffs)
    symmetric = fm.build_matrix(expr + expr.adjoint(), space)
    assert hermitian_gap(symmetric) < ATOL
    skew = fm.build_matrix(1j * (expr + expr.adjoint()), space)
    assert float(np.abs((skew + skew.conj().T).toarray()).max(initial=0.0)) < ATOL
    adjoint = fm.build_matrix(expr.adjoint(), space)
    np.testing.assert_allclose(
        adjoint.toarray(), fm.build_matrix(expr, space).toarray().conj().T, atol=ATOL
    )


@pytest.mark.parametrize("cutoff", [1, 2, 5])
def test_commutator_of_truncated_matrices_single_mode(cutoff: int) -> None:
    # [a, a†] = 1 (Dirac 1927, Proc. R. Soc. A 114, 243). With truncated matrices
    # A = P a P and A† = P a† P on n = 0..c:
    #   (A A†)_{nn} = n + 1 for n < c, but 0 at n = c, since A† sends |c> out of the
    #   kept space (its image |c+1> is dropped); (A† A)_{nn} = n everywhere.
    # So the commutator of the matrices is exactly 1 on rows n < c and -c on the top
    # row: the identity holds only away from the cutoff. The symbolic product a a†
    # normal-orders to n + 1 and is exact on every row, top included.
    space = fm.FockSpace(modes=1, cutoff=cutoff)
    lower = fm.build_matrix(fm.lowering(0), space).toarray()
    upper = fm.build_matrix(fm.raising(0), space).toarray()
    commutator = lower @ upper - upper @ lower
    np.testing.assert_allclose(commutator[:cutoff, :cutoff], np.eye(cutoff), atol=ATOL)
    assert commutator[cutoff, cutoff] == pytest.approx(-cutoff)
    np.testing.assert_allclose(np.triu(commutator, 1) + np.tril(commutator, -1), 0, atol=ATOL)
    symbolic = fm.build_matrix(fm.lowering(0) * fm.raising(0), space).toarray()
    np.testing.assert_allclose(symbolic, np.diag(np.arange(1.0, cutoff + 2)), atol=ATOL)


def test_commutators_of_truncated_matrices_several_modes() -> None:
    # Canonical relations [a_i, a_j†] = δ_ij, [a_i, a_j] = 0, [n_i, a_j†] = δ_ij a_j†
    # (Dirac, Proc. R. Soc. Lond. A 114, 243 (1927); Sakurai & Napolitano, Modern Quantum
    # Mechanics, 2nd ed. 2011, Sec. 2.3).
    # [a_i, a_j†] for i == j holds exactly on states with n_i < c_i (as in the single
    # mode test). Operators on different modes are Kronecker factors on different
    # tensor slots, so they commute exactly even when truncated. [n_i, A_i†] is exact
    # everywhere: the entry <n+1|.|n> exists only for n + 1 <= c_i and equals
    # ((n + 1) - n) sqrt(n + 1).
    cutoffs = [2, 3, 1]
    space = fm.FockSpace(cutoff=cutoffs)
    occupations = space.occupations().astype(int)

    def dense(expr: fm.LadderExpr) -> np.ndarray:
        return fm.build_matrix(expr, space).toarray()

    for i in range(3):
        for j in range(3):
            a_i, adag_j = dense(fm.lowering(i)), dense(fm.raising(j))
            commutator = a_i @ adag_j - adag_j @ a_i
            if i == j:
                below = occupations[:, i] < cutoffs[i]
                block = commutator[np.ix_(below, below)]
                np.testing.assert_allclose(block, np.eye(int(below.sum())), atol=ATOL)
                top = np.flatnonzero(~below)
                np.testing.assert_allclose(commutator[top, top], -cutoffs[i], atol=ATOL)
            else:
                np.testing.assert_allclose(commutator, 0, atol=ATOL)
            a_j = dense(fm.lowering(j))
            np.testing.assert_allclose(a_i @ a_j - a_j @ a_i, 0, atol=ATOL)
            n_i = dense(fm.number(i))
            expected = adag_j if i == j else np.zeros_like(adag_j)
            np.testing.assert_allclose(n_i @ adag_j - adag_j @ n_i, expected, atol=ATOL)


# -- errors --------------------------------------------------------------------------


def test_charge_violating_term_is_named() -> None:
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    conserving = fm.raising(0) * fm.lowering(1) + fm.number(2)
    with pytest.raises(ChargeError, match=re.escape("term 1·a0† changes the conserved charge")):
        fm.build_matrix(conserving + fm.raising(0), space)
    with pytest.raises(ChargeError, match=r"a0\†\^2 a2 changes the conserved charge by 1"):
        fm.build_matrix(conserving + 0.5 * fm.raising(0) ** 2 * fm.lowering(2), space)
    # The message tells the user what to do instead.
    with pytest.raises(ChargeError, match="drop the term, use a space without `total`"):
        fm.build_matrix(fm.lowering(1), space)
    with pytest.raises(ValueError, match="a1 changes the conserved charge by -1"):
        fm.build_matrix(fm.lowering(1), space)


def test_pair_term_respects_parity_but_not_the_number() -> None:
    # a0† a1† changes the number by 2: allowed in a parity sector, refused in a
    # fixed-number sector.
    pair = fm.raising(0) * fm.raising(1) + fm.lowering(0) * fm.lowering(1)
    parity = fm.FockSpace(modes=2, cutoff=2, total=0, modulus=2)
    assert fm.build_matrix(pair, parity).nnz > 0
    with pytest.raises(ChargeError, match="a0† a1† changes the conserved charge by 2"):
        fm.build_matrix(fm.raising(0) * fm.raising(1), fm.FockSpace(modes=2, cutoff=2, total=2))
    # Either offending term may be the one reported; both change the number by 2.
    with pytest.raises(ChargeError, match=r"a0(†)? a1(†)? changes the conserved charge by -?2"):
        fm.build_matrix(pair, fm.FockSpace(modes=2, cutoff=2, total=2))


def test_mode_beyond_the_space_is_refused() -> None:
    space = fm.FockSpace(modes=3, cutoff=2)
    message = "acts on mode 5, but the space has only 3 modes"
    with pytest.raises(ModeIndexError, match=message):
        fm.build_matrix(fm.number(0) + fm.number(5), space)
    # Catchable as both builtins callers already handle.
    with pytest.raises(IndexError, match=message):
        fm.build_matrix(fm.number(5), space)
    with pytest.raises(ValueError, match="use a space with more modes or fix the index"):
        fm.build_matrix(fm.raising(3), space)


def test_bad_argument_types_are_named() -> None:
    space = fm.FockSpace(modes=2, cutoff=2)
    with pytest.raises(TypeError, match=re.escape("expected a LadderExpr built from fm.lowering")):
        fm.build_matrix("a0† a1", space)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match=re.escape("expected a fm.FockSpace; got str")):
        fm.build_matrix(fm.number(0), "cutoff=2")  # type: ignore[arg-type]
    with pytest.raises(
        TypeError, match=re.escape("index_dtype must be numpy.int32, numpy.int64 or None")
    ):
        fm.build_matrix(fm.number(0), space, index_dtype=np.int16)  # type: ignore[arg-type]


def test_plain_number_means_a_multiple_of_the_identity() -> None:
    matrix = fm.build_matrix(2.5, fm.FockSpace(modes=2, cutoff=1))  # type: ignore[arg-type]
    np.testing.assert_array_equal(matrix.toarray(), 2.5 * np.eye(4))


def test_memory_limit_is_enforced_before_building() -> None:
    space = fm.FockSpace(modes=3, cutoff=2)
    with pytest.raises(SizeLimitError, match=r"use fm\.build_operator.*or raise memory_limit"):
        fm.build_matrix(fm.number(0) + fm.raising(1), space, memory_limit=100)
    with pytest.raises(ValueError, match="positive number of bytes"):
        fm.build_matrix(fm.number(0), space, memory_limit=0)


# -- threads -------------------------------------------------------------------------


def long_range_model(sites: int, seed: int) -> fm.LadderExpr:
    """Invented: complex all-to-all hopping decaying as 1/distance, plus on-site Kerr."""
    rng = np.random.default_rng(seed)
    expr = fm.LadderExpr()
    for i in range(sites):
        for j in range(i + 1, sites):
            hop = complex(rng.normal(), rng.normal()) / (j - i) * fm.raising(i) * fm.lowering(j)
            expr = expr + hop + hop.adjoint()
        expr = expr + rng.uniform(1, 2) * fm.number(i) * (fm.number(i) - 1)
    return expr


def test_thread_count_does_not_change_a_single_bit() -> None:
    # 8 bosons on 9 modes (dim 12870, several thousand-row blocks, so two threads both
    # get work) with complex long-range hopping: a summation order that depended on
    # the thread count would show up in the last bits.
    sites = 9
    expr = long_range_model(sites, seed=7)
    space = fm.FockSpace(modes=sites, cutoff=8, total=8)
    one = fm.build_matrix(expr, space, threads=1)
    two = fm.build_matrix(expr, space, threads=2)
    assert one.shape == (12870, 12870)
    np.testing.assert_array_equal(one.indptr, two.indptr)
    np.testing.assert_array_equal(one.indices, two.indices)
    assert one.data.tobytes() == two.data.tobytes()


@pytest.mark.parametrize(
    ("threads", "error"), [(-1, ValueError), (1.5, TypeError)], ids=["negative", "float"]
)
def test_bad_thread_counts_are_refused_with_a_named_argument(
    threads: object, error: type[Exception]
) -> None:
    # Project rule: bad input gets a clear exception naming what was wrong; a bad value
    # is a ValueError everywhere else in fockmill, so callers can catch it as one.
    space = fm.FockSpace(modes=2, cutoff=2)
    with pytest.raises(error, match="threads"):
        fm.build_matrix(fm.number(0), space, threads=threads)  # type: ignore[arg-type]
    with pytest.raises(error, match="threads"):
        fm.build_operator(fm.number(0), space, threads=threads).matvec(  # type: ignore[arg-type]
            np.ones(space.dim)
        )
