"""The ``fockmill`` command: solve a model file, run resumable sweeps, quenches, spectra
and thermal curves, show and plot results.

Exit status: 0 success, 1 the computation failed (no convergence, out of memory),
2 bad usage or bad input (one-line message on stderr), 130 interrupted (Ctrl-C).
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import math
import os
import sys
import time
from collections.abc import Sequence
from pathlib import Path
from typing import IO, Any, NoReturn

from fockmill.cli.options import (
    add_long_run,
    add_overrides,
    add_threads,
    positive_int,
    progress_option,
    solver_keywords,
    units_of,
)
from fockmill.exceptions import ConvergenceError, PoolStartError
from fockmill.store.sweeps import PointResult, ResultsStore, SweepTable

__all__ = ["main"]

PROGRAM = "fockmill"
DEMO_MODEL = "demo_model.toml"
DEMO_STEM = "ring_kerr_crossover"

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_USAGE = 2
EXIT_INTERRUPTED = 130


class UsageError(Exception):
    """Bad command-line input: reported as one line, exit status 2."""


class _Parser(argparse.ArgumentParser):
    """argparse with a one-line error message instead of the usage block."""

    def error(self, message: str) -> NoReturn:
        raise UsageError(f"{message} (see '{self.prog} --help')")


# -- parser -------------------------------------------------------------------------

_DESCRIPTION = """\
Ground states, gaps and observables of coupled bosonic modes described by a TOML
model file: solve one point, run a resumable parameter sweep into an SQLite results
file, then show or plot the results; 'quench', 'spectrum' and 'thermal' run a model
file's [quench], [spectrum] and [thermal] sections; 'stationary' solves the stationary
state of a file with [jumps] (an open system; 'sweep' scans it). 'fockmill demo' runs a
bundled invented example.
"""

_EPILOG = """\
exit status: 0 ok, 1 computation failed (solve: the point; sweep: any point failed or
  did not converge, the others are saved), 2 bad usage or input, 130 interrupted.
examples:
  fockmill solve ring.toml --set U=2.5
  fockmill sweep ring.toml --out ring.sqlite --workers 2
  fockmill show ring.sqlite --format csv > ring.csv
  fockmill plot ring.sqlite --out ring.png --y energy,gap,entropy
  fockmill quench pair.toml --out pair-quench.sqlite --plot pair-quench.png
  fockmill spectrum ring.toml --out ring-spectrum.sqlite
  fockmill thermal trimer.toml --out trimer-thermal.sqlite --set exchange_scale=2
  fockmill plot bands.sqlite --out bands.png --y dispersion   ([symmetry] translation = "all")
  fockmill stationary kerr_pair.toml --set Delta=0.5           (a file with [jumps])
  fockmill sweep kerr_pair.toml --out scan.sqlite && fockmill plot scan.sqlite --out scan.png
