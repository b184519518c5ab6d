"""Sweep results: the per-point record, the table of records, and the SQLite store.

A sweep writes one SQLite file. Each finished point is committed in its own
transaction (write-ahead log, ``synchronous=FULL``), so a sweep killed at any moment
leaves only whole rows behind and can resume where it stopped.

File layout
-----------
``meta(key TEXT PRIMARY KEY, value TEXT)``
    ``format`` (always ``fockmill-results``), ``schema_version``, ``package_version``,
    ``model_name``, ``model_fingerprint``, ``model_text_hash``, ``created``,
    ``swept_parameters`` (JSON list), ``settings`` (JSON object: what is recorded).
``points(point INTEGER PRIMARY KEY, parameters TEXT, energy REAL, gap REAL, levels TEXT,
observables TEXT, residual REAL, method TEXT, seconds REAL, finished TEXT)``
    One row per finished point; ``parameters`` holds every parameter value (swept or
    default) as JSON, ``levels`` and ``observables`` are JSON too.
"""

from __future__ import annotations

import json
import math
import os
import sqlite3
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from types import TracebackType
from typing import Any

import numpy as np
import numpy.typing as npt

__all__ = [
    "FORMAT_MARKER",
    "SCHEMA_VERSION",
    "PointResult",
    "ResultsStore",
    "StoreError",
    "SweepTable",
]

FORMAT_MARKER = "fockmill-results"
"""Value of ``meta.format`` in every results file."""

SCHEMA_VERSION = 1
"""Layout version of the results file; bumped on incompatible changes."""

_APPLICATION_ID = 0x464B4D4C  # "FKML": SQLite's header slot for a file-type tag

_SCHEMA = """
CREATE TABLE meta (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE points (
    point INTEGER PRIMARY KEY,
    parameters TEXT NOT NULL,
    energy REAL NOT NULL,
    gap REAL,
    levels TEXT,
    observables TEXT NOT NULL,
    residual REAL NOT NULL,
    method TEXT NOT NULL,
    seconds REAL NOT NULL,
    finished TEXT NOT NULL
);
"""

_POINT_COLUMNS = (
    "point, parameters, energy, gap, levels, observables, residual, method, seconds, finished"
)


class StoreError(ValueError):
    """A results file is missing, foreign, damaged, or belongs to another sweep."""


def utc_now() -> str:
    """The current time as an ISO 8601 UTC string (seconds precision)."""
    return datetime.now(UTC).isoformat(timespec="seconds")


@dataclass(frozen=True)
class PointResult:
    """What one solved parameter point produced.

    Attributes
    ----------
    index : int
        Position of the point in the sweep's list of points.
    parameters : dict of str to float
        Every parameter value used at this point (swept values and defaults).
    energy : float
        Ground-state energy.
    gap : float or None
        ``E1 − E0`` when recorded, else None.
    levels : tuple of float or None
        The lowest energies, ascending, when recorded, else None.
    observables : dict
        Recorded ground-state observables as JSON-ready values (floats and nested
        lists): ``populations``, ``number_variance``, ``one_body`` (plus
        ``one_body_imag`` for complex states), ``entropy``, ``top_weight``.
    residual : float
        ``‖H v − E v‖`` of the returned ground vector.
    method : str
        ``"dense"`` (full diagonalisation) or ``"csr"`` (sparse Lanczos on the matrix).
    seconds : float
        Wall time spent on the point (assembly, solve and observables).
    finished : str
        UTC time the point finished, ISO 8601.
    """

    index: int
    parameters: dict[str, float]
    energy: float
    gap: float | None
    levels: tuple[float, ...] | None
    observables: dict[str, Any]
    residual: float
    method: str
    seconds: float
    finished: str


def _stack(values: Sequence[Any]) -> npt.NDArray[np.float64]:
    """Stack per-point values (scalars or equal-shape lists) into one float array.

    Missing values (None) become NaN; ragged lists are NaN-padded to the longest.
    """
    present = [np.asarray(v, dtype=np.float64) for v in values if v is not None]
    if not present:
        return np.full(len(values), np.nan)
    shape = tuple(max(s) for s in zip(*(p.shape for p in present), strict=True))
    out = np.full((len(values), *shape), np.nan)
    for row, value in enumerate(values):
        if value is None:
            continue
        arr = np.asarray(value, dtype=np.float64)
        index: tuple[int | slice, ...] = (row, *(slice(0, n) for n in arr.shape))
        out[index] = arr
    return out


