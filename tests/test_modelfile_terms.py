"""User terms, per-mode parameters and units in model files.

References are independent of fockmill's builders: expressions are compared with
hand-built products of ladder operators, matrices with dense products of truncated
single-mode matrices (``np.kron``, restricted to the sector by brute force), and drawn
disorder with numpy's own generator called directly.
"""

from __future__ import annotations

import functools
import itertools
import json
import math
import re
import warnings
from pathlib import Path
from typing import Any

import fockmill as fm
import numpy as np
import pytest
from fockmill.algebra.expressions import lowering as a
from fockmill.algebra.expressions import number as n
from fockmill.algebra.expressions import raising as ad
from fockmill.algebra.terms import TermSyntaxError, parse_term
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import full_basis, restrict, sector_occupations, single_mode_matrices

EXAMPLES = Path(__file__).resolve().parents[1] / "examples" / "models"

CHAIN3 = """
[model]
kind = "bose-hubbard"
lattice = "chain"
sites = 3
total = 3
"""


# -- the term syntax ---------------------------------------------------------------------

LABELS = ["cavity 0", "emitter 0", "cavity 1"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("raise(0)", ad(0)),
        ("0.5 raise(0)^2 lower(1)", 0.5 * ad(0) ** 2 * a(1)),
        ("-2 count(2)", -2 * n(2)),
        ("- count(2)^2", -(n(2) ** 2)),
        ("1e-3 raise(cavity 0) lower(cavity 1)", 1e-3 * ad(0) * a(2)),
        ("(0.3-0.1j) raise(emitter 0) * lower(0)", (0.3 - 0.1j) * ad(1) * a(0)),
        ("count(1)*count(2)", n(1) * n(2)),
        ("0.25", fm.identity() * 0.25),
    ],
)
def test_term_syntax_builds_the_written_product(text: str, expected: fm.LadderExpr) -> None:
    # Hand-built product of the same factors, in the written order (project syntax).
    assert parse_term(text, LABELS, 3) == expected


def test_written_order_is_normal_ordered_with_the_commutator() -> None:
    # a a† = a† a + 1 from [a, a†] = 1 (Sakurai & Napolitano, Modern Quantum Mechanics,
    # 2nd ed. 2011, Sec. 2.3, eq. 2.3.3).
    assert parse_term("lower(0) raise(0)", LABELS, 3) == n(0) + 1
    # a a† a† = a†² a + 2 a† (same commutator applied twice).
    assert parse_term("lower(0) raise(0)^2", LABELS, 3) == ad(0) ** 2 * a(0) + 2 * ad(0)


def test_per_mode_template_uses_the_given_mode() -> None:
    assert parse_term("raise(@) lower(0)", LABELS, 3, here=2) == ad(2) * a(0)


@pytest.mark.parametrize(
    ("text", "column", "fragment"),
    [
        ("", 1, "empty term"),
        ("0.5 rise(0)", 5, "expected raising"),
        ("raise 0", 6, "expected '('"),
        ("raise(0", 6, "never closed"),
        ("raise(7)", 7, "mode 7 does not exist"),
        ("raise(cavity 9)", 7, "neither a mode index"),
        ("raise(0)^", 10, "positive integer power"),
        ("raise(0)^0", 10, "from 1 to"),
        ("count(@)", 7, "per_mode"),
        ("(1+zj) count(0)", 2, "complex number"),
    ],
)
def test_term_syntax_errors_give_the_column(text: str, column: int, fragment: str) -> None:
    with pytest.raises(TermSyntaxError) as info:
        parse_term(text, LABELS, 3)
    assert info.value.column == column, str(info.value)
    assert fragment in str(info.value)


# -- [terms] in model files -------------------------------------------------------------


@functools.cache
def kron_ops(cutoffs: tuple[int, ...]) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Truncated a_i and a_i† on the full product space, by np.kron (independent)."""
    lows, highs = [], []
    for i, c in enumerate(cutoffs):
        low, high = single_mode_matrices(c)
        factors_low = [np.eye(d + 1) for d in cutoffs]
        factors_high = [np.eye(d + 1) for d in cutoffs]
        factors_low[i], factors_high[i] = low, high
        lows.append(functools.reduce(np.kron, factors_low))
        highs.append(functools.reduce(np.kron, factors_high))
    return lows, highs


def in_sector(matrix: np.ndarray, cutoffs: tuple[int, ...], total: int | None) -> np.ndarray:
    return restrict(matrix, full_basis(cutoffs), sector_occupations(cutoffs, total=total))


def test_terms_section_matches_a_dense_kron_reference() -> None:
    # Three sites, three bosons, Bose–Hubbard chain plus a user term family
    # x·(a0† a2† a1² + h.c.) and a per-site detuning, at x = 0.7, J = 1, U = 2.
    # Normal-ordered products of truncated matrices equal P H P here because annihilators
    # act first and no intermediate state leaves the sector (common practice, no source).
    text = (
        CHAIN3
        + """
