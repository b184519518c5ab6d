"""The prepared problem (fm.prepare) and the solver defects it fixed.

Reference for every matrix, product and energy here: the Bose–Hubbard ring's sector
matrix written out by a hand loop over occupation tuples, then numpy.linalg.eigvalsh
(common practice, no source).
"""

from __future__ import annotations

import fockmill as fm
import numpy as np
import pytest
import scipy.sparse.linalg as sla
from fockmill.exceptions import ConvergenceError
from fockmill.problem import eigensolve as _solve
from reference import bose_hubbard_ring, sector_occupations


def dense_sector(sites: int, hopping: float, interaction: float) -> np.ndarray:
    """The unit-filled ring's sector matrix from a hand-written loop over the states
    (independent of the Rust build); basis in lexicographic order, as fockmill's."""
    states = [
        tuple(int(n) for n in row) for row in sector_occupations([sites] * sites, total=sites)
    ]
    where = {s: i for i, s in enumerate(states)}
    h = np.zeros((len(states), len(states)))
    for col, s in enumerate(states):
        h[col, col] = 0.5 * interaction * sum(n * (n - 1) for n in s)
        for i in range(sites):
            for a, b in ((i, (i + 1) % sites), ((i + 1) % sites, i)):
                if s[b] == 0:
                    continue
                t = list(s)
                amplitude = np.sqrt(t[b]) * np.sqrt(t[a] + 1)
                t[b] -= 1
                t[a] += 1
                h[where[tuple(t)], col] -= hopping * amplitude
    return h


@pytest.fixture(scope="module")
def ring6() -> tuple[fm.LadderExpr, fm.FockSpace]:
    return bose_hubbard_ring(6, 1.0, 2.0), fm.FockSpace(modes=6, cutoff=6, total=6)


def test_problem_matrix_products_and_operator_agree_with_dense(ring6) -> None:
    h, space = ring6
    reference = dense_sector(6, 1.0, 2.0)
    problem = fm.prepare(h, space, threads=2)
    x = np.random.default_rng(3).standard_normal(space.dim)
    np.testing.assert_allclose(problem.matrix().toarray(), reference, atol=1e-12)
    np.testing.assert_allclose(problem.matvec(x), reference @ x, atol=1e-10)
    block = np.random.default_rng(4).standard_normal((space.dim, 3))
    np.testing.assert_allclose(problem.matmat(block), reference @ block, atol=1e-10)
    op = problem.operator()
    assert op.native is problem.native  # one compiled operator, not a second one
    np.testing.assert_allclose(op @ x, reference @ x, atol=1e-10)
    assert problem.products == 4


def test_public_functions_accept_a_problem_and_reuse_it(ring6) -> None:
    h, space = ring6
    problem = fm.prepare(h, space)
    estimate = problem.estimate
    assert problem.estimate is estimate  # computed once
    assert fm.estimate_memory(problem) is estimate
    exact = np.linalg.eigvalsh(dense_sector(6, 1.0, 2.0))
    for method in ("dense", "csr", "operator", "lanczos"):
        g = fm.ground_state(problem, method=method)
        assert g.energy == pytest.approx(exact[0], abs=1e-8)
        assert problem.ground_state(method=method).energy == pytest.approx(exact[0], abs=1e-8)
    levels = fm.lowest_levels(problem, k=3, method="csr")
    np.testing.assert_allclose(levels.energies, exact[:3], atol=1e-8)
    np.testing.assert_allclose(problem.lowest_levels(3).energies, exact[:3], atol=1e-8)
    assert (fm.build_matrix(problem) != fm.build_matrix(h, space)).nnz == 0


def test_problem_refuses_a_second_space(ring6) -> None:
    h, space = ring6
    problem = fm.prepare(h, space)
    other = fm.FockSpace(modes=6, cutoff=6, total=5)
    with pytest.raises(ValueError, match="already carries its space"):
        fm.build_matrix(problem, other)
    with pytest.raises(TypeError, match="missing the space"):
        fm.build_matrix(h)


def reflection_odd_start(space: fm.FockSpace, seed: int) -> np.ndarray:
    """A random vector odd under the ring's reflection i -> L-1-i: it has no weight in
    the reflection-even sector where the ground state lies."""
    occ = space.occupations().astype(np.int64)
    mirror = space.index(occ[:, ::-1])
    x = np.random.default_rng(seed).standard_normal(space.dim)
    return x - x[mirror]


