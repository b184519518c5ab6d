"""Figures of sweep results: recorded quantities against one swept parameter.

matplotlib is optional and imported only when a figure is drawn; figures are rendered
with the non-interactive Agg canvas, never through pyplot.

What a figure says, and where it comes from (explicit keywords win, then the results
file's metadata, then a plain fallback):

* axis labels name what a parameter is (``on-site interaction U``), with its unit from
  the model file's ``[units]`` table (``U/J`` when the unit is another parameter,
  ``ω_c (GHz)`` otherwise) and the energy unit on energy axes;
* the title gives the model, the number of modes, the dimension and the sector
  (conserved total or parity, with the filling);
* per-mode curves that coincide (symmetry-equivalent modes) are drawn once, labelled
  with all the modes they stand for; beyond ten curves colours come from a colour map;
  legends sit outside the axes;
* an axis whose data are constant is centred on the value instead of magnifying
  rounding noise, and no axis uses offset notation;
* the entropy axis names its bipartition;
* stationary states of open models (``settings.stationary``) label their energy axis
  ``Tr(ρH)`` and their residual ``‖𝓛ρ‖``, draw ``g⁽²⁾(0)`` with the coherent value 1 as
  a dashed line (on a log axis when it spans more than a decade), and rates named after
  Greek letters (``kappa``, ``gamma``, ``Delta``) show as their symbols.
"""

from __future__ import annotations

import json
import os
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt

from fockmill.store.sweeps import ResultsStore, SweepTable, space_summary

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from fockmill.files.modelfile import ModelFile
    from fockmill.spaces.fock import FockSpace

__all__ = [
    "axis_label",
    "dispersion_figure",
    "plot_dispersion",
    "plot_sweep",
    "sweep_dispersion_figure",
    "sweep_figure",
    "unit_text",
]

_QUANTITIES = {
    "energy": "ground energy $E_0$",
    "gap": "gap $E_1-E_0$",
    "levels": "levels $E_k$",
    "populations": r"mean occupation $\langle n_i\rangle$",
    "number_variances": r"number variance Var $n_i$",
    "one_body_matrix": r"$\langle a_0^\dagger a_j\rangle$",
    "entanglement_entropy": "entanglement entropy $S$ (nats)",
    "top_level_weights": "top-level weight",
    "residual": r"residual $\|Hv-Ev\|$",
    "seconds": "seconds per point",
    "g2": r"$g^{(2)}(0)$",
    "purity": r"purity Tr$\,\rho^2$",
}
# The same quantities of a stationary state (sweeps of open models).
_STATIONARY_QUANTITIES = {
    "energy": r"mean energy Tr$(\rho H)$",
    "residual": r"residual $\|\mathcal{L}\rho\|$",
    "number_variances": r"number variance Var $n_i$",
}
_ENERGY_QUANTITIES = ("energy", "gap", "levels", "residual")

# What each built-in parameter is: (description, symbol in mathtext).
_PARAMETERS: dict[str, tuple[str, str]] = {
    "U": ("on-site interaction", "$U$"),
    "J": ("hopping", "$J$"),
    "mu": ("chemical potential", r"$\mu$"),
    "wc": ("cavity frequency", r"$\omega_c$"),
    "we": ("emitter frequency", r"$\omega_e$"),
    "g": ("cavity–emitter coupling", "$g$"),
    "frequency_scale": ("scale factor of all frequencies", r"$s_\omega$"),
    "kerr_scale": ("scale factor of all self-Kerr shifts", "$s_K$"),
    "cross_kerr_scale": ("scale factor of all cross-Kerr shifts", r"$s_\chi$"),
    "exchange_scale": ("scale factor of all exchange couplings", "$s_g$"),
    "omega": ("scale factor of all frequencies", r"$s_\omega$"),
    "kerr": ("scale factor of all self-Kerr shifts", "$s_K$"),
    "cross_kerr": ("scale factor of all cross-Kerr shifts", r"$s_\chi$"),
    "exchange": ("scale factor of all exchange couplings", "$s_g$"),
    "drive": ("scale factor of the coherent drives", r"$s_\varepsilon$"),
    "two_photon": ("scale factor of the two-photon drives", r"$s_\lambda$"),
}
_MODEL_SPECIFIC: dict[tuple[str, str], tuple[str, str]] = {
    ("jaynes-cummings-hubbard", "J"): ("photon hopping", "$J$"),
}
_GREEK = (
    "alpha beta gamma delta epsilon zeta eta theta iota kappa lambda mu nu xi pi rho sigma "
    "tau upsilon phi chi psi omega Gamma Delta Theta Lambda Xi Pi Sigma Phi Psi Omega"
).split()
_MAX_CYCLE = 10


