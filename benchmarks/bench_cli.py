"""Benchmark: ``fockmill solve`` of a model file against ``ground_state`` in-process.

Invented workload: the Bose–Hubbard model on a 3×4 rectangle of sites (open edges), 12
bosons, J = 1, U = 4: C(23, 11) = 1,352,078 states. Timed, each ``--repeats`` times
(medians):

* ``ground_state(H, space, method=M)`` in this process (expression built beforehand);
* ``fockmill solve FILE`` as a fresh process (interpreter start, import, reading the
  file, building the model, solving, printing), with ``[solver] method = M``; the
  wall time seen from outside and the total the command prints are both shown.

for M = ``"lanczos"`` and ``"auto"``. The ratio column divides the command's wall time
by the in-process ``method="lanczos"`` time (target: at most 1.5).
Run ``python benchmarks/bench_cli.py --help``; ``--quick`` uses a 2×4 rectangle.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import fockmill as fm

MODEL = """\
# Invented example for the benchmark: bosons on a {rows}x{cols} rectangle.
[model]
kind = "bose-hubbard"
lattice = "rectangle"
rows = {rows}
cols = {cols}
total = {total}

[parameters]
J = 1.0
U = 4.0

[solver]
method = "{method}"
"""


def in_process(model_file: Path, method: str) -> tuple[float, float]:
    """(seconds, energy) of ground_state on the file's model, expression prepared first."""
    spec = fm.load_model_file(model_file)
    expr = spec.model.hamiltonian()
    started = time.perf_counter()
    found = fm.ground_state(expr, spec.model.space, method=method, cutoff_warning=None)
    return time.perf_counter() - started, float(found.energy)


def command(model_file: Path) -> tuple[float, float, float]:
    """(wall seconds, printed total seconds, energy) of ``fockmill solve FILE``."""
    started = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "fockmill", "solve", str(model_file), "--format", "json"],
        capture_output=True,
        text=True,
        check=True,
    )
    wall = time.perf_counter() - started
    row = json.loads(done.stdout)
    return wall, float(row["total_seconds"]), float(row["energy"])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=3)
    parser.add_argument("--cols", type=int, default=4)
    parser.add_argument("--repeats", type=int, default=3, help="timings per variant (3)")
    parser.add_argument("--quick", action="store_true", help="2x4 rectangle, 1 repeat")
    args = parser.parse_args()
    if args.quick:
        args.rows, args.cols, args.repeats = 2, 4, 1
    sites = args.rows * args.cols
    with tempfile.TemporaryDirectory() as directory:
        files = {}
        for method in ("lanczos", "auto"):
            path = Path(directory) / f"rect_{method}.toml"
            path.write_text(
                MODEL.format(rows=args.rows, cols=args.cols, total=sites, method=method)
            )
            files[method] = path
        dim = fm.load_model_file(files["auto"]).model.space.dim
        load = os.getloadavg()[0]
        print(
            f"Bose–Hubbard {args.rows}x{args.cols} rectangle, {sites} bosons: dim {dim:,}; "
            f"median of {args.repeats}; load average at start {load:.2f}"
        )
        reference: float | None = None
        rows = []
        for method in ("lanczos", "auto"):
            times, energies = [], []
            for _ in range(args.repeats):
                seconds, energy = in_process(files[method], method)
                times.append(seconds)
                energies.append(energy)
            inside = statistics.median(times)
            if method == "lanczos":
                reference = inside
            walls, totals = [], []
            for _ in range(args.repeats):
                wall, total, energy = command(files[method])
                walls.append(wall)
                totals.append(total)
                energies.append(energy)
            spread = max(energies) - min(energies)
            rows.append(
                (method, inside, statistics.median(walls), statistics.median(totals), spread)
            )
        assert reference is not None
        header = (
            f"{'method':<8} {'in-process s':>13} {'solve wall s':>13} {'solve printed s':>16} "
            f"{'wall / in-process lanczos':>26} {'max |ΔE0|':>10}"
        )
        print(header)
        print("-" * len(header))
        for method, inside, wall, total, spread in rows:
            print(
                f"{method:<8} {inside:>13.2f} {wall:>13.2f} {total:>16.2f} "
                f"{wall / reference:>25.2f}x {spread:>10.1e}"
            )
        print(f"load average at end {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
