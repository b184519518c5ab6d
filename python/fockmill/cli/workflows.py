"""The ``fockmill quench``, ``fockmill spectrum`` and ``fockmill thermal`` commands, and
how ``fockmill show`` prints their results files (text table, CSV, JSON)."""

from __future__ import annotations

import argparse
import csv
import io
import json
import sys
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import IO, Any

import numpy as np

from fockmill.cli.options import add_long_run, add_overrides, add_threads, progress_option
from fockmill.store.claims import claim
from fockmill.store.workflows import WorkflowResult, write_workflow_results

__all__ = ["COMMANDS", "add_parsers", "format_result", "run_command"]

#: Rows the run commands print (evenly spaced over the grid); ``show`` prints all.
SUMMARY_ROWS = 11
#: Strongest poles listed in a spectrum's table.
POLE_ROWS = 10

COMMANDS: dict[str, tuple[str, str, str]] = {
    # command: (section, help, description)
    "quench": (
        "quench",
        "evolve the model file's [quench] initial state and record observables",
        "Evolve the [quench] initial state of MODEL.toml under the model at its "
        "[parameters] (changed with --set), record the populations and observables at "
        "the listed times, write RESULTS.sqlite and print a short table.",
    ),
    "spectrum": (
        "spectrum",
        "spectral function S(ω) of the model file's [spectrum] operator",
        "Solve the ground state of MODEL.toml at its [parameters] (changed with --set), "
        "compute S(ω) of the [spectrum] operator on its frequency grid (and the poles), "
        "write RESULTS.sqlite and print the strongest poles.",
    ),
    "thermal": (
        "thermal",
        "thermal averages on the model file's [thermal] grid",
        "Compute energy, heat capacity, populations and observables of MODEL.toml at "
        "every temperature of its [thermal] grid (exact or FTLM), write "
        "RESULTS.sqlite and print a short table.",
    ),
}


def add_parsers(commands: Any, positive_int: Callable[[str], int]) -> None:
    """Add the three workflow subcommands to the ``fockmill`` parser."""
    for name, (section, help_text, description) in COMMANDS.items():
        sub = commands.add_parser(name, help=help_text, description=description)
        sub.add_argument("model", metavar="MODEL.toml", help=f"model file with a [{section}]")
        sub.add_argument(
            "--out",
            required=True,
            metavar="RESULTS.sqlite",
            help="results file to write (must not exist)",
        )
        add_overrides(sub)
        add_threads(sub)
        add_long_run(sub, checkpoint=name != "thermal")
        sub.add_argument("--plot", metavar="FIG.png", help="also draw a figure (needs matplotlib)")


def run_command(
    args: argparse.Namespace,
    out: IO[str],
    load_model: Callable[[str], Any],
    parse_overrides: Callable[[Sequence[str]], dict[str, float]],
    usage_error: type[Exception],
) -> int:
    """Run ``fockmill quench|spectrum|thermal`` (see :data:`COMMANDS`)."""
    from fockmill.workflows.run import run_quench, run_spectrum, run_thermal

    section = COMMANDS[args.command][0]
    model_file = load_model(args.model)
    if getattr(model_file, section) is None:
        raise usage_error(
            f"{args.model} has no [{section}] section; add one (see docs/model-files.md)"
        )
    overrides = parse_overrides(args.overrides)
    unknown = sorted(set(overrides) - set(model_file.model.parameters))
    if unknown:
        raise usage_error(
            f"--set names unknown parameter(s) {unknown}; the model has "
            f"{sorted(model_file.model.parameters)}"
        )
    target = Path(args.out)
    if target.exists():
        raise usage_error(
            f"{args.out!r} exists already; results files are never overwritten, choose "
            "another --out or delete it"
        )
    runner = {"quench": run_quench, "spectrum": run_spectrum, "thermal": run_thermal}
    # Claim the file before computing: a second writer stops now, not after the run.
    with claim(target):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            long_run: dict[str, Any] = {"progress": progress_option(args)}
            if getattr(args, "checkpoint", None):
                long_run["checkpoint"] = args.checkpoint
            result = runner[args.command](
                model_file, overrides=overrides, threads=args.threads, **long_run
            )
        for item in caught:
            print(f"fockmill: warning: {' '.join(str(item.message).split())}", file=sys.stderr)
        path = write_workflow_results(target, result, claimed=True)
    # The warnings went to stderr above; the table leaves them out.
    print(format_result(result, rows=SUMMARY_ROWS, with_warnings=False), file=out)
    print(f"results: {path}", file=out)
    if args.plot:
        from fockmill.plots.workflows import plot_workflow

        try:
            figure = plot_workflow(result, args.plot)
            print(f"figure: {figure}", file=out)
        except ImportError as exc:
            print(f"no figure: {exc}", file=out)
    return 0


