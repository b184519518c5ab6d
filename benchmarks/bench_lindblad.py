"""Open systems: stationary states and quantum-jump trajectories of lossy Bose–Hubbard
chains (invented parameters: J = 1, U = 2, μ = 0.5, drive F = 0.3 on every site,
loss κ = 1 on every site; pumping 0.2 on site 0 for the number-conserving chain).

Every case runs in a fresh process (``python bench_lindblad.py CASE ARGS``) and prints
one table row with the load average (``uptime``) measured right before it.

    python benchmarks/bench_lindblad.py                   # both tables (minutes)
    python benchmarks/bench_lindblad.py --trajectories    # the trajectory table only
    python benchmarks/bench_lindblad.py --driven
        # the driven 4x3, 5x3, 6x3 stationary states (one block of D x D) and one
        # Liouvillian application, earlier Python path against the native product
    python benchmarks/bench_lindblad.py --pumped
        # the lossy, pumped chain (number-sector blocks) of 6, 7 and 8 sites of cutoff 3
        # with an 8 GiB memory limit: the largest that fits
    python benchmarks/bench_lindblad.py --workers SITES CUTOFF COUNT
        # COUNT trajectories serially, on a process pool and on a local Dask cluster of
        # 1 and 2 single-threaded worker processes (needs fockmill[cluster])
    python benchmarks/bench_lindblad.py --dask-memory SITES CUTOFF COUNT
        # COUNT trajectories on 2 Dask workers with Dask's default worker environment
        # and without its MALLOC_TRIM_THRESHOLD_ (glibc's own memory thresholds)
"""

from __future__ import annotations

import os
import subprocess
import sys
import time

import fockmill as fm
import numpy as np
from fockmill.exceptions import SizeLimitError

sys.path.insert(0, os.path.dirname(__file__))
from _common import table

J, U, MU, F, KAPPA, PUMP = 1.0, 2.0, 0.5, 0.3, 1.0, 0.2
#: Seconds a case may take before it is stopped (the row says so).
TIMEOUT = 900


def chain(sites: int, drive: float) -> fm.LadderExpr:
    h = fm.LadderExpr()
    for i in range(sites - 1):
        h -= J * (fm.raising(i) * fm.lowering(i + 1) + fm.raising(i + 1) * fm.lowering(i))
    for i in range(sites):
        h += 0.5 * U * fm.raising(i) * fm.raising(i) * fm.lowering(i) * fm.lowering(i)
        h -= MU * fm.number(i)
        if drive:
            h += drive * (fm.lowering(i) + fm.raising(i))
    return h


def load() -> str:
    return os.getloadavg().__repr__()


def stationary(
    kind: str, sites: int, cutoff: int, method: str, preconditioner: str = "auto"
) -> list[str]:
    space = fm.FockSpace(modes=sites, cutoff=cutoff)
    if kind == "driven":
        h = chain(sites, F)
        jumps = [fm.loss(i, KAPPA) for i in range(sites)]
    else:
        h = chain(sites, 0.0)
        jumps = [fm.loss(i, KAPPA) for i in range(sites)] + [fm.pump(0, PUMP)]
    before = load()
    t0 = time.perf_counter()
    ss = fm.stationary_state(
        h,
        space,
        jumps,
        method=method,
        tol=1e-8,
        max_iterations=4000,
        preconditioner=preconditioner,
    )
    seconds = time.perf_counter() - t0
    n = sum(b.shape[0] ** 2 for b in ss.blocks)
    return [
        kind,
        f"{sites}x{cutoff}",
        f"{space.dim:,}",
        f"{n:,}",
        f"{space.dim**2:,}",
        ss.method,
        str(ss.iterations),
        f"{seconds:.2f}",
        f"{ss.residual:.1e}",
        f"{float(np.mean(ss.populations)):.4f}",
        before,
    ]