@dataclass(frozen=True)
class SweepTable:
    """The finished points of a sweep, sorted by point index.

    Attributes
    ----------
    rows : tuple of PointResult
        One entry per finished point, ascending ``index``.
    swept : tuple of str
        Names of the parameters that vary across the sweep (the table's key columns).

    Examples
    --------
    >>> table = SweepTable(rows=(), swept=("U",))
    >>> len(table), table.to_arrays()["energy"].shape
    (0, (0,))
    """

    rows: tuple[PointResult, ...]
    swept: tuple[str, ...] = field(default=())

    def __len__(self) -> int:
        return len(self.rows)

    def __iter__(self) -> Iterator[PointResult]:
        return iter(self.rows)

    def quantities(self) -> tuple[str, ...]:
        """Names of the recorded quantities present in at least one row."""
        names: list[str] = ["energy"]
        if any(r.gap is not None for r in self.rows):
            names.append("gap")
        if any(r.levels is not None for r in self.rows):
            names.append("levels")
        for row in self.rows:
            for key in row.observables:
                if key not in names:
                    names.append(key)
        names.append("residual")
        return tuple(names)

    def to_arrays(self) -> dict[str, npt.NDArray[Any]]:
        """Columns as numpy arrays, one entry per row.

        Returns
        -------
        dict of str to numpy.ndarray
            ``index`` (int64); one float column per parameter; ``energy``, ``gap`` (NaN
            where not recorded), ``residual``, ``seconds``; ``levels`` as
            ``(rows, k)``; each observable stacked along a first axis of length
            ``rows`` (``populations`` ``(rows, modes)``, ``one_body``
            ``(rows, modes, modes)``, ``entropy`` ``(rows,)``, ...); ``method`` as a
            string array.
        """
        rows = self.rows
        out: dict[str, npt.NDArray[Any]] = {
            "index": np.array([r.index for r in rows], dtype=np.int64)
        }
        names: list[str] = list(self.swept)
        for row in rows:
            names.extend(k for k in row.parameters if k not in names)
        for name in names:
            out[name] = np.array([r.parameters.get(name, np.nan) for r in rows], dtype=float)
        out["energy"] = np.array([r.energy for r in rows], dtype=np.float64)
        out["gap"] = np.array([np.nan if r.gap is None else r.gap for r in rows], dtype=float)
        if any(r.levels is not None for r in rows):
            out["levels"] = _stack([r.levels for r in rows])
        keys: list[str] = []
        for row in rows:
            keys.extend(k for k in row.observables if k not in keys)
        for key in keys:
            out[key] = _stack([r.observables.get(key) for r in rows])
        out["residual"] = np.array([r.residual for r in rows], dtype=np.float64)
        out["seconds"] = np.array([r.seconds for r in rows], dtype=np.float64)
        out["method"] = np.array([r.method for r in rows], dtype=str)
        return out