# -- text -----------------------------------------------------------------------------


def _number(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, complex | np.complexfloating):
        return f"{value.real:.6g}{value.imag:+.6g}j"
    value = float(value)
    return "-" if np.isnan(value) else f"{value:.6g}"


def _with_error(value: float, error: float) -> str:
    if not error or np.isnan(error):
        return _number(value)
    # Two significant figures of the error (one hides whether it is 1.0 or 1.4).
    return f"{_number(value)}±{error:.2g}"


def _short_list(values: Sequence[Any]) -> str:
    return "[" + " ".join(f"{float(v):.4f}" for v in values) + "]"


def _picked(count: int, rows: int | None) -> list[int]:
    if rows is None or count <= rows:
        return list(range(count))
    return sorted({round(float(k)) for k in np.linspace(0, count - 1, rows)})


def _aligned(columns: list[str], cells: list[list[str]]) -> list[str]:
    widths = [max(len(c), *(len(r[i]) for r in cells)) for i, c in enumerate(columns)]
    lines = ["  ".join(c.rjust(w) for c, w in zip(columns, widths, strict=True))]
    lines.extend("  ".join(v.rjust(w) for v, w in zip(r, widths, strict=True)) for r in cells)
    return lines


def _header(result: WorkflowResult) -> list[tuple[str, str]]:
    meta = result.meta
    space = meta.get("space") or {}
    entries = [
        (
            "model",
            f"{meta.get('model_name', '?')} (dim {meta.get('dim', '?')}, "
            f"{space.get('modes', '?')} mode{'' if space.get('modes') == 1 else 's'})",
        ),
        ("parameters", ", ".join(f"{k}={v:g}" for k, v in (meta.get("parameters") or {}).items())),
    ]
    units = result.units
    if units:
        entries.append(("units", ", ".join(f"{k} in {v}" for k, v in units.items())))
    labels = list(result.mode_labels)
    if labels:
        entries.append(("modes", ", ".join(labels)))
    for name, texts in (meta.get("observables") or {}).items():
        entries.append((f"observable {name}", " + ".join(texts)))
    return entries


