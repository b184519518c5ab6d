"""Checks of small arguments shared by the public functions."""

from __future__ import annotations

import numbers

__all__ = ["MAX_THREADS", "check_memory_limit", "check_threads"]

#: Largest thread count accepted (the Rust core refuses more).
MAX_THREADS = 1024


def check_threads(threads: object) -> int | None:
    """A thread count: None or 0 (all cores, or ``RAYON_NUM_THREADS``) or a positive int."""
    if threads is None:
        return None
    if isinstance(threads, bool) or not isinstance(threads, numbers.Integral):
        raise TypeError(
            f"threads must be a positive integer, 0 or None (all cores); got {threads!r}"
        )
    value = int(threads)
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
    if isinstance(limit, bool) or not isinstance(limit, numbers.Integral):
        raise TypeError(
            f"memory_limit must be a number of bytes (an int such as 8 * 2**30) or None; "
            f"got {limit!r}"
        )
    if int(limit) <= 0:
        raise ValueError(f"memory_limit must be a positive number of bytes or None; got {limit}")
    return int(limit)
