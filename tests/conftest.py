"""Shared pytest configuration: hypothesis profiles and small fixtures.

Hypothesis profiles
-------------------
``dev``
    Fast local runs (30 examples per property, random seeds).
``ci``
    Thorough and reproducible (150 examples per property, derandomized).

The profile comes from ``FOCKMILL_HYPOTHESIS_PROFILE``; without it, ``ci`` is used when
the ``CI`` environment variable is set (as CI services do) and ``dev`` otherwise. Tests
that pass their own ``max_examples`` (tests/test_expr.py) keep it. Deadlines are off in
both profiles: the machines are shared, and timing is not what these tests check.
"""

from __future__ import annotations

import os

import fockmill as fm
import numpy as np
import pytest
from hypothesis import settings

PROFILE_VARIABLE = "FOCKMILL_HYPOTHESIS_PROFILE"

settings.register_profile("dev", max_examples=30, deadline=None, derandomize=False)
settings.register_profile("ci", max_examples=150, deadline=None, derandomize=True)


def _running_in_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


def _chosen_profile() -> str:
    requested = os.environ.get(PROFILE_VARIABLE, "").strip()
    if requested and requested not in ("dev", "ci"):
        raise pytest.UsageError(
            f"{PROFILE_VARIABLE}={requested!r} is not a hypothesis profile; use 'dev' or 'ci'"
        )
    return requested or ("ci" if _running_in_ci() else "dev")


settings.load_profile(_chosen_profile())


@pytest.fixture
def rng() -> np.random.Generator:
    """A fresh, fixed-seed random generator per test (results do not depend on order)."""
    return np.random.default_rng(20240517)


@pytest.fixture(scope="module")
def bose_hubbard_ring() -> tuple[fm.LadderExpr, fm.FockSpace]:
    """Invented example: 5-site Bose–Hubbard ring at unit filling (dim 126).

    ``H = -t Σ_i (a_i† a_{i+1} + h.c.) + (U/2) Σ_i n_i (n_i - 1) + Σ_i v_i n_i`` with
    t = 1, U = 3.7, periodic boundary and a static site potential v_i that lifts the
    ±momentum degeneracies of the clean ring (single-vector Krylov solvers such as
    eigsh find only one copy of a degenerate level in exact arithmetic). Cutoff 5 = N,
    so no occupation of the sector is truncated.
    """
    sites, hopping, interaction = 5, 1.0, 3.7
    potential = [0.0, 0.6, -0.35, 0.9, 0.25]
    expr = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        expr = expr - hopping * (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        expr = expr + interaction / 2 * fm.number(i) * (fm.number(i) - 1)
        expr = expr + potential[i] * fm.number(i)
    return expr, fm.FockSpace(modes=sites, cutoff=sites, total=sites)
