"""Tests for fm.build_operator: matrix-free products against CSR products and dense eigh.

References: the hand-built sector matrix of tests/reference.sector_matrix (independent of
the package's Rust code), numpy.linalg.eigh, and closed-form tight-binding bands.
"""

from __future__ import annotations

import itertools
from typing import Any

import fockmill as fm
import numpy as np
import pytest
import scipy.sparse.linalg as sla
from fockmill.exceptions import ChargeError, ModeIndexError
from hypothesis import given
from hypothesis import strategies as st
from reference import sector_matrix

REAL = st.floats(-2, 2, allow_nan=False, allow_infinity=False).filter(lambda x: x != 0)
COEFFICIENTS = REAL | st.builds(complex, REAL, REAL)
GENERATORS = st.sampled_from([fm.lowering, fm.raising, fm.number])


@st.composite
def operator_cases(draw: st.DrawFn) -> tuple[fm.LadderExpr, fm.FockSpace, int]:
    """A random expression on a random full space (or a unit-filling-like sector).

    Sector cases use number-conserving monomials (a_i† a_j, n_i and products);
    full-space cases any ladder monomial. Also returns a seed for the test vectors.
    """
    cutoffs = draw(st.lists(st.integers(1, 3), min_size=1, max_size=3))
    modes = len(cutoffs)
    mode = st.integers(0, modes - 1)
    sector = draw(st.booleans())
    if sector:
        hopping = st.builds(lambda i, j: fm.raising(i) * fm.lowering(j), mode, mode)
        factor = hopping | st.builds(fm.number, mode)
    else:
        factor = st.builds(lambda g, i, p: g(i) ** p, GENERATORS, mode, st.integers(0, 2))
    expr = fm.LadderExpr()
    for _ in range(draw(st.integers(1, 3))):
        term = fm.LadderExpr.scalar(draw(COEFFICIENTS))
        for piece in draw(st.lists(factor, min_size=1, max_size=3)):
            term = term * piece
        expr = expr + term
    total = draw(st.integers(0, sum(cutoffs))) if sector else None
    space = fm.FockSpace(cutoff=cutoffs, total=total)
    return expr, space, draw(st.integers(0, 2**32 - 1))


def random_vectors(
    rng: np.random.Generator, dim: int, columns: int | None = None
) -> tuple[np.ndarray, np.ndarray]:
    shape = (dim,) if columns is None else (dim, columns)
    real = rng.standard_normal(shape)
    complex_ = rng.standard_normal(shape) + 1j * rng.standard_normal(shape)
    return real, complex_


def oracle(expr: fm.LadderExpr, space: fm.FockSpace) -> np.ndarray:
    """P X P of the sector, built by hand (tests/reference.py)."""
    matrix = sector_matrix(expr, space.cutoffs, space.total, space.weights, space.modulus)
    return matrix.real if expr.is_real() else matrix


def assert_close(actual: Any, desired: Any) -> None:
    np.testing.assert_allclose(actual, desired, rtol=1e-12, atol=1e-12)


@given(operator_cases())
def test_products_equal_csr_products(case: tuple[fm.LadderExpr, fm.FockSpace, int]) -> None:
    expr, space, seed = case
    rng = np.random.default_rng(seed)
    matrix = oracle(expr, space)
    operator = fm.build_operator(expr, space)
    assert operator.shape == matrix.shape
    assert operator.dtype == matrix.dtype
    for x in random_vectors(rng, space.dim):
        assert_close(operator.matvec(x), matrix @ x)
        assert_close(operator @ x, matrix @ x)
        # rmatvec is the conjugate-transpose product; expressions here are generally
        # not Hermitian, so this differs from matvec.
        assert_close(operator.rmatvec(x), matrix.conj().T @ x)
        assert_close(operator.H @ x, matrix.conj().T @ x)
    for block in random_vectors(rng, space.dim, columns=3):
        assert_close(operator.matmat(block), matrix @ block)
        assert_close(operator @ block, matrix @ block)
        assert_close(operator.rmatmat(block), matrix.conj().T @ block)


def test_rmatvec_of_a_non_hermitian_operator(rng: np.random.Generator) -> None:
    # Invented, deliberately non-Hermitian: one-way hopping with a complex amplitude,
    # a lone lowering operator and a complex Kerr term.
    expr = (
        (0.3 + 1.1j) * fm.raising(0) * fm.lowering(1)
        + 0.8 * fm.lowering(2)
        + 0.5j * fm.raising(1) ** 2 * fm.lowering(1) ** 2
    )
    space = fm.FockSpace(cutoff=[3, 2, 2])
    matrix = oracle(expr, space)
    operator = fm.build_operator(expr, space)
    assert not np.allclose(matrix, matrix.conj().T)
    assert operator.dtype == np.complex128
    for x in random_vectors(rng, space.dim):
        expected = matrix.conj().T @ x
        assert_close(operator.rmatvec(x), expected)
        # Negative control: the plain product is a different vector.
        assert not np.allclose(operator.matvec(x), expected)


@pytest.mark.parametrize(
    ("expr", "dtype"),
    [
        (fm.number(0) - 2.5 * fm.raising(0) * fm.lowering(1), np.float64),
        (fm.number(0) + 1j * fm.raising(1), np.complex128),
        (fm.LadderExpr.scalar(3.0), np.float64),
    ],
)
def test_dtype_follows_the_coefficients(expr: fm.LadderExpr, dtype: type) -> None:
    operator = fm.build_operator(expr, fm.FockSpace(modes=2, cutoff=2))
    assert operator.dtype == dtype
    assert operator.shape == (9, 9)


