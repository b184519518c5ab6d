"""Open systems from model files: ``[jumps]``, sweeps of stationary states, the
``[quench]`` with jumps, the ``stationary`` command and its figures, and trajectories on
a local Dask cluster.

Every number is checked against a dense Liouvillian built here with numpy
(``test_lindblad.dense_liouvillian``; row-major vectorisation, common practice, no
source) or against the library's own Python route, which the file route must equal
exactly (same expression, same jumps, same solver)."""

from __future__ import annotations

from pathlib import Path

import fockmill as fm
import fockmill.cli.commands as cli
import numpy as np
import pytest
import scipy.linalg as sla
from fockmill.exceptions import ModelFileError
from fockmill.sweeps.run import run_sweep
from test_lindblad import dense_liouvillian, dense_stationary, ladder
from test_modelfile import check_round_trip

EXAMPLES = Path(__file__).resolve().parent.parent / "examples" / "models"

# Invented example: two coupled Kerr resonators, resonator 0 driven, both lossy,
# resonator 1 also dephased; cutoff 3 (16 states, 256 density-matrix entries).
PAIR = """\
[model]
kind = "kerr-network"
frequencies = [0.0, 0.0]
self_kerr = 4.0
couplings = [[0, 1, 0.7]]
cutoff = 3

[drives]
coherent = [[0, 0.4]]

[terms.Delta]
value = 0.3
description = "drive detuning"
per_mode = "number(@)"

[jumps.kappa]
rate = 1.0
per_mode = "lowering(@)"

[jumps.gamma_d]
rate = 0.2
operators = ["number(1)"]
"""

SWEEP = """
[sweep.Delta]
values = [-2.0, 0.0, 1.5]

[record]
quantities = ["energy", "populations", "g2", "purity", "number_variances", "residual"]
"""


def parse(text: str) -> fm.ModelFile:
    return fm.parse_model_text(text, source="<test>")


def dense_case(delta: float, kappa: float = 1.0, gamma: float = 0.2, cutoff: int = 3):
    """H and the jumps of PAIR built independently with numpy (kron products)."""
    a0, a1 = ladder([cutoff, cutoff])
    n0, n1 = a0.conj().T @ a0, a1.conj().T @ a1
    h = (
        delta * (n0 + n1)
        + 2.0 * (a0.conj().T @ a0.conj().T @ a0 @ a0 + a1.conj().T @ a1.conj().T @ a1 @ a1)
        + 0.7 * (a0.conj().T @ a1 + a1.conj().T @ a0)
        + 0.4 * (a0 + a0.conj().T)
    )
    jumps = [(kappa, a0), (kappa, a1), (gamma, n1)]
    return h, jumps, (a0, a1)


def dense_quantities(rho: np.ndarray, h: np.ndarray, ops: tuple[np.ndarray, ...]) -> dict:
    out: dict = {"energy": float(np.trace(rho @ h).real), "purity": float(np.trace(rho @ rho).real)}
    pops, g2s, variances = [], [], []
    for a in ops:
        n = a.conj().T @ a
        mean = float(np.trace(rho @ n).real)
        pops.append(mean)
        g2s.append(float(np.trace(rho @ a.conj().T @ a.conj().T @ a @ a).real) / mean**2)
        variances.append(float(np.trace(rho @ n @ n).real) - mean**2)
    out.update(populations=pops, g2=g2s, number_variances=variances)
    return out


# -- reading [jumps] --------------------------------------------------------------------


def test_jumps_become_rate_parameters() -> None:
    spec = parse(PAIR + SWEEP)
    model = spec.model
    assert model.is_open
    assert model.parameters["kappa"] == 1.0 and model.parameters["gamma_d"] == 0.2
    assert [op for op, _ in model.jumps["kappa"]] == [fm.lowering(0), fm.lowering(1)]
    assert model.jumps["gamma_d"] == ((fm.number(1), 1.0),)
    assert spec.jump_texts == {"kappa": ("lowering(0)", "lowering(1)"), "gamma_d": ("number(1)",)}
    assert spec.quantities == (
        "energy",
        "populations",
        "g2",
        "purity",
        "number_variances",
        "residual",
    )
    # Rates are parameters: [parameters], overrides and the fingerprint know them.
    assert model.channels(kappa=0.5)[0] == ("kappa[0]", fm.lowering(0), 0.5)
    closed = parse(PAIR.split("[jumps.kappa]")[0])
    assert closed.model.fingerprint() != model.fingerprint()
    assert parse(PAIR).quantities == ("populations", "g2", "purity")  # the default


