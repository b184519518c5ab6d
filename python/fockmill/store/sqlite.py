"""What the two SQLite results formats (sweeps, workflows) share: connections,
transactions, JSON values, and creating a file atomically under its real name.

A results file is created under a temporary name (``store.claims.temporary_path``),
filled and committed there, and only then linked to its real name, so a crash while
creating it leaves no half-made file under that name.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import sqlite3
from collections.abc import Callable, Iterable, Mapping
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from fockmill.exceptions import StoreError

__all__ = [
    "connect",
    "create_atomically",
    "dumps",
    "json_ready",
    "publish",
    "refuse_existing",
    "transaction",
    "utc_now",
]


def utc_now() -> str:
    """The current time as an ISO 8601 UTC string (seconds precision)."""
    return datetime.now(UTC).isoformat(timespec="seconds")


def json_ready(value: Any) -> Any:
    """``value`` with non-finite floats replaced by None (strict JSON has no NaN)."""
    if isinstance(value, float | np.floating):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, Mapping):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_ready(v) for v in value]
    if isinstance(value, np.ndarray):
        return json_ready(value.tolist())
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    return value


def dumps(value: Any) -> str:
    """Strict, sorted JSON of ``value`` (non-finite floats as null)."""
    return json.dumps(json_ready(value), sort_keys=True, allow_nan=False)


def connect(file: Path) -> sqlite3.Connection:
    """An autocommit connection: callers issue ``BEGIN``/``COMMIT`` themselves."""
    return sqlite3.connect(str(file), isolation_level=None, timeout=30.0)


class transaction:
    """``BEGIN IMMEDIATE`` … ``COMMIT`` (``ROLLBACK`` on error) on an autocommit connection."""

    def __init__(self, connection: sqlite3.Connection) -> None:
        self._connection = connection

    def __enter__(self) -> None:
        self._connection.execute("BEGIN IMMEDIATE")

    def __exit__(self, exc_type: type[BaseException] | None, *_: object) -> None:
        self._connection.execute("ROLLBACK" if exc_type is not None else "COMMIT")


def refuse_existing(file: Path, advice: str) -> None:
    """A :class:`StoreError` when ``file`` exists: results files are never overwritten."""
    if file.exists():
        raise StoreError(f"{str(file)!r} exists already; {advice}")


def publish(temporary: Path, file: Path) -> None:
    """Give the finished ``temporary`` file its real name, never replacing a file."""
    try:
        os.link(temporary, file)  # atomic, and fails if ``file`` appeared meanwhile
    except FileExistsError:
        raise StoreError(
            f"{str(file)!r} exists already (created while this run started); choose another path"
        ) from None
    except OSError:  # a file system without hard links
        if file.exists():
            raise StoreError(f"{str(file)!r} exists already; choose another path") from None
        os.replace(temporary, file)


def create_atomically(
    file: Path,
    *,
    application_id: int,
    schema_version: int,
    statements: Iterable[str],
    meta: Mapping[str, Any],
    fill: Callable[[sqlite3.Connection], None] | None = None,
) -> None:
    """Create ``file``: schema, ``meta`` rows and whatever ``fill`` inserts, committed in
    one transaction under a temporary name and then linked into place.

    Raises
    ------
    StoreError
        When ``file`` appeared meanwhile.
    """
    from fockmill.store.claims import temporary_path

    file.parent.mkdir(parents=True, exist_ok=True)
    temporary = temporary_path(file)
    try:
        connection = connect(temporary)
        try:
            with transaction(connection):
                connection.execute(f"PRAGMA application_id = {application_id}")
                connection.execute(f"PRAGMA user_version = {schema_version}")
                for statement in statements:
                    if statement.strip():
                        connection.execute(statement)
                connection.executemany(
                    "INSERT INTO meta(key, value) VALUES (?, ?)",
                    [(k, dumps(v)) for k, v in meta.items()],
                )
                if fill is not None:
                    fill(connection)
        finally:
            connection.close()
        publish(temporary, file)
    finally:
        for leftover in (temporary, temporary.with_name(temporary.name + "-journal")):
            with contextlib.suppress(FileNotFoundError):
                leftover.unlink()
