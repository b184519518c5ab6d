"""Sweep figures, inspected as matplotlib objects (labels, legends, colours, limits).

These check the project's own presentation rules (no outside source): what the axes
say, that equal curves are merged, that legends sit outside the data, that many curves
get distinct colours, that constants are not drawn as magnified noise and that the
entropy names its bipartition.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import fockmill as fm
import numpy as np
import pytest
from fockmill.plots.sweeps import axis_label, plot_sweep, sweep_figure

pytest.importorskip("matplotlib", reason="plots need matplotlib (extra plot)")

RING = """
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 4
total = 4

[units]
energy = "J"
U = "J"

[sweep.U]
values = [0.5, 2.0, 8.0]

[record]
quantities = ["energy", "gap", "populations", "number_variances", "entanglement_entropy"]
entropy_modes = [0, 1]
"""


def sweep(text: str, **options: Any) -> tuple[fm.ModelFile, fm.SweepTable]:
    spec = fm.parse_model_text(text)
    assert spec.sweep is not None
    table = fm.run_sweep(
        spec.model,
        spec.sweep.points(),
        quantities=spec.quantities,
        levels=spec.levels,
        entropy_modes=spec.entropy_modes or None,
        progress=False,
        workers=1,
        **options,
    )
    return spec, table


@pytest.fixture(scope="module")
def ring() -> tuple[fm.ModelFile, fm.SweepTable]:
    return sweep(RING)


def legend_texts(axis: Any) -> list[str]:
    legend = axis.get_legend()
    return [] if legend is None else [t.get_text() for t in legend.get_texts()]


def test_axis_labels_title_and_merged_equal_modes(
    ring: tuple[fm.ModelFile, fm.SweepTable],
) -> None:
    spec, table = ring
    figure = sweep_figure(
        table,
        y=["energy", "gap", "populations", "number_variances", "entanglement_entropy"],
        model_file=spec,
    )
    energy, gap, populations, variance, entropy = figure.axes
    assert energy.get_ylabel() == "ground energy $E_0$ / $J$"
    assert gap.get_ylabel() == "gap $E_1-E_0$ / $J$"
    assert entropy.get_xlabel() == "on-site interaction $U/J$"
    title = figure.get_suptitle()
    assert "bose-hubbard" in title and "dim 35" in title
    assert "N = 4 on 4 sites, filling 1" in title
    # Four equivalent ring sites: one curve, no legend needed.
    assert len(populations.get_lines()) == 1 and populations.get_legend() is None
    assert len(variance.get_lines()) == 1
    assert entropy.get_ylabel() == "entropy $S_A$ (nats)\nA = site 0–1"


def test_constant_data_is_not_magnified_noise(
    ring: tuple[fm.ModelFile, fm.SweepTable],
) -> None:
    spec, table = ring
    figure = sweep_figure(table, y=["populations"], model_file=spec)
    (axis,) = figure.axes
    # Every site holds exactly one boson on average at every U (translation invariance).
    low, high = axis.get_ylim()
    assert low < 1.0 < high and high - low >= 1e-3
    assert axis.yaxis.get_major_formatter().get_useOffset() is False


def test_many_distinct_curves_use_a_colour_map_and_an_outside_legend() -> None:
    text = """
[model]
kind = "bose-hubbard"
lattice = "chain"
sites = 12
total = 2

[terms.W]
value = 1.0
per_mode = "number(@)"
random = { distribution = "uniform", low = -1.0, high = 1.0, seed = 4 }

[sweep.J]
values = [0.5, 1.0]

[record]
quantities = ["energy", "populations"]
"""
    spec, table = sweep(text)
    figure = sweep_figure(table, y=["populations"], model_file=spec)
    (axis,) = figure.axes
    lines = axis.get_lines()
    assert len(lines) == 12
    colours = {tuple(np.round(np.asarray(line.get_color(), dtype=float), 6)) for line in lines}
    assert len(colours) == 12, "beyond ten curves no colour may repeat"
    assert legend_texts(axis) == [f"site {i}" for i in range(12)]
    figure.canvas.draw()
    legend_box = axis.get_legend().get_window_extent()
    axes_box = axis.get_window_extent()
    assert legend_box.x0 >= axes_box.x1, "the legend must not cover the data"
    assert axis.get_xlabel() == "hopping $J$"


def test_labels_come_from_the_results_file_metadata(tmp_path: Path) -> None:
    spec = fm.parse_model_text(RING)
    assert spec.sweep is not None
    path = tmp_path / "ring.sqlite"
    fm.run_sweep(
        spec.model,
        spec.sweep.points(),
        store=path,
        quantities=["energy", "populations"],
        progress=False,
        workers=1,
    )
    # Without mode labels or units stored, the figure falls back to plain names.
    figure = sweep_figure(path, y=["energy"])
    assert figure.axes[0].get_ylabel() == "ground energy $E_0$"
    assert figure.axes[0].get_xlabel() == "on-site interaction $U$"
    assert "dim 35" in figure.get_suptitle() and "0 modes" not in figure.get_suptitle()
    with fm.ResultsStore.open(path) as store:
        store.set_meta("units", {"energy": "meV", "U": "meV"})
        store.set_meta("mode_labels", ["a", "b", "c", "d"])
        store.set_meta("space", {"cutoffs": [4] * 4, "total": 4, "dim": 35})
    figure = sweep_figure(path, y=["energy"])
    assert "4 modes, dim 35, N = 4 on 4 modes, filling 1" in figure.get_suptitle()
    assert figure.axes[0].get_ylabel() == "ground energy $E_0$ (meV)"
    assert figure.axes[0].get_xlabel() == "on-site interaction $U$ (meV)"
    out = plot_sweep(path, tmp_path / "ring.png", y=["energy", "populations"])
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_scale_factors_and_user_parameters_say_what_they_are() -> None:
    assert axis_label("exchange_scale", {}, "kerr-network") == (
        "scale factor of all exchange couplings $s_g$"
    )
    assert axis_label("we", {"we": "GHz"}, "jaynes-cummings-hubbard") == (
        r"emitter frequency $\omega_e$ (GHz)"
    )
    assert axis_label("J", {"J": "wc"}, "jaynes-cummings-hubbard") == (
        r"photon hopping $J/\omega_c$"
    )
    assert axis_label("W", {"W": "J"}, "bose-hubbard") == "parameter $W/J$"
    assert axis_label("pair_split", {"pair_split": "MHz"}) == "parameter pair_split (MHz)"
    described = axis_label("W", {"W": "J"}, "bose-hubbard", {"W": "disorder strength"})
    assert described == "disorder strength $W/J$"


def test_a_table_brings_its_own_labels_and_units() -> None:
    # What `fockmill demo` draws: a SweepTable, no model file, no results file.
    spec = fm.parse_model_text(RING)
    assert spec.sweep is not None
    table = fm.run_sweep(
        spec.model,
        spec.sweep,
        quantities=["energy", "populations"],
        units=spec.units,
        progress=False,
        workers=1,
    )
    figure = sweep_figure(table, y=["energy", "populations"])
    assert figure.axes[0].get_ylabel() == "ground energy $E_0$ / $J$"
    assert figure.axes[1].get_xlabel() == "on-site interaction $U/J$"
    assert [line.get_label() for line in figure.axes[1].get_lines()] == ["site 0–3 (equal)"]
