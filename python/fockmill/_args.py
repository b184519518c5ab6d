"""Checks of small arguments shared by the public functions."""

from __future__ import annotations

import numbers

__all__ = ["MAX_THREADS", "check_threads"]

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
