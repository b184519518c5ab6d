"""Results files of the quench, spectrum and thermal workflows: named arrays and meta data.

A workflow computes everything first and then writes one SQLite file in a single
transaction, under a temporary name that is linked to the real name only once it is
complete (a crash leaves no half-written file). The file is never modified afterwards.

File layout (workflow schema version 1)
---------------------------------------
``meta(key TEXT PRIMARY KEY, value TEXT)``
    Every value is one JSON document: ``format`` (always ``"fockmill-workflow"``),
    ``schema_version``, ``kind`` (``"quench"``, ``"spectrum"`` or ``"thermal"``),
    ``package_version``, ``created``, ``model_name``, ``model_fingerprint``,
    ``model_text_hash``, ``dim``, ``space`` (modes, cutoffs, weights, total, modulus,
    dim), ``mode_labels`` (one per mode), ``units`` (parameter or ``"energy"`` -> unit),
    ``descriptions``, ``parameters`` (every parameter value used), ``settings`` (the
    section as read), ``observables`` (name -> its term strings) and ``summary``
    (scalars: steps, products, error estimates, energies, seconds ...).
``arrays(name TEXT PRIMARY KEY, shape TEXT, real TEXT, imag TEXT)``
    One row per array: its shape and its values in C order as JSON lists (non-finite
    values as null); ``imag`` is NULL for real arrays. The names per kind are listed in
    ``docs/model-files.md`` (``times``, ``populations``, ``values.NAME``, ``omegas``,
    ``S``, ``temperatures``, ``energy``, ``heat_capacity``, ``errors.NAME`` ...).
"""

from __future__ import annotations

import json
import os
import sqlite3
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.exceptions import StoreError
from fockmill.store.sqlite import connect, create_atomically, json_ready, refuse_existing, utc_now
from fockmill.store.sweeps import FORMAT_MARKER, _describe_file, space_summary

__all__ = [
    "KINDS",
    "WORKFLOW_MARKER",
    "WORKFLOW_SCHEMA_VERSION",
    "WorkflowResult",
    "is_workflow_file",
    "read_workflow_results",
    "write_workflow_results",
]

WORKFLOW_MARKER = "fockmill-workflow"
"""Value of ``meta.format`` in a workflow results file."""

WORKFLOW_SCHEMA_VERSION = 1
"""Layout version of workflow results files."""

KINDS: tuple[str, ...] = ("quench", "spectrum", "thermal")
"""Values of ``meta.kind``."""

_APPLICATION_ID = 0x464B4D57  # "FKMW"
_SCHEMA = (
    "CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)",
    "CREATE TABLE arrays (name TEXT PRIMARY KEY, shape TEXT NOT NULL, real TEXT NOT NULL, "
    "imag TEXT)",
)


@dataclass(frozen=True)
class WorkflowResult:
    """What a quench, spectrum or thermal run produced.

    Attributes
    ----------
    kind : {"quench", "spectrum", "thermal"}
    arrays : dict of str to numpy.ndarray
        The named arrays (float64, or complex128 for non-Hermitian observables).
    meta : dict
        Plain-JSON meta data (see the module docstring); the file adds ``format``,
        ``schema_version``, ``package_version`` and ``created``.
    path : pathlib.Path or None
        The file it was read from (None when computed in this process).
    """

    kind: str
    arrays: dict[str, npt.NDArray[Any]]
    meta: dict[str, Any] = field(default_factory=dict)
    path: Path | None = None

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"kind must be one of {KINDS}; got {self.kind!r}")

    @property
    def mode_labels(self) -> tuple[str, ...]:
        """Label of each mode (empty when not stored)."""
        labels = self.meta.get("mode_labels") or []
        return tuple(str(x) for x in labels)

    @property
    def units(self) -> dict[str, str]:
        """Units of ``"energy"`` and of parameters (empty when the model file gave none)."""
        return {str(k): str(v) for k, v in (self.meta.get("units") or {}).items()}

    @property
    def observables(self) -> tuple[str, ...]:
        """Names of the recorded named observables."""
        return tuple(self.meta.get("observables") or {})

    @property
    def summary(self) -> dict[str, Any]:
        """Scalar results (steps, energies, seconds ...)."""
        return dict(self.meta.get("summary") or {})

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, WorkflowResult):
            return NotImplemented
        return (
            self.kind == other.kind
            and self.meta == other.meta
            and self.arrays.keys() == other.arrays.keys()
            and all(
                np.array_equal(self.arrays[k], other.arrays[k], equal_nan=True) for k in self.arrays
            )
        )

    __hash__ = None  # type: ignore[assignment]


def _encode(values: npt.NDArray[Any]) -> tuple[str, str, str | None]:
    array = np.asarray(values)
    shape = json.dumps(list(array.shape))
    flat = array.reshape(-1)
    if np.iscomplexobj(flat):
        real = json.dumps(json_ready(flat.real.astype(np.float64)), allow_nan=False)
        imag = json.dumps(json_ready(flat.imag.astype(np.float64)), allow_nan=False)
        return shape, real, imag
    return shape, json.dumps(json_ready(flat.astype(np.float64)), allow_nan=False), None


def _decode(shape: str, real: str, imag: str | None) -> npt.NDArray[Any]:
    dims = tuple(int(n) for n in json.loads(shape))
    re = np.array([np.nan if v is None else v for v in json.loads(real)], dtype=np.float64)
    if imag is None:
        return re.reshape(dims)
    im = np.array([np.nan if v is None else v for v in json.loads(imag)], dtype=np.float64)
    return (re + 1j * im).reshape(dims)


