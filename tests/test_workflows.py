"""The quench, spectrum and temperature workflows of model files: parsing and refusals,
the results file, the command line, figures, and results against outside facts.

Outside facts used (each named beside its check):
* two resonators coupled by J (a₀†a₁ + h.c.) exchange one photon as n₀(t) = cos²(Jt)
  (coupled-mode theory; common practice, no source);
* a resonant Jaynes–Cummings pair started in |0 photons, excited⟩ has
  P_e(t) = cos²(gt) (Jaynes & Cummings 1963, Proc. IEEE 51, 89; vacuum Rabi
  oscillation);
* a Kerr oscillator H = (K/2) a†²a² started in |α⟩ has
  ⟨a(t)⟩ = α exp(|α|²(e^{−iKt} − 1)) (Yurke & Stoler 1986, Phys. Rev. Lett. 57, 13;
  from memory, and it follows in two lines from a|α⟩ = α|α⟩ and E_{n+1} − E_n = Kn);
* the zeroth moment of S(ω) is ⟨ψ|A†A|ψ⟩ (sum rule; common practice), and S(ω) is
  the Lorentzian-broadened Lehmann sum over exact eigenstates (dense numpy reference);
* a truncated oscillator ω n with cutoff c has ⟨n⟩_T = Σ n xⁿ / Σ xⁿ, x = e^{−ω/T},
  sums over n = 0..c (finite geometric sum; common practice), and
  C = (⟨E²⟩ − ⟨E⟩²)/T² (canonical fluctuation formula; common practice);
* N bosons condensed in the bonding orbital of two sites have binomial site occupations,
  so ⟨n₀(n₀ − 1)⟩ = N(N − 1)/4 (common practice, no source).
"""

from __future__ import annotations

import io
import json
import sqlite3
import subprocess
import sys
import warnings
from pathlib import Path

import fockmill as fm
import fockmill.cli.commands as cli
import numpy as np
import pytest
import scipy.linalg as sla
from fockmill.exceptions import ModelFileError, StoreError
from fockmill.files.dynamics import InitialState
from fockmill.store.sweeps import ResultsStore
from fockmill.store.workflows import is_workflow_file
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_modelfile import VALUES, toml_document

REPO = Path(__file__).resolve().parents[1]
EXAMPLES = REPO / "examples" / "models"

# Invented: two identical resonators coupled by J = 0.3, one photon.
PAIR = """\
[model]
kind = "kerr-network"
frequencies = [1.0, 1.0]
couplings = [[0, 1, 0.3]]
cutoff = 1
total = 1

[units]
energy = "GHz"
"""

PAIR_QUENCH = (
    PAIR
    + """
[quench]
times = { start = 0.0, stop = 10.0, num = 41 }
tol = 1e-10

[quench.initial]
state = "fock"
occupations = [1, 0]

[quench.observables]
current = ["(0-1j) raising(0) lowering(1)", "(0+1j) raising(1) lowering(0)"]
forward = "raising(0) lowering(1)"
"""
)

# Invented: a ring of four interacting sites (U = 3J) holding four bosons.
RING = """\
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 4
total = 4
cutoff = 4

[parameters]
J = 1.0
U = 3.0

[units]
energy = "J"
"""

# Invented: one oscillator, ω = 1, cutoff 6, no conserved number.
OSCILLATOR = """\
[model]
kind = "kerr-network"
frequencies = [1.0]
cutoff = 6

[units]
energy = "meV"

[thermal]
temperatures = [0.2, 0.5, 1.0, 2.0, 5.0]
method = "exact"

[thermal.observables]
n_squared = "number(0)^2"
"""


def parse(text: str) -> fm.ModelFile:
    return fm.parse_model_text(text, source="<test>")


def refusal(text: str) -> ModelFileError:
    with pytest.raises(ModelFileError) as info:
        parse(text)
    return info.value


# -- parsing ------------------------------------------------------------------------------


def test_sections_parse_with_defaults() -> None:
    spec = parse(PAIR_QUENCH)
    q = spec.quench
    assert q is not None and spec.spectrum is None and spec.thermal is None
    assert q.initial == InitialState("fock", occupations=(1, 0))
    assert q.times == tuple(np.linspace(0.0, 10.0, 41))
    assert q.tol == 1e-10 and q.populations
    assert set(q.observables) == {"current", "forward"}
    assert q.observables["current"].is_hermitian()
    assert not q.observables["forward"].is_hermitian()
    assert q.texts["forward"] == ("raising(0) lowering(1)",)
    plain = parse(RING + '[spectrum]\noperator = "lowering(site 1)"\nomegas = [0.0, 1.0]\n')
    s = plain.spectrum
    assert s is not None and s.charge == -1
    assert s.target == fm.FockSpace(modes=4, cutoff=4, total=3)
    assert (s.eta, s.reference_energy, s.poles, s.tol, s.max_steps) == (
        0.05,
        None,
        True,
        1e-6,
        None,
    )
    t = parse(OSCILLATOR).thermal
    assert t is not None
    assert (t.method, t.samples, t.seed, t.steps, t.populations) == ("exact", None, 0, None, True)
    assert t.temperatures == (0.2, 0.5, 1.0, 2.0, 5.0)


