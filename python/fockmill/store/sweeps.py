"""Sweep results: the per-point record, the table of records, and the SQLite store.

A sweep writes one SQLite file. Each finished point is committed in its own
transaction (write-ahead log, ``synchronous=FULL``), so a sweep killed at any moment
leaves only whole rows behind and can resume where it stopped. A new file is written
under a temporary name and appears under its real name only once its schema and meta
data are committed, so a crash while creating it leaves nothing a later run refuses.

File layout (schema versions 2 and 3)
-------------------------------------
Version 3 is version 2 plus symmetry sectors: ``meta.symmetry`` (generators, labels,
names, orders, description of the sector; see :class:`~fockmill.spaces.sectors.
SectorChoice`) and ``meta.sector_dims``, and, for sweeps over every label of one
generator, the observables ``dispersion`` (lowest levels per sector) and
``ground_sector``. Sweeps without a symmetry still write version 2, which older
fockmill versions read; they refuse version 3 with a clear message.

``meta(key TEXT PRIMARY KEY, value TEXT)``
    Every value is one JSON document: ``format`` (always ``"fockmill-results"``),
    ``schema_version``, ``package_version``, ``created``, ``model_name``,
    ``model_fingerprint``, ``model_text_hash``, ``dim``, ``points``,
    ``swept_parameters`` (list of str), ``settings`` (object: quantities, levels,
    entropy modes, method, tol, seed, max_iterations; ``stationary: true`` when the
    points are stationary states of a model with jumps), ``mode_labels`` (list of str, one
    per mode), ``units`` (object: parameter name or ``"energy"`` -> unit string),
    optionally ``descriptions`` (object: a user parameter or rate -> what it is).
``points(point INTEGER PRIMARY KEY, parameters TEXT, status TEXT, message TEXT,
energy REAL, gap REAL, levels TEXT, observables TEXT, residual REAL, method TEXT,
seconds REAL, finished TEXT)``
    One row per attempted point. ``status`` is ``ok``, ``not_converged`` or ``failed``
    with the reason in ``message``; numbers a failed point does not have are NULL.
    ``parameters`` holds every parameter value (swept or default) as JSON, ``levels``
    and ``observables`` are JSON too (non-finite values as null).
"""

from __future__ import annotations

import json
import math
import os
import sqlite3
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, Literal

import numpy as np
import numpy.typing as npt

from fockmill.exceptions import StoreError
from fockmill.store.sqlite import (
    connect,
    create_atomically,
    dumps,
    refuse_existing,
    transaction,
    utc_now,
)

__all__ = [
    "FORMAT_MARKER",
    "SCHEMA_VERSION",
    "STATUSES",
    "PointResult",
    "ResultsStore",
    "StoreError",
    "SweepTable",
    "space_summary",
]

FORMAT_MARKER = "fockmill-results"
"""Value of ``meta.format`` in every results file."""

SCHEMA_VERSION = 3
"""Newest layout version of the results file (files with a symmetry sector)."""

PLAIN_SCHEMA_VERSION = 2
"""Layout version written for sweeps without a symmetry (readable by older versions)."""

READABLE_SCHEMA_VERSIONS: tuple[int, ...] = (2, 3)
"""Layout versions this fockmill opens."""

STATUSES: tuple[str, ...] = ("ok", "not_converged", "failed")
"""Values of a point's ``status``."""

_APPLICATION_ID = 0x464B4D4C  # "FKML": SQLite's header slot for a file-type tag
_SQLITE_HEADER = b"SQLite format 3\x00"

_SCHEMA = """
CREATE TABLE meta (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE points (
    point INTEGER PRIMARY KEY,
    parameters TEXT NOT NULL,
    status TEXT NOT NULL,
    message TEXT NOT NULL,
    energy REAL,
    gap REAL,
    levels TEXT,
    observables TEXT NOT NULL,
    residual REAL,
    method TEXT NOT NULL,
    seconds REAL NOT NULL,
    finished TEXT NOT NULL
);
"""

_POINT_COLUMNS = (
    "point, parameters, status, message, energy, gap, levels, observables, residual, method, "
    "seconds, finished"
)