def test_weights_scale_the_rate_and_modes_take_labels() -> None:
    text = PAIR.replace(
        'per_mode = "lowering(@)"', 'per_mode = "lowering(@)"\nmodes = ["mode 1"]\nweights = [0.5]'
    )
    spec = parse(text)
    assert spec.model.jumps["kappa"] == ((fm.lowering(1), 0.5),)
    assert spec.model.channels(kappa=2.0)[0] == ("kappa", fm.lowering(1), 1.0)


def test_summed_operator_is_one_jump() -> None:
    text = (
        PAIR + '\n[jumps.collective]\nrate = 0.1\noperators = [["lowering(0)", "-1 lowering(1)"]]\n'
    )
    spec = parse(text)
    assert spec.model.jumps["collective"] == ((fm.lowering(0) - fm.lowering(1), 1.0),)


REFUSALS = [
    # (replace this, with that, key path, words of the message)
    ("rate = 1.0\n", "rate = -0.1\n", "jumps.kappa.rate", ">= 0"),
    ("rate = 1.0\n", "", "jumps.kappa.rate", "missing"),
    ('per_mode = "lowering(@)"', 'per_mode = "lowring(@)"', "jumps.kappa.per_mode", "lowring"),
    ('per_mode = "lowering(@)"', 'per_mode = "lowering(0)"', "jumps.kappa.per_mode", "using @"),
    (
        'per_mode = "lowering(@)"',
        'per_mode = "lowering(@)"\nmodes = [5]',
        "jumps.kappa.modes[0]",
        "from 0 to 1",
    ),
    (
        'per_mode = "lowering(@)"',
        'per_mode = "lowering(@)"\nmodes = ["cavity 9"]',
        "jumps.kappa.modes[0]",
        "not a mode label",
    ),
    (
        'per_mode = "lowering(@)"',
        'per_mode = "lowering(@)"\nweights = [1.0, -2.0]',
        "jumps.kappa.weights[1]",
        ">= 0",
    ),
    (
        'operators = ["number(1)"]',
        'operators = ["number(7)"]',
        "jumps.gamma_d.operators[0]",
        "0..1",
    ),
    ('operators = ["number(1)"]', "operators = [3]", "jumps.gamma_d.operators[0]", "term string"),
    ('operators = ["number(1)"]', "", "jumps.gamma_d", "per_mode"),
    ("[jumps.gamma_d]", "[jumps.exchange_scale]", "jumps.exchange_scale", "pick a new name"),
    ("rate = 0.2\n", "rate = 0.2\ncolour = 1\n", "jumps.gamma_d.colour", "unknown key"),
]


@pytest.mark.parametrize(("old", "new", "key", "words"), REFUSALS)
def test_bad_jumps_name_the_key_path(old: str, new: str, key: str, words: str) -> None:
    text = PAIR.replace(old, new, 1)
    assert text != PAIR
    with pytest.raises(ModelFileError) as info:
        parse(text)
    message = str(info.value)
    assert key in message and words in message, message