def _symbol(name: str) -> str:
    """A parameter's name as mathtext: one letter as itself, a Greek letter's name
    (optionally with a subscript, ``gamma_d``) as the letter, anything else as written."""
    if re.fullmatch(r"[A-Za-z]", name):
        return f"${name}$"
    stem, _, sub = name.partition("_")
    if stem in _GREEK and re.fullmatch(r"[A-Za-z0-9]*", sub):
        return f"$\\{stem}_{{{sub}}}$" if sub else f"$\\{stem}$"
    return name


_TRAILING_INDEX = re.compile(r"^(.*?)(\d+)$")


def _describe(
    name: str, model_name: str, descriptions: Mapping[str, str] | None = None
) -> tuple[str, str]:
    base = model_name.removeprefix("driven ")
    if descriptions and name in descriptions:
        return (descriptions[name], _symbol(name))
    if (base, name) in _MODEL_SPECIFIC:
        return _MODEL_SPECIFIC[(base, name)]
    if name in _PARAMETERS:
        return _PARAMETERS[name]
    # A user's parameter: one letter or a Greek name reads as a symbol, others as written.
    return ("parameter", _symbol(name))


def unit_text(unit: str) -> str:
    """A unit as axis labels show it: a unit that is a parameter's name (``"wc"``) as
    that parameter's symbol (``$\\omega_c$``), any other unit as written.

    Examples
    --------
    >>> unit_text("wc"), unit_text("GHz")
    ('$\\\\omega_c$', 'GHz')
    """
    if unit in _PARAMETERS:
        return _PARAMETERS[unit][1]
    symbol = _symbol(unit)
    return symbol if symbol.startswith("$\\") else unit


def axis_label(
    name: str,
    units: Mapping[str, str],
    model_name: str = "",
    descriptions: Mapping[str, str] | None = None,
) -> str:
    """The axis label of parameter ``name``: what it is, its symbol and its unit.

    Parameters
    ----------
    name : str
        The parameter (``"U"``, ``"we"``, ``"exchange_scale"``, a user term's name).
    units : mapping of str to str
        ``[units]`` of the model file; a unit that is itself a parameter name is
        written as a ratio (``U/J``), any other in parentheses (``ω_e (GHz)``).
    model_name : str, optional
        The model's name, for parameters whose meaning depends on the model.
    descriptions : mapping of str to str, optional
        What the user's own parameters are (``[terms.NAME] description``).

    Returns
    -------
    str

    Examples
    --------
    >>> axis_label("U", {"U": "J"}, "bose-hubbard")
    'on-site interaction $U/J$'
    >>> axis_label("we", {"we": "GHz"}, "jaynes-cummings-hubbard")
    'emitter frequency $\\\\omega_e$ (GHz)'
    """
    description, symbol = _describe(name, model_name, descriptions)
    unit = units.get(name)
    if not unit:
        return f"{description} {symbol}"
    if unit in _PARAMETERS or (unit in units and unit != "energy") or _greek(unit):
        # The unit is another parameter: write the ratio, U/J.
        unit_symbol = _describe(unit, model_name)[1]
        if symbol.startswith("$") and unit_symbol.startswith("$"):
            return f"{description} {symbol[:-1]}/{unit_symbol[1:]}"
        return f"{description} {symbol} / {unit_symbol}"
    return f"{description} {symbol} ({unit})"


def _greek(unit: str) -> bool:
    """A unit named after a Greek letter (``kappa``): a rate or energy of the model."""
    return _symbol(unit).startswith("$\\")


def _energy_label(quantity: str, units: Mapping[str, str], stationary: bool = False) -> str:
    text = (_STATIONARY_QUANTITIES if stationary else {}).get(quantity, _QUANTITIES[quantity])
    unit = units.get("energy")
    if not unit:
        return text
    if unit in _PARAMETERS or _greek(unit):
        return f"{text} / {unit_text(unit)}"
    return f"{text} ({unit})"


def _describe_modes(indices: Sequence[int], labels: Sequence[str]) -> str:
    """``site 0–2`` for a run of modes sharing a label word, else the labels joined."""
    names = [labels[i] if i < len(labels) else f"mode {i}" for i in indices]
    matches = [_TRAILING_INDEX.match(n) for n in names]
    if len(names) > 1 and all(matches):
        stems = {m.group(1) for m in matches if m}
        numbers = [int(m.group(2)) for m in matches if m]
        if len(stems) == 1 and numbers == list(range(numbers[0], numbers[0] + len(numbers))):
            return f"{stems.pop()}{numbers[0]}–{numbers[-1]}"
    if len(names) > 4:
        return ", ".join(names[:3]) + f", … ({len(names)} modes)"
    return ", ".join(names)