"""


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``fockmill`` command (all subcommands)."""
    parser = _Parser(
        prog=PROGRAM,
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    from fockmill._native import __version__

    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="SUBCOMMAND", parser_class=_Parser)

    solve = commands.add_parser(
        "solve",
        help="solve one point at the model file's default parameters",
        description="Solve the model of MODEL.toml at its default parameters (optionally "
        "changed with --set) and print the lowest energies, the gap and the observables "
        "the file asks to record.",
    )
    solve.add_argument("model", metavar="MODEL.toml", help="model file")
    add_overrides(solve)
    solve.add_argument(
        "--format", choices=("text", "json"), default="text", help="output format (default text)"
    )
    add_threads(solve)
    add_long_run(solve)
    solve.add_argument(
        "--plot",
        metavar="FIG.png",
        help='with [symmetry] translation = "all": also draw the dispersion E(k) into FIG.png',
    )

    sweep = commands.add_parser(
        "sweep",
        help="run the model file's parameter sweep into a results file",
        description="Run the sweep grid of MODEL.toml and commit every finished point to "
        "RESULTS.sqlite. Running the same command again resumes: stored points are kept "
        "and skipped (points that failed or did not converge too, unless --retry-failed). "
        "The file refuses a different model, grid, quantity list or solver setting.",
    )
    sweep.add_argument("model", metavar="MODEL.toml", help="model file with a sweep grid")
    sweep.add_argument(
        "--out", required=True, metavar="RESULTS.sqlite", help="results file (created or resumed)"
    )
    place = sweep.add_mutually_exclusive_group()
    place.add_argument(
        "--workers",
        type=_positive_int,
        metavar="N",
        help="local worker processes (default: all CPU cores; 1 runs in this process)",
    )
    place.add_argument(
        "--dask-scheduler",
        metavar="ADDRESS",
        help="run on an existing Dask cluster, e.g. tcp://10.0.0.5:8786 (needs fockmill[cluster])",
    )
    place.add_argument(
        "--dask-local",
        type=_positive_int,
        metavar="N",
        help="start a local Dask cluster of N single-threaded worker processes",
    )
    sweep.add_argument(
        "--chunk",
        type=_positive_int,
        metavar="N",
        help="consecutive points per task (default: about four tasks per worker, at most 64)",
    )
    sweep.add_argument(
        "--retry-failed",
        action="store_true",
        help="when resuming, solve again the points that failed or did not converge",
    )
    sweep.add_argument("--no-progress", action="store_true", help="hide the progress bar")

    show = commands.add_parser(
        "show",
        help="print a results file",
        description="Print a results file. For a sweep, 'table' shows scalar "
        "quantities and short per-mode lists, then the points that failed or did not "
        "converge and why; 'csv' flattens every recorded value into columns; 'json' prints "
        "the meta data and every row. For a quench, spectrum or thermal run: the header "
        "and every row ('table'), the arrays as columns ('csv'), meta data and arrays "
        "('json').",
    )
    show.add_argument("results", metavar="RESULTS.sqlite", help="results file")
    show.add_argument(
        "--format", choices=("table", "csv", "json"), default="table", help="default table"
    )

    plot = commands.add_parser(
        "plot",
        help="plot a results file (sweep, quench, spectrum or thermal)",
        description="Draw one panel per quantity against a swept parameter and write an "
        "image (format from the suffix: .png, .pdf, .svg). For a quench, spectrum or "
        "thermal run: observables against time, S(ω) with its poles, or the thermal "
        "curves. Needs matplotlib.",
    )
    plot.add_argument("results", metavar="RESULTS.sqlite", help="results file")
    plot.add_argument("--out", required=True, metavar="FIG.png", help="image file to write")
    plot.add_argument(
        "--x", metavar="PARAM", help="parameter on the horizontal axis (default: first swept)"
    )
    plot.add_argument(
        "--y",
        default=None,
        metavar="Q1,Q2,...",
        help="comma-separated quantities (default energy,gap; populations,g2,purity for "
        "stationary states); any of energy, gap, levels, "
        "populations, number_variances, one_body_matrix, entanglement_entropy, "
        "top_level_weights, g2, purity, residual, seconds; "
        "or 'dispersion' alone (E0(k) per point, for sweeps over every momentum)",
    )
    plot.add_argument("--no-poles", action="store_true", help="spectra: leave out the pole sticks")
    from fockmill.cli.workflows import add_parsers

    add_parsers(commands, _positive_int)
    from fockmill.cli.stationary import add_parser as add_stationary

    add_stationary(commands)

    demo = commands.add_parser(
        "demo",
        help="run the bundled example sweep",
        description="Sweep the bundled example model, an invented ring of six coupled Kerr "
        "resonators whose on-site interaction U runs across the crossover from "
        "delocalised (superfluid-like) to localised (Mott-like) photons; write a results "
        "file and a figure into DIR and print the table.",
    )
    demo.add_argument(
        "--out-dir", default="fockmill-demo", metavar="DIR", help="default ./fockmill-demo"
    )
    demo.add_argument(
        "--workers", type=_positive_int, metavar="N", help="worker processes (default: all cores)"
    )
    demo.add_argument("--no-progress", action="store_true", help="hide the progress bar")
    return parser


_positive_int = positive_int


# -- model files ----------------------------------------------------------------------


def _load_model(path: str) -> Any:
    from fockmill.files.modelfile import load_model_file

    file = Path(path)
    if not file.is_file():
        raise UsageError(f"model file {path!r} not found")
    return load_model_file(file)


def _demo_model() -> Any:
    from importlib.resources import files

    from fockmill.files.modelfile import parse_model_text

    text = files("fockmill.cli").joinpath(DEMO_MODEL).read_text(encoding="utf-8")
    return parse_model_text(text)