def apply_once(sites: int, cutoff: int) -> list[str]:
    """One Liouvillian application on the whole space (driven chain) as the stationary
    solve makes it, real form in and out: the compiled block products with transposed
    copies in Python (``apply_blockwise``, the earlier path) against the native product
    (``apply_real``); medians of 3, and the largest difference of the two results."""
    from fockmill.lindblad.liouvillian import build_liouvillian

    space = fm.FockSpace(modes=sites, cutoff=cutoff)
    liou = build_liouvillian(chain(sites, F), space, [fm.loss(i, KAPPA) for i in range(sites)])
    rng = np.random.default_rng(1)
    x = rng.random(liou.size)

    def old(v: np.ndarray) -> np.ndarray:
        return liou.to_real(liou.apply_blockwise(liou.from_real(v)))

    old(x)  # builds the stored block matrices once
    liou.apply_real(x)  # builds the native product once
    before = load()
    times: dict[str, list[float]] = {"old": [], "new": []}
    results = {}
    for _ in range(3):
        for name, f in (("old", old), ("new", liou.apply_real)):
            t0 = time.perf_counter()
            results[name] = f(x)
            times[name].append(time.perf_counter() - t0)
    t_old = float(np.median(times["old"]))
    t_new = float(np.median(times["new"]))
    diff = float(np.max(np.abs(results["old"] - results["new"])))
    return [
        f"{sites}x{cutoff}",
        f"{space.dim:,}",
        f"{liou.size:,}",
        f"{t_old:.3f}",
        f"{t_new:.3f}",
        f"{t_old / t_new:.1f}",
        f"{diff:.1e}",
        before,
    ]


APPLY_HEADERS = [
    "sites x cutoff",
    "states",
    "unknowns",
    "blockwise Python s",
    "native s",
    "ratio",
    "max |difference|",
    "load before",
]

STATIONARY_HEADERS = [
    "chain",
    "sites x cutoff",
    "states",
    "unknowns Σd²",
    "(Σd)²",
    "method",
    "iterations",
    "seconds",
    "‖𝓛ρ‖",
    "mean n",
    "load before",
]


def driven_table() -> None:
    """The driven chains' stationary states (one block of D × D) and one Liouvillian
    application, old against new, each in a fresh process."""
    print(f"fockmill {fm.__version__}, {os.cpu_count()} cores, load at start {os.getloadavg()}")
    cases = [
        ["stationary", "driven", "4", "3", "iterative", "sylvester"],
        ["stationary", "driven", "4", "3", "iterative", "sectors"],
        ["stationary", "driven", "5", "3", "iterative", "sectors"],
        ["stationary", "driven", "6", "3", "iterative", "sectors"],
    ]
    print_table(STATIONARY_HEADERS, [run(c, 11) for c in cases])
    print()
    rows = [run(["apply", str(n), "3"], 8) for n in (4, 5, 6)]
    print_table(APPLY_HEADERS, rows)


def pumped_in_budget(sites: int, cutoff: int, restart: int) -> list[str]:
    """The lossy, pumped chain (number-sector blocks) with ``memory_limit`` = 8 GiB: the
    solve plans its vectors against it (refused up front when they do not fit); the peak
    resident memory of the whole process is reported beside it."""
    import resource

    space = fm.FockSpace(modes=sites, cutoff=cutoff)
    h = chain(sites, 0.0)
    jumps = [fm.loss(i, KAPPA) for i in range(sites)] + [fm.pump(0, PUMP)]
    before = load()
    t0 = time.perf_counter()
    try:
        ss = fm.stationary_state(
            h, space, jumps, tol=1e-8, restart=restart, memory_limit=BUDGET_BYTES
        )
    except SizeLimitError as exc:
        return [
            f"{sites}x{cutoff}",
            f"{space.dim:,}",
            "-",
            "-",
            "-",
            "-",
            "-",
            f"refused: {exc}",
            before,
        ]
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    n = sum(b.shape[0] ** 2 for b in ss.blocks)
    return [
        f"{sites}x{cutoff}",
        f"{space.dim:,}",
        f"{n:,}",
        ss.method,
        str(ss.iterations),
        f"{seconds:.1f}",
        f"{peak / 2**30:.2f}",
        f"{ss.residual:.1e}",
        before,
    ]


BUDGET_BYTES = 8 * 2**30
PUMPED_HEADERS = [
    "sites x cutoff",
    "states",
    "unknowns Σd²",
    "method",
    "iterations",
    "seconds",
    "peak GiB",
    "‖𝓛ρ‖",
    "load before",
]