def _meta_json(meta: Mapping[str, Any], key: str) -> Any:
    """A metadata value (plain JSON, or JSON text in older files), None when unreadable."""
    text = meta.get(key)
    if text is None:
        return None
    if not isinstance(text, str):
        return text
    try:
        return json.loads(text)
    except json.JSONDecodeError:
        return None


def _context_from_meta(meta: Mapping[str, Any]) -> dict[str, Any]:
    """What the results file says about the model (each entry may be missing)."""
    out: dict[str, Any] = {"model_name": meta.get("model_name", "")}
    labels = _meta_json(meta, "mode_labels")
    if isinstance(labels, list) and all(isinstance(x, str) for x in labels):
        out["mode_labels"] = labels
    units = _meta_json(meta, "units")
    if isinstance(units, dict):
        out["units"] = {str(k): str(v) for k, v in units.items()}
    space = _meta_json(meta, "space")
    if isinstance(space, dict):
        out["space"] = space
    symmetry = _meta_json(meta, "symmetry")
    if isinstance(symmetry, dict):
        dims = _meta_json(meta, "sector_dims")
        out["symmetry"] = {**symmetry, "dims": dims if isinstance(dims, list) else []}
    described = _meta_json(meta, "descriptions")
    if isinstance(described, dict):
        out["descriptions"] = {str(k): str(v) for k, v in described.items()}
    settings = _meta_json(meta, "settings")
    if isinstance(settings, dict) and isinstance(settings.get("entropy_modes"), list):
        out["entropy_modes"] = [int(i) for i in settings["entropy_modes"]]
    if "dim" in meta:
        try:
            out["dim"] = int(meta["dim"])
        except (TypeError, ValueError):
            pass
    return out


def _as_table(
    source: SweepTable | ResultsStore | str | os.PathLike[str],
) -> tuple[SweepTable, dict[str, Any]]:
    if isinstance(source, SweepTable):
        # A table carries the mode labels and units of its sweep (when it kept them).
        context: dict[str, Any] = {}
        labels = list(getattr(source, "mode_labels", ()) or ())
        if labels:
            context["mode_labels"] = [str(label) for label in labels]
        units = dict(getattr(source, "units", {}) or {})
        if units:
            context["units"] = {str(k): str(v) for k, v in units.items()}
        if getattr(source, "sector", None):
            context["symmetry"] = dict(source.sector or {})
        return source, context
    if isinstance(source, ResultsStore):
        return source.to_table(), _context_from_meta(source.meta)
    with ResultsStore.open(source) as store:
        return store.to_table(), _context_from_meta(store.meta)


def _sites(labels: Sequence[str], modes: int) -> tuple[int, str]:
    """Number of sites and what to call them: modes sharing a trailing index form a site."""
    matches = [_TRAILING_INDEX.match(x) for x in labels]
    indices = {m.group(2) for m in matches if m}
    if labels and all(matches) and 0 < len(indices) < modes and len(indices) * 2 <= modes:
        return len(indices), "sites"
    if labels and all(label.startswith("site ") for label in labels):
        return modes, "sites"
    return modes, "modes"


def _title(model_name: str, space: Mapping[str, Any] | None, labels: Sequence[str]) -> str:
    """``model_name`` over a line with modes, dimension, sector and filling (what is known)."""
    if not space:
        return model_name
    modes = int(space.get("modes") or len(space.get("cutoffs") or []) or 0)
    parts = [f"{modes} mode" + ("s" if modes != 1 else "")] if modes else []
    if "dim" in space:
        parts.append(f"dim {int(space['dim']):,}")
    if modes:
        total, modulus = space.get("total"), space.get("modulus")
        if total is None:
            parts.append("all occupations up to the cutoffs")
        elif modulus:
            parts.append(f"sector N ≡ {total} (mod {modulus})")
        else:
            count, word = _sites(labels, modes)
            parts.append(f"N = {total} on {count} {word}, filling {total / max(count, 1):g}")
    heading = ", ".join(parts)
    if not heading:
        return model_name
    return f"{model_name}\n{heading}" if model_name else heading


