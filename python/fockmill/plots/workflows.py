"""Figures of quench, spectrum and thermal results (matplotlib, imported lazily).

* quench: mean occupations per mode against time (coinciding modes drawn once), then
  one panel for the named observables (real part solid, imaginary part dashed);
* spectrum: S(ω), with the Lanczos poles as sticks on a second axis (their weights); a
  momentum-resolved map as S(q, ω) in colour over momentum and frequency, with a colour
  bar and the poles as points;
* thermal: energy and heat capacity against temperature (error bars for FTLM), then
  populations and named observables.

Axis labels carry the model's energy unit from ``[units]`` (ħ = k_B = 1: times in
ħ/unit, frequencies and temperatures in the unit itself); titles name the model, its
size and sector like the sweep figures, plus a line on what was computed.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from fockmill.plots.sweeps import (
    _evenly_spaced_in_log,
    _hold_constant,
    _series,
    _title,
    log_axis,
    new_figure,
    unit_text,
)
from fockmill.store.workflows import WorkflowResult, read_workflow_results

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

__all__ = ["plot_workflow", "workflow_figure"]


def _unit(result: WorkflowResult) -> str:
    # A unit named after a parameter (wc) is shown as its symbol (ω_c), as in sweeps.
    return unit_text(result.units.get("energy", ""))


def _energy_axis(text: str, unit: str) -> str:
    return f"{text} ({unit})" if unit else text


def time_label(unit: str) -> str:
    """Time axis label: ħ = 1, so times are in ħ per energy unit."""
    return f"time $t$ (ħ/{unit})" if unit else "time $t$ (ħ = 1, inverse energy units)"


def frequency_label(unit: str) -> str:
    """Frequency axis label: ħ = 1, so ω is an energy."""
    return f"frequency $\\omega$ ({unit})" if unit else "frequency $\\omega$ (energy units)"


def temperature_label(unit: str) -> str:
    """Temperature axis label: k_B = 1, so T is an energy."""
    return f"temperature $T$ ({unit})" if unit else "temperature $T$ (k_B = 1, energy units)"


def _heading(result: WorkflowResult, title: str | None) -> str:
    meta = result.meta
    name = title if title is not None else str(meta.get("model_name", ""))
    base = _title(name, meta.get("space"), list(result.mode_labels))
    settings = meta.get("settings") or {}
    if result.kind == "quench":
        what = f"quench from {settings.get('initial_state', '?')}"
        if settings.get("jumps"):
            how = (
                f"{settings['trajectories']} trajectories"
                if settings.get("trajectories")
                else "density matrix"
            )
            rates = "; ".join(str(line).split(":")[0] for line in settings["jumps"])
            what += f", open ({how}; {rates})"
    elif result.kind == "spectrum":
        operator = " + ".join(settings.get("operator") or ["?"])
        if "labels" in result.arrays:
            what = f"S(q, ω) of {operator}, η = {settings.get('eta', '?'):g}"
            if settings.get("sector"):
                what += f"; from {settings['sector']}"
        else:
            what = f"S(ω) of {operator}, η = {settings.get('eta', '?'):g}"
    else:
        summary = result.summary
        what = f"thermal averages ({summary.get('method', settings.get('method', '?'))}"
        if summary.get("method") == "ftlm":
            what += f", {summary.get('samples')} random vectors"
        what += ")"
    return f"{base}\n{what}" if base else what


def _legend(axis: Axes) -> None:
    handles, labels = axis.get_legend_handles_labels()
    if len(handles) > 1 or (handles and labels[0]):
        axis.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize="small", frameon=False)


def _observable_lines(axis: Axes, x: Any, result: WorkflowResult, errors: bool) -> None:
    for k, name in enumerate(result.observables):
        values = result.arrays.get(f"values.{name}")
        if values is None:
            continue
        colour = f"C{k % 10}"
        err = result.arrays.get(f"errors.{name}") if errors else None
        if np.iscomplexobj(values):
            axis.plot(x, values.real, color=colour, label=f"Re {name}")
            axis.plot(x, values.imag, color=colour, linestyle="--", label=f"Im {name}")
        elif err is not None and np.any(err > 0):
            axis.errorbar(x, values, yerr=err, color=colour, label=name, capsize=2)
        else:
            axis.plot(x, values, color=colour, label=name)
    axis.set_ylabel(r"$\langle O\rangle$")
    _legend(axis)


def _population_lines(axis: Axes, x: Any, result: WorkflowResult, errors: Any = None) -> None:
    lines = _series("populations", result.arrays["populations"], list(result.mode_labels))
    for k, (label, values) in enumerate(lines):
        colour = f"C{k % 10}"
        if errors is not None and np.any(errors > 0):
            # The error of the first mode a drawn curve stands for.
            column = int(np.argmin(np.abs(result.arrays["populations"] - values[:, None]).sum(0)))
            axis.errorbar(x, values, yerr=errors[:, column], color=colour, label=label, capsize=2)
        else:
            axis.plot(x, values, color=colour, label=label)
    axis.set_ylabel(r"mean occupation $\langle n_i\rangle$")
    _legend(axis)


def _steady(axis: Axes) -> None:
    """No offset notation; a constant panel (a conserved number) is centred on its value
    instead of magnifying rounding noise."""
    axis.ticklabel_format(axis="y", useOffset=False)
    drawn = [np.asarray(line.get_ydata(), dtype=np.float64) for line in axis.get_lines()]
    if drawn:
        _hold_constant(axis, np.concatenate(drawn))


def _quench(figure: Figure, result: WorkflowResult) -> None:
    times = result.arrays["times"]
    panels = ["populations"] if "populations" in result.arrays else []
    if result.observables:
        panels.append("observables")
    axes = figure.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
    for axis, panel in zip(axes, panels, strict=True):
        if panel == "populations":
            # Trajectory runs carry standard errors (populations_error, errors.NAME).
            _population_lines(axis, times, result, result.arrays.get("populations_error"))
        else:
            _observable_lines(axis, times, result, errors=True)
        _steady(axis)
        axis.grid(alpha=0.3)
    axes[-1].set_xlabel(time_label(_unit(result)))


def _momentum_map(figure: Figure, result: WorkflowResult, poles: bool) -> None:
    from fockmill.plots.spectra import draw_momentum_map

    unit = _unit(result)
    arrays = result.arrays
    labels = arrays["labels"].astype(np.int64)
    orders = (result.meta.get("settings") or {}).get("orders") or [
        int(labels[:, j].max()) + 1 for j in range(labels.shape[1])
    ]
    pole_list = None
    if poles and "pole_frequencies" in arrays:
        rows = arrays["pole_rows"].astype(np.int64)
        pole_list = [
            (arrays["pole_frequencies"][rows == k], arrays["pole_weights"][rows == k])
            for k in range(labels.shape[0])
        ]
    axis = figure.subplots(1, 1)
    mesh = draw_momentum_map(
        axis, labels, orders, arrays["omegas"], arrays["S"], unit=unit, poles=pole_list
    )
    bar = figure.colorbar(mesh, ax=axis, extend=mesh.fockmill_extend)
    bar.set_label(f"$S(q,\\omega)$ (1/{unit})" if unit else r"$S(q,\omega)$")


def _spectrum(figure: Figure, result: WorkflowResult, poles: bool) -> None:
    if "labels" in result.arrays:
        _momentum_map(figure, result, poles)
        return
    unit = _unit(result)
    axis = figure.subplots(1, 1)
    omegas, s = result.arrays["omegas"], result.arrays["S"]
    axis.plot(omegas, s, color="C0", label=r"$S(\omega)$")
    axis.set_xlabel(frequency_label(unit))
    axis.set_ylabel(f"$S(\\omega)$ (1/{unit})" if unit else r"$S(\omega)$")
    axis.set_ylim(bottom=0.0)
    axis.grid(alpha=0.3)
    if poles and "pole_frequencies" in result.arrays:
        freqs = result.arrays["pole_frequencies"]
        weights = result.arrays["pole_weights"]
        inside = (freqs >= omegas.min()) & (freqs <= omegas.max()) & (weights > 0)
        if np.any(inside):
            sticks = axis.twinx()
            sticks.vlines(freqs[inside], 0.0, weights[inside], color="C3", linewidth=1.2)
            sticks.set_ylim(bottom=0.0, top=1.05 * float(weights[inside].max()))
            sticks.set_ylabel("pole weight $w_k$", color="C3")


def _thermal(figure: Figure, result: WorkflowResult) -> None:
    unit = _unit(result)
    arrays = result.arrays
    temperatures = arrays["temperatures"]
    panels = ["energy", "heat_capacity"]
    if "populations" in arrays:
        panels.append("populations")
    if result.observables:
        panels.append("observables")
    axes = figure.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
    for axis, panel in zip(axes, panels, strict=True):
        if panel in ("energy", "heat_capacity"):
            values, errors = arrays[panel], arrays[f"{panel}_error"]
            if np.any(errors > 0):
                axis.errorbar(temperatures, values, yerr=errors, color="C0", capsize=2)
            else:
                axis.plot(temperatures, values, color="C0", marker="o", markersize=3)
            if panel == "energy":
                axis.set_ylabel(_energy_axis(r"energy $\langle H\rangle_T$", unit))
            else:
                axis.set_ylabel("heat capacity $C/k_B$")
        elif panel == "populations":
            _population_lines(axis, temperatures, result, arrays.get("populations_error"))
        else:
            _observable_lines(axis, temperatures, result, errors=True)
        _steady(axis)
        axis.grid(alpha=0.3)
    axes[-1].set_xlabel(temperature_label(unit))
    if _evenly_spaced_in_log(temperatures):
        log_axis(axes[-1])


def workflow_figure(
    source: WorkflowResult | str | os.PathLike[str],
    *,
    title: str | None = None,
    poles: bool = True,
) -> Figure:
    """Draw a quench, spectrum or thermal result as a matplotlib Figure (Agg canvas).

    Parameters
    ----------
    source : WorkflowResult, str or path
        The result, or its results file (only read).
    title : str, optional
        First line of the title (default: the model name).
    poles : bool
        Spectra: draw the poles as sticks when the result holds them.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    StoreError
        ``source`` is a path that is not a workflow results file.
    ImportError
        matplotlib is not installed.
    """
    result = source if isinstance(source, WorkflowResult) else read_workflow_results(source)
    panels = {"quench": 1 + bool(result.observables), "spectrum": 1}.get(
        result.kind, 2 + ("populations" in result.arrays) + bool(result.observables)
    )
    if result.kind == "quench" and "populations" not in result.arrays:
        panels -= 1
    figure = new_figure((7.4, 1.4 + 2.4 * max(panels, 1)))
    if result.kind == "quench":
        _quench(figure, result)
    elif result.kind == "spectrum":
        _spectrum(figure, result, poles)
    else:
        _thermal(figure, result)
    figure.suptitle(_heading(result, title))
    return figure


def plot_workflow(
    source: WorkflowResult | str | os.PathLike[str],
    out: str | os.PathLike[str],
    *,
    title: str | None = None,
    poles: bool = True,
) -> Path:
    """Draw a quench, spectrum or thermal result and save it (format from the suffix).

    Parameters
    ----------
    source, title, poles
        As for :func:`workflow_figure`.
    out : str or path
        Image file to write (``.png``, ``.pdf``, ``.svg``).

    Returns
    -------
    pathlib.Path
    """
    figure = workflow_figure(source, title=title, poles=poles)
    path = Path(out)
    path.parent.mkdir(parents=True, exist_ok=True)
    figure.savefig(path, dpi=120)
    return path
