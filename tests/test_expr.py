"""Tests for the normal-ordered ladder-operator algebra and its dense oracle."""

from __future__ import annotations

import copy
import doctest
import itertools
import math
import pickle

import fockmill as fm
import fockmill.algebra.expressions as expr_module
import numpy as np
import pytest
from fockmill.algebra.expressions import (
    LadderExpr,
    format_monomial,
    identity,
    lowering,
    number,
    raising,
)
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from reference import (
    bounded_composition_count,
    dense_matrix,
    full_basis,
    restrict,
    sector_occupations,
    single_mode_matrices,
)

SMALL = settings(max_examples=60, deadline=None)

# Small strategies: at most 3 modes (indices 0..2), powers up to 2.
MODES = st.integers(min_value=0, max_value=2)
POWERS = st.integers(min_value=0, max_value=2)
# Gaussian-integer coefficients keep every product exact in floating point, so
# algebraic identities can be checked with exact equality.
GAUSSIAN = st.builds(complex, st.integers(-3, 3), st.integers(-3, 3))
GENERATORS = st.sampled_from([lowering, raising, number])


@st.composite
def ladder_products(draw: st.DrawFn) -> LadderExpr:
    """A random coefficient times a product of up to two generator powers."""
    result = LadderExpr.scalar(draw(GAUSSIAN))
    for generator, mode, power in draw(
        st.lists(st.tuples(GENERATORS, MODES, POWERS), min_size=1, max_size=2)
    ):
        result = result * generator(mode) ** power
    return result


EXPRESSIONS = st.lists(ladder_products(), min_size=1, max_size=3).map(
    lambda parts: sum(parts, LadderExpr())
)


def commutator(left: LadderExpr, right: LadderExpr) -> LadderExpr:
    return left * right - right * left


def max_creation_per_mode(expr: LadderExpr, mode_count: int) -> list[int]:
    """Largest creation power of each mode over the terms of ``expr``."""
    highest = [0] * mode_count
    for _, key in expr.terms():
        for mode, creation, _ in key:
            highest[mode] = max(highest[mode], creation)
    return highest


# -- canonical commutation relations (symbolic) -------------------------------------


@pytest.mark.parametrize(("i", "j"), list(itertools.product(range(3), repeat=2)))
def test_canonical_commutation_relations(i: int, j: int) -> None:
    # [a_i, a_j†] = δ_ij, [a_i, a_j] = [a_i†, a_j†] = 0: the canonical commutation
    # relations (Dirac 1927, Proc. R. Soc. A 114, 243; any QM textbook).
    expected = identity() if i == j else LadderExpr()
    assert commutator(lowering(i), raising(j)) == expected
    assert commutator(lowering(i), lowering(j)) == 0
    assert commutator(raising(i), raising(j)) == 0


@pytest.mark.parametrize(("i", "j"), list(itertools.product(range(3), repeat=2)))
def test_number_operator_commutators(i: int, j: int) -> None:
    # [n_i, a_j] = -δ_ij a_j and [n_i, a_j†] = δ_ij a_j†, which follow from the
    # canonical relations (Sakurai & Napolitano 2011, Sec. 2.3, eq. for [N, a];
    # from memory).
    delta = 1 if i == j else 0
    assert commutator(number(i), lowering(j)) == -delta * lowering(j)
    assert commutator(number(i), raising(j)) == delta * raising(j)


def test_a_adag_normal_orders_to_n_plus_one() -> None:
    # a a† = a†a + 1 (canonical commutation relation; Dirac, Proc. R. Soc. Lond. A 114,
    # 243 (1927); Sakurai & Napolitano, Modern Quantum Mechanics, 2nd ed. 2011, Sec. 2.3).
    assert lowering(0) * raising(0) == number(0) + 1


def test_double_contraction_formula() -> None:
    # a^2 a†^2 = a†^2 a^2 + 4 a†a + 2, the k = 0, 1, 2 terms of
    # a^q a†^p = Σ_k k! C(q,k) C(p,k) a†^(p-k) a^(q-k) (boson normal-ordering
    # formula, e.g. Blasiak, Penson & Solomon, Am. J. Phys. 75, 639 (2007);
    # from memory). Checked numerically against the dense oracle below too.
    a, adag = lowering(1), raising(1)
    assert a**2 * adag**2 == adag**2 * a**2 + 4 * number(1) + 2