def _group_equal(
    series: list[tuple[int, npt.NDArray[np.float64]]],
) -> list[list[tuple[int, npt.NDArray[np.float64]]]]:
    """Group columns whose values coincide at every point to 1e-6 of their scale.

    Equal up to what a figure can show: symmetry-equivalent modes agree to the
    eigensolver's accuracy, which may be far above rounding, and one drawn curve then
    stands for all of them.
    """
    groups: list[list[tuple[int, npt.NDArray[np.float64]]]] = []
    for j, values in series:
        for group in groups:
            reference = group[0][1]
            finite = np.abs(reference[np.isfinite(reference)])
            # An all-NaN column (g2 of a mode that stays empty) has no scale of its own.
            scale = max(1.0, float(finite.max()) if finite.size else 1.0)
            if np.allclose(values, reference, rtol=0, atol=1e-6 * scale, equal_nan=True):
                group.append((j, values))
                break
        else:
            groups.append([(j, values)])
    return groups


def _series(
    name: str, values: npt.NDArray[Any], mode_labels: Sequence[str]
) -> list[tuple[str, npt.NDArray[np.float64]]]:
    """Split one quantity into plottable lines: (label, values per row)."""
    if values.ndim == 1:
        return [("", values)]
    if values.ndim == 2:
        if name == "levels":
            return [(f"$E_{j}$", values[:, j]) for j in range(values.shape[1])]
        groups = _group_equal([(j, values[:, j]) for j in range(values.shape[1])])
        out = []
        for group in groups:
            text = _describe_modes([j for j, _ in group], mode_labels)
            if len(group) > 1:
                text += " (equal)"
            out.append((text, group[0][1]))
        return out
    # A (rows, modes, modes) matrix: correlations of mode 0 with every other mode.
    columns = [(j, values[:, 0, j].real) for j in range(1, values.shape[2])]
    groups = _group_equal(columns)
    return [
        ("j = " + _describe_modes([j for j, _ in group], mode_labels), group[0][1])
        for group in groups
    ]


def _evenly_spaced_in_log(values: npt.NDArray[np.float64]) -> bool:
    """True for a geometric grid spanning at least a decade (then a log axis reads best)."""
    unique = np.unique(values)
    if unique.size < 3 or unique[0] <= 0 or unique[-1] / unique[0] < 10:
        return False
    steps = np.diff(np.log(unique))
    return bool(np.allclose(steps, steps[0], rtol=1e-6))


def log_axis(axis: Any) -> None:
    """A logarithmic x axis labelled at the decades only (the minor labels of a grid
    spanning a decade or two overlap)."""
    from matplotlib.ticker import NullFormatter

    axis.set_xscale("log")
    axis.xaxis.set_minor_formatter(NullFormatter())


def _hold_constant(axis: Any, values: npt.NDArray[np.float64]) -> None:
    """Centre a constant axis on its value instead of magnifying rounding noise."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return
    low, high = float(finite.min()), float(finite.max())
    middle = 0.5 * (low + high)
    if high - low <= 1e-9 * max(1.0, abs(middle)):
        pad = max(0.05 * abs(middle), 1e-3)
        axis.set_ylim(middle - pad, middle + pad)


def _g2_axis(axis: Any, values: npt.NDArray[np.float64]) -> None:
    """``g⁽²⁾(0)``: the coherent value 1 as a dashed line; a log axis when the finite
    values are positive and span more than a decade (blockade reaches far below 1)."""
    finite = values[np.isfinite(values)]
    axis.axhline(1.0, color="0.5", linestyle="--", linewidth=1.0)
    if finite.size and float(finite.min()) > 0 and float(finite.max()) > 10 * float(finite.min()):
        axis.set_yscale("log")
    else:
        axis.ticklabel_format(axis="y", useOffset=False)


def new_figure(figsize: tuple[float, float]) -> Figure:
    """An empty Figure (constrained layout) on its own Agg canvas: no pyplot, no global
    state. ImportError naming the install command when matplotlib is missing."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise ImportError(
            "plotting needs matplotlib; install it into this environment with: "
            "pip install matplotlib"
        ) from exc
    figure = Figure(figsize=figsize, layout="constrained")
    FigureCanvasAgg(figure)
    return figure