@pytest.mark.parametrize("method", ["lanczos", "operator", "csr"])
def test_start_vector_without_ground_sector_weight_still_finds_the_ground_state(
    ring6, method: str
) -> None:
    # Defect: a v0 with no weight in the ground state's symmetry sector used to yield an
    # excited level. The unit-filled ring's ground state is reflection-even
    # (Perron–Frobenius for non-positive hopping; common practice, no source).
    # Reference: numpy.linalg.eigvalsh of the np.kron-built matrix.
    h, space = ring6
    exact = np.linalg.eigvalsh(dense_sector(6, 1.0, 2.0))
    v0 = reflection_odd_start(space, seed=11)
    g = fm.ground_state(h, space, method=method, v0=v0, tol=1e-10)
    assert g.energy == pytest.approx(exact[0], abs=1e-7)


def test_degeneracy_probe_keeps_levels_sorted_when_the_solver_stalled_high() -> None:
    # Defect: the ground-level probe appended energies unsorted, so when the solver
    # had landed on an excited level the reported energy was the higher one.
    # Reference: a diagonal matrix, whose spectrum is its diagonal (common practice).
    diagonal = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0])
    target = sla.aslinearoperator(np.diag(diagonal))
    stalled_vector = np.zeros((8, 1))
    stalled_vector[1, 0] = 1.0  # the solver "found" the level at 1.0
    energies, vectors = _solve._probe_degeneracy(
        target, 8, np.array([1.0]), stalled_vector, 1e-10, 1e-7, seed=0, maxiter=None
    )
    assert energies[0] == pytest.approx(0.0, abs=1e-8)
    assert np.all(np.diff(energies) >= 0)
    assert abs(vectors[0, 0]) == pytest.approx(1.0, abs=1e-6)


def test_unconverged_eigsh_result_raises(ring6, monkeypatch: pytest.MonkeyPatch) -> None:
    # Defect: eigsh results that missed the tolerance came back silently (converged=False).
    # ARPACK is replaced by a stand-in returning a poor Ritz pair; the one rule of every
    # method is now: raise ConvergenceError. Reference: the residual ‖Hv − Ev‖ itself.
    h, space = ring6

    def sloppy_eigsh(op, k=1, **_: object):
        v = np.ones((op.shape[0], k)) / np.sqrt(op.shape[0])
        return np.full(k, -3.0), v

    monkeypatch.setattr(_solve.sla, "eigsh", sloppy_eigsh)
    with pytest.raises(ConvergenceError, match="residual"):
        fm.lowest_levels(h, space, k=2, method="operator")
    with pytest.raises(ConvergenceError, match="residual"):
        fm.ground_state(h, space, method="csr")


def test_max_iterations_counts_products_for_every_method(ring6) -> None:
    # The same word means the same thing everywhere: a cap on matrix-vector products.
    h, space = ring6
    for method in ("lanczos", "operator"):
        with pytest.raises(ConvergenceError):
            fm.ground_state(h, space, method=method, max_iterations=5, tol=1e-12)
    g = fm.ground_state(h, space, method="operator", max_iterations=5000)
    assert g.products <= 5000 + 200  # one restart's worth of slack (ncv products)


@pytest.mark.parametrize("method", ["dense", "csr", "operator", "lanczos"])
def test_each_solve_compiles_and_estimates_once(
    ring6, method: str, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Before the prepared problem, ground_state(method="csr") compiled the expression
    # four times and estimated the memory twice. Counted here at the native boundary.
    from fockmill import _native
    from fockmill.problem import compile as _prepare

    h, space = ring6
    compiled: list[int] = []
    estimated: list[int] = []
    real_operator = _native.NativeOperator

    class CountingOperator:
        def __init__(self, inner: object) -> None:
            self._inner = inner

        @staticmethod
        def on_space(*args: object, **options: object) -> CountingOperator:
            compiled.append(1)
            return CountingOperator(real_operator.on_space(*args, **options))

        def estimate_nnz(self, **options: object) -> object:
            estimated.append(1)
            return self._inner.estimate_nnz(**options)  # type: ignore[attr-defined]

        def __getattr__(self, name: str) -> object:
            return getattr(self._inner, name)

    monkeypatch.setattr(_prepare._native, "NativeOperator", CountingOperator)
    g = fm.ground_state(h, space, method=method)
    assert np.isfinite(g.energy)
    assert len(compiled) == 1
    assert len(estimated) == 1
