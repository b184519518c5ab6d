"""Checks of small arguments shared by the public functions, sweeps and model files.

One module, one set of limits: the solvers, ``run_sweep`` and the ``[solver]`` table of
model files all check their options here, so the same wrong value gets the same message
everywhere.
"""

from __future__ import annotations

import math
import numbers

import fockmill._native as _native

__all__ = [
    "MAX_THREADS",
    "METHODS",
    "check_levels",
    "check_max_iterations",
    "check_memory_limit",
    "check_method",
    "check_positive_int",
    "check_seed",
    "check_threads",
    "check_tol",
]

#: Largest thread count accepted; the Rust core (``parallel::MAX_THREADS``) refuses more.
#: Checked here too because sweeps validate their options before any native call.
MAX_THREADS = 1024

#: Eigensolver methods accepted by ``ground_state``, ``lowest_levels`` and sweeps.
METHODS: tuple[str, ...] = ("auto", "dense", "csr", "operator", "lanczos")

#: Largest seed accepted (numpy's generators take any non-negative int; the Rust core a u64).
MAX_SEED = 2**63


def _is_int(value: object) -> bool:
    return not isinstance(value, bool) and isinstance(value, numbers.Integral)


def check_threads(threads: object) -> int | None:
    """A thread count: None or 0 (all cores, or ``RAYON_NUM_THREADS``) or a positive int
    (or a ``NativePool`` already started, passed through unchanged)."""
    if threads is None:
        return None
    if isinstance(threads, _native.NativePool):
        return threads  # type: ignore[return-value]  # a pool started once, reused
    if not _is_int(threads):
        raise TypeError(
            f"threads must be a positive integer, 0 or None (all cores); got {threads!r}"
        )
    value = int(threads)  # type: ignore[call-overload]
    if value > MAX_THREADS:
        raise ValueError(
            f"threads={value} is too many; pass at most {MAX_THREADS}, 0 or None (all cores)"
        )
    if value < 0:
        raise ValueError(f"threads must be a positive integer, 0 or None (all cores); got {value}")
    return value


def check_memory_limit(limit: object) -> int | None:
    """A memory limit in bytes: None (use the available memory) or a positive int."""
    if limit is None:
        return None
    if not _is_int(limit):
        raise TypeError(
            f"memory_limit must be a number of bytes (an int such as 8 * 2**30) or None; "
            f"got {limit!r}"
        )
    if int(limit) <= 0:  # type: ignore[call-overload]
        raise ValueError(f"memory_limit must be a positive number of bytes or None; got {limit}")
    return int(limit)  # type: ignore[call-overload]


def check_method(method: object) -> str:
    """An eigensolver method name from :data:`METHODS`."""
    if not isinstance(method, str) or method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}; got {method!r}")
    return method


def check_tol(tol: object) -> float:
    """A relative tolerance strictly between 0 and 1."""
    if (
        isinstance(tol, bool)
        or not isinstance(tol, numbers.Real)
        or not math.isfinite(float(tol))
        or not 0 < float(tol) < 1
    ):
        raise ValueError(
            f"tol must be a number between 0 and 1 (exclusive) such as 1e-9; got {tol!r}"
        )
    return float(tol)


def check_seed(seed: object) -> int:
    """A non-negative integer seed below 2**63."""
    if not _is_int(seed):
        raise TypeError(f"seed must be a non-negative integer; got {seed!r}")
    value = int(seed)  # type: ignore[call-overload]
    if value < 0 or value >= MAX_SEED:
        raise ValueError(f"seed must be a non-negative integer below 2**63; got {value}")
    return value


def check_max_iterations(value: object) -> int | None:
    """None (the solver's default) or a positive number of matrix-vector products."""
    if value is None:
        return None
    if not _is_int(value) or int(value) < 1:  # type: ignore[call-overload]
        raise ValueError(
            f"max_iterations must be a positive integer (matrix-vector products) or None; "
            f"got {value!r}"
        )
    return int(value)  # type: ignore[call-overload]


def check_levels(levels: object, dim: int) -> int:
    """How many lowest levels: an integer between 1 and the dimension ``dim``."""
    if not _is_int(levels):
        raise TypeError(f"levels must be an integer (how many lowest energies); got {levels!r}")
    value = int(levels)  # type: ignore[call-overload]
    if value < 1 or value > dim:
        raise ValueError(f"levels must be between 1 and the space's dimension {dim}; got {value}")
    return value


def check_positive_int(name: str, value: object) -> int:
    """An integer >= 1 (worker counts, chunk sizes)."""
    if not _is_int(value) or int(value) < 1:  # type: ignore[call-overload]
        raise ValueError(f"{name} must be an integer >= 1; got {value!r}")
    return int(value)  # type: ignore[call-overload]