def sweep_figure(
    source: SweepTable | ResultsStore | str | os.PathLike[str],
    *,
    x: str | None = None,
    y: Sequence[str] = ("energy", "gap"),
    title: str | None = None,
    mode_labels: Sequence[str] | None = None,
    units: Mapping[str, str] | None = None,
    space: FockSpace | None = None,
    entropy_modes: Sequence[int] | None = None,
    model_file: ModelFile | None = None,
) -> Figure:
    """Draw recorded quantities against a swept parameter, as a matplotlib Figure.

    The figure is not shown or saved (see :func:`plot_sweep`); its axes, labels and
    legends can be inspected or changed before saving with ``figure.savefig``.

    Parameters
    ----------
    source : SweepTable, ResultsStore, str or path
        The results (a results file is only read).
    x : str, optional
        Swept parameter on the horizontal axis (default: the first one that varies).
        Other varying parameters give one line per combination of their values. A
        geometric grid spanning a decade or more gets a logarithmic axis.
    y : sequence of str
        Quantities, one panel each: ``energy``, ``gap``, ``levels``, ``populations``,
        ``number_variances``, ``one_body_matrix`` (row of mode 0),
        ``entanglement_entropy``, ``top_level_weights``, ``residual``, ``seconds``; of
        stationary states ``g2`` and ``purity`` too.
    title : str, optional
        First line of the title (default: the model name); a second line gives the
        number of modes, the dimension, the sector and the filling when known.
    mode_labels : sequence of str, optional
        Names of the modes for per-mode curves (default: the results file's
        ``mode_labels``, else ``mode 0``, ``mode 1``, ...).
    units : mapping of str to str, optional
        Unit of ``"energy"`` and of parameters (default: the results file's ``units``).
    space : FockSpace, optional
        The model's space, for the title (default: the results file's ``space``).
    entropy_modes : sequence of int, optional
        Subsystem of the recorded entropy, for its label (default: from the results
        file's settings).
    model_file : ModelFile, optional
        Supplies mode labels, units, space, entropy modes and model name at once (for
        a ``SweepTable`` that carries no metadata).

    Returns
    -------
    matplotlib.figure.Figure
        One panel per quantity, on an Agg canvas.

    Raises
    ------
    ValueError
        No finished points, an unknown ``x`` or ``y``, or nothing swept.
    ImportError
        matplotlib is not installed (``pip install matplotlib``).
    """
    table, context = _as_table(source)
    if model_file is not None:
        context.setdefault("model_name", model_file.model.name)
        if not context.get("model_name"):
            context["model_name"] = model_file.model.name
        context.setdefault("mode_labels", list(model_file.model.mode_labels))
        context.setdefault("units", dict(model_file.units))
        context.setdefault("space", space_summary(model_file.model.space))
        context.setdefault("entropy_modes", list(model_file.entropy_modes))
        context.setdefault("descriptions", dict(model_file.descriptions))
        symmetry = getattr(model_file, "symmetry", None)
        if symmetry is not None:
            context.setdefault("symmetry", symmetry.as_meta())
    if space is not None:
        context["space"] = space_summary(space)
    elif "space" not in context and "dim" in context:
        context["space"] = {"dim": context["dim"]}
    labels = list(mode_labels) if mode_labels is not None else context.get("mode_labels", [])
    unit_map = dict(units) if units is not None else context.get("units", {})
    subsystem = list(entropy_modes) if entropy_modes is not None else context.get("entropy_modes")
    model_name = str(context.get("model_name", ""))
    if len(table) == 0:
        raise ValueError("the results hold no finished point yet; nothing to plot")
    stationary = bool(getattr(table, "stationary", False))
    arrays = table.to_arrays()
    varying = [name for name in table.swept if np.unique(arrays[name]).size > 1]
    if x is None:
        if not varying:
            raise ValueError(
                "no parameter varies across these results; there is no axis to plot against"
            )
        x = varying[0]
    if x not in table.swept:
        raise ValueError(f"x={x!r} is not a swept parameter; choose from {list(table.swept)}")
    available = [*table.quantities(), "seconds"]
    if isinstance(y, str):
        y = [part.strip() for part in y.split(",") if part.strip()]
    unknown = [q for q in y if q not in available]
    if unknown or not y:
        raise ValueError(f"cannot plot {unknown or 'nothing'}; recorded quantities: {available}")

    others = [name for name in varying if name != x]
    keys = [tuple(float(arrays[name][r]) for name in others) for r in range(len(table))]
    groups = sorted(set(keys))
    figure = new_figure((7.4, 1.0 + 2.4 * len(y)))
    from matplotlib import colormaps

    axes = figure.subplots(len(y), 1, sharex=True, squeeze=False)[:, 0]
    xs = arrays[x]
    for axis, quantity in zip(axes, y, strict=True):
        lines: list[tuple[str, npt.NDArray[np.int64], npt.NDArray[np.float64]]] = []
        for group in groups:
            rows = np.array([r for r, key in enumerate(keys) if key == group], dtype=np.int64)
            rows = rows[np.argsort(xs[rows], kind="stable")]
            prefix = ", ".join(f"{n} = {v:g}" for n, v in zip(others, group, strict=True))
            for label, values in _series(quantity, arrays[quantity][rows], labels):
                text = "; ".join(part for part in (prefix, label) if part)
                lines.append((text, rows, np.asarray(values, dtype=np.float64)))
        colours: list[Any]
        if len(lines) > _MAX_CYCLE:
            colours = list(colormaps["viridis"](np.linspace(0.0, 0.95, len(lines))))
        else:
            colours = [f"C{k}" for k in range(len(lines))]
        for (text, rows, values), colour in zip(lines, colours, strict=True):
            axis.plot(xs[rows], values, marker="o", markersize=3, color=colour, label=text or None)
        if quantity in _ENERGY_QUANTITIES and (quantity != "residual" or stationary):
            # ‖𝓛ρ‖ has the units of the rates and energies; ‖Hv − Ev‖ of a unit vector too,
            # but it is shown as a bare accuracy figure as before.
            ylabel = _energy_label(quantity, unit_map, stationary)
        elif quantity == "entanglement_entropy" and subsystem:
            ylabel = f"entropy $S_A$ (nats)\nA = {_describe_modes(subsystem, labels)}"
        else:
            ylabel = _QUANTITIES.get(quantity, quantity)
        axis.set_ylabel(ylabel)
        stacked = np.concatenate([values for _, _, values in lines])
        if quantity == "g2":
            _g2_axis(axis, stacked)
        elif quantity == "residual" and np.all(stacked > 0):
            axis.set_yscale("log")
        else:
            axis.ticklabel_format(axis="y", useOffset=False)
            _hold_constant(axis, stacked)
        if len(lines) > 1 and any(text for text, _, _ in lines):
            axis.legend(
                loc="upper left",
                bbox_to_anchor=(1.01, 1.0),
                fontsize="small",
                frameon=False,
                ncols=1 if len(lines) <= 16 else 2,
            )
        axis.grid(alpha=0.3)
    axes[-1].set_xlabel(axis_label(x, unit_map, model_name, context.get("descriptions")))
    if _evenly_spaced_in_log(xs):
        log_axis(axes[-1])
    else:
        axes[-1].ticklabel_format(axis="x", useOffset=False)
    heading = _title(title if title is not None else model_name, context.get("space"), labels)
    heading = _with_sector(heading, context.get("symmetry"))
    if stationary:
        heading += "\nstationary states of the master equation (open system)"
    if heading:
        figure.suptitle(heading)
    return figure


