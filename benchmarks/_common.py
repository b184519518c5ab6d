"""Shared pieces of the benchmark scripts: the Bose–Hubbard ring and timing helpers."""

from __future__ import annotations

import statistics
import time
from collections.abc import Callable
from typing import Any

import fockmill as fm


def bose_hubbard_ring(sites: int, hopping: float = 1.0, interaction: float = 1.0) -> fm.LadderExpr:
    """H = −J Σ (a_i† a_{i+1} + h.c.) + U/2 Σ n_i (n_i − 1) on a ring."""
    h = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        h = h - hopping * (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 0.5 * interaction * fm.number(i) * (fm.number(i) - 1)
    return h


def unit_filling(sites: int) -> fm.FockSpace:
    """The sector with one quantum per site on average (cutoff = number of quanta)."""
    return fm.FockSpace(modes=sites, cutoff=sites, total=sites)


def median_time(run: Callable[[], Any], repeats: int) -> tuple[float, Any]:
    """Median wall time of ``repeats`` calls and the last result."""
    times = []
    result = None
    for _ in range(repeats):
        t0 = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - t0)
        del_result = result
        del del_result
    return statistics.median(times), result


def table(headers: list[str], rows: list[list[str]]) -> str:
    """A plain-text table with right-aligned columns."""
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(headers)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(headers, widths, strict=True))]
    lines.append("  ".join("-" * w for w in widths))
    lines += ["  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) for r in rows]
    return "\n".join(lines)


def timed(run: Callable[[], Any], repeats: int) -> tuple[float, float, Any]:
    """Median wall time, median CPU time of the process (all threads) and the last
    result of ``repeats`` calls. On a shared machine the CPU time shows the work done,
    the wall time what the load left of the cores."""
    walls, cpus = [], []
    result = None
    for _ in range(repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        result = run()
        walls.append(time.perf_counter() - w0)
        cpus.append(time.process_time() - c0)
    return statistics.median(walls), statistics.median(cpus), result


def load() -> str:
    """The 1, 5 and 15 minute load averages."""
    import os

    return " ".join(f"{x:.2f}" for x in os.getloadavg())
