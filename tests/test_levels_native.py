"""The native lowest-levels solver (thick-restart Lanczos in Rust) called directly:
``NativeOperator.lanczos_levels`` (matrix-free and stored) and ``NativeOperator.from_csr`` (a CSR
matrix handed in from Python), against dense numpy ``eigh`` and closed-form degenerate
spectra."""

from __future__ import annotations

from typing import Any

import fockmill as fm
import numpy as np
import pytest
from fockmill import _native

TOL = 1e-9


def ring_hopping(sites: int, hopping: float, phase: float = 0.0) -> fm.LadderExpr:
    """−J Σ (e^{iφ} a_i† a_{i+1} + h.c.) on a ring (φ = 0: real)."""
    h = fm.LadderExpr()
    factor: complex | float = np.exp(1j * phase) if phase else 1.0
    for i in range(sites):
        j = (i + 1) % sites
        conj = np.conj(factor) if phase else 1.0
        h = h - hopping * factor * fm.raising(i) * fm.lowering(j)
        h = h - hopping * conj * fm.raising(j) * fm.lowering(i)
    return h


def bose_hubbard_ring(sites: int, hopping: float, interaction: float) -> fm.LadderExpr:
    h = ring_hopping(sites, hopping)
    for i in range(sites):
        h = h + 0.5 * interaction * fm.number(i) * (fm.number(i) - 1)
    return h


def dense(problem: fm.Problem) -> np.ndarray[Any, Any]:
    return problem.matrix().toarray()


def check_levels(
    matrix: np.ndarray[Any, Any],
    out: Any,
    exact: np.ndarray[Any, Any],
    k: int,
    tol: float = TOL,
) -> None:
    """Energies equal ``exact[:k]``, vectors orthonormal eigenvectors, residuals honest."""
    energies, vectors, residuals = out.energies, out.vectors, out.residuals
    products, restarts, converged = out.products, out.restarts, out.converged
    assert converged
    assert energies.shape == (k,) and vectors.shape == (matrix.shape[0], k)
    assert products > 0 and restarts >= 0
    np.testing.assert_allclose(energies, exact[:k], atol=1e-8)
    assert np.all(np.diff(energies) >= -1e-12)
    gram = vectors.conj().T @ vectors
    np.testing.assert_allclose(gram, np.eye(k), atol=1e-9)
    measured = np.linalg.norm(matrix @ vectors - vectors * energies, axis=0)
    np.testing.assert_allclose(residuals, measured, atol=1e-10)
    assert np.all(measured <= tol * np.maximum(1.0, np.abs(energies)))


@pytest.mark.parametrize("stored", [False, True])
@pytest.mark.parametrize("k", [1, 3, 6])
def test_bose_hubbard_ring_against_eigh(stored: bool, k: int) -> None:
    # Dense reference: numpy eigh of the same matrix (LAPACK, Anderson et al. 1999).
    problem = fm.prepare(bose_hubbard_ring(6, 1.0, 2.0), fm.FockSpace(modes=6, cutoff=6, total=6))
    matrix = dense(problem)
    exact = np.linalg.eigvalsh(matrix)
    out = problem.native.lanczos_levels(k, tol=TOL, store=stored, threads=2)
    check_levels(matrix, out, exact, k)


@pytest.mark.parametrize("stored", [False, True])
@pytest.mark.parametrize("k", [4, 5, 7])
def test_one_particle_on_a_ring_finds_both_copies_of_each_doublet(stored: bool, k: int) -> None:
    # One particle on a ring of L sites, hopping −J: Bloch levels ε(q) = −2J cos(2πq/L),
    # q and −q degenerate (common practice, no source). L = 150 is far above the basis
    # (2k + 8), so missed copies must come from the deflated re-check.
    sites, hopping = 150, 0.8
    problem = fm.prepare(ring_hopping(sites, hopping), fm.FockSpace(modes=sites, cutoff=1, total=1))
    q = np.arange(sites)
    exact = np.sort(-2 * hopping * np.cos(2 * np.pi * q / sites))
    out = problem.native.lanczos_levels(k, tol=TOL, store=stored)
    check_levels(dense(problem), out, exact, k)


