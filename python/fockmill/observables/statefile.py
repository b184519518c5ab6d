"""State files: a state vector saved together with its basis, on NumPy's ``.npz``.

Format (``fockmill-state``, version 1)
--------------------------------------
An uncompressed ``.npz`` archive (a zip of ``.npy`` arrays, readable by
``numpy.load(path, allow_pickle=False)`` without fockmill) holding:

``format``          0-d str array, ``"fockmill-state"``
``format_version``  0-d int64, ``1``
``cutoffs``         int64 ``(modes,)``, the per-mode cutoffs
``weights``         int64 ``(modes,)``, the charge weights
``total``           0-d int64, the conserved total (``-1``: none)
``modulus``         0-d int64, the modulus of the total (``0``: none)
``dim``             0-d int64, the dimension of the space
``probe_indices``   int64 ``(k,)``, up to 64 basis indices spread over the space
``probe_states``    int64 ``(k, modes)``, the occupations at those indices
``vector``          float64 or complex128 ``(dim,)``, the amplitudes in basis order
``metadata``        0-d str array, a JSON object (plain JSON, not nested strings)

The basis order is fockmill's (lexicographic, mode 0 most significant, restricted to
the sector); the probes let a reader check that the basis it rebuilds puts the same
states at the same indices before it trusts the amplitudes.
"""

from __future__ import annotations

import json
import os
import tempfile
import zipfile
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.exceptions import SpaceError, StateFileError, SymmetryError
from fockmill.observables.observe import check_vector
from fockmill.spaces.checks import check_space
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["FORMAT", "FORMAT_VERSION", "SavedState", "StateFileError", "load_state", "save_state"]

FORMAT = "fockmill-state"
"""Value of the ``format`` entry."""

FORMAT_VERSION = 1
"""Value of the ``format_version`` entry written by this version."""

_PROBES = 64
_KEYS = (
    "format",
    "format_version",
    "cutoffs",
    "weights",
    "total",
    "modulus",
    "dim",
    "probe_indices",
    "probe_states",
    "vector",
    "metadata",
)


@dataclass(frozen=True)
class SavedState:
    """What :func:`load_state` returns.

    Attributes
    ----------
    space : FockSpace
        The basis rebuilt from the file (checked against the stored probes).
    vector : numpy.ndarray
        The amplitudes, float64 or complex128, shape ``(space.dim,)``.
    metadata : dict
        The JSON metadata saved with the state.
    """

    space: FockSpace
    vector: npt.NDArray[Any]
    metadata: dict[str, Any] = field(default_factory=dict)


def _probe_indices(dim: int) -> npt.NDArray[np.int64]:
    return np.unique(np.linspace(0, dim - 1, min(dim, _PROBES)).round().astype(np.int64))


def save_state(
    path: str | os.PathLike[str],
    space: FockSpace,
    vector: npt.ArrayLike,
    metadata: Mapping[str, Any] | None = None,
) -> Path:
    """Save a state with its basis (``.npz``; see the module docstring for the layout).

    Parameters
    ----------
    path : str or path-like
        The file to write (replaced atomically if it exists). Use a ``.npz`` suffix.
    space : FockSpace
        The basis of ``vector``.
    vector : array_like
        The state, real or complex, shape ``(space.dim,)``.
    metadata : mapping, optional
        Anything JSON can hold (parameters, energy, notes), stored as plain JSON.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        For a vector that does not fit the space, or non-finite entries.
    TypeError
        For metadata JSON cannot encode, or a non-numeric vector.

    Examples
    --------
    >>> import tempfile, fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = fm.save_state(f"{folder}/g.npz", space, [0.0, 1.0, 0.0], {"U": 2.0})
    ...     loaded = fm.load_state(path)
    >>> loaded.space == space, loaded.metadata
    (True, {'U': 2.0})
    """
    s = check_space(space)
    if isinstance(s, SymmetricSpace):
        raise SymmetryError(
            "save_state stores a state of a fm.FockSpace; a symmetry sector's basis (orbit "
            "representatives) depends on its generators and labels, which the file format "
            "does not hold. Save the state in the base space instead: "
            "fm.save_state(path, sector.base, sector.expand(vector)), and after loading, "
            "sector.project(saved.vector)"
        )
    if s.several:
        raise SpaceError(
            "save_state stores spaces with at most one conserved charge; this space fixes "
            f"{len(s.charges)}. Save the vector with numpy.save and the space with pickle "
            "(a FockSpace pickles to its cutoffs and charges)"
        )
    v = check_vector(s, vector)
    try:
        meta_text = json.dumps(dict(metadata or {}), allow_nan=False)
    except (TypeError, ValueError) as error:
        raise TypeError(
            f"metadata must hold only what JSON can encode (numbers, strings, lists, "
            f"dicts); {error}"
        ) from None
    probes = _probe_indices(s.dim)
    states = np.array([s.state(int(k)) for k in probes], dtype=np.int64).reshape(-1, s.modes)
    arrays: dict[str, npt.NDArray[Any]] = {
        "format": np.array(FORMAT),
        "format_version": np.array(FORMAT_VERSION, dtype=np.int64),
        "cutoffs": np.array(s.cutoffs, dtype=np.int64),
        "weights": np.array(s.weights, dtype=np.int64),
        "total": np.array(-1 if s.total is None else s.total, dtype=np.int64),
        "modulus": np.array(s.modulus or 0, dtype=np.int64),
        "dim": np.array(s.dim, dtype=np.int64),
        "probe_indices": probes,
        "probe_states": states,
        "vector": v,
        "metadata": np.array(meta_text),
    }
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(prefix=target.name, suffix=".tmp", dir=target.parent)
    try:
        with os.fdopen(handle, "wb") as stream:
            np.savez(stream, allow_pickle=False, **arrays)
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
    return target


