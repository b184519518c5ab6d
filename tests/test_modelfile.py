"""Tests for TOML model files (``fockmill.files.modelfile``).

The examples in ``examples/models`` must load into exactly the models the builders
give; every schema violation must raise ``ModelFileError`` naming the key; and no
document, however malformed, may raise anything else.
"""

from __future__ import annotations

import hashlib
import json
import math
import pickle
import warnings
from pathlib import Path
from typing import Any

import fockmill as fm
import numpy as np
import pytest
from fockmill.files.modelfile import ModelFile, ModelFileError, load_model_file, parse_model_text
from fockmill.models import (
    bose_hubbard,
    jaynes_cummings_hubbard,
    kerr_network,
    ring_edges,
    with_drives,
)
from fockmill.sweeps.plan import RECORDABLE, SweepGrid
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

EXAMPLES = Path(__file__).resolve().parent.parent / "examples" / "models"
FUZZ = settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def parse(text: str) -> ModelFile:
    return parse_model_text(text, source="<test>")


# -- the example files --------------------------------------------------------------------


def test_every_example_is_covered() -> None:
    assert sorted(p.name for p in EXAMPLES.glob("*.toml")) == [
        "dimer_interaction_quench.toml",
        "disordered_plaquette.toml",
        "driven_triangle.toml",
        "kerr_bistability.toml",
        "kerr_oscillator_revival.toml",
        "kerr_pair_blockade.toml",
        "kerr_trimer.toml",
        "kerr_trimer_thermal.toml",
        "polariton_chain.toml",
        "ring_interaction_ramp.toml",
        "ring_kerr_crossover.toml",
        "ring_momentum_bands.toml",
        "ring_photon_removal.toml",
        "ring_structure_factor.toml",
        "squeezed_kerr_pair.toml",
    ]


def check_round_trip(name: str) -> ModelFile:
    """Load a file, and check that parsing its text gives the same description."""
    path = EXAMPLES / name
    loaded = load_model_file(path)
    text = path.read_text(encoding="utf-8")
    assert loaded.path == str(path)
    assert loaded.text_hash == hashlib.sha256(path.read_bytes()).hexdigest()
    again = parse_model_text(text)
    assert again.path is None
    assert again == ModelFile(**{**loaded.__dict__, "path": None})
    for label in ("invented", "INVENTED"):
        if label in text:
            break
    else:
        pytest.fail(f"{name} must label its scenario as invented")
    return loaded


def test_ring_kerr_crossover_example() -> None:
    spec = check_round_trip("ring_kerr_crossover.toml")
    expected = bose_hubbard(ring_edges(6), total=6, J=1.0, U=1.0)
    assert spec.model == expected
    assert spec.model.space.dim == 462
    assert spec.sweep is not None and list(spec.sweep.axes) == ["U"]
    np.testing.assert_allclose(spec.sweep.axes["U"], np.geomspace(0.5, 20.0, 25))
    assert spec.quantities == ("energy", "gap", "number_variances")
    assert spec.levels == 2
    assert spec.solver == {
        "method": "auto",
        "tol": 1e-9,
        "seed": 0,
        "max_iterations": None,
        "threads": None,
        "cutoff_warning": 1e-6,
    }
    assert spec.entropy_modes == ()


def test_polariton_chain_example() -> None:
    spec = check_round_trip("polariton_chain.toml")
    expected = jaynes_cummings_hubbard(4, cavity_cutoff=4, total=4, g=0.02, J=0.001)
    assert spec.model == expected
    assert spec.sweep is not None and spec.sweep.shape == (8,)
    assert spec.quantities == ("energy", "gap", "populations", "entanglement_entropy")
    assert spec.entropy_modes == (0, 1)
    assert spec.solver["tol"] == 1e-10


