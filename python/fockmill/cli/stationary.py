"""The ``fockmill stationary`` command: the stationary state of a model file with
``[jumps]`` at its default parameters (changed with ``--set``), printed as a table per
mode and optionally written to a results file that ``show`` reads.

The point is solved by :func:`fockmill.run_sweep` with one point, as ``fockmill solve``
solves a ground state, so the command, a sweep of the same file and
:func:`fockmill.stationary_state` give the same numbers.
"""

from __future__ import annotations

import argparse
import json
import math
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import IO, Any

from fockmill.cli.options import add_overrides, add_threads, solver_keywords, units_of

__all__ = ["add_parser", "format_stationary", "run_stationary"]

#: What the command records (all of the stationary quantities: they are cheap next to
#: the solve).
RECORDED = ("energy", "populations", "g2", "purity", "number_variances", "residual")


def add_parser(commands: Any) -> None:
    """Add ``fockmill stationary`` to the ``fockmill`` parser."""
    sub = commands.add_parser(
        "stationary",
        help="stationary state of a model file with [jumps] (open system)",
        description="Solve the stationary state of the master equation of MODEL.toml "
        "(its Hamiltonian and [jumps]) at its default parameters (changed with --set) and "
        "print per mode the mean occupation, g2(0) and the number variance, then the "
        "purity, Tr(ρH) and the residual ‖𝓛ρ‖. With --out, also write a results file "
        "('fockmill show' reads it). Sweeps of the same file: 'fockmill sweep'.",
    )
    sub.add_argument("model", metavar="MODEL.toml", help="model file with [jumps]")
    sub.add_argument(
        "--out", metavar="RESULTS.sqlite", help="also write a results file (must not exist)"
    )
    add_overrides(sub)
    sub.add_argument(
        "--format", choices=("text", "json"), default="text", help="output format (default text)"
    )
    add_threads(sub)


def _number(value: Any, digits: int = 6) -> str:
    if value is None:
        return "-"
    value = float(value)
    return "-" if math.isnan(value) else f"{value:.{digits}g}"


def format_stationary(
    row: Any,
    model: Any,
    jump_lines: Sequence[str],
    units: dict[str, str],
    total_seconds: float,
) -> str:
    """Human-readable report of one stationary state (``fockmill stationary``)."""
    space = model.space
    entries: list[tuple[str, str]] = [
        (
            "model",
            f"{model.name} (dim {space.dim:,}, {space.modes} "
            f"mode{'' if space.modes == 1 else 's'}, ρ has {space.dim**2:,} entries)",
        ),
        ("parameters", ", ".join(f"{k}={v:g}" for k, v in row.parameters.items())),
    ]
    if units:
        entries.append(("units", ", ".join(f"{k} in {v}" for k, v in units.items())))
    for k, line in enumerate(jump_lines):
        entries.append(("jumps" if k == 0 else "", line))
    if row.status != "ok":
        entries.append(("status", f"{row.status}: {row.message}"))
    observables = row.observables
    if row.energy is not None:
        entries.append(("energy", f"Tr(ρH) = {row.energy:.10g}"))
    if "purity" in observables:
        entries.append(("purity", f"Tr ρ² = {_number(observables['purity'], 10)}"))
    if row.residual is not None:
        entries.append(("residual", f"‖𝓛ρ‖ = {row.residual:.2e}  ({row.method})"))
    entries.append(
        (
            "time",
            f"{total_seconds:.3f} s total (solve {row.seconds:.3f} s, the rest: reading the "
            "file and preparing the model)",
        )
    )
    width = max(len(name) for name, _ in entries)
    lines = [f"{name:<{width}}  {text}" for name, text in entries]
    labels = list(model.mode_labels)
    if len(labels) != space.modes:
        labels = [f"mode {i}" for i in range(space.modes)]
    columns = [("populations", "⟨n⟩"), ("g2", "g2(0)"), ("number_variances", "Var n")]
    present = [(key, title) for key, title in columns if key in observables]
    if present:
        header = ["mode", *(title for _, title in present)]
        cells = [
            [label, *(_number(observables[key][i]) for key, _ in present)]
            for i, label in enumerate(labels)
        ]
        widths = [max(len(h), *(len(c[j]) for c in cells)) for j, h in enumerate(header)]
        lines.append("  ".join(h.rjust(w) for h, w in zip(header, widths, strict=True)))
        lines.extend("  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)) for r in cells)
        if "g2" in observables:
            lines.append(
                "# g2(0) = ⟨a†² a²⟩/⟨n⟩²: < 1 antibunched (blockade), 1 coherent, > 1 bunched; "
                "'-' for an empty mode"
            )
    return "\n".join(lines)


def run_stationary(
    args: argparse.Namespace,
    out: IO[str],
    load_model: Callable[[str], Any],
    parse_overrides: Callable[[Sequence[str]], dict[str, float]],
    usage_error: type[Exception],
) -> int:
    """Run ``fockmill stationary`` (see :func:`add_parser`); 0 when the point is ok, 1
    when it failed or did not converge."""
    from fockmill.files.jumps import describe_jumps
    from fockmill.store.sqlite import json_ready
    from fockmill.sweeps.run import run_sweep

    started = time.perf_counter()
    model_file = load_model(args.model)
    model = model_file.model
    if not model.is_open:
        raise usage_error(
            f"{args.model} has no [jumps]: a closed system has no stationary state to "
            "solve for; add [jumps.NAME] tables (see docs/model-files.md) or use "
            "'fockmill solve' for its ground state"
        )
    overrides = parse_overrides(args.overrides)
    unknown = sorted(set(overrides) - set(model.parameters))
    if unknown:
        raise usage_error(
            f"--set names unknown parameter(s) {unknown}; the model has {sorted(model.parameters)}"
        )
    store = None
    if args.out is not None:
        store = Path(args.out)
        if store.exists():
            raise usage_error(
                f"{args.out!r} exists already; results files are never overwritten, choose "
                "another --out or delete it"
            )
    units = units_of(model_file)
    table = run_sweep(
        model,
        [overrides],
        store=store,
        quantities=RECORDED,
        executor="serial",
        progress=False,
        units=units,
        model_text_hash=model_file.text_hash,
        descriptions=dict(model_file.descriptions),
        **solver_keywords(model_file, getattr(args, "threads", None)),
    )
    row = table.rows[0]
    total = time.perf_counter() - started
    jump_lines = describe_jumps(model, row.parameters, model_file.jump_texts)
    if args.format == "json":
        document = {
            "parameters": row.parameters,
            "jumps": jump_lines,
            "status": row.status,
            "message": row.message,
            "energy": row.energy,
            "observables": row.observables,
            "residual": row.residual,
            "method": row.method,
            "seconds": row.seconds,
            "total_seconds": total,
        }
        print(json.dumps(json_ready(document), indent=2, allow_nan=False), file=out)
    else:
        print(format_stationary(row, model, jump_lines, units, total), file=out)
    if store is not None:
        print(f"results: {store}", file=out)
    return 0 if row.status == "ok" else 1