def test_different_modes_commute_without_contraction() -> None:
    # Bosonic operators on different modes commute (common practice, no source).
    product = lowering(0) * raising(2) * number(1)
    assert product == LadderExpr.from_terms({((0, 0, 1), (1, 1, 1), (2, 1, 0)): 1})


# -- algebraic properties (hypothesis) ----------------------------------------------


@pytest.mark.slow
@SMALL
@given(EXPRESSIONS, EXPRESSIONS, EXPRESSIONS)
def test_product_is_associative(x: LadderExpr, y: LadderExpr, z: LadderExpr) -> None:
    # Operator products are associative (common practice, no source).
    assert (x * y) * z == x * (y * z)


@SMALL
@given(EXPRESSIONS, EXPRESSIONS, EXPRESSIONS)
def test_product_distributes_over_sum(x: LadderExpr, y: LadderExpr, z: LadderExpr) -> None:
    # Linearity of operator products (common practice, no source).
    assert x * (y + z) == x * y + x * z
    assert (y + z) * x == y * x + z * x


@SMALL
@given(EXPRESSIONS, EXPRESSIONS)
def test_adjoint_reverses_products(x: LadderExpr, y: LadderExpr) -> None:
    # (XY)† = Y†X† (Sakurai & Napolitano, Modern Quantum Mechanics, 2nd ed. 2011,
    # Sec. 1.2).
    assert (x * y).adjoint() == y.adjoint() * x.adjoint()


@SMALL
@given(EXPRESSIONS)
def test_adjoint_is_an_involution(x: LadderExpr) -> None:
    assert x.adjoint().adjoint() == x


@SMALL
@given(EXPRESSIONS)
def test_symmetrised_expression_is_hermitian(x: LadderExpr) -> None:
    # X + X† is Hermitian and i(X + X†) is not unless it vanishes (common practice,
    # no source). tol=0 is exact, which Gaussian-integer coefficients allow.
    symmetric = x + x.adjoint()
    assert symmetric.is_hermitian(tol=0)
    assert x.hermitian_part().is_hermitian(tol=0)
    assert x.hermitian_part() * 2 == symmetric
    if not symmetric.is_zero():
        assert not (1j * symmetric).is_hermitian()


@SMALL
@given(EXPRESSIONS, st.integers(min_value=0, max_value=3))
def test_power_equals_repeated_product(x: LadderExpr, exponent: int) -> None:
    repeated = identity()
    for _ in range(exponent):
        repeated = repeated * x
    assert x**exponent == repeated
    assert x ** np.int64(exponent) == repeated


@SMALL
@given(EXPRESSIONS, GAUSSIAN)
def test_scalars_act_as_multiples_of_identity(x: LadderExpr, c: complex) -> None:
    assert c * x == x * c == LadderExpr.scalar(c) * x
    assert x + c == c + x == x + LadderExpr.scalar(c)
    assert c - x == -(x - c)
    assert x - x == 0


# -- cross-checks against the dense oracle ------------------------------------------


@SMALL
@given(EXPRESSIONS, EXPRESSIONS, st.lists(st.integers(0, 2), min_size=3, max_size=3))
def test_product_matches_dense_oracle(
    x: LadderExpr, y: LadderExpr, small_cutoffs: list[int]
) -> None:
    # The symbolic product X*Y is the exact operator product, so its restriction
    # is P0 X Y P0 with P0 the projector onto occupations <= small cutoffs.
    # Y P0 reaches at most n_i + (largest creation power of mode i in Y), so with
    # a big projector P covering that range, P Y P0 = Y P0 and therefore
    #     P0 X Y P0 = P0 (P X P)(P Y P) P0,
    # i.e. the block of dense(X, big) @ dense(Y, big) on the small states equals
    # dense(X*Y, small). A wrong normal-ordering weight changes the left side
    # only, so this can fail; with big == small it would also fail at the top
    # states (see test_truncated_matrix_product_is_wrong_at_cutoff).
    mode_count = max(x.max_mode(), y.max_mode()) + 1
    assume(mode_count > 0)
    small = small_cutoffs[:mode_count]
    big = [c + extra for c, extra in zip(small, max_creation_per_mode(y, mode_count), strict=True)]
    big_product = dense_matrix(x, big) @ dense_matrix(y, big)
    cropped = restrict(big_product, full_basis(big), full_basis(small))
    expected = dense_matrix(x * y, small)
    np.testing.assert_allclose(expected, cropped, rtol=1e-10, atol=1e-9)


