"""Shared pieces of the benchmark scripts: the Bose–Hubbard ring and timing helpers."""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
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


def fresh_process(code: str, label: str) -> dict[str, Any]:
    """Run ``code`` in a fresh interpreter, echoing its lines prefixed with ``[label]``.

    Returns the JSON object of its last line, with ``peak_gib`` (its peak resident
    memory, from wait4), ``wall`` (seconds) and ``load`` (the 1-minute load average
    before and after). A child that fails ends the script (SystemExit).
    """
    load0 = os.getloadavg()
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    lines = []
    assert proc.stdout is not None
    for line in proc.stdout:
        lines.append(line)
        print(f"  [{label}] {line.strip()}", flush=True)
    _, status, usage = os.wait4(proc.pid, 0)
    if status != 0:
        raise SystemExit(f"the {label} run failed with status {status}")
    result: dict[str, Any] = json.loads(lines[-1])
    result["peak_gib"] = usage.ru_maxrss / 2**20  # KiB on Linux
    result["wall"] = time.perf_counter() - t0
    result["load"] = f"{load0[0]:.2f}-{os.getloadavg()[0]:.2f}"
    return result


def load() -> str:
    """The 1, 5 and 15 minute load averages."""
    return " ".join(f"{x:.2f}" for x in os.getloadavg())