def test_kerr_trimer_example() -> None:
    spec = check_round_trip("kerr_trimer.toml")
    expected = kerr_network(
        [1.0, 1.02, 0.99],
        self_kerr=[-0.05, -0.04, -0.06],
        cross_kerr={(0, 1): -0.002, (1, 2): -0.002},
        couplings={(0, 1): 0.01, (1, 2): 0.01, (0, 2): 0.005},
        cutoff=3,
        total=3,
    )
    assert spec.model == expected
    assert spec.sweep is not None
    np.testing.assert_allclose(spec.sweep.axes["exchange_scale"], np.linspace(0.0, 3.0, 13))
    assert spec.levels == 4


def test_squeezed_kerr_pair_example() -> None:
    spec = check_round_trip("squeezed_kerr_pair.toml")
    base = kerr_network([0.2, 0.25], self_kerr=0.01, couplings={(0, 1): 0.05}, cutoff=12, total=0)
    assert spec.model == with_drives(base, two_photon={0: 0.02})
    assert spec.model.space.modulus == 2 and spec.model.space.total == 0
    assert spec.levels == 1


def test_example_hamiltonian_is_the_dense_reference() -> None:
    # The two-site, two-particle Bose–Hubbard spectrum {U/2 ∓ √(U²/4 + 4J²), U}
    # (derived in test_models; common practice) reached through a model file.
    spec = parse(
        '[model]\nkind = "bose-hubbard"\nlattice = "edges"\nedges = [[0, 1]]\ntotal = 2\n'
        "[parameters]\nJ = 0.5\nU = 3.0\n"
    )
    matrix = fm.build_matrix(spec.model.hamiltonian(), spec.model.space).toarray()
    root = math.sqrt(3.0**2 / 4 + 4 * 0.5**2)
    np.testing.assert_allclose(
        np.linalg.eigvalsh(matrix), [1.5 - root, 3.0, 1.5 + root], atol=1e-12
    )


# -- valid variants -------------------------------------------------------------------------


BASE = '[model]\nkind = "bose-hubbard"\nlattice = "chain"\nsites = 3\ntotal = 2\n'


def test_defaults_without_optional_tables() -> None:
    spec = parse(BASE)
    assert spec.sweep is None
    assert spec.quantities == ("energy",)
    assert spec.levels == 1
    assert spec.solver == {
        "method": "auto",
        "tol": 1e-9,
        "seed": 0,
        "max_iterations": None,
        "threads": None,
        "cutoff_warning": 1e-6,
    }
    assert spec.model == bose_hubbard([(0, 1), (1, 2)], total=2)


def test_lattices_and_inline_sweeps() -> None:
    rectangle = parse(
        '[model]\nkind = "bose-hubbard"\nlattice = "rectangle"\nrows = 2\ncols = 3\n'
        "periodic = true\ncutoff = [1, 2, 1, 2, 1, 2]\n"
        "[sweep]\nU = { values = [1, 2] }\nJ = { start = 0.0, stop = 1.0, num = 3 }\n"
    )
    assert rectangle.model.space.cutoffs == (1, 2, 1, 2, 1, 2)
    assert (
        rectangle.model.pieces["J"]
        == bose_hubbard(
            [(0, 1), (1, 2), (2, 0), (3, 4), (4, 5), (5, 3), (0, 3), (1, 4), (2, 5)], cutoff=1
        ).pieces["J"]
    )
    assert rectangle.sweep is not None
    assert rectangle.sweep.points()[:4] == [
        {"U": 1.0, "J": 0.0},
        {"U": 1.0, "J": 0.5},
        {"U": 1.0, "J": 1.0},
        {"U": 2.0, "J": 0.0},
    ]
    edges = parse(
        '[model]\nkind = "bose-hubbard"\nlattice = "edges"\nsites = 4\n'
        "edges = [[0, 1], [1, 2, 0.5]]\ncutoff = 2\n"
    )
    assert edges.model == bose_hubbard([(0, 1), (1, 2, 0.5)], sites=4, cutoff=2)