@dataclass(frozen=True)
class PointResult:
    """What one attempted parameter point produced.

    Attributes
    ----------
    index : int
        Position of the point in the sweep's list of points.
    parameters : dict of str to float
        Every parameter value used at this point (swept values and defaults).
    energy : float or None
        Ground-state energy (None when the point failed); for a stationary state of an
        open model, ``Tr(ρH)``.
    gap : float or None
        ``E1 − E0`` when recorded, else None.
    levels : tuple of float or None
        The lowest energies, ascending, when recorded, else None.
    observables : dict
        Recorded ground-state observables as JSON-ready values (floats and nested
        lists): ``populations``, ``number_variances``, ``one_body_matrix`` (plus
        ``one_body_matrix_imag`` for complex states), ``entanglement_entropy``,
        ``top_level_weights``; of a stationary state ``populations``, ``g2``,
        ``purity``, ``number_variances``.
    residual : float or None
        ``‖H v − E v‖`` of the returned ground vector; ``‖𝓛ρ‖`` for a stationary state.
    method : str
        The solver method that ran (as in :attr:`fockmill.GroundState.method`).
    seconds : float
        Wall time spent on the point (assembly, solve and observables).
    finished : str
        UTC time the point finished, ISO 8601.
    status : {"ok", "not_converged", "failed"}
        ``"not_converged"``: the solver stopped short of its tolerance;
        ``"failed"``: no result (an error, or a non-finite energy).
    message : str
        Why the point is not ``"ok"`` (empty when it is).
    """

    index: int
    parameters: dict[str, float]
    energy: float | None
    gap: float | None
    levels: tuple[float, ...] | None
    observables: dict[str, Any]
    residual: float | None
    method: str
    seconds: float
    finished: str
    status: str = "ok"
    message: str = ""

    @property
    def ok(self) -> bool:
        """Whether the point was solved to its tolerance."""
        return self.status == "ok"


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


def _nan_if_none(value: float | None) -> float:
    return math.nan if value is None else float(value)


@dataclass(frozen=True)
class SweepTable:
    """The points of a sweep, sorted by point index.

    Attributes
    ----------
    rows : tuple of PointResult
        One entry per attempted point, ascending ``index`` (see ``status``).
    swept : tuple of str
        Names of the parameters that vary across the sweep (the table's key columns).
    mode_labels : tuple of str
        Label of each mode (``"cavity 0"``, ``"emitter 0"``, ...); empty when unknown.
    units : Mapping[str, str]
        Unit of a parameter or of ``"energy"`` (from the model file), when given.
    sector : Mapping or None
        The symmetry sector(s) the points were solved in (``meta.symmetry``), None for
        the whole space.
    stationary : bool
        The points are stationary states of an open model (``meta.settings.stationary``):
        ``energy`` is ``Tr(ρH)`` and ``residual`` is ``‖𝓛ρ‖``.

    Examples
    --------
    >>> table = SweepTable(rows=(), swept=("U",))
    >>> len(table), table.to_arrays()["energy"].shape
    (0, (0,))
    """

    rows: tuple[PointResult, ...]
    swept: tuple[str, ...] = field(default=())
    mode_labels: tuple[str, ...] = field(default=())
    units: Mapping[str, str] = field(default_factory=lambda: MappingProxyType({}))
    sector: Mapping[str, Any] | None = None
    stationary: bool = False

    def __len__(self) -> int:
        return len(self.rows)

    def __iter__(self) -> Iterator[PointResult]:
        return iter(self.rows)

    @property
    def failed(self) -> tuple[PointResult, ...]:
        """The rows whose status is not ``"ok"``."""
        return tuple(r for r in self.rows if r.status != "ok")

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
            ``index`` (int64); one float column per parameter; ``energy``, ``gap``,
            ``residual`` (NaN where not recorded or failed), ``seconds``; ``levels`` as
            ``(rows, k)``; each observable stacked along a first axis of length
            ``rows`` (``populations`` ``(rows, modes)``, ``one_body_matrix``
            ``(rows, modes, modes)``, ``entanglement_entropy`` ``(rows,)``, ...); ``method`` and
            ``status`` as string arrays.
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
        out["energy"] = np.array([_nan_if_none(r.energy) for r in rows], dtype=np.float64)
        out["gap"] = np.array([_nan_if_none(r.gap) for r in rows], dtype=float)
        if any(r.levels is not None for r in rows):
            out["levels"] = _stack([r.levels for r in rows])
        keys: list[str] = []
        for row in rows:
            keys.extend(k for k in row.observables if k not in keys)
        for key in keys:
            out[key] = _stack([r.observables.get(key) for r in rows])
        out["residual"] = np.array([_nan_if_none(r.residual) for r in rows], dtype=np.float64)
        out["seconds"] = np.array([r.seconds for r in rows], dtype=np.float64)
        out["method"] = np.array([r.method for r in rows], dtype=str)
        out["status"] = np.array([r.status for r in rows], dtype=str)
        return out