def test_grids_accept_a_table_with_geometric_spacing() -> None:
    text = RING.replace("total = 4", "total = 2") + (
        '[thermal]\ntemperatures = { start = 0.1, stop = 10.0, num = 3, spacing = "geometric" }\n'
    )
    spec = parse(text).thermal
    assert spec is not None
    np.testing.assert_allclose(spec.temperatures, [0.1, 1.0, 10.0])


@pytest.mark.parametrize(
    ("name", "section"),
    [
        ("kerr_oscillator_revival.toml", "quench"),
        ("dimer_interaction_quench.toml", "quench"),
        ("ring_interaction_ramp.toml", "quench"),
        ("ring_photon_removal.toml", "spectrum"),
        ("ring_structure_factor.toml", "spectrum"),
        ("kerr_trimer_thermal.toml", "thermal"),
    ],
)
def test_examples_load_and_parse_the_same_from_text(name: str, section: str) -> None:
    path = EXAMPLES / name
    loaded = fm.load_model_file(path)
    text = path.read_text(encoding="utf-8")
    assert "INVENTED SCENARIO" in text
    again = fm.parse_model_text(text)
    assert getattr(loaded, section) is not None
    assert getattr(again, section) == getattr(loaded, section)
    assert again == fm.ModelFile(**{**loaded.__dict__, "path": None})


def test_a_file_without_the_sections_is_unchanged() -> None:
    spec = parse(RING)
    assert (spec.quench, spec.spectrum, spec.thermal) == (None, None, None)


QUENCH_HEAD = PAIR + "[quench]\ntimes = [0.0, 1.0]\n"
FOCK = '[quench.initial]\nstate = "fock"\noccupations = [1, 0]\n'
OPEN = PAIR.replace("total = 1\n", "").replace("cutoff = 1", "cutoff = 8")

REFUSALS = [
    # (text, key path, words in the message)
    (PAIR + "[quench]\ntimes = [0.0]\n", "quench.initial", "missing"),
    (QUENCH_HEAD + FOCK + "tool = 1\n", "quench.initial.tool", "unknown key"),
    (QUENCH_HEAD + FOCK.replace('"fock"', '"fok"'), "quench.initial.state", 'did you mean "fock"'),
    (
        QUENCH_HEAD + FOCK + "amplitudes = [1.0, 0.0]\n",
        "quench.initial.amplitudes",
        'state = "fock"',
    ),
    (QUENCH_HEAD + FOCK.replace("[1, 0]", "[1]"), "quench.initial.occupations", "expected 2"),
    (QUENCH_HEAD + FOCK.replace("[1, 0]", "[2, 0]"), "quench.initial.occupations[0]", "cutoff"),
    (QUENCH_HEAD + FOCK.replace("[1, 0]", "[1, 1]"), "quench.initial.occupations", "sector"),
    (
        QUENCH_HEAD + '[quench.initial]\nstate = "coherent"\namplitudes = [1.0, 0.0]\n',
        "quench.initial.state",
        "model.total",
    ),
    (
        OPEN + '[quench]\ntimes = [0.0]\n[quench.initial]\nstate = "coherent"\n'
        "amplitudes = [3.0, 0.0]\n",
        "quench.initial.amplitudes[0]",
        "above the cutoff 8",
    ),
    (
        OPEN + '[quench]\ntimes = [0.0]\n[quench.initial]\nstate = "coherent"\n'
        "amplitudes = [[0.1, 0.2, 0.3], 0.0]\n",
        "quench.initial.amplitudes[0]",
        "[re, im]",
    ),
    (
        QUENCH_HEAD + '[quench.initial]\nstate = "ground"\nparameters = { U = 1.0 }\n',
        "quench.initial.parameters.U",
        "unknown key",
    ),
    (
        QUENCH_HEAD + '[quench.initial]\nstate = "ground"\nparameters = {}\n',
        "quench.initial.parameters",
        "empty",
    ),
    (
        PAIR + "[quench]\ntimes = [-1.0, 1.0]\n" + FOCK,
        "quench.times",
        ">= 0",
    ),
    (PAIR + "[quench]\ntimes = [2.0, 1.0]\n" + FOCK, "quench.times", "non-decreasing"),
    (PAIR + '[quench]\ntimes = "soon"\n' + FOCK, "quench.times", "array of numbers"),
    (
        PAIR + "[quench]\ntimes = { start = 0.0, stop = 1.0 }\n" + FOCK,
        "quench.times.num",
        "missing",
    ),
    (QUENCH_HEAD + "tol = 2.0\n" + FOCK, "quench.tol", "between 0 and 1"),
    (QUENCH_HEAD + "populations = false\n" + FOCK, "quench.populations", "nothing to record"),
    (
        QUENCH_HEAD + FOCK + '[quench.observables]\n"2x" = "number(0)"\n',
        "quench.observables.2x",
        "start with a letter",
    ),
    (
        QUENCH_HEAD + FOCK + '[quench.observables]\nenergy = "number(0)"\n',
        "quench.observables.energy",
        "pick another",
    ),
    (
        QUENCH_HEAD + FOCK + '[quench.observables]\nadd = "raising(0)"\n',
        "quench.observables.add",
        "sector",
    ),
    (
        QUENCH_HEAD + FOCK + '[quench.observables]\nbad = "number(0) lift(1)"\n',
        "quench.observables.bad",
        "column",
    ),
    (
        QUENCH_HEAD + FOCK + '[quench.observables]\nbad = ["number(0)", "number(7)"]\n',
        "quench.observables.bad[1]",
        "mode",
    ),
    (PAIR + "[spectrum]\nomegas = [0.0]\n", "spectrum.operator", "missing"),
    (PAIR + '[spectrum]\noperator = "lowering(0)"\n', "spectrum.omegas", "missing"),
    (
        PAIR + '[spectrum]\noperator = "lowering(0)"\nomegas = [0.0]\neta = 0.0\n',
        "spectrum.eta",
        "> 0",
    ),
    (
        PAIR + '[spectrum]\noperator = "lowering(0)"\nomegas = [0.0]\netta = 0.1\n',
        "spectrum.etta",
        "did you mean 'eta'",
    ),
    (
        PAIR + '[spectrum]\noperator = ["lowering(0)", "raising(1)"]\nomegas = [0.0]\n',
        "spectrum.operator",
        "one fixed amount",
    ),
    (
        PAIR + '[spectrum]\noperator = "lowering(0) lowering(1)"\nomegas = [0.0]\n',
        "spectrum.operator",
        "nothing is left",
    ),
    (
        PAIR + '[spectrum]\noperator = "raising(0) raising(1) raising(0)"\nomegas = [0.0]\n',
        "spectrum.operator",
        "cannot be used",
    ),
    (PAIR + "[spectrum]\noperator = 3\nomegas = [0.0]\n", "spectrum.operator", "term strings"),
    (PAIR + "[thermal]\ntemperatures = [0.0, 1.0]\n", "thermal.temperatures", "> 0"),
    (
        PAIR + '[thermal]\ntemperatures = [1.0]\nmethod = "ftml"\n',
        "thermal.method",
        'did you mean "ftlm"',
    ),
    (
        PAIR + '[thermal]\ntemperatures = [1.0]\nmethod = "exact"\nsamples = 4\n',
        "thermal.samples",
        "only meaningful",
    ),
    (PAIR + "[thermal]\ntemperatures = [1.0]\nsamples = 0\n", "thermal.samples", "integer"),
    (PAIR + "[thermal]\ntemperatures = [1.0]\nseed = -1\n", "thermal.seed", "integer"),
    (
        PAIR + '[thermal]\ntemperatures = [1.0]\n[thermal.observables]\nx = "lowering(0)"\n',
        "thermal.observables.x",
        "sector",
    ),
    (PAIR + "[quench]\n", "quench.initial", "missing"),
    ("quench = 3\n" + PAIR, "quench", "a table"),
]