def plot_sweep(
    source: SweepTable | ResultsStore | str | os.PathLike[str],
    out: str | os.PathLike[str],
    *,
    x: str | None = None,
    y: Sequence[str] = ("energy", "gap"),
    title: str | None = None,
    mode_labels: Sequence[str] | None = None,
    units: Mapping[str, str] | None = None,
    space: FockSpace | None = None,
    entropy_modes: Sequence[int] | None = None,
    model_file: ModelFile | None = None,
) -> Path:
    """Draw recorded quantities against a swept parameter and save the figure.

    Parameters
    ----------
    source : SweepTable, ResultsStore, str or path
        The results (a results file is only read).
    out : str or path
        Image file to write; the format follows the suffix (``.png``, ``.pdf``, ``.svg``).
    x, y, title, mode_labels, units, space, entropy_modes, model_file
        As for :func:`sweep_figure`.

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        No finished points, an unknown ``x`` or ``y``, or nothing swept.
    ImportError
        matplotlib is not installed (``pip install matplotlib``).
    """
    figure = sweep_figure(
        source,
        x=x,
        y=y,
        title=title,
        mode_labels=mode_labels,
        units=units,
        space=space,
        entropy_modes=entropy_modes,
        model_file=model_file,
    )
    path = Path(out)
    path.parent.mkdir(parents=True, exist_ok=True)
    figure.savefig(path, dpi=120)
    return path


# -- dispersions: E(k) of one solve, and per sweep point ---------------------------------


def _with_sector(heading: str, symmetry: Mapping[str, Any] | None) -> str:
    """``heading`` with a line naming the symmetry sector(s) solved in."""
    if not symmetry:
        return heading
    text = str(symmetry.get("description") or symmetry.get("labels"))
    dims = list(symmetry.get("dims") or [])
    line = f"sector: {text}" + (f", dim {int(dims[0]):,}" if len(dims) == 1 else "")
    return f"{heading}\n{line}" if heading else line


