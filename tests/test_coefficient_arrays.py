"""Expressions from coefficient arrays (``fm.quadratic_form``, ``fm.pair_interaction``),
their model-file keys, and the lowest-Landau-level model.

References are independent of fockmill's algebra: matrices are explicit sums over the
arrays of products of dense truncated ladder matrices (``np.kron`` of single-mode
matrices, contracted with ``np.einsum``; common practice, no source), restricted to the
sector by brute force; the Landau-level checks use published closed forms and a dense
matrix built from the orbitals' matrix elements by direct enumeration.
"""

from __future__ import annotations

import math
import pickle
from pathlib import Path

import fockmill as fm
import numpy as np
import pytest
import scipy.sparse as sparse
from fockmill.exceptions import NotHermitianError
from fockmill.models.builders import landau_level_interaction, lowest_landau_level
from reference import full_basis, restrict, sector_occupations, single_mode_matrices


def ladder_stack(cutoffs: list[int]) -> np.ndarray:
    """``A[i]``: the truncated ``a_i`` on the full product space (np.kron, mode 0 first)."""
    out = []
    for i, c in enumerate(cutoffs):
        op = np.ones((1, 1))
        for k, ck in enumerate(cutoffs):
            block = single_mode_matrices(ck)[0] if k == i else np.eye(ck + 1)
            op = np.kron(op, block)
        out.append(op)
        del c
    return np.array(out)


def oracle_quadratic(t: np.ndarray, cutoffs: list[int]) -> np.ndarray:
    """``Σ_ij t[i, j] a_i† a_j`` by einsum over dense ladder matrices (normal order makes
    products of truncated matrices exact: no intermediate state exceeds a cutoff)."""
    a = ladder_stack(cutoffs)
    ad = a.transpose(0, 2, 1)
    return np.einsum("ij,iab,jbc->ac", t, ad, a)


def oracle_pair(v: np.ndarray, cutoffs: list[int]) -> np.ndarray:
    """``½ Σ_ijkl V[i, j, k, l] a_i† a_j† a_k a_l`` by einsum over dense ladder matrices."""
    a = ladder_stack(cutoffs)
    ad = a.transpose(0, 2, 1)
    creators = np.einsum("iab,jbc->ijac", ad, ad)
    annihilators = np.einsum("kab,lbc->klac", a, a)
    return 0.5 * np.einsum("ijkl,ijab,klbc->ac", v, creators, annihilators)


def sector(matrix: np.ndarray, cutoffs: list[int], total: int | None) -> np.ndarray:
    return restrict(matrix, full_basis(cutoffs), sector_occupations(cutoffs, total=total))


def random_t(rng: np.random.Generator, m: int, complex_: bool) -> np.ndarray:
    t = rng.normal(size=(m, m)) + (1j * rng.normal(size=(m, m)) if complex_ else 0)
    return t + t.conj().T


def random_v(rng: np.random.Generator, m: int, complex_: bool) -> np.ndarray:
    v = rng.normal(size=(m,) * 4) + (1j * rng.normal(size=(m,) * 4) if complex_ else 0)
    # Hermitian: V[i, j, k, l] = conj(V[l, k, j, i]).
    return v + v.conj().transpose(3, 2, 1, 0)


# -- expressions --------------------------------------------------------------------------


@pytest.mark.parametrize("complex_", [False, True])
@pytest.mark.parametrize(("cutoffs", "total"), [([2, 2, 2], 2), ([3, 1, 2], 3), ([2, 2], None)])
def test_quadratic_form_matches_einsum_oracle(complex_: bool, cutoffs: list[int], total) -> None:
    rng = np.random.default_rng(11)
    t = random_t(rng, len(cutoffs), complex_)
    h = fm.quadratic_form(t)
    space = fm.FockSpace(len(cutoffs), cutoffs, total)
    want = sector(oracle_quadratic(t, cutoffs), cutoffs, total)
    got = fm.build_matrix(h, space).toarray()
    np.testing.assert_allclose(got, want, atol=1e-12)
    x = rng.normal(size=space.dim) + 1j * rng.normal(size=space.dim)
    np.testing.assert_allclose(fm.build_operator(h, space).matvec(x), want @ x, atol=1e-11)