@SMALL
@given(EXPRESSIONS, EXPRESSIONS, GAUSSIAN, st.lists(st.integers(0, 2), min_size=3, max_size=3))
def test_dense_oracle_is_linear_and_respects_adjoint(
    x: LadderExpr, y: LadderExpr, c: complex, cutoffs: list[int]
) -> None:
    # P X† P = (P X P)† and restriction is linear (common practice, no source).
    np.testing.assert_allclose(
        dense_matrix(x.adjoint(), cutoffs), dense_matrix(x, cutoffs).conj().T, atol=1e-12
    )
    np.testing.assert_allclose(
        dense_matrix(c * x + y, cutoffs),
        c * dense_matrix(x, cutoffs) + dense_matrix(y, cutoffs),
        atol=1e-9,
    )


@SMALL
@given(
    EXPRESSIONS,
    st.lists(st.integers(-2, 2), min_size=3, max_size=3),
    st.lists(st.integers(0, 2), min_size=3, max_size=3),
)
def test_charge_matches_dense_matrix_elements(
    x: LadderExpr, weights: list[int], cutoffs: list[int]
) -> None:
    # Each nonzero <m|X|n> connects states whose weighted occupation differs by
    # one of X's charges, since a_i† raises n_i by 1 and a_i lowers it by 1
    # (Sakurai & Napolitano 2011, Sec. 2.3; from memory).
    charges = x.charge(weights)
    basis = full_basis(cutoffs)
    weighted = basis @ np.array(weights)
    rows, columns = np.nonzero(np.abs(dense_matrix(x, cutoffs)) > 1e-12)
    for row, column in zip(rows, columns, strict=True):
        assert weighted[row] - weighted[column] in charges


# -- single mode and the truncation convention --------------------------------------


@pytest.mark.parametrize("cutoff", [0, 1, 4])
def test_number_operator_is_diagonal(cutoff: int) -> None:
    # n|k> = k|k> (Sakurai & Napolitano, Modern Quantum Mechanics, 2nd ed. 2011, Sec. 2.3).
    np.testing.assert_allclose(
        dense_matrix(number(0), [cutoff]), np.diag(np.arange(cutoff + 1)), atol=1e-12
    )


def test_single_mode_matrix_elements() -> None:
    # a†|n> = sqrt(n+1)|n+1>, a|n> = sqrt(n)|n-1> (Sakurai & Napolitano, Modern
    # Quantum Mechanics 2nd ed. 2011, Sec. 2.3; from memory).
    cutoff = 5
    lower, upper = single_mode_matrices(cutoff)
    for n in range(cutoff):
        assert upper[n + 1, n] == pytest.approx(math.sqrt(n + 1))
        assert lower[n, n + 1] == pytest.approx(math.sqrt(n + 1))
    assert np.count_nonzero(lower) == cutoff
    np.testing.assert_allclose(dense_matrix(raising(0), [cutoff]), upper)


@pytest.mark.parametrize("cutoff", [1, 3])
def test_truncated_matrix_product_is_wrong_at_cutoff(cutoff: int) -> None:
    # Negative control for the convention: a a† = n + 1 exactly (Dirac 1927), so
    # P a a† P has cutoff + 1 at the top, while the product of truncated matrices
    # has 0 there because the truncated a† kills the top state.
    lower, upper = single_mode_matrices(cutoff)
    normal_ordered = dense_matrix(lowering(0) * raising(0), [cutoff])
    assert normal_ordered[cutoff, cutoff] == pytest.approx(cutoff + 1)
    assert (lower @ upper)[cutoff, cutoff] == 0
    np.testing.assert_allclose(normal_ordered[:cutoff, :cutoff], (lower @ upper)[:cutoff, :cutoff])


def test_full_basis_matches_kron_order() -> None:
    # np.kron puts mode 0 most significant (numpy docs for numpy.kron).
    basis = full_basis([1, 2])
    assert [tuple(row) for row in basis] == list(itertools.product(range(2), range(3)))
    np.testing.assert_allclose(np.diag(dense_matrix(number(0), [1, 2])), basis[:, 0], atol=1e-12)
    np.testing.assert_allclose(np.diag(dense_matrix(number(1), [1, 2])), basis[:, 1], atol=1e-12)