@pytest.mark.parametrize(("text", "key", "words"), REFUSALS)
def test_refusals_name_the_key_path(text: str, key: str, words: str) -> None:
    error = refusal(text)
    assert error.key == key, str(error)
    assert words in error.problem, str(error)
    assert str(error).startswith(f"<test>: {key}: ")


def test_unknown_top_level_section_still_refused() -> None:
    error = refusal(PAIR + "[quenchh]\ntimes = [0.0]\n")
    assert error.key == "quenchh" and "did you mean 'quench'" in error.problem


DYNAMICS_BASE: dict[str, object] = {
    "model": {"kind": "kerr-network", "frequencies": [1.0, 1.0], "cutoff": 3},
    "quench": {
        "times": {"start": 0.0, "stop": 1.0, "num": 3},
        "initial": {"state": "coherent", "amplitudes": [0.1, [0.0, 0.1]]},
        "observables": {"x": "number(0)"},
    },
    "spectrum": {"operator": "lowering(0)", "omegas": [0.0, 1.0], "eta": 0.1},
    "thermal": {"temperatures": [0.5], "method": "ftlm", "samples": 2},
}
DYNAMICS_WORDS = [
    "times", "initial", "state", "fock", "coherent", "ground", "occupations", "amplitudes",
    "parameters", "observables", "populations", "tol", "operator", "omegas", "eta",
    "reference_energy", "poles", "max_steps", "temperatures", "method", "samples", "seed",
    "steps", "exact", "ftlm", "start", "stop", "num", "values", "lowering(0)", "number(1)",
]  # fmt: skip


def test_fuzz_base_is_valid() -> None:
    spec = parse(toml_document(DYNAMICS_BASE))
    assert spec.quench is not None and spec.spectrum is not None
    assert spec.thermal is not None


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    st.lists(
        st.tuples(
            st.sampled_from(["quench", "spectrum", "thermal", "quench.initial"]),
            st.sampled_from(DYNAMICS_WORDS),
            VALUES | st.sampled_from(DYNAMICS_WORDS) | st.none(),
        ),
        min_size=1,
        max_size=3,
    )
)
def test_fuzz_mutated_sections_fail_only_with_model_file_errors(
    mutations: list[tuple[str, str, object]],
) -> None:
    document = json.loads(json.dumps(DYNAMICS_BASE))
    for where, key, value in mutations:
        table = document
        for part in where.split("."):
            if not isinstance(table.get(part), dict):
                table[part] = {}
            table = table[part]
        if value is None:
            table.pop(key, None)
        else:
            table[key] = value
    try:
        spec = parse(toml_document(document))
    except ModelFileError as error:
        assert str(error).startswith("<test>: ")
        assert error.key is None or error.key.split(".")[0].split("[")[0] in document
    else:
        if spec.quench is not None:
            assert all(t >= 0 for t in spec.quench.times)