# -- formatting -----------------------------------------------------------------------


def _number(value: float | None) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    return f"{value:.10g}"


def _short_list(values: Sequence[Any]) -> str:
    return "[" + " ".join(f"{float(v):.4f}" for v in values) + "]"


_MATRIX_KEYS = ("one_body_matrix", "one_body_matrix_imag", "dispersion")


def _table_columns(table: SweepTable) -> list[str]:
    columns = ["point", *table.swept, "energy"]
    if any(r.gap is not None for r in table.rows):
        columns.append("gap")
    if any(r.levels is not None for r in table.rows):
        columns.append("levels")
    for row in table.rows:
        columns.extend(k for k in row.observables if k not in columns and k not in _MATRIX_KEYS)
    columns += ["residual", "method", "seconds"]
    if any(r.status != "ok" for r in table.rows):
        columns.append("status")
    return columns


def _cell(row: PointResult, column: str) -> str:
    if column == "point":
        return str(row.index)
    if column in row.parameters:
        return f"{row.parameters[column]:g}"
    if column == "energy":
        return _number(row.energy)
    if column == "gap":
        return _number(row.gap)
    if column == "levels":
        return "-" if row.levels is None else _short_list(row.levels)
    if column == "residual":
        return "-" if row.residual is None else f"{row.residual:.1e}"
    if column == "status":
        return row.status
    if column == "method":
        return row.method or "-"
    if column == "seconds":
        return f"{row.seconds:.3f}"
    value = row.observables.get(column)
    if value is None:
        return "-"
    return _short_list(value) if isinstance(value, list) else _number(float(value))


def format_table(table: SweepTable, meta: dict[str, Any] | None = None) -> str:
    """Aligned text table of a sweep (matrices are left to the CSV/JSON formats)."""
    lines: list[str] = []
    if meta:
        total = meta.get("points", "?")
        lines.append(
            f"# model {meta.get('model_name', '?')} (fingerprint "
            f"{meta.get('model_fingerprint', '?')}), {len(table)} of {total} points finished"
        )
        labels = list(table.mode_labels)
        if labels and labels != [f"mode {i}" for i in range(len(labels))]:
            lines.append(f"# modes (order of per-mode lists): {', '.join(labels)}")
        units = dict(table.units)
        if units:
            lines.append("# units: " + ", ".join(f"{k} in {v}" for k, v in units.items()))
        if table.sector:
            dims = ", ".join(f"{d:,}" for d in table.sector.get("dims") or [])
            lines.append(f"# sector: {table.sector.get('description', '')} (dim {dims})")
    if table.stationary:
        lines.append(
            "# stationary states of an open model ([jumps]): energy = Tr(ρH), residual = "
            "‖𝓛ρ‖, g2 = g2(0) per mode"
        )
    if not table.rows:
        lines.append(
            "# no point has finished yet (the sweep was stopped, or is still running); run "
            "the same 'fockmill sweep' command to resume it"
        )
        return "\n".join(lines)
    columns = _table_columns(table)
    cells = [[_cell(row, c) for c in columns] for row in table.rows]
    widths = [max([len(c), *(len(r[i]) for r in cells)]) for i, c in enumerate(columns)]
    lines.append("  ".join(c.rjust(w) for c, w in zip(columns, widths, strict=True)))
    lines.extend("  ".join(v.rjust(w) for v, w in zip(r, widths, strict=True)) for r in cells)
    if any(k in row.observables for row in table.rows for k in _MATRIX_KEYS[:2]):
        lines.append("# one_body_matrix matrices are not shown here; use --format csv or json")
    lines.extend(_dispersion_lines(table))
    lines.extend(_failure_lines(table))
    return "\n".join(lines)


