"""Crash safety of sweeps: a sweep process killed with SIGKILL at several points, and a
Dask worker killed mid-sweep, must still end with every point exactly once and the
same table as an uninterrupted run. References: the uninterrupted serial sweep, and
SQLite's own ``PRAGMA integrity_check``."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from fockmill.store.sweeps import ResultsStore
from fockmill.sweeps.run import run_sweep
from test_store import committed
from test_sweep import hubbard_ring

TOTAL = 90
KILL_AFTER = (5, 19, 37, 58)  # committed points at which successive runs are killed

SCRIPT = textwrap.dedent(
    """
    import sys
    sys.path.insert(0, sys.argv[2])
    from fockmill.sweeps.run import run_sweep
    from test_sweep import hubbard_ring

    model = hubbard_ring(sites=6, particles=6, cutoff=6)
    points = [{"U": 0.07 * k} for k in range(int(sys.argv[3]))]
    run_sweep(model, points, store=sys.argv[1], executor="serial", progress=False,
              method="csr")
    """
)


def points() -> list[dict[str, float]]:
    return [{"U": 0.07 * k} for k in range(TOTAL)]


@pytest.mark.slow
def test_repeated_sigkill_then_resume_loses_nothing(tmp_path: Path) -> None:
    path = tmp_path / "results.sqlite"
    tests_dir = str(Path(__file__).parent)
    faults = 0
    for threshold in KILL_AFTER:
        process = subprocess.Popen(
            [sys.executable, "-c", SCRIPT, str(path), tests_dir, str(TOTAL)],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        try:
            deadline = time.monotonic() + 180
            while committed(path) < threshold and process.poll() is None:
                assert time.monotonic() < deadline, "the sweep committed too few points"
                time.sleep(0.005)
            if process.poll() is None:
                os.kill(process.pid, signal.SIGKILL)
                faults += 1
        finally:
            if process.poll() is None:
                process.kill()
            process.wait()
        # After every kill the file is a consistent database with distinct points.
        with ResultsStore.open(path) as store:
            assert store.integrity_ok()
            indices = [row.index for row in store.rows()]
        assert len(indices) == len(set(indices))
    assert faults >= 3, "most kills must land mid-sweep for this test to mean anything"

    model = hubbard_ring(sites=6, particles=6, cutoff=6)
    options = {"method": "csr"}
    resumed = run_sweep(model, points(), store=path, executor="serial", progress=False, **options)
    uninterrupted = run_sweep(model, points(), executor="serial", progress=False, **options)
    with ResultsStore.open(path) as store:
        assert store.integrity_ok()
        indices = sorted(row.index for row in store.rows())
    assert indices == list(range(TOTAL))  # none lost, none duplicated
    for key in ("energy", "gap"):
        np.testing.assert_allclose(
            resumed.to_arrays()[key], uninterrupted.to_arrays()[key], rtol=0, atol=1e-9
        )


@pytest.mark.slow
def test_dask_worker_killed_mid_sweep_still_completes(tmp_path: Path) -> None:
    distributed = pytest.importorskip(
        "distributed", reason="dask.distributed is not installed (extra fockmill[cluster])"
    )
    model = hubbard_ring(sites=6, particles=6, cutoff=6)
    grid = points()[:40]
    options = {"method": "csr"}
    reference = run_sweep(model, grid, executor="serial", progress=False, **options)
    path = tmp_path / "dask.sqlite"
    done: list[int] = []
    result: dict[str, object] = {}
    with (
        distributed.LocalCluster(
            n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        pids = list(client.run(os.getpid).values())

        def run() -> None:
            try:
                result["table"] = run_sweep(
                    model,
                    grid,
                    store=path,
                    executor=client,
                    chunk=2,
                    progress=False,
                    **options,
                    on_point=lambda row: done.append(row.index),
                )
            except BaseException as exc:  # reported below
                result["error"] = exc

        worker = threading.Thread(target=run)
        worker.start()
        deadline = time.monotonic() + 120
        while len(done) < 4 and worker.is_alive():
            assert time.monotonic() < deadline
            time.sleep(0.01)
        killed = len(done) < len(grid)
        os.kill(pids[0], signal.SIGKILL)  # the nanny restarts it; tasks are rescheduled
        worker.join(timeout=300)
        assert not worker.is_alive(), "the sweep did not finish after the worker died"
    assert "error" not in result, result.get("error")
    assert killed, "the worker must die mid-sweep for this test to mean anything"
    table = result["table"]
    assert sorted(table.to_arrays()["index"].tolist()) == list(range(len(grid)))
    np.testing.assert_allclose(
        table.to_arrays()["energy"], reference.to_arrays()["energy"], rtol=0, atol=1e-9
    )
    with ResultsStore.open(path) as store:
        assert store.integrity_ok()
        assert sorted(row.index for row in store.rows()) == list(range(len(grid)))


# -- a killed sweep leaves no process behind ------------------------------------------------

# Invented example: a ring of 8 sites sharing 8 bosons, U swept over many points so that
# the sweep is still running when it is killed.
LONG_SWEEP_TOML = """\
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 8
total = 8