# -- physics against outside facts --------------------------------------------------------


def test_photon_exchange_between_two_resonators() -> None:
    # Coupled-mode theory (common practice): n₀(t) = cos²(Jt), n₁ = sin²(Jt); the
    # particle current i J (a₀†a₁ − a₁†a₀) has ⟨·⟩ = −J sin(2Jt) with this sign.
    result = fm.run_quench(parse(PAIR_QUENCH))
    t = result.arrays["times"]
    pops = result.arrays["populations"]
    np.testing.assert_allclose(pops[:, 0], np.cos(0.3 * t) ** 2, atol=1e-8)
    np.testing.assert_allclose(pops[:, 1], np.sin(0.3 * t) ** 2, atol=1e-8)
    np.testing.assert_allclose(result.arrays["values.current"], -np.sin(0.6 * t), atol=1e-8)
    forward = result.arrays["values.forward"]
    assert np.iscomplexobj(forward)
    # ⟨a₀†a₁⟩ = cos(Jt)·(−i sin(Jt)) for ψ = cos(Jt)|10⟩ − i sin(Jt)|01⟩.
    np.testing.assert_allclose(forward, -0.5j * np.sin(0.6 * t), atol=1e-8)
    np.testing.assert_allclose(result.arrays["energy"], 1.0, atol=1e-10)
    assert result.summary["error_estimate"] <= 1e-10


def test_vacuum_rabi_oscillation() -> None:
    # Jaynes & Cummings 1963: on resonance, |g = 0.05⟩ gives P_e(t) = cos²(gt).
    text = """
[model]
kind = "jaynes-cummings-hubbard"
sites = 1
cavity_cutoff = 1
total = 1
[parameters]
wc = 1.0
we = 1.0
g = 0.05
[quench]
times = { start = 0.0, stop = 80.0, num = 33 }
[quench.initial]
state = "fock"
occupations = [0, 1]
"""
    spec = parse(text)
    assert spec.model.mode_labels[1].startswith("emitter")
    result = fm.run_quench(spec)
    t = result.arrays["times"]
    np.testing.assert_allclose(result.arrays["populations"][:, 1], np.cos(0.05 * t) ** 2, atol=1e-8)
    np.testing.assert_allclose(result.arrays["populations"][:, 0], np.sin(0.05 * t) ** 2, atol=1e-8)


def test_kerr_collapse_and_revival_example() -> None:
    # Yurke & Stoler 1986: ⟨a(t)⟩ = α exp(|α|²(e^{−iKt} − 1)) for H = (K/2) a†²a²
    # (frequency 0 in the example file); ⟨n⟩ and ⟨a†²a²⟩ = |α|⁴ stay constant.
    spec = fm.load_model_file(EXAMPLES / "kerr_oscillator_revival.toml")
    result = fm.run_quench(spec)
    t = result.arrays["times"]
    alpha = 1.5
    expected = alpha * np.exp(alpha**2 * (np.exp(-1j * t) - 1.0))
    # The cutoff (24) drops < 1e-12 of |α = 1.5⟩: agreement to the propagation tolerance.
    np.testing.assert_allclose(result.arrays["values.field"], expected, atol=1e-7)
    np.testing.assert_allclose(result.arrays["populations"][:, 0], alpha**2, atol=1e-9)
    np.testing.assert_allclose(result.arrays["values.photon_pairs"], alpha**4, atol=1e-8)
    # Collapse near t = π/K (|⟨a⟩| = α e^{−2|α|²}), revival of the full |α| at 2π/K.
    collapse, revival = np.argmin(np.abs(t - np.pi)), np.argmin(np.abs(t - 2 * np.pi))
    assert abs(result.arrays["values.field"][collapse]) < 0.05
    assert abs(abs(result.arrays["values.field"][revival]) - alpha) < 1e-3


def test_interaction_quench_from_a_ground_state_matches_dense_reference() -> None:
    spec = fm.load_model_file(EXAMPLES / "dimer_interaction_quench.toml")
    result = fm.run_quench(spec)
    # Bonding condensate of N = 4: E = −NJ and ⟨n₀(n₀ − 1)⟩ = N(N − 1)/4 = 3 (binomial).
    assert result.summary["initial_energy"] == pytest.approx(-4.0, abs=1e-9)
    pairs = result.arrays["values.pairs_site0"]
    assert pairs[0] == pytest.approx(3.0, abs=1e-9)
    # Dense reference: exp(−iHt) by scipy.linalg.expm on the 5-state sector.
    model = spec.model
    h = fm.build_matrix(model.hamiltonian(), model.space).toarray()
    h0 = fm.build_matrix(model.hamiltonian(U=0.0), model.space).toarray()
    _, vectors = np.linalg.eigh(h0)
    psi0 = vectors[:, 0]
    op = fm.build_matrix(spec.quench.observables["pairs_site0"], model.space).toarray()
    for k in (10, 57, 160):
        psi = sla.expm(-1j * h * result.arrays["times"][k]) @ psi0
        assert pairs[k] == pytest.approx(float(np.vdot(psi, op @ psi).real), abs=1e-8)
    # ⟨H⟩ after the quench: −4J + (U/2)·Σ⟨n(n − 1)⟩ = −4 + 1.5·6 = 5.
    np.testing.assert_allclose(result.arrays["energy"], 5.0, atol=1e-9)


