"""Tests of the sweep engine: structure reuse, warm-start chains, executors."""

from __future__ import annotations

import itertools
import math

import fockmill as fm
import numpy as np
import pytest
from fockmill.exceptions import NotHermitianError
from fockmill.models.model import Model
from fockmill.sweeps.run import SharedPattern, run_sweep, serpentine_order
from reference import dense_matrix, full_basis, restrict, sector_matrix, sector_occupations


def hubbard_ring(sites: int, particles: int, cutoff: int) -> Model:
    """Invented example: a Bose–Hubbard ring with pieces ``J`` (hopping) and ``U``.

    ``H = −J Σ_i (a_i† a_{i+1} + h.c.) + (U/2) Σ_i a_i†² a_i²`` with a periodic boundary.
    """
    hop = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        hop = hop - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
    kerr = fm.LadderExpr()
    for i in range(sites):
        kerr = kerr + 0.5 * fm.raising(i) ** 2 * fm.lowering(i) ** 2
    space = fm.FockSpace(modes=sites, cutoff=cutoff, total=particles)
    return Model("test-ring", space, {"J": hop, "U": kerr}, {"J": 1.0, "U": 1.0})


def dense_levels(model: Model, point: dict[str, float], count: int = 2) -> np.ndarray:
    """External reference: numpy's dense eigvalsh of the matrix built by hand from the
    expressions (tests/reference.sector_matrix, independent of the package's builder)."""
    space = model.space
    matrix = sector_matrix(model.hamiltonian(**point), space.cutoffs, space.total)
    return np.linalg.eigvalsh(matrix)[:count]


GRID = [{"J": j, "U": u} for j in (1.0, 0.6) for u in np.linspace(0.0, 9.0, 7)]


@pytest.fixture(scope="module")
def ring() -> Model:
    return hubbard_ring(sites=5, particles=5, cutoff=3)  # dim 121, translation symmetric


@pytest.fixture(scope="module")
def serial_table(ring: Model):
    # method="csr" forces the sparse eigensolver with warm starts even at this size.
    return run_sweep(ring, GRID, executor="serial", method="csr", progress=False)


def test_serial_sweep_matches_dense_reference(ring: Model, serial_table) -> None:
    # Reference: numpy.linalg.eigvalsh (LAPACK) on the matrix rebuilt per point.
    # The ring is translation invariant, so E0 and E1 sit in different momentum sectors at
    # some U: a warm start without fresh noise would miss E1 and the gap would be wrong.
    assert [row.index for row in serial_table] == list(range(len(GRID)))
    assert {row.method for row in serial_table} == {"csr"}
    for row, point in zip(serial_table, GRID, strict=True):
        reference = dense_levels(ring, point)
        assert row.parameters == point
        assert row.energy == pytest.approx(reference[0], abs=1e-9)
        assert row.gap == pytest.approx(reference[1] - reference[0], abs=1e-9)
        assert row.residual < 1e-8


def test_chunked_pool_equals_serial(ring: Model, serial_table) -> None:
    pooled = run_sweep(
        ring,
        GRID,
        workers=2,
        chunk=3,
        method="csr",
        progress=False,
    )
    a, b = serial_table.to_arrays(), pooled.to_arrays()
    np.testing.assert_array_equal(a["index"], b["index"])
    np.testing.assert_allclose(b["energy"], a["energy"], rtol=0, atol=1e-9)
    np.testing.assert_allclose(b["gap"], a["gap"], rtol=0, atol=1e-9)
    for row, point in zip(pooled, GRID, strict=True):
        assert row.energy == pytest.approx(dense_levels(ring, point)[0], abs=1e-9)


def test_thread_executor_is_accepted(ring: Model, serial_table) -> None:
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=2) as executor:
        table = run_sweep(
            ring,
            GRID,
            executor=executor,
            chunk=5,
            method="csr",
            threads=1,
            progress=False,
        )
    np.testing.assert_allclose(
        table.to_arrays()["energy"], serial_table.to_arrays()["energy"], rtol=0, atol=1e-9
    )


