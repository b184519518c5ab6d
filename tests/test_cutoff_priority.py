"""converge_cutoffs raises only the modes that need it, and reports per mode."""

from __future__ import annotations

import fockmill as fm
import pytest


def displaced_oscillators() -> fm.LadderExpr:
    # Three independent oscillators: mode 0 strongly driven, mode 1 weakly driven,
    # mode 2 undriven (its ground state is the vacuum).
    a, ad, n = fm.lowering, fm.raising, fm.number
    return 1.0 * n(0) + 1.2 * (a(0) + ad(0)) + 1.5 * n(1) + 0.2 * (a(1) + ad(1)) + 0.8 * n(2)


def test_only_weighted_modes_are_raised() -> None:
    # Completing the square, ω n + ε (a + a†) has ground energy −ε²/ω (from memory: the
    # displaced oscillator, a → a + ε/ω), and the modes are independent.
    expected = -(1.2**2) / 1.0 - 0.2**2 / 1.5
    start = fm.FockSpace(modes=3, cutoff=2)
    scan = fm.converge_cutoffs(
        displaced_oscillators(), start, energy_tol=1e-10, weight_tol=1e-10, max_cutoff=60
    )
    assert scan.converged and all(scan.mode_converged)
    assert scan.energies[-1] == pytest.approx(expected, abs=1e-9)
    final = scan.cutoffs[-1]
    assert final[2] == 2, "the undriven mode carries no top-level weight and stays"
    assert final[0] > final[1] > 2, "the strongly driven mode needs the most levels"
    assert all(len(raised) == 1 for raised in scan.raised[1:])
    assert 2 not in {m for raised in scan.raised for m in raised}
    assert scan.dims[-1] == (final[0] + 1) * (final[1] + 1) * 3
    # Raising every truncating mode in step would have reached (final[0] + 1)^3 states.
    assert scan.dims[-1] < (final[0] + 1) ** 2 * 3
    assert set(scan.energy_changes) == {0, 1}
    assert all(change < 1e-10 for change in scan.energy_changes.values())
    assert list(scan.energies) == sorted(scan.energies, reverse=True)  # variational


def test_together_mode_and_max_cutoff_report() -> None:
    scan = fm.converge_cutoffs(
        displaced_oscillators(),
        fm.FockSpace(modes=3, cutoff=2),
        energy_tol=1e-10,
        weight_tol=1e-10,
        max_cutoff=60,
        one_at_a_time=False,
    )
    assert scan.converged and scan.cutoffs[-1][2] == 2
    capped = fm.converge_cutoffs(
        displaced_oscillators(),
        fm.FockSpace(modes=3, cutoff=2),
        energy_tol=1e-12,
        weight_tol=1e-12,
        max_cutoff=4,
    )
    assert not capped.converged
    assert capped.mode_converged[2] and not capped.mode_converged[0]
    assert capped.cutoffs[-1][0] == 4