def pumped_table() -> None:
    """The largest lossy, pumped chain whose stationary state fits in 8 GiB."""
    print(f"fockmill {fm.__version__}, {os.cpu_count()} cores, load at start {os.getloadavg()}")
    cases = [["pumped8", "6", "3", "40"], ["pumped8", "7", "3", "12"], ["pumped8", "8", "3", "4"]]
    print_table(PUMPED_HEADERS, [run(c, 9) for c in cases])


def trajectories(sites: int, cutoff: int, count: int, workers: int | str) -> list[str]:
    """``workers``: 0 serial, N a process pool of N, ``"daskN"`` a local Dask cluster of N
    single-threaded worker processes (started before the clock starts)."""
    import concurrent.futures as cf

    space = fm.FockSpace(modes=sites, cutoff=cutoff)
    h = chain(sites, F)
    jumps = [fm.loss(i, KAPPA) for i in range(sites)]
    psi0 = np.zeros(space.dim)
    psi0[0] = 1.0
    times = np.linspace(0.0, 4.0, 9)
    obs = {"n0": fm.number(0)}
    before = load()
    t0 = time.perf_counter()
    if workers == 0:
        tr = fm.sample_trajectories(
            h, space, psi0, times, jumps, observables=obs, count=count, seed=1
        )
    elif isinstance(workers, str):
        import dask
        from distributed import Client, LocalCluster

        name, _, option = workers.partition("-")
        size = int(name.removeprefix("dask"))
        environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ"))
        if option == "keep":
            # Dask's nanny sets MALLOC_TRIM_THRESHOLD_ (64 KiB) in its workers: glibc then
            # returns every freed vector to the system and each new one is faulted in
            # afresh. "-keep" starts the workers without it (glibc's own thresholds).
            environ.pop("MALLOC_TRIM_THRESHOLD_", None)
        with (
            dask.config.set({"distributed.nanny.pre-spawn-environ": environ}),
            LocalCluster(
                n_workers=size, threads_per_worker=1, processes=True, dashboard_address=None
            ) as cluster,
            Client(cluster) as client,
        ):
            before = load()
            t0 = time.perf_counter()
            tr = fm.sample_trajectories(
                h,
                space,
                psi0,
                times,
                jumps,
                observables=obs,
                count=count,
                seed=1,
                executor=client,
            )
            seconds = time.perf_counter() - t0
    else:
        with cf.ProcessPoolExecutor(workers) as pool:
            tr = fm.sample_trajectories(
                h, space, psi0, times, jumps, observables=obs, count=count, seed=1, executor=pool
            )
    if not isinstance(workers, str):
        seconds = time.perf_counter() - t0
    return [
        f"{sites}x{cutoff}",
        f"{space.dim:,}",
        str(count),
        str(workers or "serial"),
        f"{seconds:.1f}",
        f"{seconds / count:.2f}",
        f"{tr.mean['n0'][-1]:.4f} ± {tr.stderr['n0'][-1]:.4f}",
        before,
    ]


TRAJECTORY_HEADERS = [
    "sites x cutoff",
    "states",
    "trajectories",
    "workers",
    "seconds",
    "s / trajectory",
    "⟨n0⟩(t=4)",
    "load before",
]


def dask_memory_table(sites: int, cutoff: int, count: int) -> None:
    """The same trajectories on a local Dask cluster of 2 workers with Dask's default
    worker environment and without its memory-trimming setting, one after the other."""
    print(f"fockmill {fm.__version__}, {os.cpu_count()} cores, load at start {os.getloadavg()}")
    rows = [
        run(["traj", str(sites), str(cutoff), str(count), w], 8) for w in ["dask2", "dask2-keep"]
    ]
    print_table(TRAJECTORY_HEADERS, rows)