def test_quench_overrides_change_the_hamiltonian() -> None:
    spec = parse(PAIR_QUENCH)
    slow = fm.run_quench(spec, overrides={"exchange_scale": 0.5})
    t = slow.arrays["times"]
    np.testing.assert_allclose(slow.arrays["populations"][:, 0], np.cos(0.15 * t) ** 2, atol=1e-8)
    assert slow.meta["parameters"]["exchange_scale"] == 0.5
    with pytest.raises(ValueError, match="unknown parameter"):
        fm.run_quench(spec, overrides={"nope": 1.0})


def spectrum_text(operator: str, grid: str, eta: float = 0.1) -> str:
    return RING + f'[spectrum]\noperator = "{operator}"\nomegas = {grid}\neta = {eta}\n'


def lehmann(spec: fm.ModelFile, omegas: np.ndarray, eta: float) -> tuple[np.ndarray, float]:
    """S(ω) from exact eigenstates of both sectors (dense numpy), and ⟨A†A⟩."""
    model, s = spec.model, spec.spectrum
    assert s is not None
    h = model.hamiltonian()
    e_source, v_source = np.linalg.eigh(fm.build_matrix(h, model.space).toarray())
    e_target, v_target = np.linalg.eigh(fm.build_matrix(h, s.target).toarray())
    a = fm.build_matrix(s.operator, model.space, target=s.target).toarray()
    amplitudes = v_target.conj().T @ (a @ v_source[:, 0])
    weights = np.abs(amplitudes) ** 2
    poles = e_target - e_source[0]
    diff = omegas[:, None] - poles[None, :]
    return (eta / np.pi / (diff**2 + eta**2)) @ weights, float(weights.sum())


@pytest.mark.parametrize("operator", ["lowering(site 0)", "raising(site 2)", "number(site 1)"])
def test_spectrum_matches_the_lehmann_sum_and_the_sum_rule(operator: str) -> None:
    spec = parse(spectrum_text(operator, "{ start = -15.0, stop = 25.0, num = 801 }"))
    result = fm.run_spectrum(spec)
    omegas = result.arrays["omegas"]
    expected, norm = lehmann(spec, omegas, 0.1)
    np.testing.assert_allclose(result.arrays["S"], expected, atol=1e-6 * expected.max())
    # Sum rule: the pole weights add up to ⟨ψ|A†A|ψ⟩ exactly.
    assert result.summary["norm"] == pytest.approx(norm, rel=1e-9)
    assert result.arrays["pole_weights"].sum() == pytest.approx(norm, rel=1e-9)
    if operator == "lowering(site 0)":
        assert norm == pytest.approx(1.0, rel=1e-9)  # uniform density on a ring: ⟨n₀⟩ = 1


def test_spectrum_integral_equals_the_norm() -> None:
    # ∫S dω = ⟨A†A⟩ (sum rule); the grid is wide and fine enough that the Lorentzian
    # tails outside it (≈ 2η/(π·60)) and the trapezoid error stay below 2e-3.
    spec = parse(spectrum_text("lowering(site 0)", "{ start = -60.0, stop = 60.0, num = 12001 }"))
    result = fm.run_spectrum(spec)
    s, omegas = result.arrays["S"], result.arrays["omegas"]
    integral = float(np.sum(0.5 * (s[1:] + s[:-1]) * np.diff(omegas)))
    assert integral == pytest.approx(result.summary["norm"], abs=2e-3)


def test_spectrum_reference_energy_and_no_poles() -> None:
    text = (
        spectrum_text("lowering(site 0)", "[0.0, 1.0]") + "reference_energy = 2.5\npoles = false\n"
    )
    result = fm.run_spectrum(parse(text))
    assert result.summary["reference_energy"] == 2.5
    assert "pole_frequencies" not in result.arrays


def finite_geometric(cutoff: int, temperature: float) -> tuple[float, float, float]:
    """⟨n⟩, ⟨n²⟩ and C of ω n (ω = 1) on 0..cutoff: finite geometric sums."""
    n = np.arange(cutoff + 1, dtype=float)
    w = np.exp(-n / temperature)
    z = w.sum()
    mean, second = (n * w).sum() / z, (n * n * w).sum() / z
    return mean, second, (second - mean**2) / temperature**2


