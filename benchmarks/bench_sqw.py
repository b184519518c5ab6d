"""Benchmark: the dynamic structure factor S(q, ω) for every momentum of a Bose–Hubbard
ring at unit filling, in momentum sectors and on the whole number sector.

H = −J Σ (a_i† a_{i+1} + h.c.) + U/2 Σ n_i (n_i − 1), J = 1, U = 4, cutoff = N. The
probe is the density; each row is the continued fraction of ρ_q|ψ₀⟩ on a frequency grid
(η = 0.1, tol 1e-6, ω from −1 to 19 in 401 points).

* sectors: ``fm.momentum_spectrum`` from the ground state of the k = 0 sector: one
  sector of dimension ≈ dim/L per momentum (H built or applied there only);
* whole sector: the ground state of the whole number sector and, for every q,
  ``fm.spectral_function`` of ``ρ_q = L^{-1/2} Σ_j e^{−iqj} n_j`` on that space.

Each configuration runs in its own process, so that its peak resident memory
(``ru_maxrss``) is its own; the table gives the ground-state time, the time of the map
(all momenta), the peak memory, and the load average (1, 5, 15 min) before and after.

Usage: python benchmarks/bench_sqw.py [--runs sectors:14 whole:12 sectors:12]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

# BLAS pinned to one thread unless set (see bench_dynamics.py and README "BLAS threads").
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import numpy as np  # noqa: E402

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm  # noqa: E402
from _common import bose_hubbard_ring, load, table, unit_filling  # noqa: E402

U = 4.0
ETA = 0.1
TOL = 1e-6
OMEGAS = np.linspace(-1.0, 19.0, 401)


def one(kind: str, sites: int) -> dict[str, object]:
    """Run one configuration in this process; its figures as a dict."""
    before = load()
    h = bose_hubbard_ring(sites, 1.0, U)
    base = unit_filling(sites)
    t = fm.ring_translation(sites)
    t0 = time.perf_counter()
    if kind == "sectors":
        space = fm.SymmetricSpace(base, [(t, 0)])
        problem = fm.prepare(h, space)
        ground = fm.ground_state(problem)
        t1 = time.perf_counter()
        m = fm.momentum_spectrum(
            problem, psi=ground.vector, A=fm.number(0), omegas=OMEGAS, eta=ETA, tol=TOL
        )
        intensity, norms, dim = m.intensity, m.norms, space.dim
    else:
        problem = fm.prepare(h, base)
        ground = fm.ground_state(problem)
        t1 = time.perf_counter()
        rows, weights = [], []
        for p in range(sites):
            rho = sum(
                (
                    np.exp(-2j * np.pi * p * j / sites) / np.sqrt(sites) * fm.number(j)
                    for j in range(sites)
                ),
                fm.LadderExpr(),
            )
            row = fm.spectral_function(
                problem, psi=ground.vector, A=rho, omegas=OMEGAS, eta=ETA, tol=TOL
            )
            rows.append(row)
            weights.append(float(np.linalg.norm(fm.prepare(rho, base).matvec(ground.vector)) ** 2))
        intensity, norms, dim = np.asarray(rows), np.asarray(weights), base.dim
    t2 = time.perf_counter()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # kB on Linux
    return {
        "kind": kind,
        "sites": sites,
        "dim": dim,
        "whole_dim": base.dim,
        "ground_energy": ground.energy,
        "ground_s": t1 - t0,
        "map_s": t2 - t1,
        "peak_bytes": peak,
        "norms": [float(x) for x in norms],
        "peaks": [float(OMEGAS[int(np.argmax(row))]) for row in intensity],
        "load_before": before,
        "load_after": load(),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", nargs="+", default=["sectors:12", "whole:12", "sectors:14"])
    parser.add_argument("--one", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.one:
        kind, sites = args.one.split(":")
        print(json.dumps(one(kind, int(sites))))
        return
    commit = subprocess.run(
        ["git", "rev-parse", "--short", "HEAD"], capture_output=True, text=True, check=False
    ).stdout.strip()
    print(f"fockmill {fm.__version__} (commit {commit}); {os.cpu_count()} cores; load {load()}")
    print(
        f"S(q, ω) of the density, every q; ring J = 1, U = {U:g}, unit filling, cutoff N; "
        f"η = {ETA}, tol = {TOL:g}, {OMEGAS.size} frequencies; one run each\n"
    )
    results = []
    for run in args.runs:
        done = subprocess.run(
            [sys.executable, __file__, "--one", run], capture_output=True, text=True, check=True
        )
        results.append(json.loads(done.stdout.strip().splitlines()[-1]))
        r = results[-1]
        print(f"# {run}: ground {r['ground_s']:.1f} s, map {r['map_s']:.1f} s", flush=True)
    rows = [
        [
            r["kind"],
            str(r["sites"]),
            f"{r['whole_dim']:,}",
            f"{r['dim']:,}",
            f"{r['ground_energy']:.8f}",
            f"{r['ground_s']:.1f}",
            f"{r['map_s']:.1f}",
            f"{r['peak_bytes'] / 2**30:.2f}",
            r["load_before"],
            r["load_after"],
        ]
        for r in results
    ]
    headers = [
        "space",
        "L",
        "number sector dim",
        "dim solved",
        "E0",
        "ground s",
        "map s",
        "peak GiB",
        "load before",
        "load after",
    ]
    print()
    print(table(headers, rows))
    for r in results:
        print(f"\n{r['kind']} L={r['sites']}: S(q) per q = {[round(x, 6) for x in r['norms']]}")
        print(f"  peak ω per q = {r['peaks']}")
    print(f"\nload average at the end {load()}")


if __name__ == "__main__":
    main()