@pytest.mark.parametrize("complex_", [False, True])
@pytest.mark.parametrize(("modes", "cutoff", "total"), [(8, 3, 3), (9, 1, 3), (10, 2, 4)])
def test_dense_quadratic_form_products_and_ground_energy(
    complex_: bool, modes: int, cutoff: int, total: int
) -> None:
    # Every pair coupled: products gather the hops per intermediate state and read rows
    # from a table (no stored matrix). Checked against the built matrix (entries made
    # term by term, checked against the einsum oracle above), and the ground energy
    # against free bosons: with cutoff ≥ N all N quanta fill the lowest single-particle
    # level, E0 = N λ_min(t) (common practice, no source); with a lower cutoff, against
    # the dense matrix's lowest eigenvalue.
    rng = np.random.default_rng(modes)
    t = random_t(rng, modes, complex_)
    h = fm.quadratic_form(t)
    space = fm.FockSpace(modes, cutoff, total)
    problem = fm.prepare(h, space)
    assert problem.native.fast_products
    want = fm.build_matrix(h, space).toarray()
    x = rng.normal(size=space.dim) + 1j * rng.normal(size=space.dim)
    np.testing.assert_allclose(problem.matvec(x), want @ x, atol=1e-10)
    np.testing.assert_allclose(problem.matvec(x), want @ x, atol=1e-10)  # kept tables
    assert not problem.native.stores_matrix()  # the solver stays matrix-free
    result = fm.ground_state(problem, method="lanczos", tol=1e-10, cutoff_warning=None)
    if cutoff >= total:
        assert result.energy == pytest.approx(total * np.linalg.eigvalsh(t)[0], abs=1e-8)
    assert result.energy == pytest.approx(np.linalg.eigvalsh(want)[0], abs=1e-8)


@pytest.mark.parametrize("complex_", [False, True])
@pytest.mark.parametrize(("cutoffs", "total"), [([3, 3, 3], 3), ([2, 3, 1, 2], 4), ([2, 2], None)])
def test_pair_interaction_matches_einsum_oracle(complex_: bool, cutoffs: list[int], total) -> None:
    # Dense random tensors hold every repeated-index pattern (i = j, k = l, i = k, ...).
    rng = np.random.default_rng(5)
    m = len(cutoffs)
    v = random_v(rng, m, complex_)
    t = random_t(rng, m, complex_)
    h = fm.pair_interaction(v) + fm.quadratic_form(t)
    space = fm.FockSpace(m, cutoffs, total)
    want = sector(oracle_pair(v, cutoffs) + oracle_quadratic(t, cutoffs), cutoffs, total)
    np.testing.assert_allclose(fm.build_matrix(h, space).toarray(), want, atol=1e-11)
    x = rng.normal(size=space.dim) + 1j * rng.normal(size=space.dim)
    np.testing.assert_allclose(fm.build_operator(h, space).matvec(x), want @ x, atol=1e-10)
    energy = fm.ground_state(h, space, cutoff_warning=None).energy
    assert energy == pytest.approx(np.linalg.eigvalsh(want)[0], abs=1e-8)


def test_sparse_inputs_sum_repeats_and_drop_zeros() -> None:
    # (indices, values) with a repeated row (summed) and a zero (dropped); common
    # practice, no source: the expression equals the explicit sum of its entries.
    indices = np.array([[0, 1], [1, 0], [0, 1], [2, 2], [1, 1]])
    values = np.array([0.5, 1.0, 0.25, 0.0, -2.0])
    h = fm.quadratic_form((indices, values))
    a, ad = fm.lowering, fm.raising
    assert h == 0.75 * ad(0) * a(1) + ad(1) * a(0) - 2 * fm.number(1)
    assert h.term_count() == 3
    # A scipy sparse matrix is read as its entries.
    matrix = sparse.csr_array(np.array([[0.0, 1.5], [1.5, 0.0]]))
    assert fm.quadratic_form(matrix) == 1.5 * (ad(0) * a(1) + ad(1) * a(0))
    # Pair entries giving one monomial are summed: V[0,1,1,0] and V[1,0,0,1] both give
    # a0† a1† a0 a1 (creators commute, annihilators commute).
    pair = fm.pair_interaction((np.array([[0, 1, 1, 0], [1, 0, 0, 1]]), np.array([2.0, 2.0])))
    assert pair == 2.0 * ad(0) * ad(1) * a(0) * a(1)
    assert pair == 2.0 * fm.number(0) * fm.number(1)


