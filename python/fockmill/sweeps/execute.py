"""Where sweep points run: in-process, a local process pool, any Executor, or Dask.

Work goes out in chunks of consecutive points of the serpentine path; workers return
finished rows and only the calling process writes the results store.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import dataclasses
import math
import multiprocessing
import os
import threading
from collections.abc import Callable
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from typing import Any

from fockmill.exceptions import PoolStartError
from fockmill.settings.checks import check_positive_int
from fockmill.store.sweeps import PointResult
from fockmill.sweeps.plan import SweepSettings
from fockmill.sweeps.records import SHARED_PATTERN_MIN_POINTS, ModelRecipe
from fockmill.sweeps.sectors import prepare, solve_points, worker_prepared

__all__ = ["execute"]

_MAIN_GUARD = 'if __name__ == "__main__":'


@dataclass(frozen=True)
class _Chunk:
    """Consecutive points of the serpentine path, solved in one task."""

    recipe: ModelRecipe
    settings: SweepSettings
    points: tuple[tuple[int, dict[str, float]], ...] = field(default=())
    per_worker: int = 1  # about how many points each worker solves in this sweep


def _solve_chunk(chunk: _Chunk) -> list[PointResult]:
    """Pool task: solve a chunk's points in order, each warm-started from the last."""
    settings = chunk.settings
    if settings.threads is None:  # one native thread per worker process by default
        settings = dataclasses.replace(settings, threads=1)
    with _limit_blas_threads(settings.threads):
        many = chunk.per_worker >= SHARED_PATTERN_MIN_POINTS
        prepared = worker_prepared(chunk.recipe, settings, many)
        return list(solve_points(prepared, chunk.points, settings))


def _limit_blas_threads(threads: int | None) -> contextlib.AbstractContextManager[object]:
    """Cap BLAS threads inside a worker when threadpoolctl is installed.

    Several workers each running a multi-threaded BLAS oversubscribe the cores, and
    OpenBLAS then slows small dense solves down by orders of magnitude. Without
    threadpoolctl, set ``OPENBLAS_NUM_THREADS=1`` (or ``OMP_NUM_THREADS=1``) in the
    environment the workers start from.
    """
    if threads is None:
        return contextlib.nullcontext()
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return contextlib.nullcontext()
    return threadpool_limits(limits=threads, user_api="blas")  # type: ignore[no-any-return]


def _watch_parent(lifeline: Any) -> None:
    """Pool initializer: end this worker as soon as the sweep's process is gone.

    ``lifeline`` is the reading end of a pipe whose only writing end the sweep's process
    holds. The kernel closes that end when the process dies for any reason (SIGKILL
    included), and the read then ends with EOF; a daemon thread waiting on it ends the
    worker at once. This works for every start method the pool uses: under the fork
    server a worker's parent is the server, not the sweep, so ``os.getppid()`` or a
    parent-death signal would watch the wrong process. Once the workers are gone the fork
    server (whose liveness pipe they held) and the resource tracker (whose pipe they held)
    see EOF too and exit.
    """

    def wait() -> None:
        try:
            while True:
                lifeline.recv_bytes()
        except (EOFError, OSError):
            pass
        os._exit(70)  # EX_SOFTWARE: no cleanup, the sweep that wanted the rows is gone

    threading.Thread(target=wait, name="fockmill-lifeline", daemon=True).start()


class _Lifeline:
    """The sweep's end of the workers' lifeline pipe (see :func:`_watch_parent`)."""

    def __init__(self, context: Any) -> None:
        self.reader, self.writer = context.Pipe(duplex=False)

    def close(self) -> None:
        """Close both ends here (the workers keep their copies of the reading end)."""
        self.reader.close()
        self.writer.close()


def _guard_message(detail: str) -> str:
    return (
        f"the sweep's worker processes could not start ({detail}). A script that calls "
        f"run_sweep at top level must put the call under {_MAIN_GUARD} (each worker "
        "process re-runs the main script); or pass workers=1 to run in this process"
    )


def _refuse_nested_start() -> None:
    """Stop a worker that is re-running the main script from starting a pool of its own."""
    if getattr(multiprocessing.current_process(), "_inheriting", False):
        raise PoolStartError(_guard_message("a worker was importing the main script"))