def _dispersion_lines(table: SweepTable) -> list[str]:
    """E0(k) per point (one column per sector label) for sweeps over every label."""
    rows = [r for r in table.rows if r.observables.get("dispersion") is not None]
    if not rows:
        return []
    count = len(rows[0].observables["dispersion"])
    header = ["point", *table.swept, *(f"q={q}" for q in range(count))]
    cells = []
    for row in rows:
        ground = [line[0] for line in row.observables["dispersion"]]
        cells.append(
            [
                str(row.index),
                *(f"{row.parameters[name]:g}" for name in table.swept),
                *(_number(None if e is None else float(e)) for e in ground),
            ]
        )
    widths = [max(len(h), *(len(c[i]) for c in cells)) for i, h in enumerate(header)]
    lines = [f"# lowest energy E0(k) per sector, k = 2π·q/{count}:"]
    lines.append("  ".join(h.rjust(w) for h, w in zip(header, widths, strict=True)))
    lines.extend("  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) for r in cells)
    return lines


def _failure_lines(table: SweepTable) -> list[str]:
    """The points that failed or did not converge, with their parameters and reasons."""
    failed = table.failed
    if not failed:
        return []
    lines = [f"# failed points ({len(failed)}; run the sweep again with --retry-failed to retry):"]
    for row in failed:
        where = ", ".join(f"{name}={row.parameters[name]:g}" for name in table.swept)
        lines.append(f"#   point {row.index} ({where}): {row.status}: {row.message}")
    return lines


def _flatten(prefix: str, value: Any, out: dict[str, Any]) -> None:
    if isinstance(value, list | tuple):
        for i, item in enumerate(value):
            _flatten(f"{prefix}_{i}", item, out)
    else:
        out[prefix] = value


def format_csv(table: SweepTable) -> str:
    """Every recorded value, vectors and matrices flattened to ``name_i``/``name_i_j``."""
    flat_rows: list[dict[str, Any]] = []
    for row in table.rows:
        flat: dict[str, Any] = {"point": row.index}
        flat.update(row.parameters)
        flat["energy"] = row.energy
        flat["gap"] = row.gap
        if row.levels is not None:
            _flatten("level", list(row.levels), flat)
        for key, value in row.observables.items():
            _flatten(key, value, flat)
        flat.update(residual=row.residual, method=row.method, seconds=row.seconds)
        flat["finished"] = row.finished
        flat["status"] = row.status
        flat["message"] = row.message
        flat_rows.append(flat)
    columns: list[str] = []
    for flat in flat_rows:
        columns.extend(k for k in flat if k not in columns)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=columns, lineterminator="\n")
    writer.writeheader()
    for flat in flat_rows:
        writer.writerow({k: "" if v is None else v for k, v in flat.items()})
    return buffer.getvalue().rstrip("\n")


def _row_dict(row: PointResult) -> dict[str, Any]:
    return {
        "point": row.index,
        "parameters": row.parameters,
        "energy": row.energy,
        "gap": row.gap,
        "levels": None if row.levels is None else list(row.levels),
        "observables": row.observables,
        "residual": row.residual,
        "method": row.method,
        "seconds": row.seconds,
        "finished": row.finished,
        "status": row.status,
        "message": row.message,
    }


def format_json(table: SweepTable, meta: dict[str, Any]) -> str:
    """Meta data and every row as one JSON document (plain JSON, no NaN)."""
    from fockmill.store.sqlite import json_ready

    document = {"meta": meta, "rows": [_row_dict(r) for r in table.rows]}
    if table.sector is not None:
        document["sector"] = dict(table.sector)
    return json.dumps(json_ready(document), indent=2, allow_nan=False)


def _format_point(
    row: PointResult, model: Any, mode_labels: Sequence[str], total_seconds: float
) -> str:
    """Human-readable report of one solved point (``fockmill solve``)."""
    entries: list[tuple[str, str]] = [
        (
            "model",
            f"{model.name} (dim {model.space.dim}, {model.space.modes} "
            f"mode{'' if model.space.modes == 1 else 's'})",
        ),
        ("parameters", ", ".join(f"{k}={v:g}" for k, v in row.parameters.items())),
    ]
    if row.status != "ok":
        entries.append(("status", f"{row.status}: {row.message}"))
    if row.energy is None:
        pass
    elif row.levels is not None:
        entries.append(("energies", "  ".join(f"E{k}={e:.10g}" for k, e in enumerate(row.levels))))
    else:
        entries.append(("energy", f"E0={row.energy:.10g}"))
    if row.gap is not None:
        entries.append(("gap", f"{row.gap:.10g}"))
    labels = list(mode_labels)
    matrices: list[tuple[str, Any]] = []
    for key, value in row.observables.items():
        if key == "dispersion":  # its own table follows (_format_dispersion)
            continue
        if key in _MATRIX_KEYS:
            matrices.append((key, value))
        elif isinstance(value, list):
            named = (
                ", ".join(f"{label}={v:.6g}" for label, v in zip(labels, value, strict=True))
                if len(labels) == len(value)
                else _short_list(value)
            )
            entries.append((key, named))
        else:
            entries.append((key, f"{float(value):.10g}"))
    if row.residual is not None:
        entries.append(("residual", f"{row.residual:.2e}  ({row.method})"))
    entries.append(
        (
            "time",
            f"{total_seconds:.3f} s total (solve {row.seconds:.3f} s, the rest: reading "
            "the file and preparing the model)",
        )
    )
    width = max(len(name) for name, _ in entries)
    lines = [f"{name:<{width}}  {text}" for name, text in entries]
    for key, matrix in matrices:
        lines.append(f"{key}:")
        lines.extend("  " + _short_list(line) for line in matrix)
    return "\n".join(lines)