@pytest.mark.parametrize("total", [1, 2, 3])
def test_two_mode_hopping_spectrum(total: int) -> None:
    # a0†a1 + a1†a0 = 2 J_x in the Jordan-Schwinger map with j = N/2, so in the
    # N-boson sector its eigenvalues are -N, -N+2, ..., N (Schwinger, "On Angular
    # Momentum", U.S. AEC report NYO-3071, 1952, reprinted in Biedenharn & Van Dam,
    # Quantum Theory of Angular Momentum, 1965; from memory: the map and the spectrum
    # of 2 J_x, not the page). Cutoffs >= N keep the whole sector.
    hopping = raising(0) * lowering(1) + raising(1) * lowering(0)
    cutoffs = [total, total]
    block = restrict(
        dense_matrix(hopping, cutoffs),
        full_basis(cutoffs),
        sector_occupations(cutoffs, total=total),
    )
    np.testing.assert_allclose(
        np.linalg.eigvalsh(block), np.arange(-total, total + 1, 2), atol=1e-12
    )


def test_restrict_keeps_requested_order() -> None:
    # Worked by hand: on N = 2, a0†a1 |0,2> = sqrt(2)|1,1>, a0†a1 |1,1> = sqrt(2)|2,0>.
    cutoffs = [2, 2]
    states = sector_occupations(cutoffs, total=2)
    assert [tuple(row) for row in states] == [(0, 2), (1, 1), (2, 0)]
    block = restrict(dense_matrix(raising(0) * lowering(1), cutoffs), full_basis(cutoffs), states)
    root2 = math.sqrt(2)
    expected = np.array([[0, 0, 0], [root2, 0, 0], [0, root2, 0]])
    np.testing.assert_allclose(block, expected)
    reversed_block = restrict(
        dense_matrix(raising(0) * lowering(1), cutoffs), full_basis(cutoffs), states[::-1]
    )
    np.testing.assert_allclose(reversed_block, block[::-1, ::-1])


def test_sector_occupations_with_weights_and_modulus() -> None:
    # Worked by hand from the definition.
    assert [tuple(r) for r in sector_occupations([3], total=1, modulus=2)] == [(1,), (3,)]
    weighted = sector_occupations([2, 1], weights=[1, 2], total=2)
    assert [tuple(r) for r in weighted] == [(0, 1), (2, 0)]


# -- the oracle's own counting formula ----------------------------------------------


@SMALL
@given(st.lists(st.integers(0, 3), min_size=0, max_size=4), st.integers(-1, 12))
def test_bounded_composition_count_matches_enumeration(cutoffs: list[int], total: int) -> None:
    # Inclusion-exclusion closed form vs brute-force enumeration.
    assert bounded_composition_count(total, cutoffs) == len(
        sector_occupations(cutoffs, total=total)
    )


@pytest.mark.parametrize(("total", "modes"), [(0, 1), (3, 2), (4, 3), (5, 4)])
def test_bounded_count_reduces_to_stars_and_bars(total: int, modes: int) -> None:
    # With every cutoff >= total nothing is cut: C(N + M - 1, M - 1) (stars and
    # bars, Feller, An Introduction to Probability Theory vol. 1, 3rd ed. 1968,
    # Sec. II.5; from memory).
    assert bounded_composition_count(total, [total] * modes) == math.comb(
        total + modes - 1, modes - 1
    )


def test_bounded_count_worked_examples() -> None:
    # Worked by hand: three qubits-like modes (cutoff 1) with two quanta: 3 ways;
    # two modes with cutoff 2 and four quanta: only (2, 2).
    assert bounded_composition_count(2, [1, 1, 1]) == 3
    assert bounded_composition_count(4, [2, 2]) == 1
    assert bounded_composition_count(5, [2, 2]) == 0


# -- helpers, conversion and rendering ----------------------------------------------


def test_terms_modes_and_native_form() -> None:
    x = 2 * raising(3) * lowering(1) - 0.5j * number(1) + 4
    assert x.terms() == [
        (4 + 0j, ()),
        (2 + 0j, ((1, 0, 1), (3, 1, 0))),
        (-0.5j, ((1, 1, 1),)),
    ]
    assert x.modes() == (1, 3)
    assert x.max_mode() == 3
    assert LadderExpr.scalar(2).max_mode() == -1
    assert x.to_native() == [
        (4.0, 0.0, []),
        (2.0, 0.0, [(1, 0, 1), (3, 1, 0)]),
        (0.0, -0.5, [(1, 1, 1)]),
    ]
    native_re, native_im, factors = x.to_native()[1]
    assert type(native_re) is float
    assert type(native_im) is float
    assert all(type(value) is int for factor in factors for value in factor)


