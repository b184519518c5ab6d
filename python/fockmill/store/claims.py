"""One writer per results file: a claim taken before any work, and the temporaries a
crashed writer left behind.

A command that will write ``DIR/NAME`` first claims it: it creates ``DIR/.NAME.claim``,
locks it (``fcntl.flock``, exclusive) and writes its process id, host and start time
into it. The lock belongs to the open file, so the kernel drops it the moment the
writer ends in any way, SIGKILL included; no process ever has to clean up after a
dead one to unblock the next. While a claim is held:

* a second writer fails at once with :class:`~fockmill.exceptions.StoreError` naming
  the claim file and its owner (pid, host, start time);
* temporaries of the name (``.NAME.<pid>.<id>.creating`` and their SQLite
  ``-journal``/``-wal``/``-shm`` companions) can only belong to dead writers, since
  every writer of NAME holds the claim while it creates one; the new claim's owner
  removes them.

Where ``fcntl`` is missing (not POSIX) the claim file is created exclusively instead,
and a claim whose recorded process is no longer running on this host counts as stale.
"""

from __future__ import annotations

import contextlib
import json
import os
import socket
import sys
import time
import uuid
from pathlib import Path
from typing import Any

from fockmill.exceptions import StoreError

try:
    import fcntl
except ImportError:  # pragma: no cover - not POSIX
    fcntl = None  # type: ignore[assignment]

__all__ = ["Claim", "claim", "claim_path", "describe_leftover", "temporary_path"]

_TEMPORARY_SUFFIX = ".creating"
_COMPANIONS = ("-journal", "-wal", "-shm")


def claim_path(file: Path) -> Path:
    """The claim file of results file ``file``: ``.NAME.claim`` beside it."""
    return file.with_name(f".{file.name}.claim")


def temporary_path(file: Path) -> Path:
    """A fresh temporary name for creating ``file``, with this process's id in it."""
    return file.with_name(f".{file.name}.{os.getpid()}.{uuid.uuid4().hex[:12]}{_TEMPORARY_SUFFIX}")


def _stale_temporaries(file: Path) -> list[Path]:
    prefix = f".{file.name}."
    out: list[Path] = []
    try:
        entries = list(file.parent.iterdir())
    except OSError:
        return out
    for entry in entries:
        name = entry.name
        if not name.startswith(prefix):
            continue
        rest = name[len(prefix) :]
        for companion in ("", *_COMPANIONS):
            if rest.endswith(_TEMPORARY_SUFFIX + companion):
                out.append(entry)
                break
    return sorted(out)


def _owner_text(record: dict[str, Any]) -> str:
    parts = []
    if "pid" in record:
        parts.append(f"process {record['pid']}")
    if "host" in record:
        parts.append(f"on {record['host']}")
    if "started" in record:
        parts.append(f"since {record['started']}")
    if "command" in record:
        parts.append(f"running {record['command']!r}")
    return " ".join(parts) or "a process that left no details"


def _read_record(path: Path) -> dict[str, Any]:
    try:
        value = json.loads(path.read_text(encoding="utf-8") or "{}")
    except (OSError, ValueError):
        return {}
    return value if isinstance(value, dict) else {}


def _pid_running(pid: object) -> bool:
    if isinstance(pid, bool) or not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


class Claim:
    """The right to write one results file, held until :meth:`release`.

    Use :func:`claim` to take one. A claim is a context manager.

    Attributes
    ----------
    file : pathlib.Path
        The results file claimed.
    path : pathlib.Path
        The claim file ``.NAME.claim`` beside it.
    removed : tuple of pathlib.Path
        Temporaries of dead writers removed when the claim was taken.
    """

    def __init__(self, file: Path, path: Path, fd: int, removed: tuple[Path, ...]) -> None:
        self.file = file
        self.path = path
        self._fd: int | None = fd
        self.removed = removed

    def release(self) -> None:
        """Give the file up (idempotent): remove the claim file, then unlock it."""
        if self._fd is None:
            return
        with contextlib.suppress(OSError):
            self.path.unlink()
        os.close(self._fd)
        self._fd = None

    def __enter__(self) -> Claim:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, *_: object) -> None:
        self.release()

    def __repr__(self) -> str:
        state = "held" if self._fd is not None else "released"
        return f"Claim({str(self.file)!r}, {state})"


def _refusal(file: Path, path: Path, record: dict[str, Any]) -> StoreError:
    return StoreError(
        f"{str(file)!r} is being written by another fockmill {_owner_text(record)} (its claim "
        f"file is {str(path)!r}); wait for that run to finish, stop it, or choose another path"
    )