@pytest.mark.parametrize("k", [3, 4])
def test_two_bosons_on_a_triangle_give_a_triplet(k: int) -> None:
    # Hopping +J on a triangle: one-particle levels 2J (q = 0) and −J twice (q = ±1);
    # two bosons in the doublet: three symmetric states at −2J, then J twice, then 4J
    # (Bloch + bosonic counting; common practice, no source).
    hopping = 1.0
    problem = fm.prepare(ring_hopping(3, -hopping), fm.FockSpace(modes=3, cutoff=2, total=2))
    exact = np.array([-2.0, -2.0, -2.0, 1.0, 1.0, 4.0]) * hopping
    out = problem.native.lanczos_levels(k, tol=TOL)
    check_levels(dense(problem), out, exact, k)


def test_equal_frequency_normal_modes_without_number_conservation() -> None:
    # Three modes of frequency ω coupled in a ring by g (a_i† a_j + h.c.): normal modes
    # ω + 2g cos(2πq/3) = ω + 2g, ω − g, ω − g (circulant matrix; common practice, no
    # source). States with at most `cutoff` quanta are untouched by the truncation, so
    # the lowest levels are Σ_q n_q ε_q: 0, (ω − g)×2, 2(ω − g)×3, ω + 2g, ...
    omega, g = 1.0, 0.3
    h = omega * (fm.number(0) + fm.number(1) + fm.number(2)) - ring_hopping(3, g)
    problem = fm.prepare(h, fm.FockSpace(modes=3, cutoff=4))
    low, high = omega - g, omega + 2 * g
    exact = np.array([0.0, low, low, 2 * low, 2 * low, 2 * low, high])
    out = problem.native.lanczos_levels(6, tol=TOL)
    check_levels(dense(problem), out, exact, 6)
    # Cross-check against the dense reference as well (numpy eigh).
    np.testing.assert_allclose(out.energies, np.linalg.eigvalsh(dense(problem))[:6], atol=1e-8)


def test_complex_ring_with_flux_against_eigh() -> None:
    # Peierls phase φ on every bond: ε(q) = −2J cos(2πq/L + φ) (common practice, no
    # source); complex Hermitian, checked against numpy eigh and the closed form.
    sites, hopping, phase = 40, 1.0, 0.37
    problem = fm.prepare(
        ring_hopping(sites, hopping, phase), fm.FockSpace(modes=sites, cutoff=1, total=1)
    )
    assert not problem.is_real
    matrix = dense(problem)
    exact = np.linalg.eigvalsh(matrix)
    q = np.arange(sites)
    np.testing.assert_allclose(
        exact, np.sort(-2 * hopping * np.cos(2 * np.pi * q / sites + phase)), atol=1e-12
    )
    for stored in (False, True):
        out = problem.native.lanczos_levels(5, tol=TOL, store=stored)
        assert out.vectors.dtype == np.complex128
        check_levels(matrix, out, exact, 5)


def test_same_bits_for_any_thread_count() -> None:
    # Determinism: fixed-order reductions (common practice, no source).
    problem = fm.prepare(bose_hubbard_ring(7, 1.0, 1.0), fm.FockSpace(modes=7, cutoff=7, total=7))
    one = problem.native.lanczos_levels(4, tol=TOL, threads=1)
    two = problem.native.lanczos_levels(4, tol=TOL, threads=2)
    assert one.energies.tobytes() == two.energies.tobytes()
    assert one.vectors.tobytes() == two.vectors.tobytes()
    assert one.products == two.products


def _sector_start(sites: int) -> np.ndarray[Any, Any]:
    """sin(2π s / L) over the single-particle basis: the q = ±1 sector, orthogonal to the
    uniform q = 0 ground state of the ring."""
    space = fm.FockSpace(modes=sites, cutoff=1, total=1)
    site = np.argmax(space.occupations(), axis=1)
    return np.sin(2 * np.pi * site / sites)


def test_start_without_ground_sector_weight_still_finds_the_ground_state() -> None:
    # Issue 8 defect 2. The start is an exact eigenvector of the q = ±1 sector, so a
    # Krylov space built from it alone never contains the uniform ground state at −2J
    # (Bloch; common practice, no source). The seeded noise mixed in must reach it.
    sites = 90
    problem = fm.prepare(ring_hopping(sites, 1.0), fm.FockSpace(modes=sites, cutoff=1, total=1))
    start = _sector_start(sites)
    np.testing.assert_allclose(
        problem.native.matvec(start), -2 * np.cos(2 * np.pi / sites) * start, atol=1e-12
    )
    ground = problem.native.lanczos_ground(start=start)
    assert ground.converged and ground.residual <= TOL * 2
    assert ground.energy == pytest.approx(-2.0, abs=1e-9)
    energies = problem.native.lanczos_levels(3, start=start).energies
    first = -2 * np.cos(2 * np.pi / sites)
    np.testing.assert_allclose(energies, [-2.0, first, first], atol=1e-9)
    # A block start (dim, b) is accepted too.
    block = np.stack([start, np.cos(2 * np.pi * np.arange(sites) / sites)], axis=1)
    energies = problem.native.lanczos_levels(3, start=block).energies
    assert energies[0] == pytest.approx(-2.0, abs=1e-9)