def test_charge_sets() -> None:
    # Charge Σ w_i (p_i - q_i): a0† raises n_0, a1 lowers n_1 (common practice).
    x = raising(0) + lowering(1) ** 2 + number(2) + 1
    assert x.charge([1, 1, 1]) == {1, -2, 0}
    assert x.charge({0: 2}) == {2, 0}
    assert x.charge(np.array([1.5, 0.5, 7.0])) == {1.5, -1.0, 0.0}
    assert LadderExpr().charge([1]) == set()
    with pytest.raises(ValueError, match="weights has 2 entries but the expression uses mode 2"):
        x.charge([1, 1])
    with pytest.raises(TypeError, match="weight of mode 0 must be a real number"):
        x.charge(["x", 1, 1])  # type: ignore[list-item]


def test_is_real_and_tolerant_hermiticity() -> None:
    assert (number(0) + 2).is_real()
    assert not (1j * number(0)).is_real()
    nearly = raising(0) + (1 + 1e-14) * lowering(0)
    assert nearly.is_hermitian()
    assert not nearly.is_hermitian(tol=0)
    with pytest.raises(ValueError, match="tol must be a finite non-negative float"):
        nearly.is_hermitian(tol=-1.0)


def test_filter_keeps_matching_terms() -> None:
    x = number(0) + 3 * raising(1) + 5
    assert x.filter(lambda c, key: len(key) == 0) == 5
    assert x.filter(lambda c, key: c.real > 2) == 3 * raising(1) + 5


def test_exact_zero_dropped_but_tiny_values_kept() -> None:
    tiny = LadderExpr.from_terms({((0, 1, 0),): 1e-300})
    assert not tiny.is_zero()
    assert (tiny - tiny).is_zero()
    assert LadderExpr.from_terms({(): 0.0, ((0, 1, 1),): 0j}).terms() == []


def test_monomial_format_contract() -> None:
    # Shared text format with the Rust core (project contract, no outside source).
    assert format_monomial(((0, 2, 1), (3, 1, 0))) == "a0†^2 a3† a0"
    # Normal order as written: creators stand left of annihilators across modes.
    assert format_monomial(((0, 0, 1), (1, 1, 0))) == "a1† a0"
    assert str(0.03 * lowering(0) * raising(1)) == "0.03·a1† a0"
    assert format_monomial(((12, 0, 3),)) == "a12^3"
    assert format_monomial(((1, 1, 1),)) == "a1† a1"
    assert format_monomial(()) == "1"


def test_expression_rendering() -> None:
    x = -1 * raising(0) * lowering(1) + (0.5 + 0.5j) * raising(2) ** 2 * lowering(2) ** 2 + 3
    assert str(x) == "-1.0·a0† a1 + (0.5+0.5j)·a2†^2 a2^2 + 3.0·1"
    assert str(-1j * lowering(0) - 2 * raising(0)) == "-1j·a0 - 2.0·a0†"
    assert str(LadderExpr()) == "0"
    assert repr(number(0)) == "LadderExpr(1.0·a0† a0)"


def test_numpy_scalars_defer_to_expression() -> None:
    a = lowering(0)
    assert isinstance(np.float64(2.0) * a, LadderExpr)
    assert np.float64(2.0) * a == 2 * a
    assert np.complex128(1j) + a == a + 1j
    assert np.int64(3) - a == 3 - a
    assert a * np.float32(0.5) == a / 2
    with pytest.raises(TypeError, match="coefficients must be finite numbers"):
        _ = np.array([1.0, 2.0]) * a


def test_immutability_and_pickling() -> None:
    x = 2 * number(0) + raising(1)
    with pytest.raises(AttributeError, match="immutable"):
        x._terms = {}
    assert pickle.loads(pickle.dumps(x)) == x
    assert copy.deepcopy(x) is x
    with pytest.raises(TypeError):
        hash(x)


def test_equality_with_scalars_and_other_objects() -> None:
    assert identity() == 1
    assert LadderExpr() == 0
    assert number(0) != 1
    assert lowering(0).__eq__(None) is NotImplemented
    assert lowering(0) != "a0"
    not_a_number = math.nan
    assert (identity() == not_a_number) is False


# -- bad input ----------------------------------------------------------------------