def _scalar(arrays: Mapping[str, npt.NDArray[Any]], key: str, name: str) -> int:
    value = arrays[key]
    if value.shape != () or value.dtype.kind not in "iu":
        raise StateFileError(f"{name}: entry {key!r} must be an integer scalar")
    return int(value)


def load_state(path: str | os.PathLike[str], space: FockSpace | None = None) -> SavedState:
    """Read a state saved by :func:`save_state`.

    Parameters
    ----------
    path : str or path-like
        The ``.npz`` file.
    space : FockSpace, optional
        The basis the caller expects; the file is refused unless its basis equals it.

    Returns
    -------
    SavedState
        ``.space``, ``.vector`` and ``.metadata``.

    Raises
    ------
    StateFileError
        When the file is not a fockmill state file (or a newer version of one), is
        damaged, when the basis rebuilt from it does not put the stored probe states
        at the stored indices, or when it does not match ``space``.
    OSError
        When the file cannot be read.
    """
    name = os.fspath(path)
    try:
        with np.load(name, allow_pickle=False) as archive:
            arrays = {key: archive[key] for key in archive.files}
    except (zipfile.BadZipFile, ValueError, EOFError) as error:
        raise StateFileError(f"{name} is not a readable .npz state file: {error}") from None
    missing = [key for key in _KEYS if key not in arrays]
    if missing or str(arrays.get("format", "")) != FORMAT:
        raise StateFileError(
            f"{name} is not a {FORMAT} file (missing {missing or ['format']}); save states "
            "with fockmill.save_state"
        )
    version = _scalar(arrays, "format_version", name)
    if version > FORMAT_VERSION:
        raise StateFileError(
            f"{name} has format_version {version}; this fockmill reads up to "
            f"{FORMAT_VERSION}. Upgrade fockmill"
        )
    total = _scalar(arrays, "total", name)
    modulus = _scalar(arrays, "modulus", name)
    try:
        stored = FockSpace(
            len(arrays["cutoffs"]),
            [int(c) for c in arrays["cutoffs"]],
            None if total < 0 else total,
            weights=[int(w) for w in arrays["weights"]],
            modulus=modulus or None,
        )
    except (ValueError, TypeError, MemoryError) as error:
        raise StateFileError(f"{name}: the stored basis cannot be rebuilt: {error}") from None
    if stored.dim != _scalar(arrays, "dim", name):
        raise StateFileError(
            f"{name}: the stored basis has dim {int(arrays['dim'])} but rebuilding it gives "
            f"{stored.dim}; the file was written with a different basis convention"
        )
    probes, states = arrays["probe_indices"], arrays["probe_states"]
    if probes.ndim != 1 or states.shape != (probes.size, stored.modes):
        raise StateFileError(f"{name}: probe arrays have the wrong shape")
    for k, occupation in zip(probes.tolist(), states.tolist(), strict=True):
        if not 0 <= k < stored.dim or list(stored.state(k)) != occupation:
            raise StateFileError(
                f"{name}: basis index {k} holds {occupation} in the file but "
                f"{list(stored.state(k)) if 0 <= k < stored.dim else 'nothing'} here; the "
                "basis order differs, so the amplitudes cannot be trusted"
            )
    vector = arrays["vector"]
    if vector.shape != (stored.dim,) or vector.dtype not in (np.float64, np.complex128):
        raise StateFileError(
            f"{name}: vector must be float64 or complex128 of shape ({stored.dim},); got "
            f"{vector.dtype} {vector.shape}"
        )
    if space is not None and check_space(space) != stored:
        raise StateFileError(
            f"{name} holds a state of {stored!r}, not of the expected {space!r}; pass the "
            "matching space or load without space= and use the stored one"
        )
    try:
        metadata = json.loads(str(arrays["metadata"]))
    except json.JSONDecodeError as error:
        raise StateFileError(f"{name}: metadata is not valid JSON: {error}") from None
    if not isinstance(metadata, dict):
        raise StateFileError(f"{name}: metadata must be a JSON object")
    return SavedState(stored, vector, metadata)
