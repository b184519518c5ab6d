"""Benchmark: symmetry sectors of the Bose–Hubbard ring at unit filling.

Three tables:

``side``
    Side by side, per row: the sector product (and build) beside the full-space one at
    the same size, medians of 5, with their ratio and the load average (issue 19's
    target: a sector row at most 3× a full-space row).

``rates``
    Sector (momentum 0, reflection-even) build and product rates beside the full-space
    kernel on the same model, as rows per second and as time per operation.
``ground``
    Ground state in the momentum-0, reflection-even sector, each size in a fresh process
    (peak resident memory from wait4): orbit enumeration time, solve time, products,
    E0, and E0 of the full space where it is cheap. ``--probe`` sizes only enumerate the
    sector and time a few matrix-free products, then project the solve.

Targets: L = 16 in < 5 min, L = 17 in < 30 min; L = 18: measure, run only if the
projection is under 3 h.

Usage::

    python benchmarks/bench_symmetry.py side --sites 13 14 [--threads 2]
    python benchmarks/bench_symmetry.py rates --sites 11 12 13
    python benchmarks/bench_symmetry.py ground --sites 12 13 14 15 16 [--full 12 13]
    python benchmarks/bench_symmetry.py ground --sites 18 --probe
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections.abc import Callable
from typing import Any

import numpy as np

sys.path.insert(0, os.path.dirname(__file__))
import fockmill as fm
from _common import bose_hubbard_ring, fresh_process, median_time, table, unit_filling


def sector_of(sites: int, orbit_table: bool | None = None) -> fm.SymmetricSpace:
    """Momentum 0, reflection-even sector of the unit-filled ring (``orbit_table`` as in
    ``fm.SymmetricSpace``: None lets the library choose)."""
    return fm.SymmetricSpace(
        unit_filling(sites),
        [(fm.ring_translation(sites), 0), (fm.ring_reflection(sites), 0)],
        orbit_table=orbit_table,
    )


def cpu_time(run: Callable[[], object], repeats: int) -> float:
    """Median CPU time (all threads of this process) of ``repeats`` calls: on a shared,
    overloaded machine it tracks the work done better than the wall time."""
    times = []
    for _ in range(repeats):
        t0 = time.process_time()
        run()
        times.append(time.process_time() - t0)
    return float(np.median(times))


def rate_row(sites: int, repeats: int) -> list[str]:
    """One row of the rates table."""
    h = bose_hubbard_ring(sites)
    base = unit_filling(sites)
    t_enum, sector = median_time(lambda: sector_of(sites), repeats)
    t_sb, m_sector = median_time(lambda: fm.build_matrix(h, sector), repeats)
    t_fb, _ = median_time(lambda: fm.build_matrix(h, base), repeats)
    op_s = fm.build_operator(h, sector)
    op_f = fm.build_operator(h, base)
    xs = np.random.default_rng(0).normal(size=sector.dim)
    xf = np.random.default_rng(0).normal(size=base.dim)
    t_sp, _ = median_time(lambda: op_s @ xs, repeats)
    t_fp, _ = median_time(lambda: op_f @ xf, repeats)
    t_sc, _ = median_time(lambda: m_sector @ xs, repeats)
    c_sb = cpu_time(lambda: fm.build_matrix(h, sector), repeats)
    c_fb = cpu_time(lambda: fm.build_matrix(h, base), repeats)
    c_sp = cpu_time(lambda: op_s @ xs, repeats)
    c_fp = cpu_time(lambda: op_f @ xf, repeats)
    return [
        str(sites),
        f"{base.dim:,}",
        f"{sector.dim:,}",
        f"{t_enum:.2f}",
        f"{t_sb:.2f}",
        f"{t_fb:.2f}",
        f"{t_fb / t_sb:.1f}",
        f"{sector.dim / t_sp:.3g}",
        f"{base.dim / t_fp:.3g}",
        f"{t_sp * 1e3:.0f}",
        f"{t_fp * 1e3:.0f}",
        f"{t_fp / t_sp:.1f}",
        f"{t_sc * 1e3:.1f}",
        f"{c_sb:.2f}",
        f"{c_fb:.2f}",
        f"{sector.dim / c_sp:.3g}",
        f"{base.dim / c_fp:.3g}",
        f"{c_fp / c_sp:.2f}",
    ]


def rates(sites_list: list[int], repeats: int) -> None:
    rows = []
    for sites in sites_list:
        rows.append(rate_row(sites, repeats))
        print(rows[-1], flush=True)
    headers = [
        "L=N",
        "base dim",
        "sector dim",
        "enum s",
        "sector build s",
        "full build s",
        "build ratio",
        "sector rows/s",
        "full rows/s",
        "sector ms/prod",
        "full ms/prod",
        "prod ratio",
        "sector CSR ms/prod",
        "sector build cpu s",
        "full build cpu s",
        "sector rows/cpu-s",
        "full rows/cpu-s",
        "prod cpu ratio",
    ]
    print()
    print(table(headers, rows))
    print(
        f"\nmedians of {repeats}; sector = momentum 0, reflection-even (group of order 2L); "
        "ratio = full-space time / sector time; 'sector CSR' = scipy product with the "
        "stored sector matrix; 'cpu' columns use the process CPU time (all threads), "
        f"steadier than wall time on a shared machine; load average at the end "
        f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores."
    )


CHILD = """
import json, resource, sys, time
import numpy as np
sys.path.insert(0, {here!r})
from bench_symmetry import sector_of
from _common import bose_hubbard_ring, unit_filling
import fockmill as fm
sites, store, probe, full = {sites}, {store}, {probe}, {full}
h = bose_hubbard_ring(sites)
t0, c0 = time.perf_counter(), time.process_time()
sector = sector_of(sites)
enum, enum_cpu = time.perf_counter() - t0, time.process_time() - c0
print(json.dumps(dict(stage="enumerated", dim=sector.dim, seconds=enum, cpu=enum_cpu)), flush=True)
out = dict(dim=sector.dim, enum=enum, enum_cpu=enum_cpu)
if probe:
    op = sector._compile(h)
    x = np.random.default_rng(0).normal(size=sector.dim)
    times, cpus = [], []
    for _ in range({products}):
        t, c = time.perf_counter(), time.process_time()
        op.matvec(x)
        times.append(time.perf_counter() - t)
        cpus.append(time.process_time() - c)
        print(json.dumps(dict(stage="product", seconds=times[-1], cpu=cpus[-1])), flush=True)
    out["product"] = float(np.median(times))
    out["product_cpu"] = float(np.median(cpus))