def test_entropy_default_subsystem_and_drives() -> None:
    spec = parse(
        '[model]\nkind = "jaynes-cummings-hubbard"\nsites = 3\nperiodic = true\n'
        "cavity_cutoff = 2\n"
        "[drives]\ncoherent = [[0, 0.1], [2, 0.2]]\n"
        '[record]\nquantities = ["entanglement_entropy", "gap"]\n'
    )
    assert spec.entropy_modes == (0, 1, 2)
    assert spec.levels == 2
    assert spec.model.pieces["drive"] == 0.1 * (fm.lowering(0) + fm.raising(0)) + 0.2 * (
        fm.lowering(2) + fm.raising(2)
    )
    assert spec.model.space.total is None


def test_sweep_grid_behaviour() -> None:
    grid = SweepGrid({"a": [1, 2], "b": np.array([3.0, 4.0, 5.0])})  # type: ignore[dict-item]
    assert grid.shape == (2, 3) and grid.size == 6
    assert [tuple(p.values()) for p in grid.points()] == [
        (1, 3),
        (1, 4),
        (1, 5),
        (2, 3),
        (2, 4),
        (2, 5),
    ]
    with pytest.raises(ValueError, match="read-only"):
        grid.axes["a"][0] = 7.0
    assert grid == SweepGrid({"a": np.array([1.0, 2.0]), "b": np.array([3.0, 4.0, 5.0])})
    assert hash(grid) == hash(SweepGrid({"a": [1.0, 2.0], "b": [3.0, 4.0, 5.0]}))  # type: ignore[dict-item]
    assert grid != SweepGrid({"b": np.array([3.0, 4.0, 5.0]), "a": np.array([1.0, 2.0])})
    with pytest.raises(ValueError, match="non-empty"):
        SweepGrid({"a": np.array([])})
    with pytest.raises(ValueError, match="at least one axis"):
        SweepGrid({})


def test_error_type_and_pickling() -> None:
    with pytest.raises(ModelFileError) as caught:
        parse(BASE + "[solver]\nmethod = 3\n")
    error = caught.value
    assert isinstance(error, ValueError)
    assert error.source == "<test>" and error.key == "solver.method"
    copy = pickle.loads(pickle.dumps(error))
    assert str(copy) == str(error) and copy.key == error.key


def test_file_errors(tmp_path: Path) -> None:
    bad = tmp_path / "latin1.toml"
    bad.write_bytes(b'title = "caf\xe9"\n')
    with pytest.raises(ModelFileError, match="not UTF-8") as caught:
        load_model_file(bad)
    assert caught.value.source == str(bad)
    with pytest.raises(FileNotFoundError):
        load_model_file(tmp_path / "missing.toml")


# -- schema errors ---------------------------------------------------------------------------

JCH = '[model]\nkind = "jaynes-cummings-hubbard"\nsites = 2\ncavity_cutoff = 2\n'
KERR = '[model]\nkind = "kerr-network"\nfrequencies = [1.0, 1.1]\ncutoff = 2\n'