# -- subcommands ----------------------------------------------------------------------


def _parse_overrides(items: Sequence[str]) -> dict[str, float]:
    values: dict[str, float] = {}
    for item in items:
        name, sep, text = item.partition("=")
        if not sep or not name.strip():
            raise UsageError(f"--set expects NAME=VALUE, got {item!r}")
        try:
            values[name.strip()] = float(text)
        except ValueError:
            raise UsageError(f"--set {item!r}: {text!r} is not a number") from None
    return values


def _command_solve(args: argparse.Namespace, out: IO[str]) -> int:
    from fockmill.sweeps.run import run_sweep

    started = time.perf_counter()
    model_file = _load_model(args.model)
    model = model_file.model
    if model.is_open:
        raise UsageError(
            f"{args.model} has [jumps]: an open system relaxes to a stationary state rather "
            f"than a ground state; run 'fockmill stationary {args.model}' (or drop [jumps] "
            "for the ground state of the Hamiltonian alone)"
        )
    overrides = _parse_overrides(args.overrides)
    unknown = sorted(set(overrides) - set(model.parameters))
    if unknown:
        raise UsageError(
            f"--set names unknown parameter(s) {unknown}; the model has {sorted(model.parameters)}"
        )
    # The sweep's check of [record] levels against the sector, with its message: solve
    # and sweep accept the same files.
    from fockmill.settings.checks import check_levels

    check_levels(int(model_file.levels), _solve_dim(model_file))
    quantities = tuple(dict.fromkeys((*model_file.quantities, "levels")))
    levels = max(int(model_file.levels), 2 if "gap" in quantities else 1)
    levels = min(levels, _solve_dim(model_file))
    if levels < 2:
        quantities = tuple(q for q in quantities if q != "gap")
    symmetry = getattr(model_file, "symmetry", None)
    if args.checkpoint and symmetry is not None and symmetry.scan is not None:
        raise UsageError(
            "--checkpoint keeps one solve, and this model file scans every momentum sector "
            "(one solve per sector); pick one sector in [symmetry] or drop --checkpoint"
        )
    if args.plot and (symmetry is None or symmetry.scan is None):
        raise UsageError(
            '--plot draws a dispersion: it needs [symmetry] with translation = "all" (or a '
            'label "all") in the model file'
        )
    table = run_sweep(
        model,
        [overrides],
        quantities=quantities,
        levels=levels,
        entropy_modes=model_file.entropy_modes or None,
        executor="serial",
        progress=False,
        symmetry=symmetry,
        _checkpoint=args.checkpoint,
        _solver_progress=progress_option(args),
        **solver_keywords(model_file, getattr(args, "threads", None)),
    )
    row = table.rows[0]
    total = time.perf_counter() - started
    if args.format == "json":
        from fockmill.store.sqlite import json_ready

        document = {**_row_dict(row), "total_seconds": total}
        if table.sector is not None:
            document["sector"] = dict(table.sector)
        print(json.dumps(json_ready(document), indent=2, allow_nan=False), file=out)
    else:
        print(_format_point(row, model, table.mode_labels, total), file=out)
        if table.sector is not None:
            print(_format_dispersion(row, table.sector), file=out)
    if args.plot and row.observables.get("dispersion") is not None:
        from fockmill.plots.sweeps import plot_dispersion

        shown = SweepTable(
            rows=table.rows, swept=(), units=units_of(model_file), sector=table.sector
        )
        where = ", ".join(f"{k}={v:g}" for k, v in row.parameters.items())
        path = plot_dispersion(shown, args.plot, title=f"{model.name} at {where}")
        print(f"figure: {path}", file=out)
    return EXIT_OK if row.status == "ok" else EXIT_FAILED


