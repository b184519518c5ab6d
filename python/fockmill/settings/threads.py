"""How many threads BLAS may use inside a dense solve.

numpy and scipy call a BLAS library that starts its own threads, one per core, beside
the library's own threads and the user's processes. For the small matrices the dense
path sees, those threads cost more in start-up and contention than they save (measured
on a busy 2-core machine: one dense sector solve took 0.58 s with one BLAS thread and
2.3–37 s without a limit), so a dense solve runs with at most the library's
``threads=`` BLAS threads, and one thread below :data:`SMALL_DENSE_DIM`. Krylov loops
(evolution, spectra, FTLM) make many small, memory-bound vector operations and always
run with one BLAS thread; their matrix products run on the library's own threads.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator

__all__ = ["SMALL_DENSE_DIM", "blas_threads"]

#: Dense matrices up to this dimension are diagonalised with one BLAS thread.
SMALL_DENSE_DIM = 1000


def _cores() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # not every platform has affinity masks
        return os.cpu_count() or 1


@contextlib.contextmanager
def blas_threads(threads: int | None, dim: int | None = None) -> Iterator[None]:
    """Limit BLAS to ``threads`` (None: the cores this process may use; one thread for
    matrices of dimension below :data:`SMALL_DENSE_DIM`) for the duration of the block.

    Needs ``threadpoolctl`` (the ``fast`` extra); without it the block runs unlimited.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # optional: import fockmill needs only numpy and scipy
        yield
        return
    limit = threads if threads is not None else _cores()
    if dim is not None and dim < SMALL_DENSE_DIM:
        limit = 1
    with threadpool_limits(limits=max(1, int(limit)), user_api="blas"):
        yield