SCHEMA_ERRORS: list[tuple[str, str, str | None, str]] = [
    # (case id, document, key named, phrase in the message)
    ("no model table", "[record]\nlevels = 1\n", "model", "missing"),
    ("model not a table", "model = 3\n", "model", "expected a table"),
    ("missing kind", "[model]\nlattice = 'chain'\n", "model.kind", "missing"),
    ("bad kind", '[model]\nkind = "bose-hubard"\n', "model.kind", "did you mean"),
    ("kind wrong type", "[model]\nkind = 1\n", "model.kind", "integer"),
    ("missing lattice", '[model]\nkind = "bose-hubbard"\n', "model.lattice", "missing"),
    (
        "missing sites",
        '[model]\nkind = "bose-hubbard"\nlattice = "ring"\ntotal = 1\n',
        "model.sites",
        "missing",
    ),
    ("sites wrong type", BASE.replace("sites = 3", 'sites = "3"'), "model.sites", "string"),
    ("sites as float", BASE.replace("sites = 3", "sites = 3.0"), "model.sites", "float"),
    ("sites as date", BASE.replace("sites = 3", "sites = 2024-01-01"), "model.sites", "date"),
    (
        "ring too small",
        BASE.replace('"chain"', '"ring"').replace("sites = 3", "sites = 2"),
        "model.sites",
        "from 3",
    ),
    ("negative cutoff", BASE + "cutoff = -2\n", "model.cutoff", "got -2"),
    ("zero cutoff", BASE + "cutoff = 0\n", "model.cutoff", "from 1"),
    ("huge cutoff", BASE + "cutoff = 99999999999\n", "model.cutoff", "65535"),
    ("cutoff list length", BASE + "cutoff = [1, 2]\n", "model.cutoff", "3 cutoffs"),
    ("cutoff list item", BASE + "cutoff = [1, 2, true]\n", "model.cutoff[2]", "boolean"),
    ("no cutoff nor total", BASE.replace("total = 2\n", ""), "model.cutoff", "missing"),
    ("negative total", BASE.replace("total = 2", "total = -1"), "model.total", "from 0"),
    ("typo in model", BASE + "cutof = 2\n", "model.cutof", "did you mean 'cutoff'"),
    ("key of another lattice", BASE + "rows = 2\n", "model.rows", 'lattice = "chain"'),
    (
        "self loop",
        '[model]\nkind = "bose-hubbard"\nlattice = "edges"\nedges = [[0, 1], [2, 2]]\ncutoff = 1\n',
        "model.edges[1]",
        "two different",
    ),
    (
        "repeated edge",
        '[model]\nkind = "bose-hubbard"\nlattice = "edges"\nedges = [[0, 1], [1, 0]]\ncutoff = 1\n',
        "model.edges[1]",
        "repeats model.edges[0]",
    ),
    (
        "edge shape",
        '[model]\nkind = "bose-hubbard"\nlattice = "edges"\nedges = [[0]]\ncutoff = 1\n',
        "model.edges[0]",
        "[i, j]",
    ),
    (
        "edge out of range",
        '[model]\nkind = "bose-hubbard"\nlattice = "edges"\nsites = 2\nedges = [[0, 2]]\n'
        "cutoff = 1\n",
        "model.edges[0][1]",
        "from 0 to 1",
    ),
    (
        "no edges",
        '[model]\nkind = "bose-hubbard"\nlattice = "edges"\nedges = []\ncutoff = 1\n',
        "model.edges",
        "non-empty",
    ),
    ("rectangle without cols", BASE.replace('"chain"', '"rectangle"'), "model.sites", "unknown"),
    (
        "missing cavity cutoff",
        JCH.replace("cavity_cutoff = 2\n", ""),
        "model.cavity_cutoff",
        "missing",
    ),
    ("periodic JCH pair", JCH + "periodic = true\n", "model.sites", "from 3"),
    ("periodic not bool", JCH + "periodic = 1\n", "model.periodic", "true or false"),
    (
        "no frequencies",
        KERR.replace("frequencies = [1.0, 1.1]\n", ""),
        "model.frequencies",
        "missing",
    ),
    ("empty frequencies", KERR.replace("[1.0, 1.1]", "[]"), "model.frequencies", "non-empty"),
    ("nan frequency", KERR.replace("1.1]", "nan]"), "model.frequencies[1]", "finite"),
    ("self kerr length", KERR + "self_kerr = [0.1]\n", "model.self_kerr", "got 1"),
    ("coupling range", KERR + "couplings = [[0, 5, 0.1]]\n", "model.couplings[0][1]", "0 to 1"),
    ("cross kerr shape", KERR + "cross_kerr = [[0, 1]]\n", "model.cross_kerr[0]", "chi"),
    ("missing kerr cutoff", KERR.replace("cutoff = 2\n", ""), "model.cutoff", "missing"),
    ("empty sector", KERR + "total = 9\n", "model", "cannot build"),
    (
        "space too large",
        '[model]\nkind = "bose-hubbard"\nlattice = "chain"\nsites = 60\ncutoff = 60\n',
        "model",
        "cannot build",
    ),
    ("unknown table", BASE + "[sweeps.U]\nvalues = [1]\n", "sweeps", "did you mean 'sweep'"),
    ("schema version", "schema = 2\n" + BASE, "schema", "only layout"),
    ("unknown parameter", BASE + "[parameters]\nV = 1\n", "parameters.V", "unknown"),
    ("parameter type", BASE + '[parameters]\nU = "big"\n', "parameters.U", "finite number"),
    ("parameter nan", BASE + "[parameters]\nU = nan\n", "parameters.U", "finite"),
    ("empty sweep", BASE + "[sweep]\n", "sweep", "empty"),
    ("sweep unknown parameter", BASE + "[sweep.V]\nvalues = [1]\n", "sweep.V", "unknown"),
    ("sweep not a table", BASE + "[sweep]\nU = [1, 2]\n", "sweep.U", "expected a table"),
    ("empty sweep table", BASE + "[sweep.U]\n", "sweep.U", "empty"),
    ("empty values", BASE + "[sweep.U]\nvalues = []\n", "sweep.U.values", "non-empty"),
    ("bad value", BASE + '[sweep.U]\nvalues = [1, "x"]\n', "sweep.U.values[1]", "string"),
    ("infinite value", BASE + "[sweep.U]\nvalues = [inf]\n", "sweep.U.values[0]", "finite"),
    ("num too small", BASE + "[sweep.U]\nstart = 0\nstop = 1\nnum = 1\n", "sweep.U.num", "from 2"),
    ("num float", BASE + "[sweep.U]\nstart = 0\nstop = 1\nnum = 2.5\n", "sweep.U.num", "float"),
    (
        "num huge",
        BASE + "[sweep.U]\nstart = 0\nstop = 1\nnum = 10000000\n",
        "sweep.U.num",
        "1000000",
    ),
    ("missing stop", BASE + "[sweep.U]\nstart = 0\nnum = 3\n", "sweep.U.stop", "missing"),
    ("missing start", BASE + "[sweep.U]\nstop = 0\nnum = 3\n", "sweep.U.start", "missing"),
    (
        "values and range",
        BASE + "[sweep.U]\nvalues = [1]\nstart = 0\n",
        "sweep.U.start",
        "not both",
    ),
    (
        "geometric through zero",
        BASE + '[sweep.U]\nstart = 0\nstop = 1\nnum = 3\nspacing = "geometric"\n',
        "sweep.U.spacing",
        "same sign",
    ),
    (
        "bad spacing",
        BASE + '[sweep.U]\nstart = 1\nstop = 2\nnum = 3\nspacing = "log"\n',
        "sweep.U.spacing",
        '"linear"',
    ),
    (
        "too many points",
        BASE + "[sweep.U]\nstart = 1\nstop = 2\nnum = 1000\n"
        "[sweep.J]\nstart = 1\nstop = 2\nnum = 1001\n",
        "sweep",
        "grid points",
    ),
    (
        "sweep of zero piece",
        KERR + "[sweep.cross_kerr_scale]\nvalues = [1]\n",
        "sweep.cross_kerr_scale",
        "no",
    ),
    (
        "unknown quantity",
        BASE + '[record]\nquantities = ["energies"]\n',
        "record.quantities[0]",
        "did you mean",
    ),
    (
        "repeated quantity",
        BASE + '[record]\nquantities = ["gap", "gap"]\n',
        "record.quantities[1]",
        "twice",
    ),
    ("quantities not array", BASE + '[record]\nquantities = "gap"\n', "record.quantities", "array"),
    (
        "too few levels for gap",
        BASE + '[record]\nquantities = ["gap"]\nlevels = 1\n',
        "record.levels",
        "from 2",
    ),
    ("more levels than states", BASE + "[record]\nlevels = 7\n", "record.levels", "to 6"),
    (
        "gap of one state",
        BASE.replace("total = 2", "total = 0") + '[record]\nquantities = ["gap"]\n',
        "record.quantities",
        "only 1 state",
    ),
    (
        "entropy modes without entropy",
        BASE + "[record]\nentropy_modes = [0]\n",
        "record.entropy_modes",
        "not in record.quantities",
    ),
    (
        "entropy mode range",
        BASE + '[record]\nquantities = ["entanglement_entropy"]\nentropy_modes = [3]\n',
        "record.entropy_modes[0]",
        "0 to 2",
    ),
    (
        "entropy of everything",
        BASE + '[record]\nquantities = ["entanglement_entropy"]\nentropy_modes = [0, 1, 2]\n',
        "record.entropy_modes",
        "proper subset",
    ),
    (
        "entropy of one mode",
        KERR.replace("[1.0, 1.1]", "[1.0]") + '[record]\nquantities = ["entanglement_entropy"]\n',
        "record.quantities",
        "at least 2 modes",
    ),
    ("record typo", BASE + "[record]\nlevel = 2\n", "record.level", "did you mean 'levels'"),
    ("bad method", BASE + '[solver]\nmethod = "fast"\n', "solver.method", '"auto"'),
    ("negative tol", BASE + "[solver]\ntol = -1e-9\n", "solver.tol", "between 0 and 1"),
    ("tol of one", BASE + "[solver]\ntol = 1.0\n", "solver.tol", "between 0 and 1"),
    ("solver typo", BASE + "[solver]\ntolerance = 1e-9\n", "solver.tolerance", "did you mean"),
    ("empty drives", KERR + "[drives]\n", "drives", "empty"),
    ("drives typo", KERR + "[drives]\ncoherant = [[0, 1.0]]\n", "drives.coherant", "did you mean"),
    (
        "drive mode range",
        KERR + "[drives]\ncoherent = [[2, 0.1]]\n",
        "drives.coherent[0][0]",
        "0 to 1",
    ),
    (
        "drive twice",
        KERR + "[drives]\ntwo_photon = [[0, 0.1], [0, 0.2]]\n",
        "drives.two_photon[1][0]",
        "twice",
    ),
    ("drive shape", KERR + "[drives]\ncoherent = [0, 0.1]\n", "drives.coherent[0]", "[mode"),
    ("drive needs cutoff", BASE + "[drives]\ncoherent = [[0, 0.1]]\n", "model.cutoff", "drives"),
]