def _lock(path: Path, file: Path) -> int:
    """An open, exclusively locked descriptor of the claim file at ``path``."""
    for _ in range(100):
        if fcntl is None:  # pragma: no cover - not POSIX
            try:
                fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
            except FileExistsError:
                record = _read_record(path)
                if record.get("host") == socket.gethostname() and not _pid_running(
                    record.get("pid")
                ):
                    with contextlib.suppress(OSError):
                        path.unlink()
                    continue
                raise _refusal(file, path, record) from None
            return fd
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise _refusal(file, path, _read_record(path)) from None
        except BaseException:
            os.close(fd)
            raise
        # The previous owner may have removed the file between our open and our lock:
        # then we hold a lock on a file nobody else will open. Start again.
        try:
            same = os.stat(path).st_ino == os.fstat(fd).st_ino
        except FileNotFoundError:
            same = False
        if same:
            return fd
        os.close(fd)
    raise StoreError(  # pragma: no cover - a hundred lost races in a row
        f"could not claim {str(file)!r}: its claim file {str(path)!r} keeps changing; "
        "another program is writing there, choose another path"
    )


def claim(path: str | os.PathLike[str]) -> Claim:
    """Claim results file ``path`` for writing, before any work is done.

    Parameters
    ----------
    path : str or path-like
        The results file (it may or may not exist). Its directory is created.

    Returns
    -------
    Claim
        Held until released (or the process ends); temporaries left by writers of
        this name that died are removed (listed in ``Claim.removed``).

    Raises
    ------
    StoreError
        Another live process holds the claim; the message names its claim file and the
        process.
    """
    file = Path(path)
    file.parent.mkdir(parents=True, exist_ok=True)
    lock_path = claim_path(file)
    fd = _lock(lock_path, file)
    try:
        record = {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started": time.strftime("%Y-%m-%d %H:%M:%S %z"),
            "command": " ".join([Path(sys.argv[0]).name, *sys.argv[1:]])[:200]
            if sys.argv and sys.argv[0]
            else "python",
            "file": file.name,
        }
        data = json.dumps(record).encode("utf-8")
        os.ftruncate(fd, 0)
        os.pwrite(fd, data, 0)
        removed = []
        for leftover in _stale_temporaries(file):
            with contextlib.suppress(FileNotFoundError):
                leftover.unlink()
                removed.append(leftover)
    except BaseException:
        os.close(fd)
        raise
    return Claim(file, lock_path, fd, tuple(removed))


def _claim_held(path: Path) -> dict[str, Any] | None:
    """The record of a live claim at ``path``, or None when nobody holds it."""
    if not path.is_file():
        return None
    record = _read_record(path)
    if fcntl is None:  # pragma: no cover - not POSIX
        live = record.get("host") != socket.gethostname() or _pid_running(record.get("pid"))
        return record if live else None
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return None
    try:
        fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
    except BlockingIOError:
        return record
    finally:
        os.close(fd)
    return None


def describe_leftover(path: str | os.PathLike[str]) -> str | None:
    """What a claim file or creation temporary at ``path`` is, for ``fockmill show``.

    Returns None when ``path`` is named like neither.
    """
    file = Path(path)
    name = file.name
    if not name.startswith("."):
        return None
    if name.endswith(".claim"):
        target = file.with_name(name[1 : -len(".claim")])
        record = _claim_held(file)
        if record is not None:
            return (
                f"{str(file)!r} is the claim file of {str(target)!r}, held now by fockmill "
                f"{_owner_text(record)}; it holds no results. Show {str(target)!r} once that "
                "run has finished"
            )
        return (
            f"{str(file)!r} is the claim file of {str(target)!r}, left by a fockmill run that "
            "ended without removing it; nobody holds it now. It holds no results: delete it, "
            "or leave it (the next run writing that file takes it over)"
        )
    for companion in ("", *_COMPANIONS):
        ending = _TEMPORARY_SUFFIX + companion
        if not name.endswith(ending):
            continue
        stem = name[1 : -len(ending)]  # NAME.<pid>.<id> (or NAME.<id>, older files)
        parts = stem.rsplit(".", 2)
        if len(parts) == 3 and parts[1].isdigit():
            target, writer = file.with_name(parts[0]), f"process {parts[1]}"
        elif "." in stem:
            target, writer = file.with_name(stem.rsplit(".", 1)[0]), "a process"
        else:
            return None
        live = _claim_held(claim_path(target))
        if live is not None:
            return (
                f"{str(file)!r} is a temporary file of {str(target)!r}, being written now by "
                f"fockmill {_owner_text(live)}; it holds no results yet. Show "
                f"{str(target)!r} once that run has finished"
            )
        return (
            f"{str(file)!r} is a temporary file left by {writer}, a fockmill run that "
            f"stopped while creating {str(target)!r}; it holds no results. Delete it, or run the "
            "command again: the next run writing that file removes it"
        )
    return None
