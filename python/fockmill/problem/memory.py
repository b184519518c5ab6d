"""Memory planning: what a build or a solve will need, estimated before any allocation."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

__all__ = [
    "MemoryEstimate",
    "SolvePlan",
    "available_memory",
    "estimate_native",
    "format_bytes",
    "format_gib",
    "resident_bytes",
    "size_limit_message",
]


def format_bytes(n: float) -> str:
    """``n`` bytes in readable units (``"1.50 GiB"``, ``"12.0 KiB"``)."""
    for unit, size in (("TiB", 2**40), ("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if abs(n) >= size:
            return f"{n / size:.2f} {unit}"
    return f"{int(n)} B"


def format_gib(n: float) -> str:
    """``n`` bytes in GiB, the one unit of every size-limit message, with enough digits
    to tell two nearby sizes apart (``"0.863 GiB"``, ``"1.5e-05 GiB"``)."""
    gib = n / 2**30
    if gib >= 100:
        return f"{gib:,.0f} GiB"
    if gib >= 0.01:
        return f"{gib:.3f} GiB"
    return f"{gib:.2g} GiB"


def size_limit_message(
    what: str, need: float, limit: float, advice: str, *, given: bool, details: str = ""
) -> str:
    """The one wording of every size refusal: a sentence with both sizes in GiB.

    ``given`` says whether ``limit`` is the caller's ``memory_limit`` (else it is the
    memory available now, or the planning budget taken from it).
    """
    which = "the memory limit" if given else "the memory available now"
    text = f"{what} needs {format_gib(need)} but {which} is {format_gib(limit)}; {advice}"
    return f"{text} ({details})" if details else text


#: Limits at or above this mean "no limit" (cgroup v1 reports 2**63 rounded to a page).
_NO_LIMIT = 1 << 60


def _read_int(path: Path) -> int | None:
    try:
        return int(path.read_text().strip())
    except (OSError, ValueError):
        return None


def _stat_value(path: Path, key: str) -> int | None:
    try:
        for line in path.read_text().splitlines():
            name, _, value = line.partition(" ")
            if name == key:
                return int(value)
    except (OSError, ValueError):
        pass
    return None


def _cgroup_dir_room(directory: Path) -> int | None:
    """Room under the memory limit of one cgroup directory (v2 or v1 file names),
    counting reclaimable page cache (inactive files) as free; None without a limit."""
    if (directory / "memory.max").exists():
        limit = _read_int(directory / "memory.max")  # "max" reads as None: no limit
        usage = _read_int(directory / "memory.current")
        cache = _stat_value(directory / "memory.stat", "inactive_file")
    else:
        limit = _read_int(directory / "memory.limit_in_bytes")
        usage = _read_int(directory / "memory.usage_in_bytes")
        cache = _stat_value(directory / "memory.stat", "total_inactive_file")
    if limit is None or usage is None or limit >= _NO_LIMIT:
        return None
    return max(limit - max(usage - (cache or 0), 0), 0)


def _cgroup_room(
    root: Path = Path("/sys/fs/cgroup"), membership: Path = Path("/proc/self/cgroup")
) -> int | None:
    """Smallest room under the memory limits of this process's cgroups: its own
    directory and every ancestor (limits are hierarchical), for cgroup v2 (``0::path``)
    and v1 (the ``memory`` controller), plus the mount roots (inside a cgroup namespace
    the root is the process's own cgroup). ``root`` and ``membership`` (the process's
    cgroup list) are parameters so that tests can pass a fake tree."""
    directories = [root, root / "memory"]
    try:
        lines = membership.read_text().splitlines()
    except OSError:
        lines = []
    for line in lines:
        parts = line.split(":", 2)
        if len(parts) != 3:
            continue
        _, controllers, path = parts
        if controllers == "":
            base = root
        elif "memory" in controllers.split(","):
            base = root / "memory"
        else:
            continue
        directory = base / path.lstrip("/")
        while directory != base and base in directory.parents:
            directories.append(directory)
            directory = directory.parent
    rooms = [r for r in map(_cgroup_dir_room, directories) if r is not None]
    return min(rooms) if rooms else None


def _address_space_room(status: Path = Path("/proc/self/status")) -> int | None:
    """Room under the soft address-space limit (``RLIMIT_AS``, as ``ulimit -v`` and
    batch schedulers set it): the limit minus the current ``VmSize`` (read from
    ``status``)."""
    try:
        import resource
    except ImportError:  # not on this platform
        return None
    soft, _ = resource.getrlimit(resource.RLIMIT_AS)
    if soft == resource.RLIM_INFINITY or soft < 0:
        return None
    size = 0
    try:
        for line in status.read_text().splitlines():
            if line.startswith("VmSize:"):
                size = int(line.split()[1]) * 1024
                break
    except (OSError, ValueError, IndexError):
        pass
    return max(soft - size, 0)


def available_memory() -> int | None:
    """Bytes of memory this process can still use, or None when unknown.

    The smallest of: ``MemAvailable`` from ``/proc/meminfo``; the room left under a
    cgroup memory limit (v2 ``memory.max`` or v1 ``memory.limit_in_bytes``, for the
    process's own cgroup and its ancestors, page cache counted as free); and the room
    left under the address-space limit (``RLIMIT_AS``) after the current ``VmSize``.
    The Rust core applies the same rules before its large allocations.
    """
    candidates: list[int] = []
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemAvailable:"):
                candidates.append(int(line.split()[1]) * 1024)
                break
    except (OSError, ValueError, IndexError):
        pass
    if not candidates and hasattr(os, "sysconf"):
        try:
            candidates.append(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
        except (ValueError, OSError):
            pass
    for room in (_cgroup_room(), _address_space_room()):
        if room is not None:
            candidates.append(room)
    return min(candidates) if candidates else None


@dataclass(frozen=True)
class MemoryEstimate:
    """Sizes of the objects a build or solve would create.

    Attributes
    ----------
    dim : int
        Number of basis states.
    nnz : int
        Stored entries of the CSR matrix (exact when ``nnz_exact``, else estimated from
        a stratified sample of rows, with standard error ``nnz_std_error``).
    nnz_exact : bool
        Whether every row was counted.
    nnz_std_error : float
        Standard error of ``nnz``.
    index_dtype, value_dtype : numpy.dtype
        Element types the CSR arrays will have.
    csr_bytes : int
        Bytes of the finished CSR matrix (``indptr`` + ``indices`` + ``data``).
    build_peak_bytes : int
        Peak bytes while building (the matrix plus one row-count array).
    vector_bytes : int
        Bytes of one state vector.
    available_bytes : int or None
        Memory available now (see :func:`available_memory`).
    """

    dim: int
    nnz: int
    nnz_exact: bool
    nnz_std_error: float
    index_dtype: np.dtype[np.signedinteger]
    value_dtype: np.dtype[np.inexact]
    csr_bytes: int
    build_peak_bytes: int
    vector_bytes: int
    available_bytes: int | None

    def krylov_bytes(self, vectors: int) -> int:
        """Bytes of ``vectors`` state vectors (a Krylov basis, say)."""
        return vectors * self.vector_bytes

    def __str__(self) -> str:
        avail = "unknown" if self.available_bytes is None else format_bytes(self.available_bytes)
        return (
            f"dim={self.dim:,}, nnz≈{self.nnz:,}{'' if self.nnz_exact else ' (sampled)'}, "
            f"CSR {format_bytes(self.csr_bytes)} (peak {format_bytes(self.build_peak_bytes)} "
            f"while building), one vector {format_bytes(self.vector_bytes)}, "
            f"available {avail}"
        )


def estimate_native(
    native: Any, shape: tuple[int, int], samples: int, threads: Any
) -> MemoryEstimate:
    """The :class:`MemoryEstimate` of a compiled operator of the given shape."""
    if isinstance(samples, bool) or not isinstance(samples, int) or samples < 1:
        raise ValueError(f"samples must be a positive integer; got {samples!r}")
    # The CSR sizes come from the core (fockmill_core::solve::csr_size), the same
    # numbers the solvers' stored-or-matrix-free decision uses.
    found = native.estimate_nnz(samples=samples, threads=threads)
    _, dim = shape
    value_dtype = np.dtype(np.float64 if native.is_real else np.complex128)
    return MemoryEstimate(
        dim=dim,
        nnz=round(found.nnz),
        nnz_exact=bool(found.exact),
        nnz_std_error=float(found.std_error),
        index_dtype=np.dtype(np.int64 if found.wide else np.int32),
        value_dtype=value_dtype,
        csr_bytes=int(found.csr_bytes),
        build_peak_bytes=int(found.build_peak_bytes),
        vector_bytes=dim * value_dtype.itemsize,
        available_bytes=available_memory(),
    )


def resident_bytes(status: Path = Path("/proc/self/status")) -> int:
    """Resident memory of this process now (``VmRSS``), in bytes; 0 when unknown."""
    try:
        for line in status.read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return 0


@dataclass(frozen=True)
class SolvePlan:
    """The memory plan of a Lanczos solve: what the process holds when it is planned,
    plus what the solve adds (the numbers its stored-or-matrix-free choice compares
    with the memory limit, see :meth:`fockmill.Problem.memory_plan`).

    Attributes
    ----------
    stored : bool
        Whether the solve runs on a CSR matrix built first and kept in Rust.
    resident_bytes : int
        Resident memory of the process when planned: the interpreter and libraries,
        the space (a sector's representatives) and the operator's prepared tables.
    matrix_bytes : int
        Bytes of the stored matrix, kept for the whole solve (0 matrix-free).
    build_bytes : int
        Bytes held only while the matrix is built: one 8-byte count per row and any
        vector handed in (0 matrix-free).
    vector_bytes : int
        Bytes of the solver's vectors (four for the ground state; ``2k + 9`` for
        ``k`` levels), allocated after the build.
    """

    stored: bool
    resident_bytes: int
    matrix_bytes: int
    build_bytes: int
    vector_bytes: int

    @property
    def added_bytes(self) -> int:
        """Peak bytes the solve adds: the matrix plus the larger of its build's extra
        and the solver's vectors (never held at once)."""
        return self.matrix_bytes + max(self.build_bytes, self.vector_bytes)

    @property
    def peak_bytes(self) -> int:
        """Planned peak resident memory of the process: ``resident_bytes +
        added_bytes``."""
        return self.resident_bytes + self.added_bytes

    def __str__(self) -> str:
        how = "stored matrix" if self.stored else "matrix-free"
        return (
            f"{how}: peak {format_bytes(self.peak_bytes)} = resident "
            f"{format_bytes(self.resident_bytes)} + matrix {format_bytes(self.matrix_bytes)} "
            f"+ max(build {format_bytes(self.build_bytes)}, vectors "
            f"{format_bytes(self.vector_bytes)})"
        )