def test_arrays_combine_with_the_algebra() -> None:
    rng = np.random.default_rng(3)
    t = random_t(rng, 3, True)
    v = random_v(rng, 3, False)
    h = fm.quadratic_form(t) + fm.pair_interaction(v)
    # The same expression term by term: the dict form of the algebra.
    by_terms = sum(
        (complex(t[i, j]) * fm.raising(i) * fm.lowering(j) for i in range(3) for j in range(3)),
        fm.LadderExpr(),
    ) + sum(
        (
            0.5
            * float(v[i, j, k, l])
            * fm.raising(i)
            * fm.raising(j)
            * fm.lowering(k)
            * fm.lowering(l)
            for i in range(3)
            for j in range(3)
            for k in range(3)
            for l in range(3)  # noqa: E741
        ),
        fm.LadderExpr(),
    )
    assert (
        dict((k, c) for c, k in h.terms()).keys()
        == dict((k, c) for c, k in by_terms.terms()).keys()
    )
    for (c1, k1), (c2, k2) in zip(h.terms(), by_terms.terms(), strict=True):
        assert k1 == k2 and c1 == pytest.approx(c2, abs=1e-12)
    assert h.is_hermitian() and by_terms.is_hermitian()
    assert h.term_count() == len(h.terms())
    assert (h - h).is_zero()
    assert (h + fm.number(0) - fm.number(0)).term_count() == h.term_count()
    # Hermitian arrays give a Hermitian expression: the adjoint has the same terms.
    assert (h.adjoint() - h).filter(lambda c, _key: abs(c) > 1e-12).is_zero()
    assert pickle.loads(pickle.dumps(h)) == h
    assert (2 * h / 2) == h
    assert h.modes() == (0, 1, 2) and h.degree() == 4 and h.max_mode() == 2
    assert h.charge([1, 1, 1]) == {0}
    # A product goes term by term and still agrees with the oracle.
    square = fm.quadratic_form(t) * fm.quadratic_form(t)
    cutoffs = [2, 2, 2]
    want = sector(oracle_quadratic(t, cutoffs) @ oracle_quadratic(t, cutoffs), cutoffs, 2)
    got = fm.build_matrix(square, fm.FockSpace(3, 2, 2)).toarray()
    np.testing.assert_allclose(got, want, atol=1e-11)


def test_non_hermitian_array_is_reported_by_ground_state() -> None:
    t = np.array([[0.0, 1.0], [0.0, 0.0]])
    h = fm.quadratic_form(t)
    assert not h.is_hermitian()
    with pytest.raises(NotHermitianError, match="not Hermitian"):
        fm.ground_state(h, fm.FockSpace(2, 2, 2))
    v = np.zeros((2, 2, 2, 2))
    v[0, 0, 1, 1] = 1.0
    assert not fm.pair_interaction(v).is_hermitian()
    assert fm.pair_interaction(v + v.transpose(3, 2, 1, 0)).is_hermitian()