def workers_table(sites: int, cutoff: int, count: int) -> None:
    """The same trajectories serially, on a process pool and on a local Dask cluster
    (1 and 2 workers each), every run in a fresh process; the samples are identical
    (seeded per trajectory), so ⟨n0⟩ agrees to the last digit."""
    print(f"fockmill {fm.__version__}, {os.cpu_count()} cores, load at start {os.getloadavg()}")
    setups = ["0", "1", "2", "dask1", "dask2"]
    rows = [run(["traj", str(sites), str(cutoff), str(count), w], 8) for w in setups]
    serial = float(rows[0][4]) if rows[0][4].replace(".", "", 1).isdigit() else float("nan")
    for row in rows:
        try:
            row.append(f"{serial / float(row[4]):.2f}")
        except ValueError:
            row.append("-")
    print(table([*TRAJECTORY_HEADERS, "speed-up vs serial"], rows))


def print_table(headers: list[str], rows: list[list[str]]) -> None:
    print(table(headers, rows), flush=True)


def run(args: list[str], width: int) -> list[str]:
    """One case in a fresh process; its row padded to ``width`` columns."""
    row = _run(args)
    return (row + ["-"] * width)[:width] if len(row) < width else row


def _run(args: list[str]) -> list[str]:
    out = subprocess.run(
        [sys.executable, __file__, *args], capture_output=True, text=True, check=False
    )
    if out.returncode != 0:
        return [*args, "FAILED: " + out.stderr.strip().splitlines()[-1]]
    return out.stdout.strip().splitlines()[-1].split("|")


def main() -> None:
    only_trajectories = sys.argv[1:] == ["--trajectories"]
    if sys.argv[1:] == ["--driven"]:
        driven_table()
        return
    if sys.argv[1:] == ["--pumped"]:
        pumped_table()
        return
    if len(sys.argv) > 1 and not only_trajectories:
        case, *rest = sys.argv[1:]
        if case == "stationary":
            row = stationary(rest[0], int(rest[1]), int(rest[2]), *rest[3:])
        elif case == "pumped8":
            row = pumped_in_budget(int(rest[0]), int(rest[1]), int(rest[2]))
        elif case == "apply":
            row = apply_once(int(rest[0]), int(rest[1]))
        elif case == "--workers":
            workers_table(int(rest[0]), int(rest[1]), int(rest[2]))
            return
        elif case == "--dask-memory":
            dask_memory_table(int(rest[0]), int(rest[1]), int(rest[2]))
            return
        else:
            who = rest[3] if rest[3].startswith("dask") else int(rest[3])
            row = trajectories(int(rest[0]), int(rest[1]), int(rest[2]), who)
        print("|".join(row))
        return
    print(f"fockmill {fm.__version__}, {os.cpu_count()} cores, load at start {os.getloadavg()}")
    cases = [
        ["stationary", "driven", "3", "2", "dense"],
        ["stationary", "driven", "3", "3", "iterative"],
        ["stationary", "driven", "4", "2", "iterative"],
        ["stationary", "driven", "4", "3", "iterative"],
        ["stationary", "driven", "5", "2", "iterative"],
        ["stationary", "driven", "4", "3", "iterative", "diagonal"],
        ["stationary", "driven", "5", "3", "iterative"],
        ["stationary", "driven", "6", "3", "iterative"],
        ["stationary", "pumped", "4", "3", "auto"],
        ["stationary", "pumped", "5", "3", "auto"],
        ["stationary", "pumped", "6", "2", "auto"],
        ["stationary", "pumped", "6", "3", "auto"],
    ]
    rows = [] if only_trajectories else [run(c, 11) for c in cases]
    if rows:
        print_table(STATIONARY_HEADERS, rows)
        print()
        print_table(APPLY_HEADERS, [run(["apply", str(n), "3"], 8) for n in (5, 6)])
    traj = [
        ["traj", "6", "2", "40", "0"],
        ["traj", "6", "2", "40", "2"],
        ["traj", "8", "2", "8", "0"],
        ["traj", "8", "2", "8", "2"],
        ["traj", "10", "2", "8", "0"],
        ["traj", "10", "2", "8", "2"],
    ]
    rows = [run(c, 8) for c in traj]
    print()
    print(
        table(
            [
                "sites x cutoff",
                "states",
                "trajectories",
                "workers",
                "seconds",
                "s / trajectory",
                "⟨n0⟩(t=4)",
                "load before",
            ],
            rows,
        )
    )


if __name__ == "__main__":
    main()
