"""Benchmark: the ring's build and matrix-free product with two builds of fockmill in
one run (issue 20: many-term models must leave the lattice models no slower).

``--old`` names a directory holding another build's ``fockmill`` package (for example
``git archive <commit>`` plus its compiled ``_native`` module); each measurement runs in
a fresh process, alternating old and new, so both see the same machine.

Usage: python benchmarks/bench_old_new.py --old DIR [--sites 12 13] [--rounds 2]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys

CHILD = r"""
import sys, statistics, time
import numpy as np
import fockmill as fm
sys.path.insert(0, {bench!r})
from _common import bose_hubbard_ring, unit_filling
sites = {sites}
h = bose_hubbard_ring(sites)
space = unit_filling(sites)
def median(run, k):
    times = []
    for _ in range(k):
        t0 = time.perf_counter(); run(); times.append(time.perf_counter() - t0)
    return statistics.median(times)
build = median(lambda: fm.build_matrix(h, space, threads=2), 3)
problem = fm.prepare(h, space, threads=2)
x = np.random.default_rng(1).standard_normal(space.dim)
problem.matvec(x)
product = median(lambda: problem.matvec(x), 7)
print(f"{{build:.3f}} {{product * 1e3:.1f}} {{fm.__file__}}")
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--old", required=True)
    parser.add_argument("--sites", type=int, nargs="+", default=[12, 13])
    parser.add_argument("--rounds", type=int, default=2)
    args = parser.parse_args()
    bench = os.path.dirname(os.path.abspath(__file__))
    print(
        "| L | round | build old | build new | ratio | product old | product new | ratio | load |"
    )
    print("| --- | --- | --- | --- | --- | --- | --- | --- | --- |")
    for sites in args.sites:
        for k in range(args.rounds):
            found = {}
            for name in ("old", "new"):
                env = dict(os.environ)
                if name == "old":
                    env["PYTHONPATH"] = os.path.abspath(args.old)
                code = CHILD.format(bench=bench, sites=sites)
                out = subprocess.run(
                    [sys.executable, "-c", code],
                    env=env,
                    capture_output=True,
                    text=True,
                    check=True,
                ).stdout.split()
                found[name] = (float(out[0]), float(out[1]), out[2])
            (bo, po, _), (bn, pn, _) = found["old"], found["new"]
            load = " ".join(f"{x:.2f}" for x in os.getloadavg())
            print(
                f"| {sites} | {k + 1} | {bo:.3f} s | {bn:.3f} s | {bn / bo:.2f} | {po:.1f} ms "
                f"| {pn:.1f} ms | {pn / po:.2f} | {load} |",
                flush=True,
            )
    print(f"old: {found['old'][2]}; new: {found['new'][2]}")


if __name__ == "__main__":
    main()
