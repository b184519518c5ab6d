"""Benchmark: the cost of progress reports and checkpoints on the matrix-free Lanczos
ground state of the Bose–Hubbard ring at unit filling (the run of bench_ground.py
``--variants free``).

Variants, each in a fresh subprocess (so that peak memory is its own):

- ``plain``: no reports, no checkpoint;
- ``progress``: a progress callable receiving a record after every Lanczos step (the
  most frequent reporting there is; a bar reports at most every 0.2 s);
- ``checkpoint``: ``checkpoint=`` with ``checkpoint_every`` seconds (default 60): a
  snapshot of three Lanczos vectors every minute and the final result.

The table gives the solve's wall time, its ratio to ``plain`` (one run each, in order:
the load changes between runs, so the time spent inside the reports and writes is
also measured directly in the child and printed as its own share), the snapshots
written, their total seconds and the file size. Targets (issue 21): reporting < 1 % at
L = 14; checkpoint overhead measured at L = 15.

Usage: python benchmarks/bench_checkpoint.py [--sites 15] [--every 60]
       [--variants plain progress checkpoint] [--repeats 1]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(__file__))
from _common import load, table

CHILD = """
import json, sys, time
sys.path.insert(0, {here!r})
from _common import bose_hubbard_ring, unit_filling
import fockmill as fm
from fockmill.store import checkpoint as ck

sites, variant, every, path = {sites}, {variant!r}, {every}, {path!r}
h = bose_hubbard_ring(sites, 1.0, 1.0)
space = unit_filling(sites)
inside = {{"reports": 0, "report_s": 0.0, "writes": 0, "write_s": 0.0}}

# The Python side of each report (the record and the callable), timed around it.
from fockmill.settings import progress as pg
update = pg.Progress.update
def timed_update(self, **kw):
    t0 = time.perf_counter()
    update(self, **kw)
    inside["reports"] += 1
    inside["report_s"] += time.perf_counter() - t0
pg.Progress.update = timed_update

wrote = ck.Checkpoint._wrote
def counted(self, t0):
    inside["writes"] += 1
    inside["write_s"] += time.perf_counter() - t0
    wrote(self, t0)
ck.Checkpoint._wrote = counted

options = dict(method="lanczos", store_matrix=False, tol=1e-8, cutoff_warning=None,
               progress=False)
if variant == "progress":
    options["progress"] = lambda record: None
elif variant == "checkpoint":
    options.update(checkpoint=path, checkpoint_every=every)
t0 = time.perf_counter()
g = fm.ground_state(h, space, **options)
seconds = time.perf_counter() - t0
size = 0
try:
    import os
    size = os.path.getsize(path)
except OSError:
    pass
print(json.dumps(dict(dim=space.dim, energy=g.energy, products=g.products, seconds=seconds,
                      size=size, **inside)))
"""


def run(sites: int, variant: str, every: float) -> dict[str, float]:
    """Solve in a child process; its peak resident memory comes from wait4."""
    with tempfile.TemporaryDirectory(dir=os.environ.get("FOCKMILL_BENCH_TMP")) as tmp:
        path = os.path.join(tmp, "ground.npz")
        code = CHILD.format(
            here=os.path.dirname(os.path.abspath(__file__)),
            sites=sites,
            variant=variant,
            every=every,
            path=path,
        )
        child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
        out = child.stdout.read() if child.stdout else ""
        _, status, usage = os.wait4(child.pid, 0)
    if status != 0:
        raise RuntimeError(f"child failed with status {status}")
    result = json.loads(out.strip().splitlines()[-1])
    result["peak_gib"] = usage.ru_maxrss / 2**20
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sites", type=int, default=15)
    parser.add_argument("--every", type=float, default=60.0, help="checkpoint_every (s)")
    parser.add_argument(
        "--variants",
        nargs="+",
        default=["plain", "progress", "checkpoint"],
        choices=["plain", "progress", "checkpoint"],
    )
    parser.add_argument("--repeats", type=int, default=1, help="runs of each variant")
    args = parser.parse_args()
    print(f"# load before: {load()}", flush=True)
    rows = []
    plain: list[float] = []
    for repeat in range(args.repeats):
        for variant in args.variants:
            started = time.strftime("%H:%M:%S")
            r = run(args.sites, variant, args.every)
            if variant == "plain":
                plain.append(r["seconds"])
            base = plain[-1] if plain else float("nan")
            own = r["report_s"] + r["write_s"]
            rows.append(
                [
                    str(args.sites),
                    variant,
                    str(repeat + 1),
                    started,
                    f"{int(r['dim']):,}",
                    f"{r['energy']:.10f}",
                    str(int(r["products"])),
                    f"{r['seconds']:.1f}",
                    f"{r['seconds'] / base:.3f}",
                    str(int(r["reports"])),
                    str(int(r["writes"])),
                    f"{r['write_s']:.1f}",
                    f"{100 * own / r['seconds']:.2f}",
                    f"{r['size'] / 2**30:.2f}",
                    f"{r['peak_gib']:.2f}",
                    load(),
                ]
            )
            print(table(HEADERS, rows[-1:]).splitlines()[-1], flush=True)
    print()
    print(table(HEADERS, rows))
    print(f"\n# load after: {load()}")
    print(
        f"# matrix-free Lanczos (store_matrix=False), J=1, U=1, tol=1e-8; checkpoint_every="
        f"{args.every:g} s; 'ratio' = solve s / the last plain run's; 'own %' = seconds spent "
        "inside the progress callable or writing snapshots and the final result, as a share "
        "of the solve; 'file GiB' = the finished checkpoint (result vector); peak = maximum "
        "resident memory (wait4); load = 1/5/15-minute load averages after the run."
    )


HEADERS = [
    "L=N",
    "variant",
    "run",
    "start",
    "states",
    "E0",
    "products",
    "solve s",
    "ratio",
    "reports",
    "writes",
    "write s",
    "own %",
    "file GiB",
    "peak GiB",
    "load 1/5/15",
]

if __name__ == "__main__":
    main()
