"""Checks of small arguments shared by the public functions."""

from __future__ import annotations

import numbers

__all__ = ["check_threads"]


def check_threads(threads: object) -> int | None:
    """A thread count: None or 0 (all cores, or ``RAYON_NUM_THREADS``) or a positive int."""
    if threads is None:
        return None
    if isinstance(threads, bool) or not isinstance(threads, numbers.Integral):
        raise TypeError(
            f"threads must be a positive integer, 0 or None (all cores); got {threads!r}"
        )
    value = int(threads)
    if value < 0:
        raise ValueError(f"threads must be a positive integer, 0 or None (all cores); got {value}")
    return value