def test_dask_local_cluster_equals_serial(ring: Model, serial_table) -> None:
    distributed = pytest.importorskip(
        "distributed", reason="dask.distributed is not installed (extra fockmill[cluster])"
    )
    with (
        distributed.LocalCluster(
            n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        table = run_sweep(ring, GRID, executor=client, chunk=4, method="csr", progress=False)
    np.testing.assert_array_equal(table.to_arrays()["index"], np.arange(len(GRID)))
    np.testing.assert_allclose(
        table.to_arrays()["energy"], serial_table.to_arrays()["energy"], rtol=0, atol=1e-9
    )
    np.testing.assert_allclose(
        table.to_arrays()["gap"], serial_table.to_arrays()["gap"], rtol=0, atol=1e-9
    )


def pair_closed_form(j: float, u: float) -> dict[str, float]:
    """Two bosons on two sites, ``H = −J(a0†a1 + a1†a0) + (U/2) Σ n_i(n_i − 1)``.

    Derived by hand (common practice, no source): in the basis |2,0⟩, |1,1⟩, |0,2⟩,
    ``H = [[U, −√2 J, 0], [−√2 J, 0, −√2 J], [0, −√2 J, U]]``. The antisymmetric state
    (|2,0⟩ − |0,2⟩)/√2 has energy U; on the symmetric pair s = (|2,0⟩ + |0,2⟩)/√2, |1,1⟩
    the block is [[U, −2J], [−2J, 0]], so E± = U/2 ± √(U²/4 + 4J²). Hence E0 = E−, and
    E1 = U for every real U (since √(U²/4 + 4J²) ≥ |U|/2), gap = U/2 + √(U²/4 + 4J²).
    The ground state is α s + β |1,1⟩ with β/α = (U − E0)/(2J): ⟨n0⟩ = 1,
    Var n0 = α², ⟨a0† a1⟩ = 2αβ, and the Schmidt weights between the sites are
    α²/2, β², α²/2.
    """
    root = math.sqrt(u * u / 4 + 4 * j * j)
    e0 = u / 2 - root
    ratio = (u - e0) / (2 * j)
    alpha2 = 1 / (1 + ratio * ratio)
    beta2 = 1 - alpha2
    weights = [w for w in (alpha2 / 2, alpha2 / 2, beta2) if w > 0]
    return {
        "energy": e0,
        "gap": u / 2 + root,
        "variance": alpha2,
        "hopping": 2 * math.sqrt(alpha2 * beta2),
        "entanglement_entropy": -sum(w * math.log(w) for w in weights),
    }


def test_two_site_pair_closed_form() -> None:
    model = hubbard_ring(sites=2, particles=2, cutoff=2)
    # hubbard_ring(2) lists the bond twice (0→1 and 1→0): hopping amplitude 2J per bond.
    points = [{"J": j, "U": u} for j in (0.5, 1.0) for u in np.linspace(-3.0, 8.0, 12)]
    table = run_sweep(
        model,
        points,
        quantities=(
            "energy",
            "gap",
            "populations",
            "number_variances",
            "one_body_matrix",
            "entanglement_entropy",
        ),
        executor="serial",
        progress=False,
    )
    for row, point in zip(table, points, strict=True):
        expected = pair_closed_form(2 * point["J"], point["U"])
        assert row.energy == pytest.approx(expected["energy"], abs=1e-12)
        assert row.gap == pytest.approx(expected["gap"], abs=1e-12)
        obs = row.observables
        np.testing.assert_allclose(obs["populations"], [1.0, 1.0], atol=1e-12)
        np.testing.assert_allclose(obs["number_variances"], [expected["variance"]] * 2, atol=1e-12)
        assert obs["one_body_matrix"][0][1] == pytest.approx(expected["hopping"], abs=1e-12)
        assert obs["entanglement_entropy"] == pytest.approx(
            expected["entanglement_entropy"], abs=1e-12
        )


def test_shared_pattern_matches_dense_oracle(rng: np.random.Generator) -> None:
    # Reference: tests/reference.py builds each monomial with np.kron on the full product
    # space; restricting to the sector gives the expected matrix of H(p).
    space = fm.FockSpace(modes=3, cutoff=2, total=3)
    a0, a1, a2 = fm.lowering(0), fm.lowering(1), fm.lowering(2)
    twist = 0.3 + 0.4j
    pieces = {
        "g": twist * a0.adjoint() * a1 + np.conj(twist) * a1.adjoint() * a0,
        "k": a2.adjoint() ** 2 * a2**2,
        "x": a0.adjoint() * a1.adjoint() * a2**2 + (a2.adjoint() ** 2) * a0 * a1,
    }
    constant = 0.25 * fm.number(0) + 1.5
    model = Model("mixed", space, pieces, {"g": 1.0, "k": 1.0, "x": 1.0}, constant=constant)
    shared = SharedPattern.from_model(model, threads=1)
    cutoffs = list(space.cutoffs)
    occupations = sector_occupations(cutoffs, total=3)
    for _ in range(3):
        values = {name: float(v) for name, v in zip(pieces, rng.normal(size=3), strict=True)}
        expected = restrict(
            dense_matrix(model.hamiltonian(**values), cutoffs), full_basis(cutoffs), occupations
        )
        np.testing.assert_allclose(shared.assemble(values).toarray(), expected, atol=1e-13)


def test_serpentine_order_steps_to_neighbours() -> None:
    # Definition check (common practice, no source): on a full grid each step of a
    # boustrophedon path changes exactly one coordinate by one grid step.
    axes = {"a": [0.0, 1.0, 2.0], "b": [5.0, 6.0], "c": [-1.0, 0.0, 1.0, 2.0]}
    points = [dict(zip(axes, combo, strict=True)) for combo in itertools.product(*axes.values())]
    order = serpentine_order(points, list(axes))
    assert sorted(order) == list(range(len(points)))
    position = {name: {v: k for k, v in enumerate(vals)} for name, vals in axes.items()}
    for first, second in itertools.pairwise(order):
        steps = [abs(position[n][points[first][n]] - position[n][points[second][n]]) for n in axes]
        assert sorted(steps) == [0, 0, 1]


def test_defaults_fill_unswept_parameters(ring: Model) -> None:
    table = run_sweep(ring, [{"U": 2.0}], executor="serial", progress=False)
    assert table.rows[0].parameters == {"J": 1.0, "U": 2.0}
    assert table.swept == ("U",)
    assert table.rows[0].method == "dense"  # dim 121 is below the default dense limit


def test_levels_and_top_weight_recorded(ring: Model) -> None:
    table = run_sweep(
        ring,
        [{"U": 0.5}],
        quantities=("levels", "top_level_weights"),
        levels=4,
        executor="serial",
        progress=False,
    )
    row = table.rows[0]
    np.testing.assert_allclose(row.levels, dense_levels(ring, {"U": 0.5}, 4), atol=1e-9)
    assert row.gap is None
    assert len(row.observables["top_level_weights"]) == ring.space.modes
    arrays = table.to_arrays()
    assert arrays["levels"].shape == (1, 4)
    assert arrays["top_level_weights"].shape == (1, ring.space.modes)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"quantities": ("energy", "magnetisation")}, "cannot record"),
        ({"levels": 1}, "needs levels >= 2"),
        ({"levels": 0, "quantities": ("energy",)}, "levels must be between 1"),
        ({"tol": -1.0}, "tol must be a number between 0 and 1"),
        ({"method": "magic"}, "method must be"),
        ({"entropy_modes": (7,), "quantities": ("entanglement_entropy",)}, "entropy_modes"),
        ({"chunk": 0}, "chunk must be"),
    ],
)
def test_bad_arguments_are_named(ring: Model, kwargs: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        run_sweep(ring, [{"U": 1.0}], executor="serial", progress=False, **kwargs)


def test_bad_points_are_named(ring: Model) -> None:
    with pytest.raises(ValueError, match=r"point 1 sets unknown parameter\(s\) \['V'\]"):
        run_sweep(ring, [{"U": 1.0}, {"V": 2.0}], executor="serial", progress=False)
    with pytest.raises(ValueError, match="not finite"):
        run_sweep(ring, [{"U": math.nan}], executor="serial", progress=False)


def test_non_hermitian_piece_is_refused() -> None:
    space = fm.FockSpace(modes=2, cutoff=2, total=2)
    model = Model("lopsided", space, {"J": fm.raising(0) * fm.lowering(1)}, {"J": 1.0})
    with pytest.raises(NotHermitianError, match="piece 'J'"):
        run_sweep(model, [{"J": 1.0}], executor="serial", progress=False)


def test_progress_bar_goes_to_stderr(ring: Model, capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("tqdm", reason="tqdm is not installed (extra fockmill[progress])")
    run_sweep(ring, [{"U": 1.0}, {"U": 2.0}], executor="serial", progress=True)
    captured = capsys.readouterr()
    assert captured.out == ""
    assert "2/2" in captured.err


@pytest.mark.parametrize(
    ("method", "quantities", "levels"),
    [("operator", ("energy", "gap", "populations"), 2), ("lanczos", ("energy", "populations"), 1)],
)
def test_matrix_free_methods_match_dense(
    ring: Model, method: str, quantities: tuple[str, ...], levels: int
) -> None:
    # Reference: numpy eigvalsh on the matrix rebuilt per point. The ring at unit filling
    # is translation invariant, so every site holds one particle on average.
    points = GRID[:4]
    table = run_sweep(
        ring,
        points,
        quantities=quantities,
        levels=levels,
        executor="serial",
        method=method,
        tol=1e-12,
        progress=False,
    )
    for row, point in zip(table, points, strict=True):
        reference = dense_levels(ring, point)
        assert row.method == method
        assert row.energy == pytest.approx(reference[0], abs=1e-8)
        if "gap" in quantities:
            assert row.gap == pytest.approx(reference[1] - reference[0], abs=1e-8)
        np.testing.assert_allclose(row.observables["populations"], 1.0, atol=1e-6)


# -- failures are results (issue 8, defect 4) ---------------------------------------------


def test_failing_point_does_not_stop_the_sweep(ring: Model) -> None:
    # U = 1e308 overflows the interaction matrix elements (U/2 · n(n − 1) > max float), so
    # that point cannot give a finite energy; the points around it must still be solved.
    # Reference for the others: numpy eigvalsh on the matrix rebuilt per point.
    points = [{"U": 1.0}, {"U": 2.0}, {"U": 1e308}, {"U": 3.0}]
    table = run_sweep(ring, points, executor="serial", progress=False)
    assert [row.index for row in table] == [0, 1, 2, 3]
    assert [row.status for row in table] == ["ok", "ok", "failed", "ok"]
    bad = table.rows[2]
    assert "finite" in bad.message
    assert bad.energy is None or not math.isfinite(bad.energy)
    for row, point in zip(table, points, strict=True):
        if row.status == "ok":
            assert row.message == ""
            assert row.energy == pytest.approx(dense_levels(ring, point)[0], abs=1e-9)


def test_unconverged_point_is_recorded_not_raised(ring: Model) -> None:
    # Four matrix-vector products cannot converge Lanczos on 121 states (common
    # practice, no source): every point is recorded as not converged, none raises.
    table = run_sweep(
        ring,
        GRID[:3],
        quantities=("energy",),
        levels=1,
        method="lanczos",
        max_iterations=4,
        executor="serial",
        progress=False,
    )
    assert [row.status for row in table] == ["not_converged"] * 3
    assert all("max_iterations" in row.message for row in table)


# -- one solver stack, one vocabulary (issue 8 item 4, issue 12) ---------------------------


def test_point_is_solved_like_ground_state() -> None:
    # Same code, same defaults: a one-point sweep gives what fm.ground_state gives for
    # the same Hamiltonian (numbers and chosen method), which in turn is checked against
    # numpy eigvalsh.
    space = fm.FockSpace(modes=6, cutoff=6, total=6)  # dim 462 (above the old limit 300)
    model = hubbard_ring(sites=6, particles=6, cutoff=6)
    assert model.space.dim == space.dim
    table = run_sweep(model, [{"U": 2.0}], quantities=("energy",), levels=1, progress=False)
    expected = fm.ground_state(model.hamiltonian(U=2.0), model.space, cutoff_warning=None)
    row = table.rows[0]
    assert row.method == expected.method
    assert row.energy == pytest.approx(expected.energy, abs=1e-10)
    assert row.energy == pytest.approx(dense_levels(model, {"U": 2.0})[0], abs=1e-9)


def test_quantities_keyword_and_deprecated_aliases(ring: Model) -> None:
    table = run_sweep(
        ring, [{"U": 1.0}], quantities=["energy", "populations"], levels=1, progress=False
    )
    assert "populations" in table.rows[0].observables
    with pytest.warns(DeprecationWarning, match="quantities"):
        old = run_sweep(ring, [{"U": 1.0}], record=("energy",), levels=1, progress=False)
    assert old.rows[0].energy == pytest.approx(table.rows[0].energy, abs=1e-12)
    with pytest.warns(DeprecationWarning, match="solver_options"):
        run_sweep(
            ring,
            [{"U": 1.0}],
            quantities=("energy",),
            levels=1,
            solver_options={"tol": 1e-10},
            progress=False,
        )


def test_sweep_grid_is_accepted(ring: Model) -> None:
    grid = fm.SweepGrid({"U": np.array([0.5, 1.5]), "J": np.array([1.0])})
    table = run_sweep(
        ring, grid, quantities=("energy",), levels=1, executor="serial", progress=False
    )
    assert [row.parameters for row in table] == grid.points()
    assert table.swept == ("U", "J")


def test_default_pool_without_main_guard_names_the_fix(tmp_path) -> None:
    # Defect 10: a script calling run_sweep at top level with the default process pool.
    import subprocess
    import sys
    import textwrap

    script = tmp_path / "unguarded.py"
    script.write_text(
        textwrap.dedent(
            """
            import fockmill as fm
            from fockmill.models.model import Model

            space = fm.FockSpace(modes=2, cutoff=2, total=2)
            hop = -(fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
            model = Model("pair", space, {"J": hop}, {"J": 1.0})
            fm.run_sweep(model, [{"J": 1.0}, {"J": 2.0}], workers=2, progress=False)
            print("finished")
            """
        )
    )
    done = subprocess.run(
        [sys.executable, str(script)], capture_output=True, text=True, timeout=120, check=False
    )
    assert done.returncode != 0
    last = done.stderr.strip().splitlines()[-1]
    assert 'if __name__ == "__main__":' in last, done.stderr


@pytest.mark.parametrize("levels", [1, 2])
def test_lanczos_points_solve_on_the_shared_pattern(
    ring: Model, levels: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    # The Rust Lanczos solvers take the matrix assembled from the shared pattern.
    # Reference: numpy eigvalsh on the matrix rebuilt per point. (Five points: at
    # U >= 7.5 the native k = 2 solver itself stops short on this ring, reported.)
    import fockmill.sweeps.records as records
    from fockmill.sweeps.plan import sweep_settings
    from fockmill.sweeps.records import ModelRecipe, PreparedModel

    monkeypatch.setattr(records, "SHARED_PATTERN_MIN_POINTS", 2)
    # The ring runs on the bipartite kernel, where Lanczos stays matrix-free by default;
    # the stored path (taken by models on the row kernel) is forced here.
    import fockmill.problem.eigensolve as solve

    decide = solve._store_matrix
    monkeypatch.setattr(
        solve, "_store_matrix", lambda p, s, k=1: True if s is None else decide(p, s, k)
    )

    quantities = ("energy", "gap") if levels == 2 else ("energy",)
    options = {"method": "lanczos", "tol": 1e-10, "seed": 0, "max_iterations": None}
    settings = sweep_settings(
        ring, quantities=quantities, levels=levels, entropy_modes=None, threads=None, **options
    )
    points = GRID[:5]
    prepared = PreparedModel.build(ModelRecipe.from_model(ring), settings, points=len(points))
    assert prepared.shared is not None
    table = run_sweep(
        ring,
        points,
        quantities=quantities,
        levels=levels,
        executor="serial",
        progress=False,
        **options,
    )
    for row, point in zip(table, points, strict=True):
        reference = dense_levels(ring, point)
        assert row.status == "ok" and row.method == "lanczos"
        assert row.energy == pytest.approx(reference[0], abs=1e-8)
        if levels == 2:
            assert row.gap == pytest.approx(reference[1] - reference[0], abs=1e-8)


def test_old_quantity_names_still_record_under_the_function_names() -> None:
    # The recorded names are the functions' names; the old ones work for one release.
    model = fm.models.bose_hubbard(fm.models.chain_edges(2), total=2)
    with pytest.warns(DeprecationWarning, match="'number_variance' is 'number_variances'"):
        table = run_sweep(model, [{"U": 1.0}], quantities=["energy", "number_variance"])
    (point,) = table.rows
    space = model.space
    g = fm.ground_state(model.hamiltonian(U=1.0), space)
    np.testing.assert_allclose(
        point.observables["number_variances"], fm.number_variances(space, g.vector), atol=1e-8
    )
