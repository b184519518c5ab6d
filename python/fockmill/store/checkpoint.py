"""Checkpoints of long runs: one file per run, replaced atomically.

A checkpoint is a NumPy ``.npz`` archive (uncompressed, so that ``numpy.load`` reads it)
holding

- ``meta``: a JSON string with the file's ``format`` and ``version``, the run's
  ``identity`` (what was computed: the task, the space, a hash of the Hamiltonian's
  normal-ordered terms and the settings that change the numbers), its ``status``
  (``"running"`` or ``"finished"``), the ``solver`` that wrote the state, its integer
  counters and texts;
- ``number.NAME``: short float arrays (Lanczos coefficients, energies, times);
- ``vector.NAME``: the vectors (states, Lanczos vectors), written in pieces straight
  from the solver's memory, never copied whole.

Every write goes to a temporary file next to the target, is flushed to disk
(``fsync``) and then renamed over the target (``os.replace``): a run killed at any
moment leaves either the previous checkpoint or the new one, never a torn file. A
checkpoint of another run (another task, space, Hamiltonian or settings) is refused
with a :class:`~fockmill.exceptions.CheckpointError` naming the difference and the
path, and so is a file that is not a checkpoint (it is never overwritten).
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import time
import zipfile
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.exceptions import CheckpointError

__all__ = [
    "DEFAULT_CHECKPOINT_EVERY",
    "Checkpoint",
    "CheckpointState",
    "check_checkpoint_every",
    "terms_hash",
]

FORMAT = "fockmill checkpoint"
VERSION = 1
#: Seconds between two checkpoints of a run by default.
DEFAULT_CHECKPOINT_EVERY = 300.0


def terms_hash(terms: Iterable[Any]) -> str:
    """A short hash of normal-ordered terms ``(re, im, [(mode, p, q), ...])``, independent
    of their order (float reprs are exact, so equal terms give equal hashes)."""
    rows = sorted(
        (tuple(tuple(int(x) for x in f) for f in factors), float(re), float(im))
        for re, im, factors in terms
    )
    return hashlib.sha256(repr(rows).encode()).hexdigest()[:16]


def check_checkpoint_every(every: object) -> float:
    """``checkpoint_every``: seconds > 0 (finite)."""
    if (
        isinstance(every, bool)
        or not isinstance(every, int | float)
        or not math.isfinite(every)
        or every <= 0
    ):
        raise ValueError(
            f"checkpoint_every must be a number of seconds > 0 such as 300; got {every!r}"
        )
    return float(every)


def _check_path(path: object) -> Path:
    if not isinstance(path, str | os.PathLike) or str(path) == "":
        raise TypeError(
            f"checkpoint must be a file path (str or pathlib.Path) or None; got {path!r}"
        )
    p = Path(path)
    if p.is_dir():
        raise CheckpointError(
            f"the checkpoint {p} is a folder; pass a file path such as {p}/run.npz"
        )
    if not p.parent.is_dir():
        raise CheckpointError(
            f"the folder of the checkpoint {p} does not exist; create {p.parent} first"
        )
    return p


def _normal(value: Any) -> Any:
    """``value`` as it reads back from JSON (tuples become lists)."""
    return json.loads(json.dumps(value))


class _Writer:
    """An ``.npz`` written member by member into a temporary file, then renamed."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.tmp = path.with_name(f".{path.name}.{os.getpid()}.partial")
        self.file = open(self.tmp, "wb")
        self.zip = zipfile.ZipFile(self.file, "w", compression=zipfile.ZIP_STORED)
        self.member: Any = None

    def begin(self, name: str, descr: str, shape: tuple[int, ...], fortran: bool = False) -> None:
        self.end()
        self.member = self.zip.open(f"{name}.npy", "w", force_zip64=True)
        np.lib.format.write_array_header_2_0(
            self.member, {"descr": descr, "fortran_order": fortran, "shape": shape}
        )

    def write(self, data: Any) -> None:
        self.member.write(data)

    def end(self) -> None:
        if self.member is not None:
            self.member.close()
            self.member = None

    def array(self, name: str, arr: npt.NDArray[Any]) -> None:
        """A whole array, written from its memory (no copy when contiguous)."""
        a = np.asarray(arr)
        if a.dtype.hasobject:
            raise TypeError(f"checkpoint member {name} has objects; pass numbers or strings")
        fortran = a.ndim > 1 and not a.flags.c_contiguous and a.flags.f_contiguous
        flat = a.T if fortran else np.ascontiguousarray(a)
        self.begin(name, a.dtype.str, tuple(a.shape), fortran)
        if flat.size:
            self.write(flat.reshape(-1).view(np.uint8).data)
        self.end()

    def commit(self) -> None:
        self.end()
        self.zip.close()
        self.file.flush()
        os.fsync(self.file.fileno())
        self.file.close()
        os.replace(self.tmp, self.path)
        with contextlib.suppress(OSError):  # the rename itself on disk (POSIX)
            fd = os.open(self.path.parent, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)

    def abort(self) -> None:
        with contextlib.suppress(Exception):
            self.end()
            self.zip.close()
        with contextlib.suppress(Exception):
            self.file.close()
        with contextlib.suppress(OSError):
            self.tmp.unlink()