def _resolve_executor(
    executor: cf.Executor | str | Any | None,
    workers: int | None,
    points: int,
    lifelines: list[_Lifeline] | None = None,
) -> tuple[cf.Executor | None, bool, int]:
    """(executor or None for in-process, whether we own it, parallel slots).

    A process pool created here gets a lifeline (appended to ``lifelines``; close it
    after the pool is shut down) so that its workers die with this process.
    """
    if workers is not None:
        workers = check_positive_int("workers", workers)
    if isinstance(executor, str):
        if executor != "serial":
            raise ValueError(
                f"executor must be an Executor, a Dask Client, 'serial' or None; got {executor!r}"
            )
        return None, False, 1
    if executor is None:
        # No more processes than points: a single point never starts a pool.
        slots = workers if workers is not None else min(points, os.cpu_count() or 1)
        if slots == 1:
            return None, False, 1
        _refuse_nested_start()
        # forkserver: the parent may hold native threads, which fork() must not copy.
        method = (
            "forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else "spawn"
        )
        context = multiprocessing.get_context(method)
        lifeline = _Lifeline(context)
        if lifelines is not None:
            lifelines.append(lifeline)
        pool = cf.ProcessPoolExecutor(
            max_workers=slots,
            mp_context=context,
            initializer=_watch_parent,
            initargs=(lifeline.reader,),
        )
        return pool, True, slots
    if isinstance(executor, cf.Executor):
        return executor, False, workers if workers is not None else (os.cpu_count() or 1)
    get_executor = getattr(executor, "get_executor", None)
    if callable(get_executor):  # a dask.distributed Client
        if workers is not None:
            return get_executor(pure=False), True, workers
        try:
            slots = int(sum(executor.nthreads().values())) or 1
        except Exception:  # an unusual Client-like object: assume one slot per core
            slots = os.cpu_count() or 1
        return get_executor(pure=False), True, slots
    raise TypeError(
        "executor must be a concurrent.futures.Executor, a dask.distributed Client, 'serial' "
        f"or None; got {type(executor).__name__}"
    )


def _default_chunk(points: int, slots: int) -> int:
    """About four tasks per slot (load balance), at most 64 points each.

    The cap keeps progress updates regular and bounds the work redone after a crash;
    each chunk starts one cold solve, a small cost at 64 points.
    """
    return max(1, min(64, math.ceil(points / (4 * slots))))


def execute(
    recipe: ModelRecipe,
    full: list[dict[str, float]],
    order: list[int],
    settings: SweepSettings,
    executor: cf.Executor | str | Any | None,
    workers: int | None,
    chunk: int | None,
    finish: Callable[[PointResult], None],
) -> None:
    """Solve the points ``order`` (already in path order), handing each row to ``finish``."""
    if chunk is not None:
        chunk = check_positive_int("chunk", chunk)
    lifelines: list[_Lifeline] = []
    try:
        pool, owned, slots = _resolve_executor(executor, workers, len(order), lifelines)
        if pool is None:
            prepared = prepare(recipe, settings, points=len(order), first=full[order[0]])
            for row in solve_points(prepared, ((i, full[i]) for i in order), settings):
                finish(row)
            return
        size = chunk if chunk is not None else _default_chunk(len(order), slots)
        futures: list[cf.Future[list[PointResult]]] = []
        failed = True
        finished = 0
        try:
            for start in range(0, len(order), size):
                part = order[start : start + size]
                per_worker = math.ceil(len(order) / slots)
                task = _Chunk(recipe, settings, tuple((i, full[i]) for i in part), per_worker)
                futures.append(pool.submit(_solve_chunk, task))
            for future in cf.as_completed(futures):
                for row in future.result():
                    finish(row)
                    finished += 1
            failed = False
        except BrokenProcessPool as exc:
            if finished == 0:
                raise PoolStartError(_guard_message(str(exc))) from exc
            raise PoolStartError(
                f"a worker process of the sweep stopped abruptly after {finished} points ({exc}); "
                "it may have run out of memory. Finished points are kept: run the sweep again "
                "to resume, with fewer workers"
            ) from exc
        finally:
            if failed:
                for future in futures:
                    future.cancel()
            if owned:
                _close_pool(pool, cancel=failed)
    finally:
        for lifeline in lifelines:
            lifeline.close()


def _close_pool(pool: cf.Executor, *, cancel: bool) -> None:
    """Shut down an executor we created; on failure or Ctrl-C, stop its work now.

    Queued chunks are cancelled, and our own worker processes are terminated rather
    than left to finish the chunk in hand (their finished rows are already stored).
    """
    if not isinstance(pool, cf.ProcessPoolExecutor):
        pool.shutdown(wait=not cancel)  # dask's ClientExecutor: wait=False cancels
        return
    if not cancel:
        pool.shutdown(wait=True)
        return
    terminate = getattr(pool, "terminate_workers", None)  # Python >= 3.14
    if callable(terminate):
        terminate()
        return
    # Older Pythons have no public way; the pool's process table is read before
    # shutdown clears it.
    processes = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for process in processes:
        process.terminate()
    for process in processes:
        process.join()
