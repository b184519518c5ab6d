"""Figures of sweeps, dispersions, momentum-resolved spectra and workflows (needs the
``plot`` extra)."""

from fockmill.plots.spectra import momentum_figure, plot_momentum_spectrum
from fockmill.plots.sweeps import plot_dispersion, plot_sweep
from fockmill.plots.workflows import plot_workflow

__all__ = [
    "momentum_figure",
    "plot_dispersion",
    "plot_momentum_spectrum",
    "plot_sweep",
    "plot_workflow",
]
