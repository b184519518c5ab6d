"""Symmetry sectors in the workflows: diagnostics, model files, sweeps, the CLI, plots.

External references used here:

* dense numpy ``eigvalsh`` of matrices built by hand from the expressions
  (``tests/reference.py``), independent of the package's builders;
* the tight-binding band of one particle on a ring of ``L`` sites with hopping ``J``,
  ``ε(k) = −2J cos k`` with ``k = 2πq/L`` (textbook; e.g. Ashcroft & Mermin 1976,
  ch. 10, the s-band of nearest-neighbour tight binding; from memory);
* Perron–Frobenius: for real non-positive off-diagonal hopping the ground state of the
  Bose–Hubbard ring has positive amplitudes, so it is invariant under every site
  permutation the Hamiltonian commutes with (k = 0, reflection-even). Common practice.
"""

from __future__ import annotations

import concurrent.futures as cf
import io
import math
import sqlite3
import warnings
from pathlib import Path

import fockmill as fm
import numpy as np
import pytest
from fockmill.cli import main
from fockmill.exceptions import ModelFileError, SizeLimitError, StoreError, SymmetryError
from fockmill.files.modelfile import parse_model_text
from fockmill.models import bose_hubbard, chain_edges
from fockmill.models.model import Model
from fockmill.spaces.sectors import sector_choice
from fockmill.store.sweeps import ResultsStore
from fockmill.sweeps.run import run_sweep
from reference import sector_matrix

# -- helpers ---------------------------------------------------------------------------


def ring_model(sites: int, particles: int) -> Model:
    """Bose–Hubbard ring at fixed total (pieces J, U, mu); every cutoff is the total."""
    return bose_hubbard(chain_edges(sites, periodic=True), sites=sites, total=particles)


def dense_spectrum(model: Model, point: dict[str, float]) -> np.ndarray:
    """External reference: eigvalsh of the hand-built matrix of the whole sector."""
    space = model.space
    matrix = sector_matrix(model.hamiltonian(**point), space.cutoffs, space.total)
    return np.linalg.eigvalsh(matrix)


RING_FILE = """
[model]
kind = "bose-hubbard"
lattice = "{lattice}"
sites = 4
total = 4

[units]
energy = "J"
U = "J"

{extra}
"""


def ring_text(symmetry: str, lattice: str = "ring", extra: str = "") -> str:
    return RING_FILE.format(lattice=lattice, extra=f"[symmetry]\n{symmetry}\n{extra}")


# -- 1. truncation diagnostics and memory estimates on a sector -------------------------


def hubbard_expr(sites: int, u: float) -> fm.LadderExpr:
    h = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        h = h - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 0.5 * u * fm.raising(i) ** 2 * fm.lowering(i) ** 2
    return h


def test_cutoff_warning_and_top_weights_in_a_sector() -> None:
    base = fm.FockSpace(modes=4, cutoff=2, total=4)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(4), 0)])
    h = hubbard_expr(4, 0.5)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        ground = fm.ground_state(h, sector)
    assert any(issubclass(w.category, fm.CutoffWarning) for w in caught)
    weights = fm.top_level_weights(sector, ground.vector)
    # Reference: probability of n_i == cutoff from the expanded vector and the basis.
    full = sector.expand(ground.vector)
    occupations = base.occupations()
    expected = [float(np.sum(np.abs(full[occupations[:, i] == 2]) ** 2)) for i in range(4)]
    np.testing.assert_allclose(weights, expected, atol=1e-12)
    assert min(expected) > 1e-3


def test_converge_cutoffs_on_a_sector_raises_whole_orbits() -> None:
    base = fm.FockSpace(modes=4, cutoff=1, total=4)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(4), 0), (fm.ring_reflection(4), 0)])
    h = hubbard_expr(4, 1.0)
    scan = fm.converge_cutoffs(h, sector, energy_tol=1e-10, weight_tol=1e-8)
    assert isinstance(scan.space, fm.SymmetricSpace)
    assert all(len(set(c)) == 1 for c in scan.cutoffs)  # cutoffs stay symmetric
    assert scan.converged
    # Perron–Frobenius: the ground state of the whole space lies in this sector.
    cutoffs = scan.space.cutoffs
    reference = np.linalg.eigvalsh(sector_matrix(h, cutoffs, 4))[0]
    assert scan.energies[-1] == pytest.approx(reference, abs=1e-9)