@pytest.mark.parametrize(
    ("make", "argument", "error", "message"),
    [
        (fm.quadratic_form, np.zeros((2, 3)), ValueError, "shape"),
        (fm.quadratic_form, np.array([[np.nan]]), ValueError, "finite"),
        (fm.quadratic_form, np.array([[True]]), TypeError, "numbers"),
        (fm.quadratic_form, (np.array([[0, -1]]), np.array([1.0])), ValueError, "non-negative"),
        (fm.quadratic_form, (np.array([[0, 1]]), np.array([1.0, 2.0])), ValueError, "one value"),
        (fm.quadratic_form, (np.array([[0.5, 1]]), np.array([1.0])), TypeError, "integers"),
        (fm.quadratic_form, "t.npy", TypeError, "numpy array"),
        (fm.pair_interaction, np.zeros((2, 2, 2)), ValueError, "shape"),
        (fm.pair_interaction, (np.array([[0, 1]]), np.array([1.0])), ValueError, r"\(n, 4\)"),
        (fm.pair_interaction, sparse.eye(2), TypeError, "two indices"),
    ],
)
def test_bad_arrays_are_refused(make, argument, error, message) -> None:
    with pytest.raises(error, match=message):
        make(argument)


def test_array_on_missing_mode_is_refused() -> None:
    with pytest.raises(fm.exceptions.ModeIndexError, match="acts on mode 2"):
        fm.build_matrix(fm.quadratic_form(np.eye(3)), fm.FockSpace(2, 1))


# -- model files ----------------------------------------------------------------------------

TWO_MODES = """
[model]
kind = "modes"
modes = 2
cutoff = 2
total = 2
[terms.J]
quadratic_form = {quadratic}
[terms.U]
value = 4.0
pair_interaction = {{ indices = [[0, 0, 0, 0], [1, 1, 1, 1]], values = [1.0, 1.0] }}
"""


def test_model_file_arrays_from_npy_and_inline(tmp_path: Path) -> None:
    t = np.array([[0.5, -1.0], [-1.0, -0.5]])
    np.save(tmp_path / "t.npy", t)
    (tmp_path / "npy.toml").write_text(TWO_MODES.format(quadratic='"t.npy"'))
    (tmp_path / "inline.toml").write_text(TWO_MODES.format(quadratic="[[0.5, -1.0], [-1.0, -0.5]]"))
    for name in ("npy.toml", "inline.toml"):
        spec = fm.load_model_file(tmp_path / name)
        model = spec.model
        assert model.pieces["J"] == fm.quadratic_form(t)
        assert model.pieces["U"] == 0.5 * (fm.raising(0) ** 2 * fm.lowering(0) ** 2) + 0.5 * (
            fm.raising(1) ** 2 * fm.lowering(1) ** 2
        )
        h = model.hamiltonian()
        v = np.zeros((2, 2, 2, 2))
        v[0, 0, 0, 0] = v[1, 1, 1, 1] = 4.0
        want = sector(oracle_quadratic(t, [2, 2]) + oracle_pair(v, [2, 2]), [2, 2], 2)
        np.testing.assert_allclose(fm.build_matrix(h, model.space).toarray(), want, atol=1e-12)


@pytest.mark.parametrize(
    ("quadratic", "message"),
    [
        ('"missing.npy"', "cannot read"),
        ('"t.txt"', ".npy"),
        ("[[1.0, 0.0]]", "shape"),
        ("[[0.0, 1.0], [0.0, 0.0]]", "not Hermitian"),
        ("{ indices = [[0, 5]], values = [1.0] }", "model has 2 modes"),
        ("{ indices = [[0, 1]] }", "values"),
    ],
)
def test_model_file_array_errors(tmp_path: Path, quadratic: str, message: str) -> None:
    path = tmp_path / "bad.toml"
    path.write_text(TWO_MODES.format(quadratic=quadratic))
    with pytest.raises(fm.ModelFileError, match=message):
        fm.load_model_file(path)


def test_model_file_modes_kind_needs_terms() -> None:
    with pytest.raises(fm.ModelFileError, match=r"\[terms.NAME\]"):
        fm.parse_model_text('[model]\nkind = "modes"\nmodes = 2\ncutoff = 1\n')


# -- lowest Landau level ------------------------------------------------------------------


