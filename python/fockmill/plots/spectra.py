"""Figures of momentum-resolved spectra: the intensity ``S(q, ω)`` as a colour map over
momentum and frequency, with a colour bar (matplotlib, imported lazily).

The momentum axis is the lattice momentum the probe adds, ``q a/π`` (as the dispersion
figures); frequencies and the intensity carry the model's energy unit (ħ = 1).
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt

from fockmill.plots.sweeps import new_figure, unit_text

if TYPE_CHECKING:
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from fockmill.dynamics.momentum import MomentumSpectrum

__all__ = ["draw_momentum_map", "momentum_figure", "plot_momentum_spectrum"]


def _edges(centres: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
    """Cell edges halfway between sorted centres (half a spacing beyond the ends)."""
    if centres.size == 1:
        return np.array([centres[0] - 0.5, centres[0] + 0.5])
    mid = 0.5 * (centres[1:] + centres[:-1])
    return np.concatenate([[2 * centres[0] - mid[0]], mid, [2 * centres[-1] - mid[-1]]])


def draw_momentum_map(
    axis: Axes,
    labels: npt.NDArray[np.int64],
    orders: Sequence[int],
    omegas: npt.NDArray[np.float64],
    intensity: npt.NDArray[np.float64],
    *,
    unit: str = "",
    poles: Sequence[tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]] | None = None,
) -> Any:
    """Draw ``intensity`` (rows: label shifts ``labels``) over momentum and ``omegas`` on
    ``axis``; returns the colour mesh (for a colour bar; its ``fockmill_extend`` says
    whether the bar should extend above: the colours span the rows with a nonzero shift,
    since the zero shift of a conserved density is one saturating line at ω = 0).
    ``poles``: per row ``(frequencies, weights)``, drawn as points whose area follows the
    weight."""
    labels = np.asarray(labels, dtype=np.int64).reshape(len(intensity), len(orders))
    if len(orders) == 1:
        x = 2.0 * labels[:, 0] / orders[0]
        x = np.where(x > 1 + 1e-12, x - 2, x)
        xlabel = r"momentum transfer $q\,a/\pi$"
    else:
        x = np.arange(len(labels), dtype=np.float64)
        xlabel = "momentum transfer (labels per generator)"
    order = np.argsort(x, kind="stable")
    xs = x[order]
    values = np.asarray(intensity, dtype=np.float64)
    # The zero shift of a conserved density is one elastic line (weight N²/L at ω = 0)
    # that would saturate the scale: the colours span the other rows, the bar extends.
    moving = np.any(labels != 0, axis=1)
    top = float(values[moving].max()) if np.any(moving) else float(values.max())
    extend = "max" if values.max() > top * (1 + 1e-9) and top > 0 else "neither"
    mesh = axis.pcolormesh(
        _edges(xs),
        _edges(np.asarray(omegas, dtype=np.float64)),
        values[order].T,
        shading="flat",
        cmap="viridis",
        vmin=0.0,
        vmax=top if top > 0 else None,
    )
    mesh.fockmill_extend = extend  # read by the colour bar of the callers
    if len(orders) > 1:
        axis.set_xticks(xs)
        axis.set_xticklabels(
            ["(" + ",".join(str(int(v)) for v in labels[k]) + ")" for k in order],
            rotation=90,
            fontsize="small",
        )
    if poles is not None:
        top = max(
            (float(np.max(w)) for k, (_, w) in enumerate(poles) if np.size(w) and moving[k]),
            default=0.0,
        )
        for k, (freqs, weights) in enumerate(poles):
            inside = (freqs >= omegas.min()) & (freqs <= omegas.max()) & (weights > 1e-3 * top)
            if np.any(inside) and top > 0:
                axis.scatter(
                    np.full(int(np.sum(inside)), x[k]),
                    freqs[inside],
                    s=np.minimum(30.0 * weights[inside] / top, 60.0),
                    color="white",
                    edgecolors="none",
                    alpha=0.8,
                )
    axis.set_xlabel(xlabel)
    axis.set_ylabel(
        f"frequency $\\omega$ ({unit})" if unit else r"frequency $\omega$ (energy units)"
    )
    return mesh


def momentum_figure(
    spectrum: MomentumSpectrum,
    *,
    orders: Sequence[int] | None = None,
    unit: str = "",
    title: str | None = None,
    poles: bool = True,
) -> Figure:
    """The map of a :class:`~fockmill.MomentumSpectrum` as a matplotlib Figure.

    Parameters
    ----------
    spectrum : MomentumSpectrum
        The result of :func:`fockmill.momentum_spectrum`.
    orders : sequence of int, optional
        The order of each generator (default: the spectrum's own ``orders``).
    unit : str
        The energy unit (a parameter's name such as ``"J"`` is shown as its symbol).
    title : str, optional
        The figure's title.
    poles : bool
        Draw the poles as points when the spectrum holds them.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    ImportError
        matplotlib is not installed.
    """
    labels = np.asarray(spectrum.labels)
    if orders is None:
        orders = spectrum.orders
    shown = unit_text(unit)
    figure = new_figure((7.0, 4.6))
    axis = figure.subplots(1, 1)
    pole_list = None
    if poles and spectrum.poles is not None:
        pole_list = [(p.frequencies, p.weights) for p in spectrum.poles]
    mesh = draw_momentum_map(
        axis, labels, orders, spectrum.omegas, spectrum.intensity, unit=shown, poles=pole_list
    )
    bar = figure.colorbar(mesh, ax=axis, extend=mesh.fockmill_extend)
    bar.set_label(f"$S(q,\\omega)$ (1/{shown})" if shown else r"$S(q,\omega)$")
    heading = f"S(q, ω), η = {spectrum.eta:g}"
    figure.suptitle(f"{title}\n{heading}" if title else heading)
    return figure


def plot_momentum_spectrum(
    spectrum: MomentumSpectrum,
    out: str | os.PathLike[str],
    *,
    orders: Sequence[int] | None = None,
    unit: str = "",
    title: str | None = None,
    poles: bool = True,
) -> Path:
    """Draw a momentum-resolved spectrum (:func:`momentum_figure`) and save it.

    Returns
    -------
    pathlib.Path
        The file written (format from the suffix: ``.png``, ``.pdf``, ``.svg``).
    """
    figure = momentum_figure(spectrum, orders=orders, unit=unit, title=title, poles=poles)
    path = Path(out)
    path.parent.mkdir(parents=True, exist_ok=True)
    figure.savefig(path, dpi=120)
    return path