def _finite_or_none(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


def _describe_file(file: Path) -> str:
    """What a file that is not an SQLite database looks like, for messages."""
    try:
        with open(file, "rb") as handle:
            head = handle.read(4096)
    except OSError:
        return "it could not be read"
    if not head:
        return "it is empty"
    if head.startswith(_SQLITE_HEADER[:6]):
        return "it is an SQLite database, damaged"
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError:
        text = "\x00"
    if "\x00" in text:
        return "it is not an SQLite database (binary data of another kind)"
    if "[model]" in text:
        return (
            "it is not an SQLite database but looks like a model file; run "
            f"'fockmill sweep {file.name} --out RESULTS.sqlite' to make a results file"
        )
    return "it is not an SQLite database (it holds text)"


Purpose = Literal["read", "resume"]


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
    def open(cls, path: str | os.PathLike[str], *, purpose: Purpose = "read") -> ResultsStore:
        """Open an existing results file and check it is one of ours, intact.

        Parameters
        ----------
        path : str or path-like
            The results file.
        purpose : {"read", "resume"}
            Only changes the advice in error messages (read another file, or write
            to another path).

        Returns
        -------
        ResultsStore

        Raises
        ------
        StoreError
            The file does not exist, is not SQLite, is an SQLite file of something else,
            has another schema version, or fails SQLite's quick integrity check.
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
            cls._check_ours(connection, file, purpose)
            cls._configure(connection)
        except BaseException:
            connection.close()
            raise
        return cls(connection, file)

    @classmethod
    def create(
        cls, path: str | os.PathLike[str], meta: Mapping[str, Any], *, claimed: bool = False
    ) -> ResultsStore:
        """Create a new, empty results file.

        The file is written under a temporary name in the same directory and linked
        to ``path`` only after its schema and meta data are committed. The name is
        claimed meanwhile (:func:`fockmill.store.claims.claim`), which also removes
        temporaries of writers of that name that died.

        Parameters
        ----------
        path : str or path-like
            Where to write; must not exist yet. Parent directories are created.
        meta : Mapping[str, Any]
            Extra ``meta`` entries (model fingerprint, name, settings ...), any
            JSON-ready values. The format marker, schema version and creation time are
            added here.
        claimed : bool
            The caller holds the claim on ``path`` already (and keeps it).

        Returns
        -------
        ResultsStore

        Raises
        ------
        StoreError
            The file exists already, or another process is writing it.
        """
        from fockmill.store.claims import claim

        file = Path(path)
        if claimed:
            return cls._create(file, meta)
        cls._refuse_existing(file)
        with claim(file):
            return cls._create(file, meta)

    @staticmethod
    def _refuse_existing(file: Path) -> None:
        refuse_existing(file, "open it with ResultsStore.open or choose another path")

    @classmethod
    def _create(cls, file: Path, meta: Mapping[str, Any]) -> ResultsStore:
        from fockmill._native import __version__

        cls._refuse_existing(file)
        file.parent.mkdir(parents=True, exist_ok=True)
        version = SCHEMA_VERSION if meta.get("symmetry") else PLAIN_SCHEMA_VERSION
        entries: dict[str, Any] = {
            "format": FORMAT_MARKER,
            "schema_version": version,
            "package_version": str(__version__),
            "created": utc_now(),
        }
        entries.update({k: v for k, v in meta.items() if k not in entries})
        create_atomically(
            file,
            application_id=_APPLICATION_ID,
            schema_version=version,
            statements=_SCHEMA.split(";"),
            meta=entries,
        )
        return cls.open(file, purpose="resume")

    @staticmethod
    def _connect(file: Path) -> sqlite3.Connection:
        # Autocommit: one point per BEGIN/COMMIT.
        return connect(file)

    @staticmethod
    def _configure(connection: sqlite3.Connection) -> None:
        connection.execute("PRAGMA journal_mode = WAL")
        connection.execute("PRAGMA synchronous = FULL")

    @staticmethod
    def _check_ours(connection: sqlite3.Connection, file: Path, purpose: Purpose) -> None:
        """Raise StoreError unless ``file`` is an intact fockmill results file.

        Only reads: a foreign database is left exactly as it was.
        """
        name = repr(str(file))
        if purpose == "read":
            advice = (
                "give the path of a file written by a fockmill sweep ('fockmill sweep "
                "MODEL.toml --out RESULTS.sqlite' or run_sweep(..., store=...))"
            )
        else:
            advice = "choose another output path; this file is left untouched"
        try:
            tables = {
                row[0]
                for row in connection.execute("SELECT name FROM sqlite_master WHERE type='table'")
            }
        except sqlite3.DatabaseError as exc:
            what = _describe_file(file)
            if what.endswith("damaged"):
                raise StoreError(
                    f"{name} is damaged (SQLite says: {exc}); restore it from a copy or "
                    "re-run the sweep into a new file"
                ) from exc
            raise StoreError(
                f"{name} is not a fockmill results file: {what} (SQLite says: {exc}); {advice}"
            ) from exc
        if {"meta", "arrays"} <= tables and "points" not in tables:
            raise StoreError(
                f"{name} holds a quench, spectrum or thermal result, not a sweep; read it "
                f"with 'fockmill show' / 'fockmill plot' or fm.read_workflow_results; {advice}"
            )
        marker = None
        if {"meta", "points"} <= tables:
            row = connection.execute("SELECT value FROM meta WHERE key='format'").fetchone()
            marker = None if row is None else _loads_marker(row[0])
        if marker != FORMAT_MARKER:
            raise StoreError(
                f"{name} is an SQLite database of another program, not a fockmill results "
                f"file (no {FORMAT_MARKER!r} marker); {advice}"
            )
        row = connection.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()
        version = _loads_version(None if row is None else row[0])
        if version not in READABLE_SCHEMA_VERSIONS:
            readable = " and ".join(str(v) for v in READABLE_SCHEMA_VERSIONS)
            raise StoreError(
                f"{name} has results-file schema version {version}, this fockmill reads "
                f"versions {readable}; use the fockmill version that wrote it, or "
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

    def __exit__(self, exc_type: type[BaseException] | None, *_: object) -> None:
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
    def meta(self) -> dict[str, Any]:
        """All ``meta`` entries, decoded from JSON."""
        return {
            key: json.loads(value)
            for key, value in self._connection.execute("SELECT key, value FROM meta")
        }

    @property
    def swept(self) -> tuple[str, ...]:
        """Names of the swept parameters (``meta.swept_parameters``)."""
        return tuple(self.meta.get("swept_parameters") or ())

    def _meta_value(self, key: str, kind: type) -> Any:
        value = self.meta.get(key)
        if isinstance(value, str) and kind is not str:  # written as JSON inside a string
            try:
                value = json.loads(value)
            except ValueError:
                return None
        return value if isinstance(value, kind) else None

    @property
    def mode_labels(self) -> tuple[str, ...]:
        """Label of each mode (``meta.mode_labels``; empty when not stored)."""
        return tuple(str(label) for label in self._meta_value("mode_labels", list) or ())

    @property
    def units(self) -> dict[str, str]:
        """Units of parameters and of ``"energy"`` (``meta.units``; empty when not given)."""
        return {str(k): str(v) for k, v in (self._meta_value("units", dict) or {}).items()}

    def finished_indices(self, *, include_failed: bool = True) -> set[int]:
        """Indices of the points stored (all, or only those with status ``ok``)."""
        query = "SELECT point FROM points"
        if not include_failed:
            query += " WHERE status = 'ok'"
        return {row[0] for row in self._connection.execute(query)}

    def stored_parameters(self) -> dict[int, dict[str, float]]:
        """Point index -> the parameter values stored for it."""
        return {
            int(i): json.loads(text)
            for i, text in self._connection.execute("SELECT point, parameters FROM points")
        }

    def rows(self) -> list[PointResult]:
        """Every stored point, by ascending index."""
        cursor = self._connection.execute(f"SELECT {_POINT_COLUMNS} FROM points ORDER BY point")
        return [self._decode(row) for row in cursor]

    def to_table(self) -> SweepTable:
        """The stored points as a :class:`SweepTable` (with mode labels and units)."""
        return SweepTable(
            rows=tuple(self.rows()),
            swept=self.swept,
            mode_labels=self.mode_labels,
            units=MappingProxyType(self.units),
            sector=self._sector(),
            stationary=bool((self._meta_value("settings", dict) or {}).get("stationary")),
        )

    def _sector(self) -> dict[str, Any] | None:
        """``meta.symmetry`` with the sector dimensions (``dims``), None without one."""
        sector = self._meta_value("symmetry", dict)
        if sector is None:
            return None
        return {**sector, "dims": self._meta_value("sector_dims", list) or []}

    def integrity_ok(self) -> bool:
        """True when SQLite's full ``PRAGMA integrity_check`` reports no problem."""
        rows = self._connection.execute("PRAGMA integrity_check").fetchall()
        return rows == [("ok",)]

    @staticmethod
    def _decode(row: tuple[Any, ...]) -> PointResult:
        (
            point,
            parameters,
            status,
            message,
            energy,
            gap,
            levels,
            observables,
            residual,
            method,
            seconds,
            done,
        ) = row
        return PointResult(
            index=int(point),
            parameters=json.loads(parameters),
            energy=None if energy is None else float(energy),
            gap=None if gap is None else float(gap),
            levels=None if levels is None else tuple(json.loads(levels)),
            observables=_current_names(json.loads(observables)),
            residual=None if residual is None else float(residual),
            method=str(method),
            seconds=float(seconds),
            finished=str(done),
            status=str(status),
            message=str(message),
        )

    # -- writing -------------------------------------------------------------------

    def add_point(self, result: PointResult, *, replace_failed: bool = False) -> None:
        """Commit one point in its own transaction.

        Non-finite numbers are stored as NULL; an ``ok`` point whose energy is not
        finite is stored as ``failed``.

        Parameters
        ----------
        result : PointResult
            The point.
        replace_failed : bool
            Replace a stored row of the same index whose status is not ``ok``
            (retrying failed points).

        Raises
        ------
        StoreError
            The point is stored already (two sweeps writing one file?).
        """
        status, message = result.status, result.message
        if status not in STATUSES:
            raise ValueError(f"status must be one of {STATUSES}; got {status!r}")
        energy = _finite_or_none(result.energy)
        if energy is None and status == "ok":
            status, message = "failed", f"the energy is not finite ({result.energy})"
        values = (
            int(result.index),
            dumps(result.parameters),
            status,
            str(message),
            energy,
            _finite_or_none(result.gap),
            None if result.levels is None else dumps(list(result.levels)),
            dumps(result.observables),
            _finite_or_none(result.residual),
            result.method,
            float(result.seconds),
            result.finished,
        )
        try:
            with transaction(self._connection):
                if replace_failed:
                    self._connection.execute(
                        "DELETE FROM points WHERE point = ? AND status != 'ok'", (values[0],)
                    )
                self._connection.execute(
                    f"INSERT INTO points({_POINT_COLUMNS}) VALUES (?,?,?,?,?,?,?,?,?,?,?,?)",
                    values,
                )
        except sqlite3.IntegrityError as exc:
            raise StoreError(
                f"point {result.index} is already stored in {str(self._path)!r}; is another "
                "sweep writing the same file? Give each sweep its own output file"
            ) from exc

    def set_meta(self, key: str, value: Any) -> None:
        """Insert or replace one ``meta`` entry (any JSON-ready value; own transaction)."""
        with transaction(self._connection):
            self._connection.execute(
                "INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)", (key, dumps(value))
            )


def _loads_marker(text: object) -> object:
    try:
        return json.loads(str(text))
    except ValueError:
        return None


def _loads_version(text: object) -> int:
    try:
        value = json.loads(str(text))
    except ValueError:
        return -1
    return value if isinstance(value, int) and not isinstance(value, bool) else -1


def space_summary(space: Any) -> dict[str, Any]:
    """What a results file records of a space: modes, cutoffs, sector, dimension."""
    if getattr(space, "several", False):
        return {
            "modes": space.modes,
            "cutoffs": [int(c) for c in space.cutoffs],
            "charges": [
                {"weights": list(c.weights), "total": c.total, "modulus": c.modulus}
                for c in space.charges
            ],
            "dim": space.dim,
        }
    return {
        "modes": space.modes,
        "cutoffs": [int(c) for c in space.cutoffs],
        "weights": [int(w) for w in space.weights],
        "total": space.total,
        "modulus": space.modulus,
        "dim": space.dim,
    }


_RENAMED = {
    "number_variance": "number_variances",
    "one_body": "one_body_matrix",
    "one_body_imag": "one_body_matrix_imag",
    "entropy": "entanglement_entropy",
    "top_weight": "top_level_weights",
}


def _current_names(values: dict[str, Any]) -> dict[str, Any]:
    """Recorded quantities under their current names: files written before the rename
    (see ``fockmill.sweeps.plan.RENAMED_QUANTITIES``) keep the old keys."""
    return {_RENAMED.get(key, key): value for key, value in values.items()}