def _scan_axis(symmetry: Mapping[str, Any] | None, count: int) -> tuple[Any, str, bool]:
    """(x values per label, axis label, is a momentum) for the scanned generator."""
    names = list((symmetry or {}).get("names") or [])
    labels = list((symmetry or {}).get("labels") or [])
    name = names[labels.index("all")] if "all" in labels and names else ""
    q = np.arange(count)
    if not symmetry or "translation" in name or not name:
        k = 2 * q / count
        k = np.where(k > 1 + 1e-12, k - 2, k)
        return k, r"lattice momentum $k\,a/\pi$", True
    return q, f"label $q$ of {name.removeprefix('symmetry.')}", False


def _dispersion_input(
    source: Any,
) -> tuple[npt.NDArray[np.float64], Mapping[str, Any] | None, dict[str, Any]]:
    """(energies (labels, levels), symmetry meta, context) of a Dispersion or a one-row sweep."""
    from fockmill.solvers.momentum import Dispersion

    if isinstance(source, Dispersion):
        return np.asarray(source.energies, dtype=np.float64), None, {}
    table, context = _as_table(source)
    rows = [r for r in table.rows if r.observables.get("dispersion") is not None]
    if not rows:
        raise ValueError(
            'these results hold no dispersion; solve with a symmetry whose label is "all" '
            '(model file: [symmetry] translation = "all")'
        )
    energies = np.array(rows[0].observables["dispersion"], dtype=np.float64)
    return energies, context.get("symmetry"), context


def dispersion_figure(
    source: Any,
    *,
    units: Mapping[str, str] | None = None,
    title: str | None = None,
) -> Figure:
    """The lowest levels per momentum sector, ``E_n(k)``, of one solve.

    Parameters
    ----------
    source : Dispersion, SweepTable, ResultsStore, str or path
        A :class:`fockmill.Dispersion`, or results of a solve over every label of one
        generator (the first point with a dispersion is drawn).
    units : mapping of str to str, optional
        ``"energy"``: the energy unit for the vertical axis (default: the results').
    title : str, optional
        First line of the title (default: the model name); a line names the sector.

    Returns
    -------
    matplotlib.figure.Figure
        One panel: one marker series per level ``n`` against the momentum ``k a/π``
        in ``(-1, 1]`` (or against the label ``q`` for a generator that is no
        translation), the ground level joined by a line.
    """
    energies, symmetry, context = _dispersion_input(source)
    unit_map = dict(units) if units is not None else context.get("units", {})
    count = energies.shape[0]
    xs, xlabel, momentum = _scan_axis(symmetry, count)
    edge = np.isclose(xs, 1.0)
    if momentum and np.any(edge):
        # k = π and k = −π are one momentum: show it at both ends of the zone, so the
        # axis ends on a point at either side.
        xs = np.concatenate([xs, -xs[edge]])
        energies = np.concatenate([energies, energies[edge]], axis=0)
    order = np.argsort(xs, kind="stable")
    figure = new_figure((6.4, 4.4))
    axis = figure.subplots()
    for n in range(energies.shape[1]):
        ys = energies[order, n]
        style = "-o" if n == 0 else "o"
        axis.plot(xs[order], ys, style, markersize=5 if n == 0 else 3.5, label=f"$E_{n}(k)$")
    axis.set_xlabel(xlabel)
    axis.set_ylabel(_energy_label("levels", unit_map).replace("$E_k$", "$E_n(k)$"))
    axis.ticklabel_format(axis="y", useOffset=False)
    if momentum:
        axis.set_xlim(-1.05, 1.05)
    if energies.shape[1] > 1:
        axis.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize="small", frameon=False)
    axis.grid(alpha=0.3)
    model_name = str(context.get("model_name", ""))
    labels = context.get("mode_labels", [])
    heading = _title(title if title is not None else model_name, context.get("space"), labels)
    heading = _with_sector(heading, symmetry)
    if heading:
        figure.suptitle(heading)
    return figure