def orbital_integral(m1: int, m2: int, m3: int, m4: int) -> float:
    """``2π a² ∫ d²r φ*_m1 φ*_m2 φ_m3 φ_m4`` for ``φ_m = z^m exp(−|z|²/2)/sqrt(π m!)``
    (lengths in units of a), by numerical quadrature of the radial integral; the angular
    integral gives 2π δ(m1 + m2, m3 + m4). Independent of the closed form under test."""
    from scipy.integrate import quad

    if m1 + m2 != m3 + m4:
        return 0.0
    s = m1 + m2
    norm = math.pi**2 * math.sqrt(math.prod(math.factorial(m) for m in (m1, m2, m3, m4)))
    radial, _ = quad(lambda r: r ** (2 * s + 1) * math.exp(-2 * r * r), 0, np.inf)
    return 2 * math.pi * (2 * math.pi * radial) / norm


def test_landau_level_elements_match_quadrature() -> None:
    indices, values = landau_level_interaction(4)
    table = {tuple(i): v for i, v in zip(indices.tolist(), values, strict=True)}
    for m1 in range(4):
        for m2 in range(4):
            for m3 in range(4):
                for m4 in range(4):
                    want = orbital_integral(m1, m2, m3, m4)
                    assert table.get((m1, m2, m3, m4), 0.0) == pytest.approx(want, rel=1e-9)


def llL_dense(n: int, l_total: int) -> np.ndarray:
    """Dense H (g = 1) on N bosons with angular momentum L by direct enumeration."""
    orbitals = l_total + 1
    states: list[tuple[int, ...]] = []

    def fill(m: int, left: int, momentum: int, cur: list[int]) -> None:
        if m == orbitals:
            if left == 0 and momentum == 0:
                states.append(tuple(cur))
            return
        for k in range(left + 1):
            if k * m > momentum:
                break
            fill(m + 1, left - k, momentum - k * m, [*cur, k])

    fill(0, n, l_total, [])
    position = {s: i for i, s in enumerate(states)}
    h = np.zeros((len(states), len(states)))

    def element(m1: int, m2: int, m3: int, m4: int) -> float:
        s = m1 + m2
        denominator = math.sqrt(math.prod(math.factorial(m) for m in (m1, m2, m3, m4)))
        return math.factorial(s) / (2**s * denominator)

    for c, state in enumerate(states):
        for m3 in range(orbitals):
            for m4 in range(orbitals):
                occ = list(state)
                if occ[m4] == 0:
                    continue
                amp = math.sqrt(occ[m4])
                occ[m4] -= 1
                if occ[m3] == 0:
                    continue
                amp *= math.sqrt(occ[m3])
                occ[m3] -= 1
                for m1 in range(orbitals):
                    m2 = m3 + m4 - m1
                    if not 0 <= m2 < orbitals:
                        continue
                    new = list(occ)
                    amp2 = math.sqrt(new[m2] + 1)
                    new[m2] += 1
                    amp2 *= math.sqrt(new[m1] + 1)
                    new[m1] += 1
                    h[position[tuple(new)], c] += 0.5 * element(m1, m2, m3, m4) * amp * amp2
    return h


@pytest.mark.parametrize(("n", "l_total"), [(3, 2), (3, 3), (4, 4), (4, 6), (5, 3)])
def test_landau_level_matches_dense_enumeration(n: int, l_total: int) -> None:
    model = lowest_landau_level(total=n, angular_momentum=l_total)
    want = llL_dense(n, l_total)
    assert model.space.dim == want.shape[0]
    got = fm.build_matrix(model.hamiltonian(), model.space).toarray()
    # Same basis order: lexicographic in (n_0, n_1, ...), as the enumeration.
    np.testing.assert_allclose(got, want, atol=1e-12)


@pytest.mark.parametrize("n", [3, 4, 5, 6])
def test_yrast_line(n: int) -> None:
    # Bertsch & Papenbrock, PRL 83, 5412 (1999); exact eigenstates by Smith & Wilkin,
    # PRA 62, 061602 (2000): for 2 <= L <= N the lowest energy is E_L = g N(2N − L − 2)/4
    # in units where the L = 0 energy is g N(N − 1)/2 (g = V_0000, checked against the
    # dense enumeration above; the PRL writes the same line with its own unit of g).
    g = 1.7
    for l_total in range(0, n + 1):
        model = lowest_landau_level(total=n, angular_momentum=l_total, g=g)
        energy = fm.ground_state(model.hamiltonian(), model.space).energy
        if l_total <= 1:
            want = g * n * (n - 1) / 2  # all in m = 0, or its centre-of-mass excitation
        else:
            want = g * n * (2 * n - l_total - 2) / 4
        assert energy == pytest.approx(want, abs=1e-9), (n, l_total)