[terms.x]
value = 0.7
terms = ["raise(0) raise(2) lower(1)^2"]
add_adjoint = true

[terms.detuning]
value = 1.0
per_mode = "count(@)"
weights = [0.1, -0.2, 0.3]

[parameters]
U = 2.0
"""
    )
    spec = fm.parse_model_text(text)
    cutoffs = (3, 3, 3)
    lo, hi = kron_ops(cutoffs)
    hop = sum(-(hi[i] @ lo[j] + hi[j] @ lo[i]) for i, j in [(0, 1), (1, 2)])
    onsite = sum(0.5 * hi[i] @ hi[i] @ lo[i] @ lo[i] for i in range(3))
    pair = hi[0] @ hi[2] @ lo[1] @ lo[1]
    detune = 0.1 * hi[0] @ lo[0] - 0.2 * hi[1] @ lo[1] + 0.3 * hi[2] @ lo[2]
    dense = 1.0 * hop + 2.0 * onsite + 0.7 * (pair + pair.T) + detune
    expected = in_sector(dense, cutoffs, 3)
    built = fm.build_matrix(spec.model.hamiltonian(), spec.model.space).toarray()
    np.testing.assert_allclose(built, expected, atol=1e-12)
    assert spec.mode_weights == {"detuning": (0.1, -0.2, 0.3)}
    assert spec.descriptions == {}
    described = fm.parse_model_text(
        CHAIN3 + '[terms.W]\ndescription = "disorder"\nterms = ["count(0)"]\n'
    )
    assert described.descriptions == {"W": "disorder"}
    assert spec.model.parameters["x"] == 0.7


def test_terms_added_to_an_existing_parameter_and_fixed_terms() -> None:
    text = (
        CHAIN3
        + """
[terms.U]
terms = ["count(0)"]

[terms.shift]
fixed = true
value = 2.0
terms = ["0.5 count(1)"]
"""
    )
    spec = fm.parse_model_text(text)
    base = fm.models.bose_hubbard(fm.models.chain_edges(3), total=3)
    assert spec.model.pieces["U"] == base.pieces["U"] + n(0)
    assert "shift" not in spec.model.parameters
    assert spec.model.constant == 1.0 * n(1)


def test_random_disorder_is_numpys_seeded_draw() -> None:
    # The documented distribution: numpy.random.default_rng(seed).uniform(low, high, size)
    # and .normal(mean, std, size), in mode order (project contract).
    uniform = CHAIN3 + (
        '[terms.W]\nper_mode = "count(@)"\n'
        'random = { distribution = "uniform", low = -1.0, high = 2.0, seed = 7 }\n'
    )
    spec = fm.parse_model_text(uniform)
    drawn = np.random.default_rng(7).uniform(-1.0, 2.0, size=3)
    np.testing.assert_array_equal(spec.mode_weights["W"], drawn)
    expected = sum(float(w) * n(i) for i, w in enumerate(drawn))
    assert spec.model.pieces["W"] == expected
    normal = CHAIN3 + (
        '[terms.W]\nper_mode = "count(@)"\nmodes = [2, "site 0"]\n'
        'random = { distribution = "normal", mean = 0.5, std = 0.1, seed = 3 }\n'
    )
    spec = fm.parse_model_text(normal)
    drawn = np.random.default_rng(3).normal(0.5, 0.1, size=2)
    np.testing.assert_array_equal(spec.mode_weights["W"], drawn)
    assert spec.model.pieces["W"] == float(drawn[0]) * n(2) + float(drawn[1]) * n(0)
    # Same seed, same draw.
    assert fm.parse_model_text(normal).mode_weights == spec.mode_weights


def test_user_parameter_is_swept_like_any_other() -> None:
    # Two sites sharing one boson with an extra detuning δ n_1: the levels are
    # δ/2 ∓ sqrt(δ²/4 + J²) (two-level problem; Cohen-Tannoudji, Diu & Laloë, Quantum
    # Mechanics vol. 1, 1977, Chap. IV, complement B_IV; from memory).
    text = """