def test_thermal_oscillator_is_the_finite_geometric_sum() -> None:
    spec = parse(OSCILLATOR)
    # The truncation is the point here: at T = 5 the top level holds ~10 % of the weight.
    with pytest.warns(fm.CutoffWarning, match="thermal ensemble"):
        result = fm.run_thermal(spec)
    assert any("highest kept level" in m for m in result.meta["warnings"])
    temps = result.arrays["temperatures"]
    for k, temperature in enumerate(temps):
        mean, second, heat = finite_geometric(6, float(temperature))
        assert result.arrays["populations"][k, 0] == pytest.approx(mean, rel=1e-10)
        assert result.arrays["energy"][k] == pytest.approx(mean, rel=1e-10)
        assert result.arrays["values.n_squared"][k] == pytest.approx(second, rel=1e-10)
        assert result.arrays["heat_capacity"][k] == pytest.approx(heat, rel=1e-8)
    assert np.all(result.arrays["energy_error"] == 0)
    assert result.summary["method"] == "exact"


@pytest.mark.filterwarnings("ignore::fockmill.exceptions.CutoffWarning")
def test_thermal_ftlm_agrees_with_exact_within_its_errors() -> None:
    # Invented: three coupled oscillators, 64 states, FTLM with 30 vectors.
    base = """
[model]
kind = "kerr-network"
frequencies = [1.0, 1.1, 0.9]
couplings = [[0, 1, 0.1], [1, 2, 0.1]]
cutoff = 3
[thermal]
temperatures = [0.5, 1.0, 3.0]
"""
    exact = fm.run_thermal(parse(base + 'method = "exact"\n'))
    ftlm = fm.run_thermal(parse(base + 'method = "ftlm"\nsamples = 30\nseed = 3\n'))
    assert ftlm.summary["method"] == "ftlm" and ftlm.summary["samples"] == 30
    errors = ftlm.arrays["energy_error"]
    assert np.all(errors > 0)
    deviation = np.abs(ftlm.arrays["energy"] - exact.arrays["energy"])
    assert np.all(deviation <= 5 * errors + 1e-12), (deviation, errors)
    assert np.all(ftlm.arrays["heat_capacity_error"] > 0)
    assert ftlm.arrays["populations_error"].shape == (3, 3)


def test_missing_section_is_a_clear_error() -> None:
    with pytest.raises(ValueError, match=r"no \[spectrum\] section"):
        fm.run_spectrum(parse(PAIR_QUENCH))


# -- the results file ---------------------------------------------------------------------


@pytest.fixture(scope="module")
def results() -> dict[str, fm.WorkflowResult]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", fm.CutoffWarning)  # the truncated oscillator
        return {
            "quench": fm.run_quench(parse(PAIR_QUENCH)),
            "spectrum": fm.run_spectrum(
                parse(spectrum_text("lowering(site 0)", "[-1.0, 0.0, 1.0]"))
            ),
            "thermal": fm.run_thermal(parse(OSCILLATOR)),
        }


@pytest.mark.parametrize("kind", ["quench", "spectrum", "thermal"])
def test_round_trip_through_the_results_file(
    kind: str, results: dict[str, fm.WorkflowResult], tmp_path: Path
) -> None:
    result = results[kind]
    path = fm.write_workflow_results(tmp_path / "sub" / f"{kind}.sqlite", result)
    assert sorted(p.name for p in path.parent.iterdir()) == [f"{kind}.sqlite"]  # no leftovers
    assert is_workflow_file(path)
    back = fm.read_workflow_results(path)
    assert back.kind == kind and back.path == path
    assert back.arrays.keys() == result.arrays.keys()
    for name, values in result.arrays.items():
        assert back.arrays[name].dtype == values.dtype, name
        np.testing.assert_array_equal(back.arrays[name], values)
    assert back.meta["format"] == "fockmill-workflow" and back.meta["kind"] == kind
    for key in ("mode_labels", "units", "space", "parameters", "settings", "summary"):
        assert back.meta[key] == json.loads(json.dumps(result.meta[key])), key
    assert back.units == result.units and back.mode_labels == result.mode_labels
    # Plain JSON in the meta table (no NaN), readable without fockmill.
    with sqlite3.connect(path) as connection:
        for _, value in connection.execute("SELECT key, value FROM meta"):
            json.loads(value, parse_constant=lambda c: pytest.fail(f"non-JSON constant {c}"))


def test_results_file_is_never_overwritten(
    results: dict[str, fm.WorkflowResult], tmp_path: Path
) -> None:
    path = tmp_path / "q.sqlite"
    fm.write_workflow_results(path, results["quench"])
    with pytest.raises(StoreError, match="exists already"):
        fm.write_workflow_results(path, results["thermal"])
    assert fm.read_workflow_results(path).kind == "quench"


def test_files_of_another_kind_are_refused(
    results: dict[str, fm.WorkflowResult], tmp_path: Path
) -> None:
    workflow = fm.write_workflow_results(tmp_path / "w.sqlite", results["spectrum"])
    with pytest.raises(StoreError, match="not a sweep"):
        ResultsStore.open(workflow)
    sweep = tmp_path / "sweep.sqlite"
    ring = parse(RING.replace("total = 4", "total = 2") + "[sweep.U]\nvalues = [1.0]\n")
    fm.run_sweep(ring.model, ring.sweep, store=sweep, executor="serial", progress=False)
    assert not is_workflow_file(sweep)
    with pytest.raises(StoreError, match="parameter sweep"):
        fm.read_workflow_results(sweep)
    text = tmp_path / "model.toml"
    text.write_text(PAIR_QUENCH)
    with pytest.raises(StoreError, match="not a fockmill results file"):
        fm.read_workflow_results(text)
    foreign = tmp_path / "foreign.sqlite"
    with sqlite3.connect(foreign) as connection:
        connection.execute("CREATE TABLE t (x)")
    with pytest.raises(StoreError, match="another program"):
        fm.read_workflow_results(foreign)
    with pytest.raises(StoreError, match="does not exist"):
        fm.read_workflow_results(tmp_path / "absent.sqlite")


