"""Figures of sweeps, dispersions and workflows (needs the ``plot`` extra)."""

from fockmill.plots.sweeps import plot_dispersion, plot_sweep
from fockmill.plots.workflows import plot_workflow

__all__ = ["plot_dispersion", "plot_sweep", "plot_workflow"]