else:
    t0 = time.perf_counter()
    problem = fm.prepare(h, sector)
    plan = problem.memory_plan(store_matrix=store)
    print(json.dumps(dict(stage="planned", plan=str(plan))), flush=True)
    # The default cutoff check runs (cutoff_warning as the default): it is part of what
    # a default ground state costs.
    g = problem.ground_state(method="lanczos", tol=1e-8, store_matrix=store)
    out.update(energy=g.energy, residual=g.residual, products=g.products,
               seconds=time.perf_counter() - t0, plan=plan.peak_bytes,
               sector_peak=resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024)
    if full:
        t0 = time.perf_counter()
        gf = fm.ground_state(h, unit_filling(sites), method="lanczos", tol=1e-8,
                             cutoff_warning=None)
        out.update(full_energy=gf.energy, full_seconds=time.perf_counter() - t0)
print(json.dumps(out), flush=True)
"""


def child(sites: int, store: bool, probe: bool, full: bool, products: int) -> dict[str, Any]:
    """Run one size in a fresh process; its peak resident memory comes from wait4."""
    code = CHILD.format(
        here=os.path.dirname(os.path.abspath(__file__)),
        sites=sites,
        store=store,
        probe=probe,
        full=full,
        products=products,
    )
    return fresh_process(code, f"L={sites}")


def ground(sites_list: list[int], store: bool, probe: bool, full: list[int], products: int) -> None:
    rows = []
    for sites in sites_list:
        r = child(sites, store, probe, sites in full, products)
        if probe:
            rows.append(
                [
                    str(sites),
                    f"{int(r['dim']):,}",
                    f"{r['enum']:.1f}",
                    f"{r['enum_cpu']:.1f}",
                    f"{r['product']:.1f}",
                    f"{r['product_cpu']:.1f}",
                    f"{int(r['dim']) / r['product_cpu']:.3g}",
                    f"{r['product'] * 300 / 3600:.1f}",
                    f"{r['peak_gib']:.2f}",
                ]
            )
        else:
            rows.append(
                [
                    str(sites),
                    "stored" if store else "free",
                    f"{int(r['dim']):,}",
                    f"{r['enum']:.1f}",
                    f"{r['seconds']:.1f}",
                    f"{r['wall']:.1f}",
                    str(int(r["products"])),
                    f"{r['energy']:.10f}",
                    f"{r['residual']:.1e}",
                    f"{r['full_energy']:.10f}" if "full_energy" in r else "-",
                    f"{r['plan'] / 2**30:.2f}",
                    f"{r['peak_gib']:.2f}",
                    f"{r['sector_peak'] / r['plan']:.2f}",
                ]
            )
        print(rows[-1], flush=True)
    if probe:
        headers = [
            "L=N",
            "sector dim",
            "enum s",
            "enum cpu s",
            "s/product",
            "cpu s/product",
            "rows/cpu-s",
            "h per 300 products",
            "peak GiB",
        ]
    else:
        headers = [
            "L=N",
            "variant",
            "sector dim",
            "enum s",
            "solve s",
            "wall s",
            "products",
            "E0 (sector)",
            "residual",
            "E0 (full space)",
            "plan GiB",
            "peak GiB",
            "peak/plan",
        ]
    print()
    print(table(headers, rows))
    load = os.getloadavg()
    print(
        f"\nJ = U = 1, tol = 1e-8, sector = momentum 0, reflection-even; plan = "
        "Problem.memory_plan(...).peak_bytes of the sector solve (resident memory when "
        "planned + planned growth); peak = wait4 maximum of the process (with the full-space "
        "check, when run); peak/plan = the process's maximum resident memory at the end of "
        "the sector solve / plan, which should stay <= 1.10; wall includes the "
        f"process start and the expression build; load average at the end {load[0]:.1f}, "
        f"{load[1]:.1f}, {load[2]:.1f} on {os.cpu_count()} cores."
    )


def side_row(sites: int, repeats: int, threads: int | None) -> list[str]:
    """One row of the side-by-side table: per-row cost of the sector product (and
    build) beside the full-space ones, same model, same process, same hour."""
    h = bose_hubbard_ring(sites)
    base = unit_filling(sites)
    load0 = os.getloadavg()[0]
    t0 = time.perf_counter()
    plain = sector_of(sites, orbit_table=False)
    t_enum_plain = time.perf_counter() - t0
    t0 = time.perf_counter()
    sector = sector_of(sites, orbit_table=True)
    t_enum = time.perf_counter() - t0
    op_s = fm.build_operator(h, sector, threads=threads)
    op_p = fm.build_operator(h, plain, threads=threads)
    op_f = fm.build_operator(h, base, threads=threads)
    xs = np.random.default_rng(0).normal(size=sector.dim)
    xf = np.random.default_rng(0).normal(size=base.dim)
    # First use prepares the kernels and faults the pages in; both sector paths agree.
    if not np.array_equal(op_s @ xs, op_p @ xs):
        raise SystemExit("the sector product differs with and without the orbit table")
    op_f @ xf
    t_sp, _ = median_time(lambda: op_s @ xs, repeats)
    t_pp, _ = median_time(lambda: op_p @ xs, repeats)
    t_fp, _ = median_time(lambda: op_f @ xf, repeats)
    c_sp = cpu_time(lambda: op_s @ xs, repeats)
    c_fp = cpu_time(lambda: op_f @ xf, repeats)
    t_sb, _ = median_time(lambda: fm.build_matrix(h, sector, threads=threads), repeats)
    t_fb, _ = median_time(lambda: fm.build_matrix(h, base, threads=threads), repeats)
    load1 = os.getloadavg()[0]
    ns_s = t_sp / sector.dim * 1e9
    ns_f = t_fp / base.dim * 1e9
    return [
        str(sites),
        f"{base.dim:,}",
        f"{sector.dim:,}",
        f"{t_enum_plain:.2f}",
        f"{t_enum:.2f}",
        f"{sector.orbit_table_bytes / 2**20:,.0f}",
        f"{t_pp * 1e3:.1f}",
        f"{t_pp / t_sp:.2f}",
        f"{t_sp * 1e3:.1f}",
        f"{t_fp * 1e3:.1f}",
        f"{ns_s:.0f}",
        f"{ns_f:.1f}",
        f"{ns_s / ns_f:.1f}",
        f"{c_sp / sector.dim * 1e9:.0f}",
        f"{c_fp / base.dim * 1e9:.1f}",
        f"{(c_sp / sector.dim) / (c_fp / base.dim):.1f}",
        f"{t_sb / sector.dim * 1e9:.0f}",
        f"{t_fb / base.dim * 1e9:.0f}",
        f"{(t_sb / sector.dim) / (t_fb / base.dim):.1f}",
        f"{load0:.1f}-{load1:.1f}",
    ]


def side(sites_list: list[int], repeats: int, threads: int | None) -> None:
    rows = []
    for sites in sites_list:
        rows.append(side_row(sites, repeats, threads))
        print(rows[-1], flush=True)
    headers = [
        "L=N",
        "base dim",
        "sector dim",
        "enumerate s (no table)",
        "enumerate s (table)",
        "table MiB",
        "no-table ms/prod",
        "table speed-up",
        "sector ms/prod",
        "full ms/prod",
        "sector ns/row",
        "full ns/row",
        "row ratio",
        "sector cpu ns/row",
        "full cpu ns/row",
        "cpu row ratio",
        "sector build ns/row",
        "full build ns/row",
        "build row ratio",
        "load",
    ]
    print()
    print(table(headers, rows))
    print(
        f"\nmedians of {repeats} (products after one untimed warm-up); threads "
        f"{threads or os.cpu_count()}; sector = momentum 0, reflection-even (group of order "
        "2L), with the orbit table; no-table = the same sector without it (the previous "
        "kernel), table speed-up = its time / the table's; row ratio = sector time per row / "
        "full-space time per row (target <= 3); "
        "cpu = process CPU time of all threads; load = 1-minute load average before-after "
        f"each size, on {os.cpu_count()} cores."
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="what", required=True)
    p_rates = sub.add_parser("rates")
    p_rates.add_argument("--sites", type=int, nargs="+", default=[11, 12, 13])
    p_rates.add_argument("--repeats", type=int, default=3)
    p_side = sub.add_parser("side")
    p_side.add_argument("--sites", type=int, nargs="+", default=[13, 14])
    p_side.add_argument("--repeats", type=int, default=5)
    p_side.add_argument("--threads", type=int, default=None)
    p_ground = sub.add_parser("ground")
    p_ground.add_argument("--sites", type=int, nargs="+", default=[12, 13, 14])
    p_ground.add_argument("--free", action="store_true", help="matrix-free Lanczos")
    p_ground.add_argument("--probe", action="store_true", help="time products only")
    p_ground.add_argument("--products", type=int, default=3, help="products in --probe")
    p_ground.add_argument("--full", type=int, nargs="*", default=[12, 13])
    args = parser.parse_args()
    print(f"uptime load at start: {os.getloadavg()}", flush=True)
    if args.what == "rates":
        rates(args.sites, args.repeats)
    elif args.what == "side":
        side(args.sites, args.repeats, args.threads)
    else:
        ground(args.sites, not args.free, args.probe, args.full, args.products)


if __name__ == "__main__":
    main()