def test_native_csr_runs_the_same_solvers() -> None:
    problem = fm.prepare(bose_hubbard_ring(6, 1.0, 3.0), fm.FockSpace(modes=6, cutoff=6, total=6))
    csr = problem.matrix()
    matrix = csr.toarray()
    exact = np.linalg.eigvalsh(matrix)
    for index in (np.int32, np.int64):
        held = _native.NativeOperator.from_csr(
            csr.indptr.astype(index), csr.indices.astype(index), csr.data
        )
        assert held.kind == "csr" and held.shape == (problem.dim, problem.dim)
        assert held.is_real and held.terms is None
        found = held.estimate_nnz()
        assert found.exact and found.nnz == csr.nnz
        assert found.max_row == int(np.diff(csr.indptr).max())
        check_levels(matrix, held.lanczos_levels(4, tol=TOL), exact, 4)
        ground = held.lanczos_ground(tol=TOL)
        assert ground.stored and ground.residual <= TOL * max(1.0, abs(ground.energy))
        assert ground.converged and ground.energy == pytest.approx(exact[0], abs=1e-9)
        # Products on the held matrix equal scipy's (reference: scipy.sparse CSR @).
        x = np.random.default_rng(1).standard_normal(problem.dim)
        np.testing.assert_allclose(held.matvec(x), csr @ x, rtol=1e-13, atol=1e-13)
        z = x + 1j * np.random.default_rng(2).standard_normal(problem.dim)
        np.testing.assert_allclose(held.matvec(z), csr @ z, rtol=1e-13, atol=1e-13)
        block = np.random.default_rng(3).standard_normal((problem.dim, 3))
        np.testing.assert_allclose(held.matmat(block), csr @ block, rtol=1e-13, atol=1e-13)
        with pytest.raises(ValueError, match="handed in"):
            held.build_csr()
    # The same results as the operator's stored variant (same matrix, same seed).
    stored = problem.native.lanczos_levels(4, tol=TOL, store=True)
    assert stored.stored
    held = _native.NativeOperator.from_csr(csr.indptr, csr.indices, csr.data)
    assert held.lanczos_levels(4, tol=TOL).energies.tobytes() == stored.energies.tobytes()


def test_native_csr_complex() -> None:
    sites = 30
    problem = fm.prepare(
        ring_hopping(sites, 1.0, 0.2), fm.FockSpace(modes=sites, cutoff=1, total=1)
    )
    csr = problem.matrix()
    held = _native.NativeOperator.from_csr(csr.indptr, csr.indices, csr.data)
    assert not held.is_real
    matrix = csr.toarray()
    check_levels(matrix, held.lanczos_levels(3, tol=TOL), np.linalg.eigvalsh(matrix), 3)


def test_bad_input_is_refused_clearly() -> None:
    problem = fm.prepare(ring_hopping(5, 1.0), fm.FockSpace(modes=5, cutoff=1, total=1))
    with pytest.raises(ValueError, match="k=0"):
        problem.native.lanczos_levels(0)
    with pytest.raises(ValueError, match="k=6"):
        problem.native.lanczos_levels(6)
    with pytest.raises(ValueError, match="start"):
        problem.native.lanczos_levels(2, start=np.zeros(5))
    with pytest.raises(ValueError, match="start"):
        problem.native.lanczos_levels(2, start=np.ones(4))
    with pytest.raises(ValueError, match="tol"):
        problem.native.lanczos_levels(2, tol=-1.0)
    indptr = np.array([0, 1, 2], dtype=np.int32)
    with pytest.raises(ValueError, match="outside the square matrix"):
        _native.NativeOperator.from_csr(indptr, np.array([0, 5], dtype=np.int32), np.ones(2))
    with pytest.raises(ValueError, match="equal length"):
        _native.NativeOperator.from_csr(indptr, np.array([0, 1], dtype=np.int32), np.ones(3))
    with pytest.raises(ValueError, match="NaN"):
        _native.NativeOperator.from_csr(
            indptr, np.array([0, 1], dtype=np.int32), np.array([1.0, np.nan])
        )