@pytest.mark.parametrize(
    ("document", "key", "phrase"),
    [case[1:] for case in SCHEMA_ERRORS],
    ids=[case[0] for case in SCHEMA_ERRORS],
)
def test_schema_errors_name_the_key(document: str, key: str, phrase: str) -> None:
    with pytest.raises(ModelFileError) as caught:
        parse(document)
    error = caught.value
    message = str(error)
    assert error.key == key, message
    assert message.startswith(f"<test>: {key}: "), message
    assert phrase in message, message


@pytest.mark.parametrize(
    ("document", "line"),
    [
        ("[model]\nkind = \n", "line 2"),
        ('[model]\nkind = "kerr-network"\nkind = "kerr-network"\n', "line 3"),
        ("[model\n", "line 1"),
    ],
)
def test_toml_syntax_errors_carry_the_line(document: str, line: str) -> None:
    with pytest.raises(ModelFileError, match="not valid TOML") as caught:
        parse(document)
    assert caught.value.key is None
    assert line in str(caught.value) or "end of document" in str(caught.value)


def test_deep_nesting_is_a_model_file_error() -> None:
    with pytest.raises(ModelFileError, match="not valid TOML"):
        parse("a = " + "[" * 5000 + "]" * 5000 + "\n")


# -- fuzzing ---------------------------------------------------------------------------------