def _finite_or_none(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


class ResultsStore:
    """A sweep's results file (SQLite), written by one process and read by any.

    Use :meth:`create` for a new file, :meth:`open` for an existing one; run_sweep does
    either for you. A store is a context manager and closes its connection on exit.

    Parameters
    ----------
    connection : sqlite3.Connection
        An open connection to a checked results file (use the class methods).
    path : pathlib.Path
        The file's path (for messages).

    Notes
    -----
    The file runs in write-ahead-log mode with ``synchronous=FULL``, and
    :meth:`add_point` commits each point in its own transaction: after a crash or a
    SIGKILL every row present is complete and every committed row survives.
    """

    def __init__(self, connection: sqlite3.Connection, path: Path) -> None:
        self._connection = connection
        self._path = path

    # -- opening -------------------------------------------------------------------

    @classmethod
    def open(cls, path: str | os.PathLike[str]) -> ResultsStore:
        """Open an existing results file and check it is one of ours, intact.

        Parameters
        ----------
        path : str or path-like
            The results file.

        Returns
        -------
        ResultsStore

        Raises
        ------
        StoreError
            The file does not exist, is not SQLite, is an SQLite file of something else,
            has a newer schema, or fails SQLite's quick integrity check.
        """
        file = Path(path)
        if file.is_dir():
            raise StoreError(
                f"{str(file)!r} is a directory, not a results file; give the path of a file "
                f"inside it, e.g. {str(file / 'results.sqlite')!r}"
            )
        if not file.is_file():
            raise StoreError(
                f"results file {str(file)!r} does not exist; run a sweep with "
                "--out/store= pointing at it first"
            )
        connection = cls._connect(file)
        try:
            cls._check_ours(connection, file)
        except BaseException:
            connection.close()
            raise
        cls._configure(connection)
        return cls(connection, file)

    @classmethod
    def create(cls, path: str | os.PathLike[str], meta: Mapping[str, str]) -> ResultsStore:
        """Create a new, empty results file.

        Parameters
        ----------
        path : str or path-like
            Where to write; must not exist yet. Parent directories are created.
        meta : Mapping[str, str]
            Extra ``meta`` entries (model fingerprint, name, settings ...). The format
            marker, schema version and creation time are added here.

        Returns
        -------
        ResultsStore

        Raises
        ------
        StoreError
            The file exists already.
        """
        from fockmill._native import __version__

        file = Path(path)
        if file.exists():
            raise StoreError(
                f"{str(file)!r} exists already; open it with ResultsStore.open or choose "
                "another path"
            )
        file.parent.mkdir(parents=True, exist_ok=True)
        connection = cls._connect(file)
        cls._configure(connection)
        entries = {
            "format": FORMAT_MARKER,
            "schema_version": str(SCHEMA_VERSION),
            "package_version": str(__version__),
            "created": utc_now(),
        }
        entries.update({k: str(v) for k, v in meta.items() if k not in entries})
        with _transaction(connection):
            connection.execute(f"PRAGMA application_id = {_APPLICATION_ID}")
            connection.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
            for statement in _SCHEMA.split(";"):
                if statement.strip():
                    connection.execute(statement)
            connection.executemany("INSERT INTO meta(key, value) VALUES (?, ?)", entries.items())
        return cls(connection, file)

    @staticmethod
    def _connect(file: Path) -> sqlite3.Connection:
        # isolation_level=None: we issue BEGIN/COMMIT ourselves, one point per commit.
        return sqlite3.connect(str(file), isolation_level=None, timeout=30.0)

    @staticmethod
    def _configure(connection: sqlite3.Connection) -> None:
        connection.execute("PRAGMA journal_mode = WAL")
        connection.execute("PRAGMA synchronous = FULL")

    @staticmethod
    def _check_ours(connection: sqlite3.Connection, file: Path) -> None:
        """Raise StoreError unless ``file`` is an intact fockmill results file.

        Only reads: a foreign database is left exactly as it was.
        """
        name = repr(str(file))
        try:
            tables = {
                row[0]
                for row in connection.execute("SELECT name FROM sqlite_master WHERE type='table'")
            }
        except sqlite3.DatabaseError as exc:
            raise StoreError(
                f"{name} is not a fockmill results file (SQLite says: {exc}); give the path of "
                "a file written by a fockmill sweep, or a new path to start one"
            ) from exc
        marker = None
        if {"meta", "points"} <= tables:
            row = connection.execute("SELECT value FROM meta WHERE key='format'").fetchone()
            marker = None if row is None else row[0]
        if marker != FORMAT_MARKER:
            raise StoreError(
                f"{name} is an SQLite file but not a fockmill results file (no "
                f"{FORMAT_MARKER!r} marker); choose another output path, this file is left "
                "untouched"
            )
        row = connection.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        version = int(row[0]) if row is not None and str(row[0]).isdigit() else -1
        if version != SCHEMA_VERSION:
            raise StoreError(
                f"{name} has results-file schema version {version}, this fockmill reads "
                f"version {SCHEMA_VERSION}; use the fockmill version that wrote it, or "
                "re-run the sweep into a new file"
            )
        check = connection.execute("PRAGMA quick_check").fetchone()
        if check is None or check[0] != "ok":
            raise StoreError(
                f"{name} is damaged (SQLite quick_check: {check[0] if check else 'no answer'}); "
                "restore it from a copy or re-run the sweep into a new file"
            )

    # -- context manager -------------------------------------------------------------

    def __enter__(self) -> ResultsStore:
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        traceback: TracebackType | None,
    ) -> None:
        self.close()

    def close(self) -> None:
        """Close the connection (idempotent)."""
        self._connection.close()

    def __repr__(self) -> str:
        return f"ResultsStore({str(self._path)!r})"

    # -- reading -------------------------------------------------------------------

    @property
    def path(self) -> Path:
        """The file's path."""
        return self._path

    @property
    def meta(self) -> dict[str, str]:
        """All ``meta`` entries."""
        return dict(self._connection.execute("SELECT key, value FROM meta").fetchall())

    @property
    def swept(self) -> tuple[str, ...]:
        """Names of the swept parameters (from ``meta.swept_parameters``)."""
        text = self.meta.get("swept_parameters")
        return tuple(json.loads(text)) if text else ()

    def finished_indices(self) -> set[int]:
        """Indices of the points already committed."""
        return {row[0] for row in self._connection.execute("SELECT point FROM points")}

    def stored_parameters(self) -> dict[int, dict[str, float]]:
        """Point index -> the parameter values stored for it."""
        return {
            int(i): json.loads(text)
            for i, text in self._connection.execute("SELECT point, parameters FROM points")
        }

    def rows(self) -> list[PointResult]:
        """Every committed point, by ascending index."""
        cursor = self._connection.execute(f"SELECT {_POINT_COLUMNS} FROM points ORDER BY point")
        return [self._decode(row) for row in cursor]

    def to_table(self) -> SweepTable:
        """The committed points as a :class:`SweepTable`."""
        return SweepTable(rows=tuple(self.rows()), swept=self.swept)

    def integrity_ok(self) -> bool:
        """True when SQLite's full ``PRAGMA integrity_check`` reports no problem."""
        rows = self._connection.execute("PRAGMA integrity_check").fetchall()
        return rows == [("ok",)]

    @staticmethod
    def _decode(row: tuple[Any, ...]) -> PointResult:
        point, parameters, energy, gap, levels, observables, residual, method, seconds, done = row
        return PointResult(
            index=int(point),
            parameters=json.loads(parameters),
            energy=float(energy),
            gap=None if gap is None else float(gap),
            levels=None if levels is None else tuple(json.loads(levels)),
            observables=json.loads(observables),
            residual=float(residual),
            method=str(method),
            seconds=float(seconds),
            finished=str(done),
        )

    # -- writing -------------------------------------------------------------------

    def add_point(self, result: PointResult) -> None:
        """Commit one finished point in its own transaction.

        Raises
        ------
        StoreError
            The point is stored already (two sweeps writing one file?).
        """
        values = (
            int(result.index),
            json.dumps(result.parameters, sort_keys=True),
            float(result.energy),
            _finite_or_none(result.gap),
            None if result.levels is None else json.dumps(list(result.levels)),
            json.dumps(result.observables, sort_keys=True),
            float(result.residual),
            result.method,
            float(result.seconds),
            result.finished,
        )
        try:
            with _transaction(self._connection):
                self._connection.execute(
                    f"INSERT INTO points({_POINT_COLUMNS}) VALUES (?,?,?,?,?,?,?,?,?,?)", values
                )
        except sqlite3.IntegrityError as exc:
            raise StoreError(
                f"point {result.index} is already stored in {str(self._path)!r}; is another "
                "sweep writing the same file? Give each sweep its own output file"
            ) from exc

    def set_meta(self, key: str, value: str) -> None:
        """Insert or replace one ``meta`` entry (own transaction)."""
        with _transaction(self._connection):
            self._connection.execute(
                "INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)", (key, value)
            )


class _transaction:
    """``BEGIN IMMEDIATE`` … ``COMMIT`` (``ROLLBACK`` on error) on an autocommit connection."""

    def __init__(self, connection: sqlite3.Connection) -> None:
        self._connection = connection

    def __enter__(self) -> None:
        self._connection.execute("BEGIN IMMEDIATE")

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        traceback: TracebackType | None,
    ) -> None:
        self._connection.execute("ROLLBACK" if exc_type is not None else "COMMIT")
