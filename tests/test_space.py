"""Tests for FockSpace: basis enumeration, ranking, sector sizes and argument checks.

The oracle is brute force (tests/reference.py): enumerate the full truncated product
space with itertools.product and keep the states of the sector.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import SizeLimitError, SpaceError
from hypothesis import assume, given
from hypothesis import strategies as st
from reference import bounded_composition_count, full_basis, sector_occupations


@dataclass(frozen=True)
class SpaceSpec:
    """Arguments for FockSpace plus the per-mode cutoff list the oracle needs."""

    modes: int
    cutoff: int | list[int]
    cutoffs: list[int]
    total: int | None
    weights: list[int] | None
    modulus: int | None

    def build(self) -> fm.FockSpace:
        return fm.FockSpace(
            self.modes, self.cutoff, self.total, weights=self.weights, modulus=self.modulus
        )

    def expected_occupations(self) -> np.ndarray:
        return sector_occupations(self.cutoffs, self.weights, self.total, self.modulus)


@st.composite
def space_specs(draw: st.DrawFn) -> SpaceSpec:
    """Small spaces: up to 4 modes, cutoffs 1..3, optional total, weights and modulus."""
    modes = draw(st.integers(1, 4))
    cutoff: int | list[int]
    if draw(st.booleans()):
        shared = draw(st.integers(1, 3))
        cutoff, cutoffs = shared, [shared] * modes
    else:
        cutoffs = draw(st.lists(st.integers(1, 3), min_size=modes, max_size=modes))
        cutoff = cutoffs
    weights = draw(st.none() | st.lists(st.integers(0, 3), min_size=modes, max_size=modes))
    unit = [1] * modes if weights is None else weights
    largest_charge = sum(w * c for w, c in zip(unit, cutoffs, strict=True))
    total = draw(st.none() | st.integers(0, largest_charge + 1))
    modulus = None if total is None else draw(st.none() | st.integers(2, 4))
    return SpaceSpec(modes, cutoff, cutoffs, total, weights, modulus)


def as_tuples(rows: np.ndarray) -> list[tuple[int, ...]]:
    return [tuple(int(v) for v in row) for row in rows]


# -- enumeration and ranking against brute force ------------------------------------


@given(space_specs())
def test_sector_is_empty_exactly_when_brute_force_finds_no_state(spec: SpaceSpec) -> None:
    # An empty sector must be refused up front, and only then.
    if len(spec.expected_occupations()) == 0:
        with pytest.raises(SpaceError, match=r"change the total|lower the total"):
            spec.build()
    else:
        assert spec.build().dim > 0


@given(space_specs())
def test_occupations_equal_brute_force_in_the_same_order(spec: SpaceSpec) -> None:
    # Brute-force enumeration in lexicographic order, mode 0 most significant
    # (reference.sector_occupations); the order is part of the public contract.
    expected = spec.expected_occupations()
    assume(len(expected) > 0)
    space = spec.build()
    occupations = space.occupations()
    assert occupations.dtype == np.uint8
    assert occupations.shape == (space.dim, spec.modes)
    assert space.dim == len(expected)
    np.testing.assert_array_equal(occupations, expected)


@given(space_specs())
def test_index_inverts_occupations(spec: SpaceSpec) -> None:
    # Ranking undoes unranking: index(occupations()) == arange(dim).
    assume(len(spec.expected_occupations()) > 0)
    space = spec.build()
    ranks = space.index(space.occupations())
    assert ranks.dtype == np.int64
    np.testing.assert_array_equal(ranks, np.arange(space.dim))


@given(space_specs(), st.data())
def test_index_of_arbitrary_states_matches_lookup(spec: SpaceSpec, data: st.DataObject) -> None:
    # States outside the sector (wrong charge, above a cutoff, negative) rank to -1;
    # states inside rank to their brute-force position.
    expected = spec.expected_occupations()
    assume(len(expected) > 0)
    space = spec.build()
    position = {state: k for k, state in enumerate(as_tuples(expected))}
    candidates = np.array(
        data.draw(
            st.lists(
                st.tuples(*(st.integers(-1, c + 1) for c in spec.cutoffs)), min_size=1, max_size=8
            )
        ),
        dtype=np.int64,
    )
    wanted = [position.get(state, -1) for state in as_tuples(candidates)]
    np.testing.assert_array_equal(space.index(candidates, strict=False), wanted)


@given(space_specs())
def test_every_state_outside_the_sector_ranks_to_minus_one(spec: SpaceSpec) -> None:
    expected = spec.expected_occupations()
    assume(len(expected) > 0)
    inside = set(as_tuples(expected))
    outside = [state for state in as_tuples(full_basis(spec.cutoffs)) if state not in inside]
    assume(outside)
    ranks = spec.build().index(np.array(outside, dtype=np.int64), strict=False)
    assert np.all(ranks == -1)
    with pytest.raises(ValueError, match="is not in this space"):
        spec.build().index(np.array(outside[0], dtype=np.int64))


@given(space_specs())
def test_properties_echo_the_specification(spec: SpaceSpec) -> None:
    assume(len(spec.expected_occupations()) > 0)
    space = spec.build()
    assert space.modes == spec.modes
    assert space.cutoffs == tuple(spec.cutoffs)
    assert space.weights == tuple([1] * spec.modes if spec.weights is None else spec.weights)
    assert space.modulus == spec.modulus
    if spec.total is None:
        assert space.total is None
    elif spec.modulus is None:
        assert space.total == spec.total
    else:
        # The conserved total is reported as its residue class.
        assert space.total == spec.total % spec.modulus


# -- sector sizes against closed forms ----------------------------------------------


@given(st.lists(st.integers(1, 3), min_size=1, max_size=4), st.integers(0, 12))
def test_sector_size_matches_inclusion_exclusion(cutoffs: list[int], total: int) -> None:
    # Closed-form count of bounded compositions by inclusion-exclusion (Stanley,
    # Enumerative Combinatorics vol. 1, 2nd ed. 2012; see reference.py, from memory).
    count = bounded_composition_count(total, cutoffs)
    if count == 0:
        with pytest.raises(SpaceError, match="lower the total or raise the cutoffs"):
            fm.FockSpace(cutoff=cutoffs, total=total)
    else:
        assert fm.FockSpace(cutoff=cutoffs, total=total).dim == count


@pytest.mark.parametrize(
    ("total", "cutoffs"),
    [(10, [2] * 10), (7, [1, 2, 3, 4, 5, 6]), (12, [3] * 8), (20, [5, 4, 6, 7, 3])],
)
def test_large_sector_sizes_match_inclusion_exclusion(total: int, cutoffs: list[int]) -> None:
    # Sizes too large for the brute-force oracle, still against the closed form.
    assert fm.FockSpace(cutoff=cutoffs, total=total).dim == bounded_composition_count(
        total, cutoffs
    )


@pytest.mark.parametrize(
    ("particles", "sites", "cutoff"),
    [(0, 3, 1), (1, 7, 1), (4, 5, 4), (6, 6, 9), (10, 3, 12), (12, 8, 12)],
)
def test_sector_size_is_stars_and_bars_without_truncation(
    particles: int, sites: int, cutoff: int
) -> None:
    # N bosons on L modes with no cutoff below N: C(N + L - 1, N) states (stars and
    # bars: Feller, An Introduction to Probability Theory vol. 1, 3rd ed. 1968,
    # Sec. II.5; from memory).
    assert cutoff >= particles
    space = fm.FockSpace(modes=sites, cutoff=cutoff, total=particles)
    assert space.dim == math.comb(particles + sites - 1, particles)


def test_worked_example_with_weights_and_modulus() -> None:
    # Worked by hand: cutoffs (3, 2, 1), weights (1, 2, 3), charge ≡ 5 ≡ 2 (mod 3).
    space = fm.FockSpace(cutoff=[3, 2, 1], total=5, weights=[1, 2, 3], modulus=3)
    assert as_tuples(space.occupations()) == [
        (0, 1, 0),
        (0, 1, 1),
        (1, 2, 0),
        (1, 2, 1),
        (2, 0, 0),
        (2, 0, 1),
        (3, 1, 0),
        (3, 1, 1),
    ]
    assert space.total == 2


# -- element types and call shapes ---------------------------------------------------


def test_occupations_widen_to_uint16_above_255() -> None:
    # One mode with cutoff 300: occupations 0..300 need 16 bits.
    space = fm.FockSpace(modes=1, cutoff=300)
    occupations = space.occupations()
    assert occupations.dtype == np.uint16
    np.testing.assert_array_equal(occupations[:, 0], np.arange(301))
    np.testing.assert_array_equal(space.index(occupations), np.arange(301))
    assert space.index([300]) == 300
    assert space.index([301], strict=False) == -1


@pytest.mark.parametrize(("cutoffs", "dtype"), [([255], np.uint8), ([1, 256], np.uint16)])
def test_occupation_dtype_boundary(cutoffs: list[int], dtype: type) -> None:
    space = fm.FockSpace(cutoff=cutoffs)
    occupations = space.occupations()
    assert occupations.dtype == dtype
    assert int(occupations.max()) == max(cutoffs)


def test_index_accepts_one_state_or_a_stack() -> None:
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    # Worked by hand: the order is (0,0,2) (0,1,1) (0,2,0) (1,0,1) (1,1,0) (2,0,0).
    single = space.index([1, 1, 0])
    assert type(single) is int
    assert single == 4
    assert space.index(np.array([1, 1, 1], dtype=np.uint8), strict=False) == -1
    stacked = space.index([[1, 1, 0], [1, 1, 1], [0, 0, 2]], strict=False)
    assert isinstance(stacked, np.ndarray)
    assert stacked.shape == (3,)
    np.testing.assert_array_equal(stacked, [4, -1, 0])
    assert space.index(np.zeros((0, 3), dtype=np.int64)).shape == (0,)


def test_index_rejects_wrong_shapes_and_floats() -> None:
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    with pytest.raises(ValueError, match=re.escape("must have shape (3,) or (m, 3); got (4,)")):
        space.index([1, 1, 0, 0])
    with pytest.raises(TypeError, match="occupations must be integers; got dtype float64"):
        space.index([1.0, 1.0, 0.0])


# -- bad arguments -------------------------------------------------------------------


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        (dict(modes=2, cutoff=0), "cutoff must be >= 1; got 0"),
        (dict(cutoff=[2, 0]), re.escape("cutoff[1] must be >= 1; got 0")),
        (dict(modes=0, cutoff=1), "modes must be >= 1; got 0"),
        (dict(cutoff=[]), "needs at least one mode; pass modes >= 1"),
        (dict(modes=2, cutoff=1, total=-1), "total must be >= 0; got -1"),
        (
            dict(modes=3, cutoff=1, total=1, weights=[1, 1]),
            "weights has 2 entries but modes=3; give one entry per mode",
        ),
        (
            dict(modes=2, cutoff=[1, 1, 1]),
            "cutoff has 3 entries but modes=2; give one entry per mode",
        ),
        (
            dict(modes=2, cutoff=1, total=1, weights=[1, -2]),
            re.escape("weights[1] must be >= 0; got -2"),
        ),
        (dict(modes=2, cutoff=1, total=1, modulus=1), "modulus must be >= 2; got 1"),
        (
            dict(modes=2, cutoff=1, modulus=2),
            "a modulus needs a total .*pass total=0 or total=1",
        ),
        (
            dict(modes=2, cutoff=1, total=3),
            "no state has total 3: the largest reachable weighted total is 2; "
            "lower the total or raise the cutoffs",
        ),
        (
            dict(modes=2, cutoff=2, total=3, weights=[2, 2]),
            "no state satisfies the constraint .*change the total, the weights or the cutoffs",
        ),
    ],
)
def test_bad_specifications_raise_space_error(kwargs: dict[str, object], message: str) -> None:
    with pytest.raises(SpaceError, match=message):
        fm.FockSpace(**kwargs)  # type: ignore[arg-type]


@pytest.mark.parametrize("kwargs", [dict(modes=40, cutoff=40), dict(modes=30, cutoff=30, total=30)])
def test_oversized_space_is_refused_up_front(kwargs: dict[str, int]) -> None:
    # 41^40 states, and C(59, 30) ≈ 5.9e16 (stars and bars): beyond any index type.
    with pytest.raises(SizeLimitError, match="dimension of the space"):
        fm.FockSpace(**kwargs)  # type: ignore[arg-type]


def test_space_error_is_a_value_error() -> None:
    with pytest.raises(ValueError, match="cutoff must be >= 1"):
        fm.FockSpace(modes=1, cutoff=0)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        (dict(modes=2, cutoff=1.5), "cutoff must be an integer or a sequence of integers"),
        (dict(cutoff=[1, 2.0]), "cutoff.* must be an integer >= 1"),
        (dict(modes=True, cutoff=1), "modes must be an integer >= 1; got True of type bool"),
        (dict(modes=2, cutoff=1, total=1.0), "total must be an integer >= 0"),
        (dict(cutoff=2), "give modes=... when cutoff is a single integer"),
    ],
)
def test_non_integer_arguments_raise_type_error(kwargs: dict[str, object], message: str) -> None:
    with pytest.raises(TypeError, match=message):
        fm.FockSpace(**kwargs)  # type: ignore[arg-type]


def test_index_of_a_state_outside_names_the_broken_constraint() -> None:
    # A mistyped state must not land silently on the last basis state (index -1).
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    with pytest.raises(
        ValueError,
        match=re.escape(
            "(1, 1, 1) is not in this space: the number of quanta is 3, but the space keeps total=2"
        ),
    ):
        space.index([1, 1, 1])
    with pytest.raises(
        ValueError, match=re.escape("mode 0 holds 3 quanta, outside 0..2 (its cutoff)")
    ):
        space.index([3, 0, 0])
    with pytest.raises(ValueError, match="strict=False"):
        space.index([[1, 1, 0], [0, 0, 3]])
    parity = fm.FockSpace(modes=2, cutoff=3, total=0, modulus=2)
    with pytest.raises(ValueError, match=re.escape("is 1 ≡ 1 mod 2, but the space keeps 0 mod 2")):
        parity.index([1, 0])


def test_basis_vector_is_the_unit_vector_of_index() -> None:
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    # Worked by hand: (1, 1, 0) is basis state 4 (see test_index_accepts_one_state_or_a_stack).
    vector = space.basis_vector([1, 1, 0])
    expected = np.zeros(6)
    expected[4] = 1.0
    np.testing.assert_array_equal(vector, expected)
    assert space.basis_vector([0, 0, 2], dtype=np.complex128).dtype == np.complex128
    with pytest.raises(ValueError, match="not in this space"):
        space.basis_vector([2, 2, 0])