@dataclass
class CheckpointState:
    """A checkpoint as read back (its vectors are read on demand).

    Attributes
    ----------
    path : pathlib.Path
    status : str
        ``"running"`` or ``"finished"``.
    solver : str
        What wrote the state (``"ground"``, ``"levels"``, ``"evolve"``, ``"result"``).
    integers : dict of str to int
    numbers : dict of str to list of float
    texts : dict of str to str
    vectors : list of str
        Names of the stored vectors, for :meth:`load`.
    """

    path: Path
    status: str
    solver: str
    integers: dict[str, int]
    numbers: dict[str, list[float]]
    texts: dict[str, str]
    vectors: list[str] = field(default_factory=list)

    def load(self, name: str) -> npt.NDArray[Any]:
        """The vector block ``name`` as one flat array (read now, one at a time)."""
        return self.array(name).reshape(-1, order="A")

    def array(self, name: str) -> npt.NDArray[Any]:
        """The vector block ``name`` in its stored shape."""
        try:
            with np.load(self.path, allow_pickle=False) as npz:
                return np.asarray(npz[f"vector.{name}"])
        except (OSError, KeyError, ValueError, zipfile.BadZipFile) as error:
            raise CheckpointError(
                f"the checkpoint {self.path} is damaged (vector {name!r}: {error}); delete it "
                "to start over"
            ) from None