@pytest.mark.parametrize(
    ("extra", "key", "words"),
    [
        ("[parameters]\nkappa = -1.0\n", "parameters.kappa", ">= 0"),
        ("[parameters]\nkapa = 1.0\n", "parameters.kapa", "did you mean 'kappa'"),
        ("[sweep.kappa]\nvalues = [1.0, -0.5]\n", "sweep.kappa", ">= 0"),
        ("[sweep.kapa]\nvalues = [1.0]\n", "sweep.kapa", "did you mean 'kappa'"),
        ('[record]\nquantities = ["gap"]\n', "record.quantities[0]", "closed system"),
        ("[record]\nlevels = 2\n", "record.levels", "stationary"),
        ('[solver]\nmethod = "lanczos"\n', "solver.method", "ground-state method"),
        ('[units]\nkapa = "MHz"\n', "units.kapa", "did you mean 'kappa'"),
        ("[symmetry]\npermutations = [[1, 0]]\nlabels = [0]\n", "symmetry", "drop [symmetry]"),
    ],
)
def test_bad_uses_of_rates_name_the_key_path(extra: str, key: str, words: str) -> None:
    with pytest.raises(ModelFileError) as info:
        parse(PAIR + extra)
    message = str(info.value)
    assert key in message and words in message, message


def test_a_loss_jump_refuses_a_conserved_total() -> None:
    text = """\
[model]
kind = "bose-hubbard"
lattice = "chain"
sites = 2
total = 1
cutoff = 2

[jumps.kappa]
rate = 0.1
per_mode = "lowering(@)"
"""
    with pytest.raises(ModelFileError, match=r"drop model\.total"):
        parse(text)
    # Dephasing keeps the number of quanta: allowed with a total.
    spec = parse(text.replace("lowering(@)", "number(@)"))
    assert spec.model.space.total == 1


def test_trajectories_need_jumps() -> None:
    closed = PAIR.split("[jumps.kappa]")[0]
    quench = (
        "[quench]\ntimes = [0.0, 1.0]\ntrajectories = 5\n"
        'initial = { state = "fock", occupations = [0, 0] }\n'
    )
    with pytest.raises(ModelFileError, match=r"quench\.trajectories.*need \[jumps\]"):
        parse(closed + quench)
    with pytest.raises(ModelFileError, match=r"quench\.seed"):
        parse(PAIR + quench.replace("trajectories = 5", "seed = 3"))


# -- sweeps of stationary states ----------------------------------------------------------


def test_sweep_points_equal_the_python_route_and_the_dense_reference() -> None:
    spec = parse(PAIR + SWEEP)
    model = spec.model
    assert spec.sweep is not None
    table = run_sweep(model, spec.sweep, quantities=spec.quantities, workers=1, progress=False)
    assert table.stationary and [row.status for row in table] == ["ok"] * 3
    for row in table:
        values = row.parameters
        # The Python route with the same expression and jumps: exactly equal.
        h = model.hamiltonian(**values)
        jumps = [fm.loss(0, values["kappa"]), fm.loss(1, values["kappa"])]
        jumps.append(fm.dephasing(1, values["gamma_d"]))
        ss = fm.stationary_state(h, model.space, jumps)
        assert row.method == ss.method == "dense"
        assert row.observables["populations"] == [float(v) for v in ss.populations]
        assert row.observables["g2"] == [ss.g2(0), ss.g2(1)]
        assert row.observables["purity"] == ss.purity
        assert row.residual == ss.residual
        assert row.energy == ss.energy
        np.testing.assert_allclose(ss.energy, float(ss.expectation(h)), rtol=1e-12, atol=1e-14)
        # An independent dense Liouvillian (numpy): equal to 1e-9.
        hd, jd, ops = dense_case(values["Delta"])
        reference = dense_quantities(dense_stationary(hd, jd), hd, ops)
        for key in ("populations", "g2", "number_variances"):
            np.testing.assert_allclose(row.observables[key], reference[key], rtol=1e-9, atol=1e-11)
        np.testing.assert_allclose(row.observables["purity"], reference["purity"], rtol=1e-9)
        np.testing.assert_allclose(row.energy, reference["energy"], rtol=1e-9, atol=1e-11)
        assert row.residual < 1e-10


