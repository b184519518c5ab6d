"""State files: save a state with its basis, load it back, refuse what does not match.

The format is ours (docs in fockmill.observables.statefile); the checks are that the archive is a
plain ``.npz`` readable by numpy alone, that round trips are exact, and that every
mismatch is refused with StateFileError (project contract, no outside source).
"""

from __future__ import annotations

import json
from pathlib import Path

import fockmill as fm
import numpy as np
import pytest


def random_state(space: fm.FockSpace, complex_: bool, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    v = rng.normal(size=space.dim)
    if complex_:
        v = v + 1j * rng.normal(size=space.dim)
    return v


@pytest.mark.parametrize("complex_", [False, True])
@pytest.mark.parametrize(
    "space",
    [
        fm.FockSpace(modes=3, cutoff=2, total=3),
        fm.FockSpace(modes=2, cutoff=[4, 1]),
        fm.FockSpace(modes=3, cutoff=4, total=1, weights=[1, 2, 1], modulus=2),
    ],
    ids=["sector", "full", "parity"],
)
def test_round_trip_is_exact(tmp_path: Path, space: fm.FockSpace, complex_: bool) -> None:
    v = random_state(space, complex_)
    meta = {"energy": -1.25, "note": "invented", "params": {"U": 2.0}}
    path = fm.save_state(tmp_path / "state.npz", space, v, meta)
    loaded = fm.load_state(path)
    assert loaded.space == space
    np.testing.assert_array_equal(loaded.vector, v)
    assert loaded.vector.dtype == (np.complex128 if complex_ else np.float64)
    assert loaded.metadata == meta
    assert fm.load_state(path, space).space == space
    # Plain .npz: numpy alone reads it, and the metadata is plain JSON text.
    with np.load(path, allow_pickle=False) as archive:
        assert str(archive["format"]) == "fockmill-state"
        assert json.loads(str(archive["metadata"])) == meta
        np.testing.assert_array_equal(archive["cutoffs"], space.cutoffs)


def test_refuses_another_basis(tmp_path: Path) -> None:
    space = fm.FockSpace(modes=3, cutoff=3, total=3)
    path = fm.save_state(tmp_path / "s.npz", space, random_state(space, False))
    with pytest.raises(fm.StateFileError, match="not of the expected"):
        fm.load_state(path, fm.FockSpace(modes=3, cutoff=3, total=2))


def tampered(tmp_path: Path, **changes: object) -> Path:
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    path = fm.save_state(tmp_path / "s.npz", space, random_state(space, False))
    with np.load(path, allow_pickle=False) as archive:
        arrays = {key: archive[key] for key in archive.files}
    arrays.update({k: np.asarray(v) for k, v in changes.items()})
    out = tmp_path / "tampered.npz"
    np.savez(out, **arrays)
    return out


def test_refuses_a_basis_whose_order_differs(tmp_path: Path) -> None:
    # A writer with another basis order: same space, states at other indices.
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    probes = np.arange(space.dim)
    reversed_states = np.array([space.state(space.dim - 1 - k) for k in probes])
    path = tampered(tmp_path, probe_indices=probes, probe_states=reversed_states)
    with pytest.raises(fm.StateFileError, match="basis order differs"):
        fm.load_state(path)


@pytest.mark.parametrize(
    ("changes", "fragment"),
    [
        ({"format": "something-else"}, "not a fockmill-state file"),
        ({"format_version": 99}, "Upgrade fockmill"),
        ({"dim": 5}, "different basis convention"),
        ({"vector": np.zeros(3)}, "shape"),
        ({"metadata": "{not json"}, "not valid JSON"),
        ({"metadata": "[1, 2]"}, "JSON object"),
        ({"cutoffs": np.array([0, 2, 2])}, "cannot be rebuilt"),
    ],
)
def test_refuses_damaged_files(tmp_path: Path, changes: dict[str, object], fragment: str) -> None:
    with pytest.raises(fm.StateFileError, match=fragment):
        fm.load_state(tampered(tmp_path, **changes))


def test_refuses_non_npz_and_bad_input(tmp_path: Path) -> None:
    junk = tmp_path / "junk.npz"
    junk.write_bytes(b"not a zip")
    with pytest.raises(fm.StateFileError, match="not a readable"):
        fm.load_state(junk)
    space = fm.FockSpace(modes=2, cutoff=1)
    with pytest.raises(TypeError, match="JSON"):
        fm.save_state(tmp_path / "x.npz", space, np.ones(space.dim), {"bad": object()})
    with pytest.raises(ValueError, match="shape"):
        fm.save_state(tmp_path / "x.npz", space, np.ones(space.dim + 1))
    assert isinstance(fm.StateFileError("x"), ValueError)