[parameters]
J = 1.0
U = 2.0

[sweep.U]
start = 0.0
stop = 10.0
num = 4000

[solver]
method = "csr"
"""


def _descendants(pid: int) -> list[int]:
    """Every live process below ``pid`` (from /proc: the ``PPid`` of each process)."""
    children: dict[int, list[int]] = {}
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            status = (entry / "status").read_text()
        except OSError:
            continue
        fields = dict(line.split(":\t", 1) for line in status.splitlines() if ":\t" in line)
        if fields.get("State", "").startswith("Z"):
            continue
        children.setdefault(int(fields.get("PPid", "0")), []).append(int(entry.name))
    found: list[int] = []
    stack = [pid]
    while stack:
        for child in children.get(stack.pop(), []):
            found.append(child)
            stack.append(child)
    return found


def _alive(pid: int) -> bool:
    """Running or sleeping (a zombie waiting to be reaped has ended)."""
    try:
        state = (Path("/proc") / str(pid) / "status").read_text()
    except OSError:
        return False
    return "\nState:\tZ" not in state


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="needs /proc (Linux)")
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM], ids=["SIGKILL", "SIGTERM"])
def test_killed_sweep_leaves_no_process_behind(tmp_path: Path, sig: signal.Signals) -> None:
    """Workers, fork server and resource tracker all end with the sweep's process.

    Standard: a process's helpers must not outlive it (common practice, no source).
    """
    model = tmp_path / "ring.toml"
    model.write_text(LONG_SWEEP_TOML)
    out = tmp_path / "ring.sqlite"
    command = ["sweep", str(model), "--out", str(out), "--workers", "2", "--no-progress"]
    process = subprocess.Popen(
        [sys.executable, "-m", "fockmill", *command],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    helpers: list[int] = []
    try:
        deadline = time.monotonic() + 120
        # Wait until both workers have finished a point: the pool is fully up.
        while committed(out) < 4:
            assert process.poll() is None, "the sweep ended before it could be killed"
            assert time.monotonic() < deadline, "the sweep committed too few points"
            time.sleep(0.02)
        helpers = _descendants(process.pid)
        assert len(helpers) >= 2, helpers  # at least the two workers
        os.kill(process.pid, sig)
        process.wait(timeout=30)
        deadline = time.monotonic() + 20
        while any(_alive(pid) for pid in helpers) and time.monotonic() < deadline:
            time.sleep(0.05)
        survivors = [pid for pid in helpers if _alive(pid)]
        assert not survivors, f"processes outlived the killed sweep: {survivors}"
    finally:
        if process.poll() is None:
            process.kill()
            process.wait()
        for pid in helpers:
            if _alive(pid):
                os.kill(pid, signal.SIGKILL)