def test_product_counter_counts_vectors(rng: np.random.Generator) -> None:
    space = fm.FockSpace(modes=2, cutoff=2)
    operator = fm.build_operator(fm.number(0) + fm.raising(1), space)
    assert operator.products == 0
    operator.matvec(rng.standard_normal(space.dim))
    assert operator.products == 1
    operator.matmat(rng.standard_normal((space.dim, 3)))
    assert operator.products == 4
    operator.rmatvec(rng.standard_normal(space.dim))
    assert operator.products == 5


def test_column_vector_keeps_its_shape(rng: np.random.Generator) -> None:
    space = fm.FockSpace(modes=2, cutoff=3, total=3)
    expr = fm.raising(0) * fm.lowering(1) + 0.5 * fm.number(1)
    column = rng.standard_normal((space.dim, 1))
    result = fm.build_operator(expr, space).matvec(column)
    assert result.shape == (space.dim, 1)
    assert_close(result, oracle(expr, space) @ column)


def test_products_do_not_depend_on_thread_count(rng: np.random.Generator) -> None:
    # Each row is summed by one thread in a fixed order: bit-identical results. Invented
    # model: 8 bosons on 9 modes (dim 12870, several thousand-row blocks, so both
    # threads get work) with complex hopping between every pair of modes.
    sites = 9
    expr = fm.LadderExpr()
    for i in range(sites):
        for j in range(i + 1, sites):
            hop = complex(rng.normal(), rng.normal()) / (j - i) * fm.raising(i) * fm.lowering(j)
            expr = expr + hop + hop.adjoint()
        expr = expr + 1.5 * fm.number(i) * (fm.number(i) - 1)
    space = fm.FockSpace(modes=sites, cutoff=8, total=8)
    x = rng.standard_normal((space.dim, 2)) + 1j * rng.standard_normal((space.dim, 2))
    one = fm.build_operator(expr, space, threads=1)
    two = fm.build_operator(expr, space, threads=2)
    assert one.matvec(x[:, 0]).tobytes() == two.matvec(x[:, 0]).tobytes()
    assert one.matmat(x).tobytes() == two.matmat(x).tobytes()
    assert one.rmatvec(x[:, 1]).tobytes() == two.rmatvec(x[:, 1]).tobytes()


# -- inside scipy's eigensolver -------------------------------------------------------


def test_eigsh_on_the_operator_matches_dense_eigh(
    bose_hubbard_ring: tuple[fm.LadderExpr, fm.FockSpace], rng: np.random.Generator
) -> None:
    # Reference: all eigenvalues of the dense matrix from numpy.linalg.eigvalsh.
    expr, space = bose_hubbard_ring
    assert space.dim == 126  # C(9, 5): 5 bosons on 5 sites (stars and bars)
    operator = fm.build_operator(expr, space)
    dense = oracle(expr, space)
    expected = np.linalg.eigvalsh(dense)[:3]
    # The site potential of the fixture keeps the three lowest levels non-degenerate
    # (gaps >= 0.03), so a single-vector Krylov method must find all three.
    assert np.min(np.diff(expected)) > 0.01
    v0 = rng.standard_normal(space.dim)
    found = sla.eigsh(operator, k=3, which="SA", v0=v0, tol=1e-12, return_eigenvectors=False)
    np.testing.assert_allclose(np.sort(found), expected, rtol=0, atol=1e-9)
    assert operator.products > 0


@pytest.mark.parametrize("flux", [0.4, 0.9, -2.0])
def test_eigsh_on_a_free_ring_with_flux_matches_the_band(
    flux: float, rng: np.random.Generator
) -> None:
    # Free bosons (U = 0) on an L-site ring threaded by a flux Φ (Peierls phase e^{iΦ/L}
    # on each bond a_{i+1}† a_i): single-particle energies ε_k = -2t cos((2πk + Φ)/L),
    # k = 0..L-1 (tight-binding band: Ashcroft & Mermin, Solid State Physics, 1976,
    # Chap. 10; Peierls substitution: Peierls, Z. Phys. 80, 763 (1933), from memory for
    # the reference). Without interactions the N-boson levels are the sums of N of them,
    # repetition allowed. The complex phase makes the operator complex Hermitian; the
    # sign of t matters on this odd (non-bipartite) ring, and dropping or mis-conjugating
    # the phase would change the levels. With 0 < |Φ| < π the three lowest levels are
    # non-degenerate, so a single-vector Krylov method must find all three.
    sites, particles, hopping = 5, 3, 1.0
    phase = np.exp(1j * flux / sites)
    expr = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        bond = -hopping * phase * fm.raising(j) * fm.lowering(i)
        expr = expr + bond + bond.adjoint()
    space = fm.FockSpace(modes=sites, cutoff=particles, total=particles)
    operator = fm.build_operator(expr, space)
    assert operator.dtype == np.complex128
    band = -2 * hopping * np.cos((2 * np.pi * np.arange(sites) + flux) / sites)
    levels = sorted(
        sum(choice) for choice in itertools.combinations_with_replacement(band, particles)
    )
    v0 = rng.standard_normal(space.dim) + 1j * rng.standard_normal(space.dim)
    lowest = sla.eigsh(operator, k=3, which="SA", v0=v0, tol=1e-12, return_eigenvectors=False)
    assert np.min(np.diff(levels[:3])) > 0.1
    np.testing.assert_allclose(np.sort(lowest), levels[:3], rtol=0, atol=1e-9)


# -- errors ----------------------------------------------------------------------------


def test_operator_refuses_what_the_matrix_refuses() -> None:
    space = fm.FockSpace(modes=2, cutoff=2, total=2)
    with pytest.raises(ChargeError, match="a1† changes the conserved charge by 1"):
        fm.build_operator(fm.number(0) + fm.raising(1), space)
    with pytest.raises(ModeIndexError, match="acts on mode 2, but the space has only 2 modes"):
        fm.build_operator(fm.number(2), space)