def test_rates_can_be_swept_and_the_iterative_method_warm_starts() -> None:
    text = (
        PAIR
        + '[sweep.kappa]\nvalues = [0.5, 1.0, 2.0]\n[solver]\nmethod = "iterative"\ntol = 1e-11\n'
    )
    spec = parse(text)
    assert spec.solver["method"] == "iterative"
    table = run_sweep(
        spec.model,
        spec.sweep,
        quantities=spec.quantities,
        workers=1,
        progress=False,
        **{k: spec.solver[k] for k in ("method", "tol")},
    )
    for row in table:
        assert row.status == "ok" and row.method.startswith("iterative")
        hd, jd, ops = dense_case(0.3, kappa=row.parameters["kappa"])
        reference = dense_quantities(dense_stationary(hd, jd), hd, ops)
        np.testing.assert_allclose(
            row.observables["populations"], reference["populations"], rtol=1e-7, atol=1e-9
        )
        np.testing.assert_allclose(row.observables["g2"], reference["g2"], rtol=1e-6)


def test_a_zero_rate_point_without_a_unique_state_is_a_failed_row() -> None:
    # With kappa = 0 and no drive only dephasing is left, which conserves the photon
    # number: one stationary state per number sector, so none is unique (common
    # practice, no source); the point is a failed row, the next one is solved.
    text = PAIR.replace("[drives]\ncoherent = [[0, 0.4]]\n", "")
    spec = parse(text + "[sweep.kappa]\nvalues = [0.0, 1.0]\n")
    table = run_sweep(spec.model, spec.sweep, workers=1, progress=False)
    assert table.rows[0].status == "failed" and "not unique" in table.rows[0].message
    assert table.rows[1].status == "ok"


def test_symmetry_is_refused_for_open_models() -> None:
    spec = parse(PAIR)
    swap = fm.ModePermutation([1, 0])
    with pytest.raises(ValueError, match="drop symmetry="):
        run_sweep(spec.model, [{}], symmetry=[(swap, 0)], workers=1, progress=False)
    with pytest.raises(ValueError, match="choose from"):
        run_sweep(spec.model, [{}], quantities=["gap"], workers=1, progress=False)


def test_resumed_store_keeps_the_stationary_points(tmp_path: Path) -> None:
    spec = parse(PAIR + SWEEP)
    path = tmp_path / "scan.sqlite"
    first = run_sweep(spec.model, spec.sweep, store=path, workers=1, progress=False)
    again = run_sweep(spec.model, spec.sweep, store=path, workers=1, progress=False)
    assert again.stationary
    assert [r.observables for r in again] == [r.observables for r in first]
    with fm.ResultsStore.open(path) as store:
        assert store.meta["settings"]["stationary"] is True


# -- [quench] with jumps --------------------------------------------------------------------

QUENCH = """
[quench]
times = [0.0, 0.5, 1.0, 2.0]
initial = { state = "fock", occupations = [2, 0] }

[quench.observables]
hop = ["raising(0) lowering(1)", "raising(1) lowering(0)"]
"""


def test_quench_with_jumps_evolves_the_density_matrix() -> None:
    from fockmill.workflows.run import run_quench

    result = run_quench(parse(PAIR + QUENCH))
    # The same file without jumps (its truncation warning is off: only the arrays matter).
    closed_text = PAIR.split("[jumps.kappa]")[0] + QUENCH + "[solver]\ncutoff_warning = false\n"
    closed = run_quench(parse(closed_text))
    assert set(result.arrays) == set(closed.arrays)  # the same result arrays
    hd, jd, (a0, a1) = dense_case(0.3)
    lmat = dense_liouvillian(hd, jd)
    psi = np.zeros(16, dtype=complex)
    psi[2 * 4] = 1.0  # |2, 0⟩ (mode 0 most significant)
    rho0 = np.outer(psi, psi.conj()).reshape(-1)
    hop = a0.conj().T @ a1 + a1.conj().T @ a0
    tops = []
    for k, t in enumerate(result.arrays["times"]):
        rho = (sla.expm(lmat * t) @ rho0).reshape(16, 16)
        n0 = float(np.trace(rho @ a0.conj().T @ a0).real)
        n1 = float(np.trace(rho @ a1.conj().T @ a1).real)
        np.testing.assert_allclose(result.arrays["populations"][k], [n0, n1], atol=1e-6)
        np.testing.assert_allclose(
            result.arrays["values.hop"][k], float(np.trace(rho @ hop).real), atol=1e-6
        )
        np.testing.assert_allclose(
            result.arrays["energy"][k], float(np.trace(rho @ hd).real), atol=1e-6
        )
        probabilities = np.diag(rho).real.reshape(4, 4)
        tops.append([probabilities[3, :].sum(), probabilities[:, 3].sum()])
    np.testing.assert_allclose(result.arrays["top_weights"], np.max(tops, axis=0), atol=1e-6)
    assert result.meta["settings"]["jumps"][0].startswith("kappa = 1")