def test_memory_estimate_and_refusal_on_a_sector() -> None:
    base = fm.FockSpace(modes=6, cutoff=6, total=6)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(6), 1)])
    h = hubbard_expr(6, 2.0)
    estimate = fm.estimate_memory(h, sector)
    matrix = fm.build_matrix(h, sector)
    assert estimate.dim == sector.dim
    assert estimate.nnz_exact and estimate.nnz == matrix.nnz
    assert estimate.value_dtype == matrix.dtype == np.complex128
    stored = matrix.data.nbytes + matrix.indices.nbytes + matrix.indptr.nbytes
    assert estimate.csr_bytes == stored
    with pytest.raises(SizeLimitError, match=r"needs .* GiB but the memory limit is .* GiB"):
        fm.build_matrix(h, sector, memory_limit=estimate.csr_bytes // 2)


# -- 2. model files: [symmetry] ----------------------------------------------------------


def test_parse_lattice_translations_reflections_and_permutations() -> None:
    spec = parse_model_text(ring_text("translation = 1")).symmetry
    assert spec is not None and spec.labels == (1,) and spec.scan is None
    assert spec.generators[0].images == (1, 2, 3, 0)
    spec = parse_model_text(ring_text('translation = "all"')).symmetry
    assert spec is not None and spec.scan == 0 and spec.scan_labels() == [0, 1, 2, 3]
    spec = parse_model_text(ring_text("translation = 2\nreflection = 1")).symmetry
    assert spec is not None and spec.labels == (2, 1)
    assert spec.generators[1].images == (3, 2, 1, 0)
    spec = parse_model_text(ring_text("reflection = 0", lattice="chain")).symmetry
    assert spec is not None and spec.names == ("symmetry.reflection",)
    text = ring_text("permutations = [[1, 2, 3, 0], [3, 2, 1, 0]]\nlabels = [0, 1]")
    spec = parse_model_text(text).symmetry
    assert spec is not None and spec.labels == (0, 1)


def test_parse_rectangle_and_polariton_ring() -> None:
    rectangle = """
[model]
kind = "bose-hubbard"
lattice = "rectangle"
rows = 3
cols = 3
periodic = true
total = 2
[symmetry]
translation = ["all", 1]
"""
    spec = parse_model_text(rectangle).symmetry
    assert spec is not None and spec.scan == 0 and spec.labels == (None, 1)
    assert spec.generators[0].images[:3] == (1, 2, 0)
    assert spec.generators[1].images[:3] == (3, 4, 5)
    polaritons = """
[model]
kind = "jaynes-cummings-hubbard"
sites = 3
periodic = true
cavity_cutoff = 2
total = 2
[symmetry]
translation = 1
"""
    spec = parse_model_text(polaritons).symmetry
    assert spec is not None
    # Unit cell of two modes (cavity s, emitter s) moves to site s + 1.
    assert spec.generators[0].images == (2, 3, 4, 5, 0, 1)


REFUSALS = [
    (
        ring_text("permutations = [[1, 1, 3, 0]]\nlabels = [0]"),
        "symmetry.permutations[0]",
        "bijection",
    ),
    (ring_text("permutations = [[1, 2, 0]]\nlabels = [0]"), "symmetry.permutations[0]", "4 images"),
    (ring_text("permutations = [[1, 2, 3, 0]]\nlabels = [4]"), "symmetry.labels[0]", "order 4"),
    (ring_text("permutations = [[1, 2, 3, 0]]"), "symmetry.labels", "missing"),
    (ring_text("labels = [0]"), "symmetry.permutations", "missing"),
    (ring_text("translation = 4"), "symmetry.translation", "out of range"),
    (ring_text("translation = 1\nreflection = 0"), "symmetry.reflection", "one-dimensional"),
    (ring_text('translation = "all"\nreflection = 0'), "symmetry.reflection", "one-dimensional"),
    (
        ring_text('translation = "all"\npermutations = [[3, 2, 1, 0]]\nlabels = ["all"]'),
        "symmetry.permutations[0]",
        'only one label can be "all"',
    ),
    (ring_text("translation = 0", lattice="chain"), "symmetry.translation", "not invariant"),
    (ring_text("reflection = 2"), "symmetry.reflection", "0 (even) or 1 (odd)"),
    (ring_text("momentum = 0"), "symmetry.momentum", "unknown key"),
    (ring_text(""), "symmetry", "empty"),
    (
        ring_text(
            "translation = 0",
            extra='[terms.W]\nper_mode = "number(@)"\nrandom = {distribution = "uniform", '
            "seed = 3, low = -1.0, high = 1.0}",
        ),
        "symmetry.translation",
        "'W' terms are not invariant",
    ),
    (
        """
[model]
kind = "bose-hubbard"
lattice = "edges"
edges = [[0, 1], [1, 2], [2, 0]]
total = 2
[symmetry]
translation = 0
""",
        "symmetry.translation",
        "symmetry.permutations",
    ),
    (
        """
[model]
kind = "kerr-network"
frequencies = [1.0, 1.0]
couplings = [[0, 1, 0.2]]
cutoff = [2, 3]
[symmetry]
permutations = [[1, 0]]
labels = [0]
""",
        "symmetry.permutations[0]",
        "same cutoff",
    ),
    (
        """
[model]
kind = "kerr-network"
frequencies = [1.0, 1.0]
cutoff = 2
[symmetry]
reflection = 0
""",
        "symmetry.reflection",
        "no lattice",
    ),
]


@pytest.mark.parametrize(("text", "path", "words"), REFUSALS)
def test_every_refusal_names_the_key_path(text: str, path: str, words: str) -> None:
    with pytest.raises(ModelFileError) as info:
        parse_model_text(text, source="ring.toml")
    message = str(info.value)
    assert f"ring.toml: {path}:" in message
    assert words in message


def test_ring_momentum_bands_example() -> None:
    path = (
        Path(__file__).resolve().parent.parent / "examples" / "models" / "ring_momentum_bands.toml"
    )
    text = path.read_text(encoding="utf-8")
    assert "INVENTED" in text
    spec = parse_model_text(text)
    assert spec.symmetry is not None and spec.symmetry.scan == 0
    assert spec.symmetry.generators[0] == fm.ring_translation(8)
    assert spec.model.space.dim == 6435
    assert spec.sweep is not None and spec.levels == 2


def test_python_symmetry_argument_is_checked() -> None:
    t, r = fm.ring_translation(4), fm.ring_reflection(4)
    with pytest.raises(SymmetryError, match='at most one generator can have the label "all"'):
        sector_choice([(t, "all"), (r, "all")])
    with pytest.raises(SymmetryError, match="order 4"):
        sector_choice([(t, 4)])
    with pytest.raises(TypeError, match='an integer or "all"'):
        sector_choice([(t, "every")])
    chain = bose_hubbard(chain_edges(4), sites=4, total=4)
    with pytest.raises(SymmetryError, match="'J' part does not commute"):
        run_sweep(chain, [{"U": 1.0}], symmetry=[(t, 0)], workers=1, progress=False)


# -- 3. sweeps in a sector and over every momentum -----------------------------------------


def test_sector_sweep_equals_the_whole_space_ground_energy() -> None:
    model = ring_model(4, 4)
    points = [{"U": u} for u in (0.3, 2.0, 7.0)]
    t, r = fm.ring_translation(4), fm.ring_reflection(4)
    table = run_sweep(
        model,
        points,
        quantities=["energy", "populations"],
        symmetry=[(t, 0), (r, 0)],
        workers=1,
        progress=False,
    )
    assert table.sector is not None and table.sector["labels"] == [0, 0]
    for row, point in zip(table, points, strict=True):
        assert row.status == "ok"
        # Perron–Frobenius: the ground state lies in k = 0, reflection-even.
        assert row.energy == pytest.approx(dense_spectrum(model, point)[0], abs=1e-8)
        np.testing.assert_allclose(row.observables["populations"], 1.0, atol=1e-8)


def projected_spectrum(model: Model, point: dict[str, float], label: int) -> np.ndarray:
    """External reference for a momentum sector: the hand-built dense matrix compressed
    onto the range of the projector P_q = (1/L) Σ_n exp(−2πi q n / L) Tⁿ, with T the
    translation acting on occupation vectors (built here from the basis itself)."""
    space = model.space
    sites = space.modes
    matrix = sector_matrix(model.hamiltonian(**point), space.cutoffs, space.total)
    occupations = [tuple(int(n) for n in row) for row in space.occupations()]
    index = {occ: i for i, occ in enumerate(occupations)}
    shift = np.zeros((len(occupations), len(occupations)))
    for i, occ in enumerate(occupations):
        moved = tuple(occ[(s - 1) % sites] for s in range(sites))  # site s -> s + 1
        shift[index[moved], i] = 1.0
    projector = np.zeros_like(matrix, dtype=complex)
    power = np.eye(len(occupations))
    for n in range(sites):
        projector += np.exp(-2j * np.pi * label * n / sites) * power / sites
        power = shift @ power
    values, vectors = np.linalg.eigh(projector)
    basis = vectors[:, values > 0.5]
    return np.linalg.eigvalsh(basis.conj().T @ matrix @ basis)


@pytest.mark.parametrize("method", ["dense", "csr", "lanczos", "operator"])
def test_every_method_in_a_complex_momentum_sector(method: str) -> None:
    model = ring_model(4, 4)
    points = [{"U": u} for u in np.linspace(0.0, 7.0, 8)]  # 8 points: the shared pattern
    table = run_sweep(
        model,
        points,
        quantities=["energy", "gap"],
        symmetry=[(fm.ring_translation(4), 1)],
        method=method,
        workers=1,
        progress=False,
    )
    assert {row.method for row in table} == {method}
    for row, point in zip(table, points, strict=True):
        reference = projected_spectrum(model, point, 1)
        assert row.status == "ok"
        assert row.energy == pytest.approx(reference[0], abs=1e-8)
        assert row.gap == pytest.approx(reference[1] - reference[0], abs=1e-7)


def test_every_momentum_merges_to_the_whole_spectrum() -> None:
    model = ring_model(4, 4)
    points = [{"U": u} for u in (0.5, 4.0)]
    table = run_sweep(
        model,
        points,
        quantities=["energy", "gap", "levels"],
        levels=3,
        symmetry=[(fm.ring_translation(4), "all")],
        workers=1,
        progress=False,
    )
    arrays = table.to_arrays()
    assert arrays["dispersion"].shape == (2, 4, 3)
    for row, point in zip(table, points, strict=True):
        dense = dense_spectrum(model, point)
        dispersion = np.array(row.observables["dispersion"])
        # The minimum over k is the whole space's ground energy; the 3 lowest levels
        # of the merge are the 3 lowest of the whole spectrum.
        assert np.nanmin(dispersion) == pytest.approx(dense[0], abs=1e-8)
        np.testing.assert_allclose(row.levels, dense[:3], atol=1e-8)
        assert row.gap == pytest.approx(dense[1] - dense[0], abs=1e-8)
        assert row.observables["ground_sector"] == 0
        # Inversion symmetry of the ring: E(q) = E(L - q).
        np.testing.assert_allclose(dispersion[1], dispersion[3], atol=1e-8)


def test_one_particle_on_a_ring_gives_the_tight_binding_band() -> None:
    sites = 7
    model = ring_model(sites, 1)
    table = run_sweep(
        model,
        [{"J": 1.0}, {"J": 0.5}],
        quantities=["energy"],
        symmetry=[(fm.ring_translation(sites), "all")],
        workers=1,
        progress=False,
    )
    q = np.arange(sites)
    for row in table:
        j = row.parameters["J"]
        band = -2 * j * np.cos(2 * np.pi * q / sites)  # ε(k) = −2J cos k
        np.testing.assert_allclose(np.array(row.observables["dispersion"])[:, 0], band, atol=1e-9)
        assert table.sector is not None and table.sector["dims"] == [1] * sites


def test_empty_sectors() -> None:
    # One particle on a ring of 4: the k = 0 state (uniform amplitudes) is even under
    # the reflection, so the k = 0, reflection-odd sector holds no state.
    model = ring_model(4, 1)
    odd = [(fm.ring_translation(4), 0), (fm.ring_reflection(4), 1)]
    with pytest.raises(SymmetryError, match="holds no state"):
        run_sweep(model, [{"U": 1.0}], symmetry=odd, workers=1, progress=False)
    # No particle on a ring of 3: only the vacuum, at k = 0; the other rows stay empty.
    table = run_sweep(
        ring_model(3, 0),
        [{"U": 1.0}],
        symmetry=[(fm.ring_translation(3), "all")],
        workers=1,
        progress=False,
        quantities=["energy"],
    )
    (row,) = table.rows
    assert row.status == "ok" and row.energy == 0.0
    dispersion = table.to_arrays()["dispersion"][0]
    assert dispersion[0, 0] == 0.0 and np.isnan(dispersion[1:]).all()


def test_threaded_executor_and_chunks_give_the_same_dispersion() -> None:
    model = ring_model(5, 3)
    points = [{"U": u} for u in (0.0, 1.0, 2.0, 3.0)]
    symmetry = [(fm.ring_translation(5), "all")]
    serial = run_sweep(model, points, symmetry=symmetry, executor="serial", progress=False)
    with cf.ThreadPoolExecutor(max_workers=2) as pool:
        chunked = run_sweep(
            model, points, symmetry=symmetry, executor=pool, chunk=1, workers=2, progress=False
        )
    np.testing.assert_allclose(
        serial.to_arrays()["dispersion"], chunked.to_arrays()["dispersion"], atol=1e-9
    )


def test_process_pool_sends_sectors_to_workers() -> None:
    # The recipe (with its sector, or the generator to scan) is pickled to the workers.
    model = ring_model(4, 4)
    points = [{"U": u} for u in (0.5, 1.5, 3.0)]
    t, r = fm.ring_translation(4), fm.ring_reflection(4)
    scan = run_sweep(model, points, symmetry=[(t, "all")], workers=2, chunk=1, progress=False)
    fixed = run_sweep(model, points, symmetry=[(t, 0), (r, 0)], workers=2, progress=False)
    for a, b, point in zip(scan, fixed, points, strict=True):
        expected = dense_spectrum(model, point)[0]
        assert a.energy == pytest.approx(expected, abs=1e-8)
        assert b.energy == pytest.approx(expected, abs=1e-8)


def test_resume_store_schema_and_sector_mismatch(tmp_path: Path) -> None:
    model = ring_model(4, 4)
    points = [{"U": u} for u in (0.5, 1.0, 2.0, 4.0)]
    symmetry = [(fm.ring_translation(4), "all")]
    path = tmp_path / "bands.sqlite"
    first = run_sweep(model, points, store=path, symmetry=symmetry, workers=1, progress=False)
    with sqlite3.connect(path) as connection:
        connection.execute("DELETE FROM points WHERE point IN (1, 3)")
    connection.close()
    solved: list[int] = []
    again = run_sweep(
        model,
        points,
        store=path,
        symmetry=symmetry,
        workers=1,
        progress=False,
        on_point=lambda row: solved.append(row.index),
    )
    assert sorted(solved) == [1, 3]
    np.testing.assert_allclose(
        first.to_arrays()["dispersion"], again.to_arrays()["dispersion"], atol=1e-9
    )
    with ResultsStore.open(path) as store:
        meta = store.meta
        assert meta["schema_version"] == 3
        assert meta["symmetry"]["labels"] == ["all"]
        assert meta["sector_dims"] == [10, 8, 9, 8]  # as fm.SymmetricSpace's doctest
    with pytest.raises(StoreError, match="resume with the same symmetry"):
        run_sweep(model, points, store=path, symmetry=[(fm.ring_translation(4), 0)], workers=1)
    with pytest.raises(StoreError, match="the whole space"):
        run_sweep(model, points, store=path, workers=1, progress=False)
    plain = tmp_path / "plain.sqlite"
    run_sweep(model, points[:1], store=plain, workers=1, progress=False)
    with ResultsStore.open(plain) as store:
        assert store.meta["schema_version"] == 2  # older readers still open these
    with sqlite3.connect(path) as connection:
        connection.execute("UPDATE meta SET value = '4' WHERE key = 'schema_version'")
    connection.close()
    with pytest.raises(StoreError, match="reads versions 2 and 3"):
        ResultsStore.open(path)


# -- 4. the command line --------------------------------------------------------------


BAND_FILE = """
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 5
total = 1

[units]
energy = "J"

[symmetry]
translation = "all"

[sweep.J]
values = [0.5, 1.0, 2.0]
"""


def run_cli(argv: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    code = main(argv, out=out)
    return code, out.getvalue()


def test_cli_solve_prints_the_dispersion_table(tmp_path: Path) -> None:
    model = tmp_path / "band.toml"
    model.write_text(BAND_FILE)
    code, text = run_cli(["solve", str(model), "--set", "J=1", "--plot", str(tmp_path / "b.png")])
    assert code == 0
    assert (tmp_path / "b.png").stat().st_size > 0
    lines = text.splitlines()
    start = next(i for i, line in enumerate(lines) if line.lstrip().startswith("q "))
    rows = [line.split() for line in lines[start + 1 : start + 6]]
    for q, row in enumerate(rows):
        assert int(row[0]) == q
        assert float(row[3]) == pytest.approx(-2 * math.cos(2 * math.pi * q / 5), abs=1e-8)
        assert float(row[4]) == pytest.approx(2 - 2 * math.cos(2 * math.pi * q / 5), abs=1e-8)
    assert "sector  translation: every momentum" in text


def test_cli_solve_in_one_sector_matches_the_dense_ground_energy(tmp_path: Path) -> None:
    model = tmp_path / "ring.toml"
    model.write_text(ring_text("translation = 0\nreflection = 0"))
    code, text = run_cli(["solve", str(model), "--set", "U=3", "--format", "json"])
    assert code == 0
    import json

    document = json.loads(text)
    assert document["sector"]["labels"] == [0, 0]
    expected = dense_spectrum(ring_model(4, 4), {"U": 3.0})[0]
    assert document["energy"] == pytest.approx(expected, abs=1e-8)


def test_cli_sweep_show_and_plot_a_dispersion(tmp_path: Path) -> None:
    model = tmp_path / "band.toml"
    model.write_text(BAND_FILE)
    results = tmp_path / "band.sqlite"
    code, _ = run_cli(
        ["sweep", str(model), "--out", str(results), "--workers", "1", "--no-progress"]
    )
    assert code == 0
    code, text = run_cli(["show", str(results)])
    assert code == 0
    assert "# sector: translation: every momentum k = 2π·q/5 (dim 1, 1, 1, 1, 1)" in text
    block = text.split("per sector, k = 2π·q/5:")[1].splitlines()
    assert block[1].split()[:3] == ["point", "J", "q=0"]
    j2 = block[4].split()
    assert float(j2[1]) == 2.0 and float(j2[2]) == pytest.approx(-4.0, abs=1e-8)
    code, _ = run_cli(["plot", str(results), "--y", "dispersion", "--out", str(tmp_path / "d.png")])
    assert code == 0 and (tmp_path / "d.png").stat().st_size > 0


def test_cli_refuses_a_bad_symmetry_with_the_key_path(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model = tmp_path / "chain.toml"
    model.write_text(ring_text("translation = 0", lattice="chain"))
    assert main(["solve", str(model)], out=io.StringIO()) == 2
    assert (
        "symmetry.translation: the model's 'J' terms are not invariant" in capsys.readouterr().err
    )


# -- 5. figures ---------------------------------------------------------------------------


def test_dispersion_figure_of_one_solve() -> None:
    pytest.importorskip("matplotlib")
    from fockmill.plots.sweeps import dispersion_figure

    h = hubbard_expr(6, 0.0)
    dispersion = fm.momentum_levels(
        h, fm.FockSpace(modes=6, cutoff=1, total=1), fm.ring_translation(6), levels=1
    )
    figure = dispersion_figure(dispersion, units={"energy": "meV"}, title="one particle")
    (axis,) = figure.axes
    assert "momentum" in axis.get_xlabel()
    assert "(meV)" in axis.get_ylabel()
    (line,) = axis.get_lines()
    xs, ys = line.get_data()
    np.testing.assert_allclose(ys, -2 * np.cos(np.pi * np.asarray(xs)), atol=1e-9)
    # k = π is shown at both ends of the zone (the same momentum), so no end is empty.
    assert min(xs) == pytest.approx(-1.0) and max(xs) == pytest.approx(1.0)
    assert figure.get_suptitle().startswith("one particle")


def test_sweep_dispersion_figure_and_sector_titles(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    from fockmill.plots.sweeps import sweep_dispersion_figure, sweep_figure

    spec = parse_model_text(BAND_FILE)
    path = tmp_path / "band.sqlite"
    run_sweep(
        spec.model,
        spec.sweep,
        store=path,
        symmetry=spec.symmetry,
        units=spec.units,
        workers=1,
        progress=False,
    )
    figure = sweep_dispersion_figure(path)
    curves, mesh, bar_left, bar_right = figure.axes
    assert len(curves.get_lines()) == 3  # one curve per sweep point
    assert "hopping $J$" in bar_left.get_ylabel()
    assert "hopping $J$" in mesh.get_ylabel()
    assert "/ $J$" in curves.get_ylabel()
    assert "excitation" in bar_right.get_ylabel()
    (quad,) = mesh.collections
    excitation = np.asarray(quad.get_array()).reshape(3, 5)
    assert np.nanmin(excitation) == 0.0  # each point's E0 is the zero of its row
    assert "sector: translation: every momentum" in figure.get_suptitle()
    energy = sweep_figure(path, y=["energy"])
    assert "sector: translation" in energy.get_suptitle()
    fixed = tmp_path / "fixed.sqlite"
    model = ring_model(4, 4)
    symmetry = [(fm.ring_translation(4), 0), (fm.ring_reflection(4), 0)]
    run_sweep(model, [{"U": 1.0}, {"U": 2.0}], store=fixed, symmetry=symmetry, workers=1)
    title = sweep_figure(fixed, y=["energy"]).get_suptitle()
    assert title.endswith("sector: translation k = 2π·0/4, reflection even, dim 8")


def test_momentum_levels_old_keyword_warns_and_agrees() -> None:
    # One particle on a ring: E(q) = -2 cos(2πq/L) (Bloch's theorem; common practice, no
    # source). The old keyword k= still works for one release, with a DeprecationWarning.
    h = hubbard_expr(6, 0.0)
    space = fm.FockSpace(modes=6, cutoff=1, total=1)
    with pytest.warns(DeprecationWarning, match="levels="):
        old = fm.momentum_levels(h, space, fm.ring_translation(6), k=1)
    new = fm.momentum_levels(h, space, fm.ring_translation(6), levels=1)
    np.testing.assert_array_equal(old.energies, new.energies)
    np.testing.assert_allclose(new.energies[:, 0], -2 * np.cos(new.momenta), atol=1e-9)


def test_every_state_function_takes_a_sector_or_says_why() -> None:
    # A sector state is a state of the base space in the orbit basis: observables agree
    # with the same quantities of the expanded state (common practice, no source).
    L = 4
    base = fm.FockSpace(modes=L, cutoff=2, total=2)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(L), 0)])
    h = hubbard_expr(L, 1.0)
    v = fm.ground_state(h, sector).vector
    full = sector.expand(v)
    np.testing.assert_allclose(
        fm.density_correlations(sector, v), fm.density_correlations(base, full), atol=1e-12
    )
    np.testing.assert_allclose(
        fm.density_correlations(sector, v, connected=True),
        fm.density_correlations(base, full, connected=True),
        atol=1e-12,
    )
    # A non-invariant observable is measured through its group average: same value.
    ev = fm.evolve(h, sector, psi0=v, times=[0.0, 1.0], observables={"n0": fm.number(0)})
    np.testing.assert_allclose(ev.values["n0"], fm.expectation(fm.number(0), base, full))
    th = fm.thermal(h, sector, temperatures=[1.0], observables={"n0": fm.number(0)})
    np.testing.assert_allclose(th.values["n0"], [0.5], atol=1e-12)  # N/L by translation
    with pytest.raises(SymmetryError, match=r"sector.base, sector.expand\(vector\)"):
        fm.save_state("unused.npz", sector, v)
    with pytest.raises(SymmetryError, match=r"sector\.base"):
        fm.momentum_levels(h, sector, fm.ring_translation(L))
