"""density_correlations against a dense reference built from brute-force occupations."""

from __future__ import annotations

import fockmill as fm
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import sector_occupations


@st.composite
def sectors(draw: st.DrawFn) -> tuple[list[int], int | None, list[int], int | None]:
    modes = draw(st.integers(1, 4))
    cutoffs = draw(st.lists(st.integers(1, 3), min_size=modes, max_size=modes))
    weights = draw(st.lists(st.integers(1, 2), min_size=modes, max_size=modes))
    total = draw(st.none() | st.integers(0, 4))
    modulus = draw(st.none() | st.just(2)) if total is not None else None
    return cutoffs, total, weights, modulus


@settings(max_examples=40, deadline=None)
@given(sectors(), st.booleans(), st.integers(0, 2**32 - 1))
def test_matches_dense_number_operators(
    sector: tuple[list[int], int | None, list[int], int | None], complex_: bool, seed: int
) -> None:
    # ⟨n_i n_j⟩ = Σ_s |ψ_s|² n_i(s) n_j(s) / ‖ψ‖², since number states diagonalise every
    # n_i (Sakurai & Napolitano, Modern Quantum Mechanics, 2nd ed. 2011, Sec. 2.3).
    cutoffs, total, weights, modulus = sector
    occupations = sector_occupations(cutoffs, weights, total, modulus)
    if occupations.shape[0] == 0:
        return
    space = fm.FockSpace(len(cutoffs), cutoffs, total, weights=weights, modulus=modulus)
    rng = np.random.default_rng(seed)
    psi = rng.normal(size=space.dim) + (1j * rng.normal(size=space.dim) if complex_ else 0)
    p = np.abs(psi) ** 2 / np.sum(np.abs(psi) ** 2)
    occ = occupations.astype(float)
    expected = np.einsum("s,si,sj->ij", p, occ, occ)
    np.testing.assert_allclose(fm.density_correlations(space, psi), expected, atol=1e-12)
    mean = p @ occ
    connected = fm.density_correlations(space, psi, connected=True)
    np.testing.assert_allclose(connected, expected - np.outer(mean, mean), atol=1e-12)


def test_thread_counts_agree_bit_for_bit() -> None:
    space = fm.FockSpace(modes=6, cutoff=6, total=6)
    psi = np.random.default_rng(5).normal(size=space.dim)
    one = fm.density_correlations(space, psi, threads=1)
    two = fm.density_correlations(space, psi, threads=2)
    assert np.array_equal(one, two)


def test_ring_ground_state_is_translation_invariant() -> None:
    # On a ring every site is equivalent, so ⟨n_0 n_j⟩ depends on distance only
    # (common practice, no source), and Σ_j ⟨n_0 n_j⟩ = ⟨n_0 N⟩ = N ⟨n_0⟩ = N²/L.
    L = 6
    hop = sum(
        -(fm.raising(i) * fm.lowering((i + 1) % L) + fm.raising((i + 1) % L) * fm.lowering(i))
        for i in range(L)
    )
    h = hop + 1.5 * sum(fm.number(i) * (fm.number(i) - 1) for i in range(L))
    space = fm.FockSpace(modes=L, cutoff=L, total=L)
    g = fm.ground_state(h, space)
    c = fm.density_correlations(space, g.vector)
    assert c[0].sum() == pytest.approx(L * L / L, abs=1e-9)
    assert c[0, 1] == pytest.approx(c[0, L - 1], abs=1e-9)
    assert c[0, 2] == pytest.approx(c[0, L - 2], abs=1e-9)


def test_bad_input() -> None:
    space = fm.FockSpace(modes=2, cutoff=1)
    with pytest.raises(ValueError, match="shape"):
        fm.density_correlations(space, np.ones(3))
    with pytest.raises(ValueError, match="zero"):
        fm.density_correlations(space, np.zeros(space.dim))