def toml_string(text: str) -> str:
    """A TOML basic string; everything outside printable ASCII is escaped."""
    out = []
    for char in text:
        if char in '"\\':
            out.append("\\" + char)
        elif " " <= char <= "~":
            out.append(char)
        elif ord(char) <= 0xFFFF:
            out.append(f"\\u{ord(char):04x}")
        else:
            out.append(f"\\U{ord(char):08x}")
    return '"' + "".join(out) + '"'


def toml_value(value: Any) -> str:
    """A minimal TOML writer for the fuzzer: every table inline."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return toml_string(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return "{" + ", ".join(f"{toml_string(k)} = {toml_value(v)}" for k, v in value.items()) + "}"


def toml_document(document: dict[str, Any]) -> str:
    return "".join(f"{toml_string(k)} = {toml_value(v)}\n" for k, v in document.items())


VOCABULARY = [
    "model", "kind", "bose-hubbard", "jaynes-cummings-hubbard", "kerr-network",
    "lattice", "chain", "ring", "rectangle", "edges", "sites", "rows", "cols",
    "periodic", "cutoff", "total", "cavity_cutoff", "frequencies", "self_kerr",
    "cross_kerr", "couplings", "parameters", "drives", "coherent", "two_photon",
    "sweep", "values", "start", "stop", "num", "spacing", "geometric", "record",
    "quantities", "levels", "entropy_modes", "solver", "tol", "method", "threads",
    "J", "U", "mu", "wc", "we", "g", "omega", "kerr", "exchange", "drive", "schema",
    "frequency_scale", "kerr_scale", "cross_kerr_scale", "exchange_scale",
    "terms", "units", "energy", "value", "fixed", "per_mode", "modes", "weights",
    "random", "add_adjoint", "distribution", "seed", "number(@)", "raising(0) lowering(1)",
    "description",
    *RECORDABLE,
]  # fmt: skip
TABLES = ["model", "terms", "parameters", "units", "drives", "sweep", "record", "solver"]
KEYS = st.one_of(st.sampled_from(VOCABULARY), st.text(max_size=4))
SCALARS = st.one_of(
    st.integers(-2, 8),
    st.floats(-1e3, 1e3) | st.sampled_from([math.inf, -math.inf, math.nan, 1e300]),
    st.booleans(),
    st.sampled_from(VOCABULARY),
)
VALUES = st.recursive(
    SCALARS,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(KEYS, inner, max_size=4),
    max_leaves=12,
)

VALID_DOCUMENTS: list[dict[str, Any]] = [
    {
        "model": {"kind": "bose-hubbard", "lattice": "ring", "sites": 4, "total": 2},
        "sweep": {"U": {"start": 0.5, "stop": 4.0, "num": 3, "spacing": "geometric"}},
        "record": {"quantities": ["energy", "gap", "entanglement_entropy"], "levels": 2},
        "solver": {"tol": 1e-8, "method": "auto", "threads": 1},
    },
    {
        "model": {"kind": "jaynes-cummings-hubbard", "sites": 2, "cavity_cutoff": 2, "total": 2},
        "parameters": {"g": 0.1, "J": 0.05},
        "sweep": {"J": {"values": [0.0, 0.1]}},
        "record": {"quantities": ["populations", "entanglement_entropy"], "entropy_modes": [0, 3]},
    },
    {
        "model": {
            "kind": "kerr-network",
            "frequencies": [1.0, 1.1],
            "self_kerr": 0.1,
            "couplings": [[0, 1, 0.2]],
            "cutoff": [2, 3],
        },
        "drives": {"two_photon": [[0, 0.1]]},
        "record": {"quantities": ["levels"]},
    },
]


def check_invariants(spec: ModelFile) -> None:
    assert set(spec.quantities) <= set(RECORDABLE)
    assert 1 <= spec.levels <= spec.model.space.dim
    if "gap" in spec.quantities:
        assert spec.levels >= 2
    assert all(0 <= m < spec.model.space.modes for m in spec.entropy_modes)
    if spec.sweep is not None:
        assert set(spec.sweep.axes) <= set(spec.model.parameters)
        assert len(spec.sweep.points()) == spec.sweep.size


def parse_or_model_file_error(text: str) -> None:
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            spec = parse(text)
        except ModelFileError as error:
            assert str(error).startswith("<test>: ")
        else:
            check_invariants(spec)
    # The only warning a file may cause: a deprecated parameter name, with its new name.
    for warning in caught:
        assert issubclass(warning.category, DeprecationWarning), warning
        assert "is now called" in str(warning.message)


@FUZZ
@given(st.text(max_size=200))
def test_fuzz_arbitrary_text(text: str) -> None:
    parse_or_model_file_error(text)


@pytest.mark.slow
@FUZZ
@given(st.dictionaries(KEYS, VALUES, max_size=5))
def test_fuzz_random_documents(document: dict[str, Any]) -> None:
    parse_or_model_file_error(toml_document(document))


@FUZZ
@given(
    st.sampled_from(VALID_DOCUMENTS),
    st.lists(
        st.tuples(st.sampled_from(TABLES), st.sampled_from(VOCABULARY), VALUES | st.none()),
        min_size=1,
        max_size=3,
    ),
)
def test_fuzz_mutated_valid_documents(
    base: dict[str, Any], mutations: list[tuple[str, str, Any]]
) -> None:
    # Each mutation sets (or, for None, deletes) one key of one table of a valid file.
    document = json.loads(json.dumps(base))
    for table, key, value in mutations:
        target = document.setdefault(table, {})
        if not isinstance(target, dict):
            document[table] = target = {}
        if value is None:
            target.pop(key, None)
        else:
            target[key] = value
    parse_or_model_file_error(toml_document(document))


@pytest.mark.parametrize("index", range(len(VALID_DOCUMENTS)))
def test_fuzz_bases_are_valid(index: int) -> None:
    check_invariants(parse(toml_document(VALID_DOCUMENTS[index])))


def test_solver_settings_follow_the_library_rules() -> None:
    # One rule set (fockmill.settings.solver.SolverSettings) for files and keywords:
    # threads = 0 means all cores in both; tol must lie strictly between 0 and 1 in both.
    parsed = parse_model_text(BASE + "[solver]\nthreads = 0\ntol = 1e-10\n")
    assert parsed.solver["threads"] == 0
    assert parsed.solver["tol"] == 1e-10
    space = fm.FockSpace(modes=2, cutoff=1, total=1)
    h = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    assert fm.ground_state(h, space, threads=0).energy == pytest.approx(-1.0)
    with pytest.raises(ValueError, match="between 0 and 1"):
        fm.ground_state(h, space, tol=1.0)
    with pytest.raises(ModelFileError, match="between 0 and 1"):
        parse_model_text(BASE + "[solver]\ntol = 1.0\n")


def test_cutoff_warning_has_a_file_form() -> None:
    # The advice of the CutoffWarning names a form that exists in files too.
    assert (
        parse_model_text(BASE + "[solver]\ncutoff_warning = false\n").solver["cutoff_warning"]
        is None
    )
    assert parse_model_text(BASE + "[solver]\ncutoff_warning = 1e-3\n").solver[
        "cutoff_warning"
    ] == pytest.approx(1e-3)
    with pytest.raises(ModelFileError, match=r"solver\.cutoff_warning"):
        parse_model_text(BASE + "[solver]\ncutoff_warning = 2.0\n")


def test_messages_name_the_right_sign_and_the_right_fix() -> None:
    # add_adjoint: the written term's own charge (+1 for a creation), not its adjoint's.
    drive = (
        '[model]\nkind = "bose-hubbard"\nlattice = "chain"\nsites = 3\ntotal = 2\n'
        '[terms.drive]\nvalue = 0.5\nterms = ["raising(0)"]\nadd_adjoint = true\n'
    )
    with pytest.raises(ModelFileError, match="changes the total number of quanta by 1,"):
        parse_model_text(drive)
    ring = '[model]\nkind = "bose-hubbard"\nlattice = "ring"\nsites = 4\ntotal = 4\n'
    # A term family that breaks the ring's translation: no advice to make it periodic.
    tilted = (
        ring + '[terms.tilt]\nvalue = 0.1\nterms = ["number(0)"]\n[symmetry]\ntranslation = 0\n'
    )
    with pytest.raises(ModelFileError, match="these terms break it") as caught:
        parse_model_text(tilted)
    assert "periodic = true" not in str(caught.value)
    # Scanning every momentum with a reflection: one sentence that says what to do.
    scan = ring + '[symmetry]\ntranslation = "all"\nreflection = 0\n'
    with pytest.raises(ModelFileError, match=r"momenta 0 and L/2\); drop symmetry\.reflection"):
        parse_model_text(scan)