def test_quench_trajectories_agree_with_the_density_matrix() -> None:
    from fockmill.workflows.run import run_quench

    density = run_quench(parse(PAIR + QUENCH))
    spec = parse(PAIR + QUENCH.replace("[quench]\n", "[quench]\ntrajectories = 150\nseed = 7\n"))
    sampled = run_quench(spec)
    assert set(density.arrays) <= set(sampled.arrays)
    assert {"populations_error", "energy_error", "errors.hop"} <= set(sampled.arrays)
    # Within 4 standard errors (Dalibard, Castin & Mølmer 1992: the trajectory average
    # converges to the master equation; the bound is common practice, no source).
    error = sampled.arrays["populations_error"]
    gap = np.abs(sampled.arrays["populations"] - density.arrays["populations"])
    assert np.all(gap <= 4 * error + 1e-9)
    again = run_quench(spec)
    np.testing.assert_array_equal(again.arrays["populations"], sampled.arrays["populations"])
    from fockmill.cli.workflows import format_result

    text = format_result(sampled)
    assert "150 quantum-jump trajectories (seed 7)" in text and "±" in text


RAMP = """
[quench.ramp.Delta]
times = [0.0, 1.0, 2.0]
values = [0.0, 1.5, -1.0]
"""


@pytest.mark.parametrize("trajectories", [False, True], ids=["density", "trajectories"])
def test_quench_with_jumps_follows_a_ramp(trajectories: bool) -> None:
    # The ramped detuning Δ(t) of the file against dρ/dt = 𝓛(t)ρ integrated densely by
    # scipy's solve_ivp on the numpy Liouvillian (common practice, no source);
    # trajectories within 4 standard errors of it (Dalibard, Castin & Mølmer 1992).
    from fockmill.workflows.run import run_quench
    from scipy.integrate import solve_ivp

    text = PAIR + QUENCH + RAMP
    if trajectories:
        text = text.replace("[quench]\n", "[quench]\ntrajectories = 200\nseed = 3\n")
    result = run_quench(parse(text))
    h0, jd, (a0, a1) = dense_case(0.0)
    piece = dense_case(1.0)[0] - h0  # Σ_i n_i
    l0 = dense_liouvillian(h0, jd)
    lp = dense_liouvillian(piece, [])
    ramp = fm.piecewise_linear([0.0, 1.0, 2.0], [0.0, 1.5, -1.0])
    psi = np.zeros(16, dtype=complex)
    psi[2 * 4] = 1.0  # |2, 0⟩
    times = result.arrays["times"]
    ref = solve_ivp(
        lambda t, r: (l0 + ramp(t) * lp) @ r,
        (0.0, float(times[-1])),
        np.outer(psi, psi.conj()).reshape(-1),
        method="DOP853",
        t_eval=times,
        rtol=1e-11,
        atol=1e-12,
    )
    for k, t in enumerate(times):
        rho = ref.y[:, k].reshape(16, 16)
        n = [float(np.trace(rho @ a.conj().T @ a).real) for a in (a0, a1)]
        energy = float(np.trace(rho @ (h0 + ramp(float(t)) * piece)).real)
        if trajectories:
            bound = 4 * result.arrays["populations_error"][k] + 1e-9
            assert np.all(np.abs(result.arrays["populations"][k] - n) <= bound)
            assert abs(result.arrays["energy"][k] - energy) <= (
                4 * result.arrays["energy_error"][k] + 1e-9
            )
        else:
            np.testing.assert_allclose(result.arrays["populations"][k], n, atol=1e-6)
            assert result.arrays["energy"][k] == pytest.approx(energy, abs=1e-6)
    assert result.meta["settings"]["ramps"]["Delta"]["values"] == [0.0, 1.5, -1.0]
    assert not any(key.startswith("values.#") for key in result.arrays)