def _solve_dim(model_file: Any) -> int:
    """The dimension ``solve`` works in: the sector's for a single sector, else the
    model space's (a dispersion clips each sector's levels to its own size)."""
    symmetry = getattr(model_file, "symmetry", None)
    space = model_file.model.space
    if symmetry is None or symmetry.scan is not None:
        return int(space.dim)
    return max(1, int(symmetry.sector(space).dim))


def _format_dispersion(row: PointResult, sector: Any) -> str:
    """The sector line of ``solve``, and for a dispersion the table k, E0(k), gaps."""
    lines = [f"sector  {sector.get('description', '')}"]
    dims = list(sector.get("dims") or [])
    value = row.observables.get("dispersion")
    if value is None:
        if dims:
            lines.append(f"sector dim  {dims[0]:,}")
        return "\n".join(lines)
    energies = [[math.nan if e is None else float(e) for e in line] for line in value]
    count = len(energies)
    ground = min((line[0] for line in energies if not math.isnan(line[0])), default=math.nan)
    lines.append(
        "dispersion: lowest levels per momentum sector, k = 2π·q/"
        f"{count} (E0(k) - E0: above the lowest energy; E1(k) - E0(k): gap inside the sector)"
    )
    header = ["q", "k/π", "dim", "E0(k)", "E0(k) - E0", "E1(k) - E0(k)"]
    cells = []
    for q, line in enumerate(energies):
        k = 2 * q / count
        k = k - 2 if k > 1 + 1e-12 else k
        first = line[0]
        second = line[1] if len(line) > 1 else math.nan
        cells.append(
            [
                str(q),
                f"{k:+.4f}",
                f"{dims[q]:,}" if q < len(dims) else "-",
                _number(first),
                _number(first - ground),
                _number(second - first),
            ]
        )
    widths = [max(len(h), *(len(c[i]) for c in cells)) for i, h in enumerate(header)]
    lines.append("  ".join(h.rjust(w) for h, w in zip(header, widths, strict=True)))
    lines.extend("  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) for r in cells)
    return "\n".join(lines)


def _dask_client(args: argparse.Namespace) -> Any:
    if args.dask_scheduler is None and args.dask_local is None:
        return None
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise UsageError(
            "Dask options need dask.distributed; install it with: pip install 'fockmill[cluster]'"
        ) from None
    if args.dask_scheduler is not None:
        return Client(args.dask_scheduler)
    cluster = LocalCluster(n_workers=args.dask_local, processes=True, threads_per_worker=1)
    return Client(cluster)


def _run_file_sweep(
    model_file: Any,
    results: Path,
    *,
    executor: Any,
    workers: int | None,
    chunk: int | None,
    progress: bool,
    retry_failed: bool = False,
) -> SweepTable:
    from fockmill.sweeps.run import run_sweep

    if model_file.sweep is None:
        single = "stationary" if model_file.model.is_open else "solve"
        raise UsageError(
            f"{model_file.path or 'the model file'} defines no sweep grid; add one, or use "
            f"'fockmill {single}' for a single point"
        )
    return run_sweep(
        model_file.model,
        model_file.sweep,
        store=results,
        quantities=tuple(model_file.quantities),
        levels=int(model_file.levels),
        entropy_modes=model_file.entropy_modes or None,
        executor=executor,
        workers=workers,
        chunk=chunk,
        progress=progress,
        retry_failed=retry_failed,
        units=units_of(model_file),
        model_text_hash=model_file.text_hash,
        symmetry=getattr(model_file, "symmetry", None),
        descriptions=dict(getattr(model_file, "descriptions", None) or {}),
        **solver_keywords(model_file),
    )


def _single_threaded_blas_for_workers() -> None:
    """Default the BLAS thread count of worker processes started from here to one.

    Each worker already owns a core; a multi-threaded BLAS on top oversubscribes the
    machine (OpenBLAS then slows small solves a hundredfold). Values the user set win.
    """
    for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")


def _command_sweep(args: argparse.Namespace, out: IO[str]) -> int:
    model_file = _load_model(args.model)
    if args.workers != 1:
        _single_threaded_blas_for_workers()
    client = _dask_client(args)
    try:
        table = _run_file_sweep(
            model_file,
            Path(args.out),
            executor=client,
            workers=args.workers,
            chunk=args.chunk,
            progress=not args.no_progress,
            retry_failed=args.retry_failed,
        )
    finally:
        if client is not None:
            cluster = getattr(client, "cluster", None) if args.dask_local else None
            client.close()
            if cluster is not None:
                cluster.close()
    print(_summary(table, args.out), file=out)
    # Points that failed or did not converge make the command fail (status 1), as a
    # single point does in 'solve'; bad input stays status 2.
    return EXIT_FAILED if table.failed else EXIT_OK


def _summary(table: SweepTable, path: str | Path) -> str:
    """``N points in FILE`` and, when some are not ok, how many and where to look."""
    text = f"{len(table)} points in {path}"
    counts: dict[str, int] = {}
    for row in table.failed:
        counts[row.status] = counts.get(row.status, 0) + 1
    if counts:
        parts = [f"{n} {status.replace('_', ' ')}" for status, n in sorted(counts.items())]
        text += f" ({', '.join(parts)}; see 'fockmill show {path}')"
    return text


def _open_results(path: str) -> ResultsStore:
    if not Path(path).is_file():
        raise UsageError(f"results file {path!r} not found")
    return ResultsStore.open(path, purpose="read")


def _command_show(args: argparse.Namespace, out: IO[str]) -> int:
    from fockmill.store.claims import describe_leftover
    from fockmill.store.workflows import is_workflow_file

    leftover = describe_leftover(args.results) if Path(args.results).is_file() else None
    if leftover is not None:
        raise UsageError(leftover)
    if is_workflow_file(args.results):
        return _show_workflow(args, out)
    with _open_results(args.results) as store:
        table = store.to_table()
        meta = store.meta
    if args.format == "csv":
        text = format_csv(table)
    elif args.format == "json":
        text = format_json(table, meta)
    else:
        text = format_table(table, meta)
    print(text, file=out)
    return EXIT_OK


def _show_workflow(args: argparse.Namespace, out: IO[str]) -> int:
    from fockmill.cli.workflows import format_csv as workflow_csv
    from fockmill.cli.workflows import format_json as workflow_json
    from fockmill.cli.workflows import format_result
    from fockmill.store.workflows import read_workflow_results

    result = read_workflow_results(args.results)
    if args.format == "csv":
        text = workflow_csv(result)
    elif args.format == "json":
        text = workflow_json(result)
    else:
        text = format_result(result)
    print(text, file=out)
    return EXIT_OK


def _plot_workflow(args: argparse.Namespace, out: IO[str]) -> int:
    from fockmill.plots.workflows import plot_workflow
    from fockmill.store.workflows import read_workflow_results

    result = read_workflow_results(args.results)
    if args.x is not None or args.y is not None:
        raise UsageError(
            f"--x and --y choose sweep quantities; {args.results} holds a {result.kind} run, "
            "whose figure is fixed (leave them out)"
        )
    path = plot_workflow(result, args.out, poles=not args.no_poles)
    print(f"wrote {path}", file=out)
    return EXIT_OK


def _command_plot(args: argparse.Namespace, out: IO[str]) -> int:
    from fockmill.plots.sweeps import plot_sweep
    from fockmill.store.workflows import is_workflow_file

    if is_workflow_file(args.results):
        return _plot_workflow(args, out)
    default = "energy,gap"
    if args.y is None:
        with _open_results(args.results) as store:
            if (store.meta.get("settings") or {}).get("stationary"):
                default = "populations,g2,purity"
    quantities = [q.strip() for q in (args.y or default).split(",") if q.strip()]
    if "dispersion" in quantities:
        if quantities != ["dispersion"]:
            raise UsageError("--y dispersion draws its own figure; give it alone")
        from fockmill.plots.sweeps import plot_dispersion

        with _open_results(args.results) as store:
            path = plot_dispersion(store, args.out, x=args.x)
        print(f"wrote {path}", file=out)
        return EXIT_OK
    with _open_results(args.results) as store:
        path = plot_sweep(store, args.out, x=args.x, y=quantities, mode_labels=store.mode_labels)
    print(f"wrote {path}", file=out)
    return EXIT_OK


def _command_demo(args: argparse.Namespace, out: IO[str]) -> int:
    model_file = _demo_model()
    directory = Path(args.out_dir)
    results = directory / f"{DEMO_STEM}.sqlite"
    print(
        f"demo: {model_file.model.name}, an invented ring of coupled Kerr resonators "
        f"(dim {model_file.model.space.dim}); results in {results}",
        file=out,
    )
    if args.workers != 1:
        _single_threaded_blas_for_workers()
    table = _run_file_sweep(
        model_file,
        results,
        executor=None,
        workers=args.workers,
        chunk=None,
        progress=not args.no_progress,
    )
    with ResultsStore.open(results) as store:
        print(format_table(table, store.meta), file=out)
    table_path = directory / f"{DEMO_STEM}.csv"
    table_path.write_text(format_csv(table))
    print(f"table: {table_path}", file=out)
    try:
        from fockmill.plots.sweeps import plot_sweep

        wanted = ("energy", "gap", "number_variances", "entanglement_entropy")
        figure = plot_sweep(
            table,
            directory / f"{DEMO_STEM}.png",
            y=[q for q in wanted if q in table.quantities()],
            title=f"{model_file.model.name} (invented example)",
            mode_labels=table.mode_labels,
        )
        print(f"figure: {figure}", file=out)
    except ImportError as exc:
        print(f"no figure: {exc}", file=out)
    return EXIT_OK


def _command_stationary(args: argparse.Namespace, out: IO[str]) -> int:
    from fockmill.cli.stationary import run_stationary

    return run_stationary(args, out, _load_model, _parse_overrides, UsageError)


def _command_workflow(args: argparse.Namespace, out: IO[str]) -> int:
    from fockmill.cli.workflows import run_command

    return run_command(args, out, _load_model, _parse_overrides, UsageError)


_COMMANDS = {
    "solve": _command_solve,
    "sweep": _command_sweep,
    "show": _command_show,
    "plot": _command_plot,
    "demo": _command_demo,
    "quench": _command_workflow,
    "spectrum": _command_workflow,
    "thermal": _command_workflow,
    "stationary": _command_stationary,
}


def main(argv: Sequence[str] | None = None, *, out: IO[str] | None = None) -> int:
    """Run the ``fockmill`` command line; return the exit status.

    Parameters
    ----------
    argv : sequence of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).
    out : text stream, optional
        Where results are printed (default: standard output). Errors go to stderr.

    Returns
    -------
    int
        0 ok, 1 computation failed, 2 bad usage or input, 130 interrupted.
    """
    stream = out if out is not None else sys.stdout
    command = None
    try:
        try:
            args = build_parser().parse_args(argv)
        except SystemExit as exc:  # --help and --version end here
            return int(exc.code or 0)
        command = args.command
        if args.command is None:
            raise UsageError(
                f"choose a subcommand: {', '.join(_COMMANDS)} (see '{PROGRAM} --help')"
            )
        return _COMMANDS[args.command](args, stream)
    except BrokenPipeError:
        # The reader went away (e.g. `fockmill show ... | head`): not our error.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return EXIT_OK
    except KeyboardInterrupt:
        if command in ("quench", "spectrum", "thermal"):
            print(f"{PROGRAM}: interrupted; no results file was written", file=sys.stderr)
            return EXIT_INTERRUPTED
        print(
            f"{PROGRAM}: interrupted; finished points are saved, run the same command to resume",
            file=sys.stderr,
        )
        return EXIT_INTERRUPTED
    except UsageError as exc:
        _report(str(exc))
        return EXIT_USAGE
    except (ConvergenceError, MemoryError, PoolStartError) as exc:
        print(f"{PROGRAM}: failed: {exc}", file=sys.stderr)
        return EXIT_FAILED
    except KeyError as exc:
        _report(str(exc.args[0]) if exc.args else repr(exc))
        return EXIT_USAGE
    except (ValueError, TypeError, OSError, ImportError) as exc:
        _report(str(exc))
        return EXIT_USAGE


def _report(message: str) -> None:
    one_line = " ".join(message.split())
    print(f"{PROGRAM}: error: {one_line}", file=sys.stderr)