def _quench_text(result: WorkflowResult, rows: int | None) -> list[str]:
    settings, summary = result.meta.get("settings") or {}, result.summary
    times = result.arrays["times"]
    entries = _header(result)
    entries.append(("initial", str(settings.get("initial_state", "?"))))
    if "initial_energy" in summary:
        entries.append(("initial energy", _number(summary["initial_energy"])))
    entries.append(("times", f"{times.size} from {times[0]:g} to {times[-1]:g}"))
    jumps = list(settings.get("jumps") or [])
    for k, line in enumerate(jumps):
        entries.append(("jumps" if k == 0 else "", str(line)))
    if not jumps:
        entries.append(
            (
                "propagation",
                f"{summary.get('steps')} Krylov steps, {summary.get('products')} products "
                f"({summary.get('method')}), error estimate "
                f"{summary.get('error_estimate', 0):.1e}",
            )
        )
    elif settings.get("trajectories"):
        entries.append(
            (
                "propagation",
                f"{summary.get('trajectories')} quantum-jump trajectories (seed "
                f"{summary.get('seed')}), {summary.get('mean_jumps', 0):.3g} jumps each on "
                "average; values are means ± standard errors",
            )
        )
    else:
        entries.append(
            (
                "propagation",
                f"density matrix, {summary.get('steps')} steps, {summary.get('evaluations')} "
                f"Liouvillian applications ({summary.get('method')}), |Tr ρ − 1| <= "
                f"{summary.get('trace_error', 0):.1e}",
            )
        )
    energy = result.arrays["energy"]
    ramps = settings.get("ramps") or {}
    for name, table in ramps.items():
        points = ", ".join(
            f"({t:g}, {v:g})" for t, v in zip(table["times"], table["values"], strict=True)
        )
        entries.append((f"ramp {name}", f"piecewise linear through (t, value) = {points}"))
    if ramps:
        entries.append(
            ("energy", f"⟨H(t)⟩ from {_number(energy[0])} to {_number(energy[-1])} (ramped)")
        )
    elif jumps:
        entries.append(
            ("energy", f"Tr(ρH) from {_number(energy[0])} to {_number(energy[-1])} (open)")
        )
    else:
        entries.append(
            ("energy", f"⟨H⟩ = {_number(energy[0])} (drift {summary.get('energy_drift', 0):.1e})")
        )
    entries.append(("seconds", f"{summary.get('seconds', 0):.3f}"))
    columns = ["t"]
    if "populations" in result.arrays:
        columns.append("populations")
    columns += list(result.observables)
    cells = []
    for k in _picked(times.size, rows):
        row = [f"{times[k]:g}"]
        if "populations" in result.arrays:
            errors = result.arrays.get("populations_error")  # trajectories only
            if errors is None:
                row.append(_short_list(result.arrays["populations"][k]))
            else:
                pairs = zip(result.arrays["populations"][k], errors[k], strict=True)
                row.append("[" + " ".join(f"{v:.4f}±{e:.2g}" for v, e in pairs) + "]")
        for n in result.observables:
            value = result.arrays[f"values.{n}"][k]
            error = result.arrays.get(f"errors.{n}")
            if error is None or np.iscomplexobj(value):
                row.append(_number(value))
            else:
                row.append(_with_error(value, float(error[k])))
        cells.append(row)
    lines = _entries(entries) + _aligned(columns, cells)
    if rows is not None and times.size > rows:
        lines.append(f"# {len(cells)} of {times.size} times shown; 'fockmill show' prints all")
    return lines


def _momentum_text(result: WorkflowResult, rows: int | None) -> list[str]:
    """A momentum-resolved map: per momentum its weight, strongest pole and peak."""
    settings, summary, arrays = result.meta.get("settings") or {}, result.summary, result.arrays
    omegas, s = arrays["omegas"], arrays["S"]
    labels, momenta = arrays["labels"].astype(int), arrays["momenta"]
    entries = _header(result)
    entries.append(("sector", f"{settings.get('sector')} (dim {summary.get('sector_dim')})"))
    entries.append(
        ("operator", f"{' + '.join(settings.get('operator') or [])}, resolved in momentum")
    )
    entries.append(("ground energy", _number(summary.get("ground_energy"))))
    entries.append(("reference", f"E_ref = {_number(summary.get('reference_energy'))}"))
    entries.append(
        (
            "grid",
            f"{labels.shape[0]} momenta × {omegas.size} frequencies from {omegas[0]:g} to "
            f"{omegas[-1]:g}, η = {settings.get('eta')}",
        )
    )
    entries.append(("seconds", f"{summary.get('seconds', 0):.3f}"))
    lines = _entries(entries)
    has_poles = "pole_frequencies" in arrays
    columns = ["labels", "q a/π", "dim", "weight", "peak omega", "peak S"]
    if has_poles:
        columns += ["strongest pole", "its weight"]
    cells = []
    for k in range(labels.shape[0]):
        peak = int(np.argmax(s[k]))
        row = [
            ",".join(str(v) for v in labels[k]),
            ",".join(f"{v / np.pi:.4f}" for v in momenta[k]),
            f"{int(arrays['dims'][k])}",
            _number(arrays["norms"][k]),
            f"{omegas[peak]:g}",
            _number(s[k, peak]),
        ]
        if has_poles:
            mine = arrays["pole_rows"] == k
            if np.any(mine):
                best = int(np.argmax(np.where(mine, arrays["pole_weights"], -np.inf)))
                row += [
                    _number(arrays["pole_frequencies"][best]),
                    _number(arrays["pole_weights"][best]),
                ]
            else:
                row += ["-", "-"]
        cells.append(row)
    return lines + _aligned(columns, cells)