@pytest.mark.parametrize("n", [3, 4])
def test_laughlin_state_is_the_first_zero_mode(n: int) -> None:
    # The bosonic Laughlin state Π (z_i − z_j)² at L = N(N − 1) has zero contact energy
    # and is the only such state there; no smaller L has a zero-energy state (Smith &
    # Wilkin 2000; the standard result for the ν = 1/2 bosonic Laughlin state).
    laughlin = n * (n - 1)
    for l_total in range(0, laughlin + 1):
        model = lowest_landau_level(total=n, angular_momentum=l_total)
        h = fm.build_matrix(model.hamiltonian(), model.space).toarray()
        energies = np.linalg.eigvalsh(h)
        if l_total < laughlin:
            assert energies[0] > 1e-6, (n, l_total)
        else:
            assert abs(energies[0]) < 1e-10
            assert energies[1] > 1e-3  # unique


def test_laughlin_sector_solves_with_the_lanczos_solver() -> None:
    model = lowest_landau_level(total=5, angular_momentum=20)
    result = fm.ground_state(model.hamiltonian(), model.space, method="lanczos")
    assert abs(result.energy) < 1e-8


def test_landau_level_model_file() -> None:
    spec = fm.parse_model_text(
        '[model]\nkind = "lowest-landau-level"\ntotal = 4\nangular_momentum = 4\n'
        "[parameters]\ng = 2.0\n"
    )
    energy = fm.ground_state(spec.model.hamiltonian(), spec.model.space).energy
    assert energy == pytest.approx(2.0 * 4 * (8 - 4 - 2) / 4)  # Bertsch & Papenbrock 1999


def test_landau_level_bad_arguments() -> None:
    with pytest.raises(ValueError, match="total"):
        lowest_landau_level(total=0, angular_momentum=2)
    with pytest.raises(ValueError, match="angular_momentum"):
        lowest_landau_level(total=2, angular_momentum=-1)
    with pytest.raises(fm.exceptions.SpaceError):
        lowest_landau_level(3, total=2, angular_momentum=5)


def test_arrays_on_a_symmetry_sector() -> None:
    # A circulant coupling matrix commutes with the ring translation: the sector built
    # from the arrays equals the one built term by term, and its energies are among
    # those of the einsum oracle on the full sector (common practice, no source).
    m = 4
    row = np.array([0.3, -1.0, 0.25, -1.0])
    t = np.array([[row[(j - i) % m] for j in range(m)] for i in range(m)])
    v = np.zeros((m,) * 4)
    for i in range(m):
        v[i, i, i, i] = 2.0
    h = fm.quadratic_form(t) + fm.pair_interaction(v)
    by_terms = sum(
        (float(t[i, j]) * fm.raising(i) * fm.lowering(j) for i in range(m) for j in range(m)),
        fm.LadderExpr(),
    ) + sum((fm.raising(i) ** 2 * fm.lowering(i) ** 2 for i in range(m)), fm.LadderExpr())
    base = fm.FockSpace(m, 3, 3)
    momentum = fm.SymmetricSpace(base, [(fm.ring_translation(m), 0)])
    got = fm.build_matrix(h, momentum).toarray()
    np.testing.assert_allclose(got, fm.build_matrix(by_terms, momentum).toarray(), atol=1e-12)
    cutoffs = [3] * m
    full = np.linalg.eigvalsh(
        sector(oracle_quadratic(t, cutoffs) + oracle_pair(v, cutoffs), cutoffs, 3)
    )
    for energy in np.linalg.eigvalsh(got):
        assert np.min(np.abs(full - energy)) < 1e-9