def test_bad_modes() -> None:
    with pytest.raises(ValueError, match="mode must be a non-negative int, got -1"):
        lowering(-1)
    with pytest.raises(TypeError, match=r"mode must be a non-negative int.*got 1\.5"):
        lowering(1.5)  # type: ignore[arg-type]
    with pytest.raises(TypeError, match="got the bool True"):
        lowering(True)
    with pytest.raises(TypeError, match="got '0' of type str"):
        raising("0")  # type: ignore[arg-type]
    assert number(np.int32(2)) == number(2)


def test_bad_scalars() -> None:
    x = number(0)
    with pytest.raises(ValueError, match="coefficients must be finite numbers; got nan"):
        _ = x * float("nan")
    with pytest.raises(ValueError, match="coefficients must be finite numbers; got inf"):
        _ = x + float("inf")
    with pytest.raises(TypeError, match=r"coefficients must be finite numbers.*got None"):
        _ = x + None  # type: ignore[operator]
    with pytest.raises(TypeError, match="got 'two' of type str"):
        _ = x * "two"  # type: ignore[operator]
    with pytest.raises(ZeroDivisionError, match="cannot divide a LadderExpr by zero"):
        _ = x / 0
    with pytest.raises(TypeError, match="cannot divide by a LadderExpr"):
        _ = 1 / x


def test_bad_exponents() -> None:
    x = raising(0)
    with pytest.raises(ValueError, match="exponent must be a non-negative int, got -1"):
        _ = x**-1
    with pytest.raises(TypeError, match=r"exponent must be a non-negative int; got 1\.5"):
        _ = x**1.5  # type: ignore[operator]
    assert x**0 == identity()


def test_bad_keys() -> None:
    with pytest.raises(ValueError, match="must list each mode once, sorted by mode"):
        LadderExpr.from_terms({((1, 1, 0), (0, 0, 1)): 1})
    with pytest.raises(ValueError, match="must list each mode once"):
        LadderExpr.from_terms({((0, 1, 0), (0, 0, 1)): 1})
    with pytest.raises(ValueError, match=r"has p \+ q == 0"):
        LadderExpr.from_terms({((0, 0, 0),): 1})
    with pytest.raises(ValueError, match="must be non-negative, got -2"):
        LadderExpr.from_terms({((0, -2, 1),): 1})
    with pytest.raises(TypeError, match=r"must be a \(mode, p, q\) triple"):
        LadderExpr.from_terms({((0, 1),): 1})  # type: ignore[dict-item]
    with pytest.raises(TypeError, match="terms must be a mapping"):
        LadderExpr([(1.0, ())])  # type: ignore[arg-type]


def test_docstring_examples_run() -> None:
    results = doctest.testmod(expr_module, optionflags=doctest.ELLIPSIS)
    assert results.attempted > 0
    assert results.failed == 0


@given(
    EXPRESSIONS,
    st.floats(min_value=-1e6, max_value=1e6, allow_nan=False).filter(lambda x: x != 0),
)
@settings(max_examples=80, deadline=None)
def test_printed_expressions_read_back_as_themselves(expr: LadderExpr, scale: float) -> None:
    # One vocabulary: what str() prints, fm.parse_terms reads (and model files accept);
    # repr() of a float reads back exactly, so the round trip is exact.
    for e in (expr, expr * scale, expr + scale):
        assert fm.parse_terms(str(e)) == e


def test_term_words_are_the_python_function_names() -> None:
    # Worked by hand: [a, a†] = 1, so a a† = a†a + 1 (common practice, no source).
    a0, a1 = fm.lowering(0), fm.lowering(1)
    assert fm.parse_terms("lowering(0) raising(0)") == a0 * a0.adjoint()
    assert fm.parse_terms("lowering(0) raising(0)") == fm.number(0) + 1
    assert fm.parse_terms("0.5 raising(0)^2 lowering(1) - 2") == 0.5 * a0.adjoint() ** 2 * a1 - 2
    # The older spellings still read the same.
    assert fm.parse_terms("raise(0) lower(1) + count(1)") == a0.adjoint() * a1 + fm.number(1)
    assert fm.parse_terms("number(cavity)", labels=["cavity"]) == fm.number(0)
    with pytest.raises(ValueError, match="column 3: expected raising"):
        fm.parse_terms("2 rasing(0)")
    with pytest.raises(ValueError, match="mode 2 does not exist"):
        fm.parse_terms("a2", modes=2)