def _spectrum_text(result: WorkflowResult, rows: int | None) -> list[str]:
    if "labels" in result.arrays:
        return _momentum_text(result, rows)
    settings, summary = result.meta.get("settings") or {}, result.summary
    omegas, s = result.arrays["omegas"], result.arrays["S"]
    entries = _header(result)
    charge = int(settings.get("charge") or 0)
    change = (
        "keeps the number of quanta"
        if charge == 0
        else f"{'adds' if charge > 0 else 'removes'} {abs(charge)} "
        f"quant{'um' if abs(charge) == 1 else 'a'}"
    )
    entries.append(
        (
            "operator",
            f"{' + '.join(settings.get('operator') or [])} ({change}; lands in a space of "
            f"dim {settings.get('target_dim')})",
        )
    )
    entries.append(("ground energy", _number(summary.get("ground_energy"))))
    entries.append(("reference", f"E_ref = {_number(summary.get('reference_energy'))}"))
    integral = float(np.sum(0.5 * (s[1:] + s[:-1]) * np.diff(omegas)))  # trapezoid rule
    entries.append(
        (
            "weight",
            f"⟨A†A⟩ = {_number(summary.get('norm'))}; ∫S dω over the grid = {_number(integral)}",
        )
    )
    entries.append(
        (
            "grid",
            f"{omegas.size} frequencies from {omegas[0]:g} to {omegas[-1]:g}, "
            f"η = {settings.get('eta')}",
        )
    )
    entries.append(("seconds", f"{summary.get('seconds', 0):.3f}"))
    lines = _entries(entries)
    if "pole_frequencies" in result.arrays:
        freqs, weights = result.arrays["pole_frequencies"], result.arrays["pole_weights"]
        order = np.argsort(-weights, kind="stable")
        if rows is not None:
            order = order[:POLE_ROWS]
        order = np.sort(order)
        exact = "exact" if summary.get("poles_exact") else "Lanczos estimates"
        lines.append(f"# poles ({exact}; strongest {len(order)} of {freqs.size})")
        lines += _aligned(
            ["omega", "weight"], [[_number(freqs[k]), _number(weights[k])] for k in order]
        )
    else:
        cells = [[f"{omegas[k]:g}", _number(s[k])] for k in _picked(omegas.size, rows)]
        lines += _aligned(["omega", "S"], cells)
    return lines


def _thermal_text(result: WorkflowResult, rows: int | None) -> list[str]:
    summary, arrays = result.summary, result.arrays
    temperatures = arrays["temperatures"]
    entries = _header(result)
    method = str(summary.get("method"))
    if method == "ftlm":
        method += f" ({summary.get('samples')} random vectors, {summary.get('steps')} steps)"
    entries.append(("method", method))
    entries.append(("seconds", f"{summary.get('seconds', 0):.3f}"))
    columns = ["T", "energy", "heat_capacity"]
    if "populations" in arrays:
        columns.append("populations")
    columns += list(result.observables)
    cells = []
    for k in _picked(temperatures.size, rows):
        row = [
            f"{temperatures[k]:g}",
            _with_error(arrays["energy"][k], arrays["energy_error"][k]),
            _with_error(arrays["heat_capacity"][k], arrays["heat_capacity_error"][k]),
        ]
        if "populations" in arrays:
            row.append(_short_list(arrays["populations"][k]))
        for name in result.observables:
            value = arrays[f"values.{name}"][k]
            error = arrays[f"errors.{name}"][k]
            row.append(_number(value) if np.iscomplexobj(value) else _with_error(value, error))
        cells.append(row)
    lines = _entries(entries) + _aligned(columns, cells)
    if rows is not None and temperatures.size > rows:
        lines.append(
            f"# {len(cells)} of {temperatures.size} temperatures shown; 'fockmill show' prints all"
        )
    return lines


def _entries(entries: list[tuple[str, str]]) -> list[str]:
    width = max(len(name) for name, _ in entries)
    return [f"{name:<{width}}  {text}" for name, text in entries]


