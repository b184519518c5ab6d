"""Figures of sweep results: recorded quantities against one swept parameter.

matplotlib is optional (``fockmill[plot]``) and imported only when a figure is drawn;
figures are rendered with the non-interactive Agg canvas, never through pyplot.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill._store import ResultsStore, SweepTable

__all__ = ["plot_sweep"]

_LABELS = {
    "energy": "ground energy $E_0$",
    "gap": "gap $E_1-E_0$",
    "levels": "levels $E_k$",
    "populations": r"$\langle n_i\rangle$",
    "number_variance": r"Var $n_i$",
    "one_body": r"$\langle a_0^\dagger a_j\rangle$",
    "entropy": "entropy (nats)",
    "top_weight": "top-level weight",
    "residual": r"residual $\|Hv-Ev\|$",
    "seconds": "seconds per point",
}


def _as_table(source: SweepTable | ResultsStore | str | os.PathLike[str]) -> tuple[SweepTable, str]:
    if isinstance(source, SweepTable):
        return source, ""
    if isinstance(source, ResultsStore):
        return source.to_table(), source.meta.get("model_name", "")
    with ResultsStore.open(source) as store:
        return store.to_table(), store.meta.get("model_name", "")


def _series(
    name: str, values: npt.NDArray[Any], mode_labels: Sequence[str]
) -> list[tuple[str, npt.NDArray[np.float64]]]:
    """Split one quantity into plottable lines: (label, values per row)."""
    if values.ndim == 1:
        return [("", values)]
    if values.ndim == 2:

        def label(j: int) -> str:
            if name == "levels":
                return f"$E_{j}$"
            return mode_labels[j] if j < len(mode_labels) else f"mode {j}"

        return [(label(j), values[:, j]) for j in range(values.shape[1])]
    # A (rows, modes, modes) matrix: correlations of mode 0 with every other mode.
    return [(f"j={j}", values[:, 0, j]) for j in range(1, values.shape[2])]


def _evenly_spaced_in_log(values: npt.NDArray[np.float64]) -> bool:
    """True for a geometric grid spanning at least a decade (then a log axis reads best)."""
    unique = np.unique(values)
    if unique.size < 3 or unique[0] <= 0 or unique[-1] / unique[0] < 10:
        return False
    steps = np.diff(np.log(unique))
    return bool(np.allclose(steps, steps[0], rtol=1e-6))


def plot_sweep(
    source: SweepTable | ResultsStore | str | os.PathLike[str],
    out: str | os.PathLike[str],
    *,
    x: str | None = None,
    y: Sequence[str] = ("energy", "gap"),
    title: str | None = None,
    mode_labels: Sequence[str] = (),
) -> Path:
    """Draw recorded quantities against a swept parameter and save the figure.

    Parameters
    ----------
    source : SweepTable, ResultsStore, str or path
        The results (a results file is opened read-only in effect).
    out : str or path
        Image file to write; the format follows the suffix (``.png``, ``.pdf``, ``.svg``).
    x : str, optional
        Swept parameter on the horizontal axis (default: the first one that varies).
        Other varying parameters give one line per combination of their values. A
        geometric grid spanning a decade or more gets a logarithmic axis.
    y : sequence of str
        Quantities, one panel each: ``energy``, ``gap``, ``levels``, ``populations``,
        ``number_variance``, ``one_body`` (row of mode 0), ``entropy``, ``top_weight``,
        ``residual``, ``seconds``.
    title : str, optional
        Figure title (default: the model name stored in the results file).
    mode_labels : sequence of str
        Line labels for per-mode quantities (default ``mode 0``, ``mode 1``, ...).

    Returns
    -------
    pathlib.Path
        The file written.

    Raises
    ------
    ValueError
        No finished points, an unknown ``x`` or ``y``, or nothing swept.
    ImportError
        matplotlib is not installed (install ``fockmill[plot]``).
    """
    table, model_name = _as_table(source)
    if len(table) == 0:
        raise ValueError("the results hold no finished point yet; nothing to plot")
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

    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise ImportError(
            "plotting needs matplotlib; install it with: pip install 'fockmill[plot]'"
        ) from exc

    others = [name for name in varying if name != x]
    keys = [tuple(float(arrays[name][r]) for name in others) for r in range(len(table))]
    groups = sorted(set(keys))
    figure = Figure(figsize=(6.4, 0.6 + 2.4 * len(y)), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.subplots(len(y), 1, sharex=True, squeeze=False)[:, 0]
    xs = arrays[x]
    for axis, quantity in zip(axes, y, strict=True):
        lines = 0
        for group in groups:
            rows = np.array([r for r, key in enumerate(keys) if key == group], dtype=np.int64)
            rows = rows[np.argsort(xs[rows], kind="stable")]
            prefix = ", ".join(f"{n}={v:g}" for n, v in zip(others, group, strict=True))
            for label, values in _series(quantity, arrays[quantity][rows], mode_labels):
                text = "; ".join(part for part in (prefix, label) if part)
                axis.plot(xs[rows], values, marker="o", markersize=3, label=text or None)
                lines += 1
        axis.set_ylabel(_LABELS.get(quantity, quantity))
        if quantity == "residual" and np.all(arrays[quantity] > 0):
            axis.set_yscale("log")
        if 1 < lines <= 12:
            axis.legend(fontsize="small")
        axis.grid(alpha=0.3)
    axes[-1].set_xlabel(x)
    if _evenly_spaced_in_log(xs):
        axes[-1].set_xscale("log")
    heading = title if title is not None else model_name
    if heading:
        figure.suptitle(heading)
    path = Path(out)
    path.parent.mkdir(parents=True, exist_ok=True)
    figure.savefig(path, dpi=120)
    return path