class Checkpoint:
    """The checkpoint of one run at ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        The file (created on the first write; its folder must exist).
    identity : dict
        What the run computes: ``task``, ``space``, ``hamiltonian`` and ``settings``
        (JSON values). A file written for another identity is refused.
    every : float
        Seconds between two writes of the run's state.

    Raises
    ------
    CheckpointError
        When the file exists and is not a checkpoint, is damaged, or belongs to another
        run (the message names the first difference and the path).
    """

    def __init__(self, path: object, identity: Mapping[str, Any], *, every: float) -> None:
        self.path = _check_path(path)
        self.identity = _normal(dict(identity))
        self.every = check_checkpoint_every(every)
        self.last_write = time.monotonic()
        self.writes = 0
        self.write_seconds = 0.0
        self._writer: _Writer | None = None
        self._pending: dict[str, Any] = {}
        self.saved = self._read() if self.path.exists() else None
        self._remove_stale_partials()

    def _remove_stale_partials(self) -> None:
        """Delete temporary files that killed runs left next to the checkpoint (their
        process is gone; a write of a live process is left alone)."""
        for leftover in self.path.parent.glob(f".{self.path.name}.*.partial"):
            pid = leftover.name[len(self.path.name) + 2 : -len(".partial")]
            if not pid.isdigit() or int(pid) == os.getpid():
                continue
            try:
                os.kill(int(pid), 0)
            except ProcessLookupError:
                with contextlib.suppress(OSError):
                    leftover.unlink()
            except OSError:
                continue

    # -- reading ----------------------------------------------------------------------

    def _read(self) -> CheckpointState:
        try:
            with np.load(self.path, allow_pickle=False) as npz:
                meta = json.loads(str(npz["meta"]))
                names = list(npz.files)
                numbers = {
                    n[len("number.") :]: np.asarray(npz[n], dtype=np.float64).tolist()
                    for n in names
                    if n.startswith("number.")
                }
        except (OSError, KeyError, ValueError, zipfile.BadZipFile, json.JSONDecodeError):
            raise CheckpointError(
                f"{self.path} exists and is not a fockmill checkpoint (or is damaged); pass "
                "another path, or delete the file to start over"
            ) from None
        if meta.get("format") != FORMAT or meta.get("version") != VERSION:
            raise CheckpointError(
                f"{self.path} is not a fockmill checkpoint of version {VERSION}; pass another "
                "path, or delete the file to start over"
            )
        self._compare(meta.get("identity", {}))
        return CheckpointState(
            path=self.path,
            status=str(meta["status"]),
            solver=str(meta["solver"]),
            integers={k: int(v) for k, v in meta.get("integers", {}).items()},
            numbers=numbers,
            texts={k: str(v) for k, v in meta.get("texts", {}).items()},
            vectors=[n[len("vector.") :] for n in names if n.startswith("vector.")],
        )

    def _compare(self, there: Mapping[str, Any]) -> None:
        here = self.identity
        problems: list[str] = []
        for key, what in (("task", "computation"), ("space", "space")):
            if there.get(key) != here.get(key):
                problems.append(
                    f"its {what} is {there.get(key)} where this run's is {here.get(key)}"
                )
        if there.get("hamiltonian") != here.get("hamiltonian"):
            problems.append(
                "its Hamiltonian differs (terms hash "
                f"{there.get('hamiltonian')} there, {here.get('hamiltonian')} here)"
            )
        theirs, ours = there.get("settings", {}), here.get("settings", {})
        for key in sorted(set(theirs) | set(ours)):
            if theirs.get(key) != ours.get(key):
                problems.append(f"{key}={theirs.get(key)!r} there, {key}={ours.get(key)!r} here")
        if problems:
            raise CheckpointError(
                f"the checkpoint {self.path} was written by another run: "
                + "; ".join(problems)
                + ". Pass another checkpoint path, or delete the file to start over"
            )

    @property
    def finished(self) -> CheckpointState | None:
        """The saved result when the run finished, else None."""
        if self.saved is not None and self.saved.status == "finished":
            return self.saved
        return None

    def running(self, solver: str) -> CheckpointState | None:
        """The saved state of an unfinished run written by ``solver``, else None."""
        if self.saved is not None and self.saved.status == "running":
            if self.saved.solver == solver:
                return self.saved
        return None

    # -- writing ----------------------------------------------------------------------

    def due(self) -> bool:
        """Whether ``every`` seconds passed since the last write (or the start)."""
        return time.monotonic() - self.last_write >= self.every

    def _meta(
        self,
        status: str,
        solver: str,
        integers: Mapping[str, int],
        texts: Mapping[str, str],
        report: Mapping[str, Any] | None = None,
    ) -> npt.NDArray[Any]:
        meta = {
            "format": FORMAT,
            "version": VERSION,
            "identity": self.identity,
            "status": status,
            "solver": solver,
            "integers": {k: int(v) for k, v in integers.items()},
            "texts": dict(texts),
            "report": dict(report or {}),
            "written": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        }
        return np.array(json.dumps(meta))

    def save(
        self,
        *,
        status: str,
        solver: str,
        integers: Mapping[str, int] | None = None,
        numbers: Mapping[str, Any] | None = None,
        texts: Mapping[str, str] | None = None,
        vectors: Mapping[str, npt.NDArray[Any]] | None = None,
    ) -> None:
        """Write a whole state at once (Python loops, and the final result)."""
        t0 = time.perf_counter()
        writer = _Writer(self.path)
        try:
            writer.array("meta", self._meta(status, solver, integers or {}, texts or {}))
            for name, values in (numbers or {}).items():
                writer.array(f"number.{name}", np.asarray(values, dtype=np.float64))
            for name, arr in (vectors or {}).items():
                writer.array(f"vector.{name}", arr)
            writer.commit()
        except BaseException:
            writer.abort()
            raise
        self._wrote(t0)

    def _wrote(self, t0: float) -> None:
        self.writes += 1
        self.write_seconds += time.perf_counter() - t0
        self.last_write = time.monotonic()

    # -- the native solvers' sink and loader ------------------------------------------

    def begin(
        self,
        solver: str,
        integers: dict[str, int],
        numbers: dict[str, list[float]],
        vectors: list[tuple[str, int, int]],
        dtype: str,
        report: dict[str, Any],
    ) -> None:
        """Sink protocol of the native solvers: a snapshot starts."""
        self.abort()
        self._pending = {
            "t0": time.perf_counter(),
            "dtype": dtype,
            "shapes": {
                name: ((rows, length // rows) if rows > 1 else (length,))
                for name, rows, length in vectors
            },
            "current": None,
        }
        writer = _Writer(self.path)
        self._writer = writer
        writer.array("meta", self._meta("running", solver, integers, {}, report))
        for name, values in numbers.items():
            writer.array(f"number.{name}", np.asarray(values, dtype=np.float64))

    def write(self, name: str, data: bytes) -> None:
        """Sink protocol: the next piece of vector block ``name``."""
        writer = self._writer
        if writer is None:
            raise RuntimeError("checkpoint write without begin")
        if self._pending["current"] != name:
            writer.begin(f"vector.{name}", self._pending["dtype"], self._pending["shapes"][name])
            self._pending["current"] = name
        writer.write(data)

    def commit(self) -> None:
        """Sink protocol: the snapshot is complete; replace the checkpoint with it."""
        writer = self._writer
        if writer is None:
            raise RuntimeError("checkpoint commit without begin")
        writer.commit()
        self._writer = None
        self._wrote(self._pending["t0"])

    def abort(self) -> None:
        """Drop a snapshot left unfinished (the previous checkpoint stays)."""
        if self._writer is not None:
            self._writer.abort()
            self._writer = None