def test_a_ramped_jump_rate_is_refused() -> None:
    from fockmill.workflows.run import run_quench

    spec = parse(PAIR + QUENCH + RAMP.replace("Delta", "kappa"))
    with pytest.raises(ValueError, match="sets a jump rate"):
        run_quench(spec)


# -- the command line and the figures -----------------------------------------------------


def run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    code = cli.main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_stationary_command_prints_and_writes_the_python_result(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model_path = tmp_path / "pair.toml"
    model_path.write_text(PAIR, encoding="utf-8")
    out = tmp_path / "point.sqlite"
    code, text, err = run(
        ["stationary", str(model_path), "--set", "Delta=-1", "--out", str(out)], capsys
    )
    assert code == 0, err
    spec = parse(PAIR)
    h = spec.model.hamiltonian(Delta=-1.0)
    ss = fm.stationary_state(
        h, spec.model.space, [fm.loss(0, 1.0), fm.loss(1, 1.0), fm.dephasing(1, 0.2)]
    )
    assert f"{ss.populations[0]:.6g}" in text and f"{ss.g2(1):.6g}" in text
    assert "g2(0)" in text and "kappa = 1: " in text and "‖𝓛ρ‖" in text
    with fm.ResultsStore.open(out) as store:
        row = store.rows()[0]
    assert row.observables["populations"] == [float(v) for v in ss.populations]
    code, text, err = run(["show", str(out)], capsys)
    assert code == 0 and "g2" in text
    # An existing file is never overwritten; a closed file has no stationary state.
    code, _, err = run(["stationary", str(model_path), "--out", str(out)], capsys)
    assert code == 2 and "exists already" in err
    closed = tmp_path / "closed.toml"
    closed.write_text(PAIR.split("[jumps.kappa]")[0], encoding="utf-8")
    code, _, err = run(["stationary", str(closed)], capsys)
    assert code == 2 and "no [jumps]" in err
    code, _, err = run(["solve", str(model_path)], capsys)
    assert code == 2 and "fockmill stationary" in err


def test_sweep_command_and_figure_with_units(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    pytest.importorskip("matplotlib")
    from fockmill.plots.sweeps import sweep_figure

    model_path = tmp_path / "pair.toml"
    model_path.write_text(
        PAIR + SWEEP + '[units]\nenergy = "kappa"\nDelta = "kappa"\nkappa = "MHz"\n',
        encoding="utf-8",
    )
    results = tmp_path / "scan.sqlite"
    code, _, err = run(
        ["sweep", str(model_path), "--out", str(results), "--workers", "1", "--no-progress"],
        capsys,
    )
    assert code == 0, err
    code, _, err = run(["plot", str(results), "--out", str(tmp_path / "scan.png")], capsys)
    assert code == 0, err
    assert (tmp_path / "scan.png").is_file()
    figure = sweep_figure(results, y=["populations", "g2", "energy", "residual"])
    axes = figure.axes
    assert axes[-1].get_xlabel() == r"drive detuning $\Delta/\kappa$"
    assert axes[1].get_ylabel() == r"$g^{(2)}(0)$"
    assert axes[2].get_ylabel() == r"mean energy Tr$(\rho H)$ / $\kappa$"
    assert axes[3].get_ylabel() == r"residual $\|\mathcal{L}\rho\|$ / $\kappa$"


def test_example_files_read_and_solve() -> None:
    for name in ("kerr_pair_blockade.toml", "kerr_bistability.toml"):
        spec = check_round_trip(name)  # loads, parses the same from text, says invented
        assert spec.model.is_open and spec.sweep is not None
        assert list(spec.model.jumps) == ["kappa"] and spec.units["Delta"] == "kappa"
    # Every key of a [jumps.NAME] table is documented (common practice, no source).
    from fockmill.files.jumps import JUMP_KEYS

    docs = (EXAMPLES.parents[1] / "docs" / "model-files.md").read_text(encoding="utf-8")
    for key in (*JUMP_KEYS, "trajectories", "g2", "purity"):
        assert f"`{key}`" in docs, key
    # Photon blockade on resonance in the pair (U = 10 κ): g2(0) of the driven
    # resonator well below 1 at Delta = 0 (Imamoḡlu et al., Phys. Rev. Lett. 79, 1467
    # (1997): antibunching for U >> κ), against the dense reference to 1e-8.
    spec = fm.load_model_file(EXAMPLES / "kerr_pair_blockade.toml")
    table = run_sweep(spec.model, [{"Delta": 0.0}], quantities=["g2"], workers=1, progress=False)
    g2 = table.rows[0].observables["g2"][0]
    a0, a1 = ladder([4, 4])
    hd = 5.0 * sum(a.conj().T @ a.conj().T @ a @ a for a in (a0, a1))
    hd = hd + (a0.conj().T @ a1 + a1.conj().T @ a0) + 0.2 * (a0 + a0.conj().T)
    rho = dense_stationary(hd, [(1.0, a0), (1.0, a1)])
    n0 = np.trace(rho @ a0.conj().T @ a0).real
    reference = np.trace(rho @ a0.conj().T @ a0.conj().T @ a0 @ a0).real / n0**2
    np.testing.assert_allclose(g2, reference, rtol=1e-8)
    assert g2 < 0.5


# -- trajectories on a local Dask cluster ---------------------------------------------------


def test_trajectories_on_a_local_dask_cluster_equal_the_serial_run() -> None:
    distributed = pytest.importorskip("distributed")
    space = fm.FockSpace(modes=2, cutoff=2)
    h = 0.5 * (fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    h = h + 0.3 * (fm.lowering(0) + fm.raising(0))
    jumps = [fm.loss(0, 0.8), fm.loss(1, 0.4)]
    psi0 = np.zeros(space.dim)
    psi0[space.index(np.array([1, 1]))] = 1.0
    times = [0.0, 0.5, 1.5]
    obs = {"n0": fm.number(0), "n1": fm.number(1)}
    serial = fm.sample_trajectories(h, space, psi0, times, jumps, observables=obs, count=10, seed=5)
    with (
        distributed.LocalCluster(
            n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        remote = fm.sample_trajectories(
            h,
            space,
            psi0,
            times,
            jumps,
            observables=obs,
            count=10,
            seed=5,
            executor=client,
            chunk=3,
        )
        # A sweep of stationary states runs on the same cluster through run_sweep.
        spec = parse(PAIR + SWEEP)
        on_dask = run_sweep(spec.model, spec.sweep, executor=client, progress=False)
    for name in obs:
        np.testing.assert_array_equal(remote.samples[name], serial.samples[name])
    np.testing.assert_array_equal(remote.jumps, serial.jumps)
    here = run_sweep(spec.model, spec.sweep, workers=1, progress=False)
    assert [r.observables for r in on_dask] == [r.observables for r in here]


def test_thermal_of_an_open_file_warns_that_jumps_are_unused() -> None:
    from fockmill.workflows.run import run_thermal

    thermal = "[thermal]\ntemperatures = [1.0]\n[solver]\ncutoff_warning = false\n"
    spec = parse(PAIR + thermal)
    with pytest.warns(UserWarning, match=r"\[jumps\] are not used by \[thermal\]"):
        result = run_thermal(spec)
    # The Hamiltonian alone: the same as the file without jumps.
    closed = run_thermal(parse(PAIR.split("[jumps.kappa]")[0] + thermal))
    np.testing.assert_array_equal(result.arrays["energy"], closed.arrays["energy"])