def sweep_dispersion_figure(
    source: SweepTable | ResultsStore | str | os.PathLike[str],
    *,
    x: str | None = None,
    units: Mapping[str, str] | None = None,
    title: str | None = None,
) -> Figure:
    """``E_0(k)`` at every sweep point: one curve per point, and a colour map.

    Parameters
    ----------
    source : SweepTable, ResultsStore, str or path
        Results of a sweep over every label of one generator (``"all"``).
    x : str, optional
        The swept parameter (default: the first that varies). When others vary too,
        the points at their first values are drawn (named in the title).
    units : mapping of str to str, optional
        Units of ``"energy"`` and of the parameters (default: the results').
    title : str, optional
        First line of the title (default: the model name).

    Returns
    -------
    matplotlib.figure.Figure
        Two panels: (left) ``E_0(k)`` per point, coloured by the parameter with a
        colour bar; (right) the excitation energy ``E_0(k) − E_0`` (``E_0`` the
        point's lowest energy) as a colour map over momentum and parameter.

    Raises
    ------
    ValueError
        No point with a dispersion, or an unknown ``x``.
    """
    table, context = _as_table(source)
    rows = [r for r in table.rows if r.observables.get("dispersion") is not None]
    if not rows:
        raise ValueError(
            'these results hold no dispersion; sweep with a symmetry whose label is "all"'
        )
    swept = list(table.swept)
    if x is None:
        varying = [n for n in swept if len({r.parameters.get(n) for r in rows}) > 1]
        if not varying:
            raise ValueError("no parameter varies across these results")
        x = varying[0]
    if x not in swept:
        raise ValueError(f"x={x!r} is not a swept parameter; choose from {swept}")
    others = [n for n in swept if n != x and len({r.parameters.get(n) for r in rows}) > 1]
    fixed = {n: rows[0].parameters[n] for n in others}
    rows = [r for r in rows if all(r.parameters[n] == v for n, v in fixed.items())]
    rows.sort(key=lambda r: r.parameters[x])

    unit_map = dict(units) if units is not None else context.get("units", {})
    model_name = str(context.get("model_name", ""))
    symmetry = context.get("symmetry")
    ground = np.array([np.array(r.observables["dispersion"], dtype=float)[:, 0] for r in rows])
    params = np.array([r.parameters[x] for r in rows])
    xs, klabel, _ = _scan_axis(symmetry, ground.shape[1])
    order = np.argsort(xs, kind="stable")
    figure = new_figure((11.0, 4.6))
    from matplotlib import colormaps
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import LogNorm, Normalize

    left, right = figure.subplots(1, 2)
    geometric = _evenly_spaced_in_log(params)
    low, high = float(params.min()), float(params.max())
    norm = LogNorm(low, high) if geometric else Normalize(low, high if high > low else low + 1)
    cmap = colormaps["viridis"]
    for value, line in zip(params, ground, strict=True):
        left.plot(xs[order], line[order], "-o", markersize=3, color=cmap(norm(value)))
    param_label = axis_label(x, unit_map, model_name, context.get("descriptions"))
    figure.colorbar(ScalarMappable(norm=norm, cmap=cmap), ax=left, label=param_label)
    left.set_xlabel(klabel)
    left.set_ylabel(
        _energy_label("energy", unit_map).replace("ground energy $E_0$", "lowest level $E_0(k)$")
    )
    left.ticklabel_format(axis="y", useOffset=False)
    left.grid(alpha=0.3)
    excitation = ground - np.nanmin(ground, axis=1, keepdims=True)
    mesh = right.pcolormesh(
        xs[order], params, excitation[:, order], shading="nearest", cmap="magma"
    )
    bar_label = _energy_label("energy", unit_map).replace(
        "ground energy $E_0$", "excitation $E_0(k) - E_0$"
    )
    figure.colorbar(mesh, ax=right, label=bar_label)
    right.set_xlabel(klabel)
    right.set_ylabel(param_label)
    if geometric:
        right.set_yscale("log")
    labels = context.get("mode_labels", [])
    heading = _title(title if title is not None else model_name, context.get("space"), labels)
    if fixed:
        heading += "\nat " + ", ".join(f"{n} = {v:g}" for n, v in fixed.items())
    heading = _with_sector(heading, symmetry)
    if heading:
        figure.suptitle(heading)
    return figure


def plot_dispersion(
    source: Any,
    out: str | os.PathLike[str],
    *,
    x: str | None = None,
    units: Mapping[str, str] | None = None,
    title: str | None = None,
) -> Path:
    """Save a dispersion figure: :func:`sweep_dispersion_figure` when a parameter
    varies across the results, else :func:`dispersion_figure` (one solve).

    Returns
    -------
    pathlib.Path
        The file written (format from the suffix).
    """
    from fockmill.solvers.momentum import Dispersion

    if isinstance(source, str | os.PathLike):
        with ResultsStore.open(source) as store:
            return plot_dispersion(store, out, x=x, units=units, title=title)
    many = False
    if not isinstance(source, Dispersion):
        table, _ = _as_table(source)
        rows = [r for r in table.rows if r.observables.get("dispersion") is not None]
        many = any(len({r.parameters.get(n) for r in rows}) > 1 for n in table.swept)
    if many:
        figure = sweep_dispersion_figure(source, x=x, units=units, title=title)
    else:
        figure = dispersion_figure(source, units=units, title=title)
    path = Path(out)
    path.parent.mkdir(parents=True, exist_ok=True)
    figure.savefig(path, dpi=120)
    return path