def format_result(
    result: WorkflowResult, rows: int | None = None, *, with_warnings: bool = True
) -> str:
    """A header and an aligned table of a workflow result (``rows``: at most this many),
    then the warnings the run gave (unless ``with_warnings=False``)."""
    text = {"quench": _quench_text, "spectrum": _spectrum_text, "thermal": _thermal_text}
    lines = text[result.kind](result, rows)
    for message in (result.meta.get("warnings") or []) if with_warnings else []:
        lines.append(f"# warning: {' '.join(str(message).split())}")
    return "\n".join(lines)


def format_csv(result: WorkflowResult) -> str:
    """The arrays along the grid as columns (per-mode arrays as ``name_i``).

    Arrays that do not run along the grid (the quench's ``top_weights``, a spectrum's
    poles) are left to the JSON format, except the poles, which follow after a blank
    line as their own table.
    """
    if "labels" in result.arrays:
        return _momentum_csv(result)
    axis = {"quench": "times", "spectrum": "omegas", "thermal": "temperatures"}[result.kind]
    count = result.arrays[axis].shape[0]
    columns: dict[str, Any] = {}
    for name, values in result.arrays.items():
        if values.ndim == 0 or values.shape[0] != count or name.startswith("pole_"):
            continue
        if values.ndim == 1:
            if np.iscomplexobj(values):
                columns[f"{name}.real"], columns[f"{name}.imag"] = values.real, values.imag
            else:
                columns[name] = values
        elif values.ndim == 2:
            # One column per mode, named as in sweep tables (populations_0, ...); the
            # mode labels are in the results file's meta data.
            for j in range(values.shape[1]):
                columns[f"{name}_{j}"] = values[:, j]
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(list(columns))
    for k in range(count):
        writer.writerow(["" if np.isnan(v[k]) else repr(float(v[k])) for v in columns.values()])
    if "pole_frequencies" in result.arrays:
        writer.writerow([])
        writer.writerow(["pole_frequency", "pole_weight"])
        for f, w in zip(
            result.arrays["pole_frequencies"], result.arrays["pole_weights"], strict=True
        ):
            writer.writerow([repr(float(f)), repr(float(w))])
    return buffer.getvalue().rstrip("\n")


def _momentum_csv(result: WorkflowResult) -> str:
    """A momentum-resolved map in long form: one row per (momentum, frequency), then the
    poles with their momentum after a blank line."""
    arrays = result.arrays
    labels, momenta, omegas, s = arrays["labels"], arrays["momenta"], arrays["omegas"], arrays["S"]
    count = labels.shape[1]
    names = [f"label_{j}" for j in range(count)] + [f"q_{j}" for j in range(count)]
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow([*names, "omega", "S"])
    for k in range(labels.shape[0]):
        head = [str(int(v)) for v in labels[k]] + [repr(float(v)) for v in momenta[k]]
        for w, value in zip(omegas, s[k], strict=True):
            writer.writerow([*head, repr(float(w)), repr(float(value))])
    if "pole_frequencies" in arrays:
        writer.writerow([])
        writer.writerow([*names, "pole_frequency", "pole_weight"])
        for row, f, w in zip(
            arrays["pole_rows"], arrays["pole_frequencies"], arrays["pole_weights"], strict=True
        ):
            k = int(row)
            head = [str(int(v)) for v in labels[k]] + [repr(float(v)) for v in momenta[k]]
            writer.writerow([*head, repr(float(f)), repr(float(w))])
    return buffer.getvalue().rstrip("\n")


def format_json(result: WorkflowResult) -> str:
    """Meta data and every array (complex ones as ``{"real": ..., "imag": ...}``)."""
    from fockmill.store.sqlite import json_ready

    arrays: dict[str, Any] = {}
    for name, values in result.arrays.items():
        if np.iscomplexobj(values):
            arrays[name] = {"real": values.real.tolist(), "imag": values.imag.tolist()}
        else:
            arrays[name] = values.tolist()
    document = {"meta": result.meta, "arrays": arrays}
    return json.dumps(json_ready(document), indent=2, allow_nan=False)