# -- command line -------------------------------------------------------------------------


def run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    buffer = io.StringIO()
    code = cli.main(argv, out=buffer)
    return code, buffer.getvalue(), capsys.readouterr().err


def one_line_error(err: str, *fragments: str) -> None:
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("fockmill: error: ")
    for fragment in fragments:
        assert fragment in lines[0], lines[0]


@pytest.mark.parametrize(
    ("command", "example", "words"),
    [
        ("quench", "dimer_interaction_quench.toml", ["initial", "ground state at U=0"]),
        ("quench", "ring_interaction_ramp.toml", ["ramp U", "(ramped)"]),
        ("spectrum", "ring_photon_removal.toml", ["poles", "removes 1 quantum"]),
        ("thermal", "kerr_trimer_thermal.toml", ["heat_capacity", "method", "exact"]),
    ],
)
def test_cli_runs_each_example(
    command: str,
    example: str,
    words: list[str],
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:
    out = tmp_path / "r.sqlite"
    code, text, err = run([command, str(EXAMPLES / example), "--out", str(out)], capsys)
    assert code == 0, err
    assert "Traceback" not in err and "warning" not in err
    assert f"results: {out}" in text
    for word in words:
        assert word in text
    assert fm.read_workflow_results(out).kind == {"temperature": "thermal"}.get(command, command)
    code, shown, _ = run(["show", str(out)], capsys)
    assert code == 0 and "model" in shown
    code, table, _ = run(["show", str(out), "--format", "csv"], capsys)
    assert code == 0 and table.splitlines()[0].split(",")[0] in ("times", "omegas", "temperatures")
    code, document, _ = run(["show", str(out), "--format", "json"], capsys)
    assert code == 0 and json.loads(document)["meta"]["format"] == "fockmill-workflow"


def test_cli_quench_table_set_threads_and_csv(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model = tmp_path / "pair.toml"
    model.write_text(PAIR_QUENCH)
    out = tmp_path / "pair.sqlite"
    code, text, err = run(
        ["quench", str(model), "--out", str(out), "--set", "exchange_scale=0.5", "--threads", "1"],
        capsys,
    )
    assert code == 0, err
    assert "exchange_scale=0.5" in text and "11 of 41 times shown" in text
    code, table, _ = run(["show", str(out), "--format", "csv"], capsys)
    lines = table.splitlines()
    header = lines[0].split(",")
    assert header[:4] == ["times", "energy", "populations_0", "populations_1"]
    assert "values.forward.imag" in header and len(lines) == 42
    row = dict(zip(header, lines[-1].split(","), strict=True))
    assert float(row["populations_0"]) == pytest.approx(np.cos(0.15 * 10.0) ** 2, abs=1e-8)
    code, full, _ = run(["show", str(out)], capsys)
    assert code == 0 and "times shown" not in full and len(full.splitlines()) > 41


@pytest.mark.parametrize(
    ("argv_tail", "text", "fragments"),
    [
        ([], RING, ["no [quench] section"]),
        (["--set", "nope=1"], PAIR_QUENCH, ["unknown parameter", "nope"]),
        (["--set", "J"], PAIR_QUENCH, ["NAME=VALUE"]),
        ([], PAIR_QUENCH.replace("tol = 1e-10", "tol = -1"), ["quench.tol"]),
    ],
)
def test_cli_errors_are_one_line(
    argv_tail: list[str],
    text: str,
    fragments: list[str],
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:
    model = tmp_path / "m.toml"
    model.write_text(text)
    out = tmp_path / "r.sqlite"
    code, _, err = run(["quench", str(model), "--out", str(out), *argv_tail], capsys)
    assert code == 2
    one_line_error(err, *fragments)
    assert not out.exists()


def test_cli_refuses_an_existing_output(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    model = tmp_path / "m.toml"
    model.write_text(PAIR_QUENCH)
    out = tmp_path / "r.sqlite"
    out.write_text("keep me")
    code, _, err = run(["quench", str(model), "--out", str(out)], capsys)
    assert code == 2
    one_line_error(err, "exists already")
    assert out.read_text() == "keep me"


def test_cli_subprocess_bad_model_file_has_no_traceback(tmp_path: Path) -> None:
    model = tmp_path / "m.toml"
    model.write_text(PAIR + '[spectrum]\noperator = "lowering(0) lift(1)"\nomegas = [0.0]\n')
    done = subprocess.run(
        [sys.executable, "-m", "fockmill", "spectrum", str(model), "--out", str(tmp_path / "r")],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 2
    one_line_error(done.stderr, "spectrum.operator", "column")


# -- figures ------------------------------------------------------------------------------


def test_figures_have_units_titles_and_error_bars(
    results: dict[str, fm.WorkflowResult], tmp_path: Path
) -> None:
    pytest.importorskip("matplotlib", reason="plots need matplotlib (extra plot)")
    from fockmill.plots.workflows import workflow_figure

    quench = workflow_figure(results["quench"])
    axes = quench.axes
    assert len(axes) == 2
    assert axes[-1].get_xlabel() == "time $t$ (ħ/GHz)"
    assert "occupation" in axes[0].get_ylabel()
    labels = [line.get_label() for line in axes[1].get_lines()]
    assert labels == ["current", "Re forward", "Im forward"]
    title = quench.get_suptitle()
    assert "kerr-network" in title and "quench from |1,0⟩" in title and "dim 2" in title

    spectrum = workflow_figure(results["spectrum"])
    main, sticks = spectrum.axes
    assert main.get_xlabel() == r"frequency $\omega$ ($J$)"  # the unit is the hopping J
    assert main.get_ylabel() == r"$S(\omega)$ (1/$J$)"
    assert sticks.get_ylabel() == "pole weight $w_k$"
    assert "S(ω) of lowering(site 0), η = 0.1" in spectrum.get_suptitle()
    assert len(workflow_figure(results["spectrum"], poles=False).axes) == 1

    thermal = workflow_figure(results["thermal"])
    assert thermal.axes[-1].get_xlabel() == "temperature $T$ (meV)"
    assert thermal.axes[0].get_ylabel() == r"energy $\langle H\rangle_T$ (meV)"
    assert thermal.axes[1].get_ylabel() == "heat capacity $C/k_B$"
    assert "exact" in thermal.get_suptitle()
    assert not thermal.axes[0].containers  # exact: no error bars

    ftlm_text = OSCILLATOR.replace('method = "exact"', 'method = "ftlm"\nsamples = 5')
    with pytest.warns(fm.CutoffWarning):
        ftlm = workflow_figure(fm.run_thermal(parse(ftlm_text)))
    assert ftlm.axes[0].containers and ftlm.axes[1].containers  # FTLM: error bars
    assert "5 random vectors" in ftlm.get_suptitle()

    path = fm.plot_workflow(results["thermal"], tmp_path / "fig" / "t.png")
    assert path.read_bytes()[:4] == b"\x89PNG"


def test_cli_plot_of_a_workflow_file(
    results: dict[str, fm.WorkflowResult], tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    pytest.importorskip("matplotlib", reason="plots need matplotlib (extra plot)")
    data = fm.write_workflow_results(tmp_path / "s.sqlite", results["spectrum"])
    figure = tmp_path / "s.svg"
    code, text, err = run(["plot", str(data), "--out", str(figure), "--no-poles"], capsys)
    assert code == 0, err
    assert text.strip() == f"wrote {figure}"
    assert figure.read_text().lstrip().startswith("<?xml")
    code, _, err = run(["plot", str(data), "--out", str(figure), "--y", "energy"], capsys)
    assert code == 2
    one_line_error(err, "--x and --y", "spectrum")


def test_cli_run_with_plot(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("matplotlib", reason="plots need matplotlib (extra plot)")
    model = tmp_path / "osc.toml"
    model.write_text(OSCILLATOR.replace("5.0]", "1.0]").replace("cutoff = 6", "cutoff = 30"))
    figure = tmp_path / "osc.png"
    code, text, err = run(
        ["thermal", str(model), "--out", str(tmp_path / "o.sqlite"), "--plot", str(figure)], capsys
    )
    assert code == 0, err
    assert f"figure: {figure}" in text and figure.is_file()


def test_symmetry_section_is_named_as_unused_by_the_workflows() -> None:
    # Exact thermal averages of a 4-site ring in the whole space agree with a dense
    # reference (numpy eigh; common practice, no source); the [symmetry] table does not
    # change them and the run says so.
    text = """
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 4
total = 4
[symmetry]
translation = 0
[thermal]
temperatures = [0.5, 2.0]
"""
    model_file = fm.parse_model_text(text)
    with pytest.warns(UserWarning, match=r"\[symmetry\] is not used by \[thermal\]"):
        result = fm.run_thermal(model_file)
    h = fm.build_matrix(model_file.model.hamiltonian(), model_file.model.space).toarray()
    energies = np.linalg.eigvalsh(h)
    for t, value in zip([0.5, 2.0], result.arrays["energy"], strict=True):
        weights = np.exp(-(energies - energies[0]) / t)
        assert value == pytest.approx(float(weights @ energies / weights.sum()), abs=1e-10)


def test_the_older_section_name_temperature_still_reads(tmp_path: Path) -> None:
    # The section shares its name with the command and the function (thermal); the old
    # name [temperature] is read for one release, with a DeprecationWarning.
    text = (EXAMPLES / "kerr_trimer_thermal.toml").read_text(encoding="utf-8")
    old = text.replace("[thermal", "[temperature")
    assert old != text
    with pytest.warns(DeprecationWarning, match=r"\[temperature\] is now \[thermal\]"):
        spec = fm.parse_model_text(old)
    assert spec.thermal == fm.parse_model_text(text).thermal
    assert spec.temperature is spec.thermal