[model]
kind = "bose-hubbard"
lattice = "chain"
sites = 2
total = 1

[terms.delta]
value = 0.0
terms = ["count(1)"]

[sweep.delta]
values = [0.0, 0.5, 2.0]

[record]
quantities = ["energy", "gap"]
"""
    spec = fm.parse_model_text(text)
    assert spec.sweep is not None
    table = fm.run_sweep(
        spec.model, spec.sweep.points(), quantities=["energy", "gap"], progress=False, workers=1
    )
    for row in table:
        delta = row.parameters["delta"]
        root = np.sqrt(delta**2 / 4 + 1.0)
        assert row.energy == pytest.approx(delta / 2 - root, abs=1e-9)
        assert row.gap == pytest.approx(2 * root, abs=1e-9)


def test_units_are_read() -> None:
    spec = fm.parse_model_text(CHAIN3 + '[units]\nenergy = "meV"\nU = "J"\n')
    assert spec.units == {"energy": "meV", "U": "J"}
    assert fm.parse_model_text(CHAIN3).units == {}


def test_deprecated_kerr_names_in_files_warn_and_map() -> None:
    text = """
[model]
kind = "kerr-network"
frequencies = [1.0, 1.1]
couplings = [[0, 1, 0.1]]
cutoff = 2

[parameters]
omega = 2.0
"""
    with pytest.warns(DeprecationWarning, match="now called 'frequency_scale'"):
        spec = fm.parse_model_text(text)
    assert spec.model.parameters["frequency_scale"] == 2.0
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fm.parse_model_text(text.replace("omega", "frequency_scale"))


@pytest.mark.parametrize(
    ("extra", "key", "fragment"),
    [
        ("[terms]\n", "terms", "empty"),
        ('[terms.x]\nterms = ["raise(0) lower(4)"]\n', "terms.x.terms[0]", "column 16"),
        ('[terms.x]\nterms = ["raise(0)"]\nadd_adjoint = true\n', "terms.x.terms[0]", "sector"),
        ('[terms.x]\nterms = ["raise(0) lower(1)"]\n', "terms.x", "not Hermitian"),
        ("[terms.x]\nterms = [3]\n", "terms.x.terms[0]", "term string"),
        ('[terms.x]\nterm = ["count(0)"]\n', "terms.x.term", "did you mean 'terms'"),
        ("[terms.x]\nvalue = 1.0\n", "terms.x", "per_mode"),
        ('[terms.U]\nvalue = 2.0\nterms = ["count(0)"]\n', "terms.U", "already a parameter"),
        ('[terms.2x]\nterms = ["count(0)"]\n', "terms.2x", "start with a letter"),
        ('[terms.x]\nper_mode = "count(0)"\n', "terms.x.per_mode", "using @"),
        (
            '[terms.x]\nper_mode = "count(@)"\nweights = [1.0]\n',
            "terms.x.weights",
            "expected 3 numbers",
        ),
        (
            '[terms.x]\nper_mode = "count(@)"\nmodes = ["site 7"]\n',
            "terms.x.modes[0]",
            "not a mode label",
        ),
        (
            '[terms.x]\nper_mode = "count(@)"\nrandom = { distribution = "flat", seed = 1 }\n',
            "terms.x.random.distribution",
            '"uniform"',
        ),
        (
            '[terms.x]\nper_mode = "count(@)"\nrandom = { distribution = "uniform", low = 0 }\n',
            "terms.x.random.seed",
            "missing",
        ),
        (
            '[terms.x]\nper_mode = "count(@)"\n'
            'random = { distribution = "normal", std = 0.1, seed = 1, low = 0 }\n',
            "terms.x.random.low",
            "unknown key",
        ),
        ('[terms.x]\nmodes = [0]\nterms = ["count(0)"]\n', "terms.x.modes", "per_mode"),
        ('[units]\nenergy = ""\n', "units.energy", "unit such as"),
        ('[terms.x]\nterms = ["count(0)"]\ndescription = ""\n', "terms.x.description", "short"),
        (
            '[terms.x]\nfixed = true\nterms = ["count(0)"]\ndescription = "a"\n',
            "terms.x.description",
            "no parameter",
        ),
        ('[units]\nV = "J"\n', "units.V", "unknown key"),
    ],
)
def test_term_errors_name_file_key_and_column(extra: str, key: str, fragment: str) -> None:
    with pytest.raises(fm.ModelFileError) as info:
        fm.parse_model_text(CHAIN3 + extra, source="user.toml")
    error = info.value
    assert error.source == "user.toml"
    assert error.key == key, str(error)
    assert fragment in str(error), str(error)
    assert str(error).startswith(f"user.toml: {key}: ")


def test_examples_cover_every_section_and_key() -> None:
    # Every documented top-level section, [terms] key and lattice appears in an example.
    texts = "\n".join(p.read_text(encoding="utf-8") for p in sorted(EXAMPLES.glob("*.toml")))
    for section in ("[model]", "[terms.", "[parameters]", "[units]", "[drives]", "[sweep."):
        assert section in texts, section
    for section in ("[record]", "[solver]"):
        assert section in texts, section
    for key in ("per_mode", "weights", "random", "add_adjoint", "fixed", "modes", "value"):
        assert re.search(rf"^{key} = ", texts, re.MULTILINE), key
    for key in ("description",):
        assert re.search(rf"^{key} = ", texts, re.MULTILINE), key
    # "chain" is "ring" without the closing bond; the other three appear verbatim.
    for lattice in ("ring", "rectangle", "edges"):
        assert f'lattice = "{lattice}"' in texts, lattice
    for key in ("coherent", "two_photon", "threads", "entropy_modes", "spacing", "schema"):
        assert f"{key} = " in texts, key
    docs = (EXAMPLES.parents[1] / "docs" / "model-files.md").read_text(encoding="utf-8")
    for word in itertools.chain(
        ("kind", "lattice", "cutoff", "total", "edges", "rows", "cols", "periodic"),
        ("frequencies", "self_kerr", "cross_kerr", "couplings", "cavity_cutoff", "sites"),
        ("coherent", "two_photon", "values", "start", "stop", "num", "spacing"),
        ("quantities", "levels", "entropy_modes", "tol", "method", "threads"),
        ("value", "fixed", "terms", "per_mode", "modes", "weights", "random", "add_adjoint"),
        ("description",),
        ("distribution", "seed", "low", "high", "mean", "std", "energy"),
    ):
        assert f"`{word}`" in docs, word


TERM_TEXT = st.text(alphabet="raiselowcnt()@^0123 .-+*je", max_size=24) | st.sampled_from(
    ["count(@)", "raise(0) lower(1)", "lower(site 1)^2", "(0.5+1j) raise(2)", "-"]
)
TERM_VALUES = st.recursive(
    st.one_of(
        TERM_TEXT,
        st.integers(-2, 4),
        st.floats(-3, 3) | st.sampled_from([math.nan, math.inf]),
        st.booleans(),
        st.sampled_from(["uniform", "normal", "site 0", "W", "J"]),
    ),
    lambda inner: (
        st.lists(inner, max_size=4)
        | st.dictionaries(
            st.sampled_from(["distribution", "seed", "low", "high", "mean", "std", "x"]),
            inner,
            max_size=4,
        )
    ),
    max_leaves=10,
)
TERM_TABLES = st.dictionaries(
    st.sampled_from(
        [
            "value",
            "fixed",
            "description",
            "terms",
            "per_mode",
            "modes",
            "weights",
            "random",
            "add_adjoint",
        ]
    ),
    TERM_VALUES,
    max_size=5,
)


@pytest.mark.slow
@settings(max_examples=300, deadline=None)
@given(st.dictionaries(st.sampled_from(["x", "U", "W", "omega", "2y"]), TERM_TABLES, max_size=2))
def test_fuzzed_terms_give_a_model_or_a_model_file_error(tables: dict[str, Any]) -> None:
    # Anything goes in: the reader either builds a model or raises ModelFileError with
    # a key path (project contract, no outside source); nothing else escapes.
    text = CHAIN3 + "".join(
        f"[terms.{json.dumps(name)}]\n"
        + "".join(f"{key} = {toml_value(value)}\n" for key, value in table.items())
        for name, table in tables.items()
    )
    try:
        spec = fm.parse_model_text(text, source="fuzz.toml")
    except fm.ModelFileError as error:
        assert str(error).startswith("fuzz.toml: ")
    else:
        assert spec.model.hamiltonian().is_hermitian()


def toml_value(value: Any) -> str:
    """TOML text of a value (inline tables for dicts; nan/inf as TOML spells them)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
