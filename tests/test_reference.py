"""The two dense oracles of tests/reference.py agree with each other.

``dense_matrix`` builds P X P on the full product space with np.kron; ``sector_matrix``
applies each monomial to each sector state in a plain loop. Agreement of two unrelated
constructions is what lets the other tests use either as an outside reference.
"""

from __future__ import annotations

import fockmill as fm
import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import dense_matrix, full_basis, restrict, sector_matrix, sector_occupations

FACTORS = st.sampled_from([fm.lowering, fm.raising, fm.number])


@st.composite
def cases(draw: st.DrawFn) -> tuple[fm.LadderExpr, list[int], int | None, list[int], int | None]:
    modes = draw(st.integers(1, 3))
    cutoffs = draw(st.lists(st.integers(1, 3), min_size=modes, max_size=modes))
    weights = draw(st.lists(st.integers(0, 2), min_size=modes, max_size=modes))
    total = draw(st.none() | st.integers(0, 4))
    modulus = draw(st.none() | st.just(2)) if total is not None else None
    expr = fm.LadderExpr()
    for _ in range(draw(st.integers(1, 4))):
        term = fm.LadderExpr.scalar(draw(st.floats(-2, 2, allow_nan=False)))
        for _ in range(draw(st.integers(0, 3))):
            term = term * draw(FACTORS)(draw(st.integers(0, modes - 1)))
        expr = expr + term
    return expr, cutoffs, total, weights, modulus


@settings(max_examples=60, deadline=None)
@given(cases())
def test_loop_oracle_equals_kron_oracle(
    case: tuple[fm.LadderExpr, list[int], int | None, list[int], int | None],
) -> None:
    expr, cutoffs, total, weights, modulus = case
    kept = sector_occupations(cutoffs, weights, total, modulus)
    expected = restrict(dense_matrix(expr, cutoffs), full_basis(cutoffs), kept)
    actual = sector_matrix(expr, cutoffs, total, weights, modulus)
    np.testing.assert_allclose(actual, expected, atol=1e-12)