def write_workflow_results(
    path: str | os.PathLike[str], result: WorkflowResult, *, claimed: bool = False
) -> Path:
    """Write ``result`` to a new results file (never replacing an existing file).

    Parameters
    ----------
    path : str or path-like
        Where to write; must not exist yet. Parent directories are created.
    result : WorkflowResult
    claimed : bool
        The caller holds the claim on ``path`` already (see
        :func:`fockmill.store.claims.claim`); else it is claimed while writing.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    StoreError
        The file exists already, or another process is writing it.
    """
    from fockmill.store.claims import claim

    file = Path(path)
    if claimed:
        return _write(file, result)
    _refuse_existing(file)
    with claim(file):
        return _write(file, result)


def _refuse_existing(file: Path) -> None:
    refuse_existing(file, "results files are never overwritten, choose another path or delete it")


def _write(file: Path, result: WorkflowResult) -> Path:
    from fockmill._native import __version__

    _refuse_existing(file)
    file.parent.mkdir(parents=True, exist_ok=True)
    entries: dict[str, Any] = {
        "format": WORKFLOW_MARKER,
        "schema_version": WORKFLOW_SCHEMA_VERSION,
        "kind": result.kind,
        "package_version": str(__version__),
        "created": utc_now(),
    }
    entries.update({k: v for k, v in result.meta.items() if k not in entries})
    rows = [(name, *_encode(values)) for name, values in result.arrays.items()]

    def fill(connection: sqlite3.Connection) -> None:
        connection.executemany(
            "INSERT INTO arrays(name, shape, real, imag) VALUES (?, ?, ?, ?)", rows
        )

    create_atomically(
        file,
        application_id=_APPLICATION_ID,
        schema_version=WORKFLOW_SCHEMA_VERSION,
        statements=_SCHEMA,
        meta=entries,
        fill=fill,
    )
    return file


def _marker(connection: sqlite3.Connection) -> tuple[set[str], object]:
    tables = {
        row[0] for row in connection.execute("SELECT name FROM sqlite_master WHERE type='table'")
    }
    if "meta" not in tables:
        return tables, None
    row = connection.execute("SELECT value FROM meta WHERE key='format'").fetchone()
    if row is None:
        return tables, None
    try:
        return tables, json.loads(row[0])
    except ValueError:
        return tables, None


def _connect_read_only(file: Path) -> sqlite3.Connection:
    # Only SELECTs run on it; a plain connection also reads sweep files in WAL mode.
    return connect(file)


def is_workflow_file(path: str | os.PathLike[str]) -> bool:
    """Whether ``path`` is a readable workflow results file (False for anything else)."""
    file = Path(path)
    if not file.is_file():
        return False
    try:
        connection = _connect_read_only(file)
    except sqlite3.Error:
        return False
    try:
        return _marker(connection)[1] == WORKFLOW_MARKER
    except sqlite3.Error:
        return False
    finally:
        connection.close()


def read_workflow_results(path: str | os.PathLike[str]) -> WorkflowResult:
    """Read a results file written by a quench, spectrum or thermal run.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    WorkflowResult

    Raises
    ------
    StoreError
        The file does not exist, is not SQLite, is a sweep's results file or another
        program's database, has another layout version, or is damaged.
    """
    file = Path(path)
    name = repr(str(file))
    if not file.is_file():
        raise StoreError(f"results file {name} does not exist")
    connection = _connect_read_only(file)
    try:
        try:
            tables, marker = _marker(connection)
        except sqlite3.DatabaseError as exc:
            raise StoreError(
                f"{name} is not a fockmill results file: {_describe_file(file)} (SQLite says: "
                f"{exc})"
            ) from exc
        if marker == FORMAT_MARKER:
            raise StoreError(
                f"{name} holds a parameter sweep, not a quench, spectrum or thermal run; "
                "read it with ResultsStore.open (fockmill show/plot do either)"
            )
        if marker != WORKFLOW_MARKER or "arrays" not in tables:
            raise StoreError(
                f"{name} is an SQLite database of another program, not a fockmill results "
                f"file (no {WORKFLOW_MARKER!r} marker)"
            )
        meta = {
            key: json.loads(value)
            for key, value in connection.execute("SELECT key, value FROM meta")
        }
        version = meta.get("schema_version")
        if version != WORKFLOW_SCHEMA_VERSION:
            raise StoreError(
                f"{name} has workflow schema version {version}, this fockmill reads version "
                f"{WORKFLOW_SCHEMA_VERSION}; use the fockmill version that wrote it, or run "
                "the workflow again into a new file"
            )
        kind = meta.get("kind")
        if kind not in KINDS:
            raise StoreError(f"{name} holds an unknown kind of result {kind!r}")
        arrays = {
            str(n): _decode(s, r, i)
            for n, s, r, i in connection.execute(
                "SELECT name, shape, real, imag FROM arrays ORDER BY rowid"
            )
        }
    except sqlite3.DatabaseError as exc:
        raise StoreError(f"{name} is damaged (SQLite says: {exc})") from exc
    finally:
        connection.close()
    return WorkflowResult(kind=str(kind), arrays=arrays, meta=meta, path=file)


def meta_of(
    model_file: Any, kind: str, parameters: Mapping[str, float], **extra: Any
) -> dict[str, Any]:
    """The meta data every workflow result carries about its model file."""
    model = model_file.model
    return {
        "kind": kind,
        "model_name": model.name,
        "model_fingerprint": model.fingerprint(),
        "model_text_hash": model_file.text_hash,
        "model_file": model_file.path,
        "dim": model.space.dim,
        "space": space_summary(model.space),
        "mode_labels": list(model.mode_labels) or [f"mode {i}" for i in range(model.space.modes)],
        "units": dict(model_file.units),
        "descriptions": dict(model_file.descriptions),
        "parameters": dict(parameters),
        **extra,
    }
