"""Tests of the SQLite results store: round trip, resume, crash safety, refusals."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import fockmill as fm
import numpy as np
import pytest
from fockmill.models.model import Model
from fockmill.store.sweeps import FORMAT_MARKER, ResultsStore, StoreError
from fockmill.sweeps.run import run_sweep
from test_sweep import dense_levels, hubbard_ring

POINTS = [{"U": float(u)} for u in np.linspace(0.0, 6.0, 9)]
RECORD = ("energy", "gap", "populations", "entanglement_entropy")


@pytest.fixture(scope="module")
def ring() -> Model:
    return hubbard_ring(sites=4, particles=4, cutoff=4)  # dim 35


def sweep(model: Model, store: Path | ResultsStore, points=POINTS, **kwargs):
    options = {"quantities": RECORD, "executor": "serial", "progress": False}
    options.update(kwargs)
    return run_sweep(model, points, store=store, **options)


def test_round_trip(ring: Model, tmp_path: Path) -> None:
    path = tmp_path / "ring.sqlite"
    table = sweep(ring, path)
    with ResultsStore.open(path) as store:
        meta = store.meta
        assert meta["format"] == FORMAT_MARKER
        assert meta["model_fingerprint"] == ring.fingerprint()
        assert store.integrity_ok()
        assert store.finished_indices() == set(range(len(POINTS)))
        assert store.rows() == list(table.rows)
        assert store.to_table().swept == ("U",)
    for row, point in zip(table, POINTS, strict=True):
        # Reference: numpy eigvalsh on the matrix rebuilt from expressions.
        assert row.energy == pytest.approx(dense_levels(ring, point)[0], abs=1e-9)
    arrays = table.to_arrays()
    assert arrays["populations"].shape == (len(POINTS), 4)
    assert arrays["entanglement_entropy"].shape == (len(POINTS),)
    with sqlite3.connect(path) as raw:
        assert raw.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_interrupted_sweep_resumes_without_redoing(ring: Model, tmp_path: Path) -> None:
    path = tmp_path / "ring.sqlite"
    seen: list[int] = []

    def stop_after_three(row) -> None:
        seen.append(row.index)
        if len(seen) == 3:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        sweep(ring, path, on_point=stop_after_three)
    with ResultsStore.open(path) as store:
        assert store.finished_indices() == set(seen)
    redone: list[int] = []
    resumed = sweep(ring, path, on_point=lambda row: redone.append(row.index))
    assert set(redone).isdisjoint(seen)
    assert sorted(redone + seen) == list(range(len(POINTS)))
    reference = sweep(ring, tmp_path / "whole.sqlite")
    assert [r.index for r in resumed] == [r.index for r in reference]
    np.testing.assert_allclose(
        resumed.to_arrays()["energy"], reference.to_arrays()["energy"], rtol=0, atol=1e-9
    )


KILL_SCRIPT = textwrap.dedent(
    """
    import sys
    sys.path.insert(0, sys.argv[2])
    from fockmill.sweeps.run import run_sweep
    from test_sweep import hubbard_ring

    model = hubbard_ring(sites=6, particles=6, cutoff=6)
    points = [{"U": 0.05 * k} for k in range(int(sys.argv[3]))]
    run_sweep(model, points, store=sys.argv[1], executor="serial", progress=False,
              method="csr")
    """
)


def committed(path: Path) -> int:
    """Rows committed so far, read through a separate read-only connection."""
    try:
        with sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=5) as reader:
            return int(reader.execute("SELECT COUNT(*) FROM points").fetchone()[0])
    except sqlite3.Error:
        return 0  # file or schema not there yet


def test_sigkill_mid_sweep_then_resume_equals_uninterrupted(tmp_path: Path) -> None:
    path = tmp_path / "killed.sqlite"
    total = 120
    tests_dir = str(Path(__file__).parent)
    process = subprocess.Popen(
        [sys.executable, "-c", KILL_SCRIPT, str(path), tests_dir, str(total)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    try:
        deadline = time.monotonic() + 120
        while committed(path) < 15:
            assert process.poll() is None, process.stderr.read().decode() if process.stderr else ""
            assert time.monotonic() < deadline, "the sweep committed no points in time"
            time.sleep(0.01)
        os.kill(process.pid, signal.SIGKILL)
    finally:
        if process.poll() is None:
            process.kill()
        process.wait()
        if process.stderr is not None:
            process.stderr.close()
    assert process.returncode == -signal.SIGKILL
    at_kill = committed(path)
    assert 15 <= at_kill < total, "the kill must land mid-sweep for this test to mean anything"
    print(f"killed after {at_kill} of {total} points")

    model = hubbard_ring(sites=6, particles=6, cutoff=6)
    points = [{"U": 0.05 * k} for k in range(total)]
    options = {"method": "csr"}
    redone: list[int] = []
    resumed = run_sweep(
        model,
        points,
        store=path,
        executor="serial",
        progress=False,
        **options,
        on_point=lambda row: redone.append(row.index),
    )
    assert len(redone) == total - at_kill
    uninterrupted = run_sweep(model, points, executor="serial", progress=False, **options)
    with ResultsStore.open(path) as store:
        assert store.integrity_ok()
        indices = [row.index for row in store.rows()]
    assert sorted(indices) == list(range(total))  # no duplicates, none missing
    assert [r.parameters for r in resumed] == [r.parameters for r in uninterrupted]
    np.testing.assert_allclose(
        resumed.to_arrays()["energy"], uninterrupted.to_arrays()["energy"], rtol=0, atol=1e-9
    )
    np.testing.assert_allclose(
        resumed.to_arrays()["gap"], uninterrupted.to_arrays()["gap"], rtol=0, atol=1e-9
    )


def test_refuses_foreign_sqlite_and_leaves_it_alone(ring: Model, tmp_path: Path) -> None:
    path = tmp_path / "inventory.sqlite"
    with sqlite3.connect(path) as other:
        other.execute("CREATE TABLE parts (name TEXT)")
        other.execute("INSERT INTO parts VALUES ('resistor')")
    before = path.read_bytes()
    with pytest.raises(StoreError, match=r"inventory\.sqlite.*not a fockmill results file"):
        sweep(ring, path)
    with pytest.raises(StoreError, match="not a fockmill results file"):
        ResultsStore.open(path)
    assert path.read_bytes() == before


def test_refuses_non_sqlite_file(ring: Model, tmp_path: Path) -> None:
    path = tmp_path / "notes.sqlite"
    path.write_text("these are my notes, not a database\n" * 40)
    with pytest.raises(StoreError, match=r"notes\.sqlite.*not a fockmill results file"):
        sweep(ring, path)
    assert isinstance(StoreError("x"), ValueError)


def test_refuses_other_model(ring: Model, tmp_path: Path) -> None:
    path = tmp_path / "ring.sqlite"
    sweep(ring, path, points=POINTS[:2])
    other = hubbard_ring(sites=4, particles=3, cutoff=3)
    with pytest.raises(StoreError, match="fingerprint"):
        sweep(other, path, points=POINTS[:2])


def test_refuses_changed_grid_or_record(ring: Model, tmp_path: Path) -> None:
    path = tmp_path / "ring.sqlite"
    sweep(ring, path, points=POINTS[:3])
    shifted = [{"U": p["U"] + 0.5} for p in POINTS[:3]]
    with pytest.raises(StoreError, match="grid or a default value changed"):
        sweep(ring, path, points=shifted)
    with pytest.raises(StoreError, match="quantities"):
        sweep(ring, path, points=POINTS[:3], quantities=("energy",))
    # A changed default of an unswept parameter changes every point too.
    retuned = Model(
        ring.name, ring.space, ring.pieces, {"J": 0.9, "U": 1.0}, constant=ring.constant
    )
    with pytest.raises(StoreError, match="default value changed"):
        sweep(retuned, path, points=POINTS[:3])


def test_missing_file_and_existing_create(tmp_path: Path) -> None:
    with pytest.raises(StoreError, match="does not exist"):
        ResultsStore.open(tmp_path / "absent.sqlite")
    path = tmp_path / "taken.sqlite"
    path.write_text("")
    with pytest.raises(StoreError, match="exists already"):
        ResultsStore.create(path, {})


def test_duplicate_point_is_refused(ring: Model, tmp_path: Path) -> None:
    path = tmp_path / "ring.sqlite"
    table = sweep(ring, path, points=POINTS[:1])
    with ResultsStore.open(path) as store, pytest.raises(StoreError, match="already stored"):
        store.add_point(table.rows[0])


def test_complex_model_round_trips(tmp_path: Path) -> None:
    # A hopping ring threaded by a flux (Peierls phase) has a complex Hamiltonian and a
    # complex one-body matrix; the store keeps its real and imaginary parts.
    sites = 3
    phase = np.exp(0.7j)
    hop = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        hop = hop - (
            phase * fm.raising(i) * fm.lowering(j) + np.conj(phase) * fm.raising(j) * fm.lowering(i)
        )
    space = fm.FockSpace(modes=sites, cutoff=2, total=2)
    model = Model("flux-ring", space, {"J": hop}, {"J": 1.0})
    path = tmp_path / "flux.sqlite"
    table = sweep(model, path, points=[{"J": 1.0}], quantities=("energy", "gap", "one_body_matrix"))
    with ResultsStore.open(path) as store:
        row = store.rows()[0]
    assert row == table.rows[0]
    matrix = np.array(row.observables["one_body_matrix"]) + 1j * np.array(
        row.observables["one_body_matrix_imag"]
    )
    np.testing.assert_allclose(matrix, matrix.conj().T, atol=1e-12)  # Hermitian, as ⟨a_i† a_j⟩
    assert row.energy == pytest.approx(dense_levels(model, {"J": 1.0})[0], abs=1e-9)


def test_directory_is_not_a_results_file(tmp_path: Path) -> None:
    with pytest.raises(StoreError, match="is a directory"):
        ResultsStore.open(tmp_path)


# -- failures are results; safe creation; resume checks (issue 8, defects 5-7) ------------


def test_nan_result_is_stored_as_a_failed_point(ring: Model, tmp_path: Path) -> None:
    # Defect 5: U = 1e308 overflows the matrix (U/2 · n(n − 1) > max float). The point
    # must be stored as failed with a message, not rejected by a NOT NULL constraint
    # and reported as a point "already stored".
    path = tmp_path / "ring.sqlite"
    points = [{"U": 1.0}, {"U": 1e308}, {"U": 2.0}]
    table = sweep(ring, path, points=points)
    assert [row.status for row in table] == ["ok", "failed", "ok"]
    with ResultsStore.open(path) as store:
        rows = store.rows()
        assert store.integrity_ok()
    assert [row.status for row in rows] == ["ok", "failed", "ok"]
    assert "finite" in rows[1].message
    assert rows[0].energy == pytest.approx(dense_levels(ring, points[0])[0], abs=1e-9)


def test_interrupted_creation_leaves_no_file(
    ring: Model, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Defect 6: a failure between creating the file and committing its schema must not
    # leave a half-made file that every later run refuses as foreign.
    import fockmill.store.sweeps as store_module

    path = tmp_path / "ring.sqlite"
    monkeypatch.setattr(store_module, "_SCHEMA", store_module._SCHEMA + "\nCREATE TABLE (;")
    with pytest.raises(sqlite3.Error):
        sweep(ring, path, points=POINTS[:2])
    monkeypatch.undo()
    assert not path.exists()
    assert [p.name for p in tmp_path.iterdir()] == []
    table = sweep(ring, path, points=POINTS[:2])
    assert len(table) == 2


@pytest.mark.parametrize(
    ("changed", "setting"),
    [
        ({"method": "csr"}, "method"),
        ({"tol": 1e-6}, "tol"),
        ({"seed": 7}, "seed"),
        ({"levels": 3}, "levels"),
    ],
)
def test_resume_refuses_other_solver_settings(
    ring: Model, tmp_path: Path, changed: dict, setting: str
) -> None:
    # Defect 7: results solved one way must not be mixed with results solved another.
    path = tmp_path / "ring.sqlite"
    sweep(ring, path, points=POINTS[:3], method="dense", tol=1e-9, seed=0, levels=2)
    options = {"method": "dense", "tol": 1e-9, "seed": 0, "levels": 2}
    options.update(changed)
    with pytest.raises(StoreError, match=rf"\b{setting}\b"):
        sweep(ring, path, points=POINTS[:3], **options)
    # The same settings resume fine.
    assert len(sweep(ring, path, points=POINTS[:3], method="dense", tol=1e-9, levels=2)) == 3


def test_failed_points_are_retried_only_when_asked(ring: Model, tmp_path: Path) -> None:
    # Lanczos with 4 products cannot converge on 35 states; with the default limit it
    # does. Reference: numpy eigvalsh on the matrix rebuilt per point.
    path = tmp_path / "ring.sqlite"
    options = {"quantities": ("energy",), "levels": 1, "method": "lanczos"}
    first = sweep(ring, path, points=POINTS[:3], max_iterations=4, **options)
    assert {row.status for row in first} == {"not_converged"}
    kept = sweep(ring, path, points=POINTS[:3], **options)
    assert [row.status for row in kept] == ["not_converged"] * 3
    redone: list[int] = []
    retried = sweep(
        ring,
        path,
        points=POINTS[:3],
        retry_failed=True,
        on_point=lambda r: redone.append(r.index),
        **options,
    )
    assert sorted(redone) == [0, 1, 2]
    assert [row.status for row in retried] == ["ok"] * 3
    for row, point in zip(retried, POINTS[:3], strict=True):
        assert row.energy == pytest.approx(dense_levels(ring, point)[0], abs=1e-8)
    with ResultsStore.open(path) as store:
        assert sorted(store.finished_indices()) == [0, 1, 2]
        assert store.integrity_ok()


def test_metadata_is_plain_json_with_mode_labels_and_units(ring: Model, tmp_path: Path) -> None:
    import json

    path = tmp_path / "ring.sqlite"
    sweep(ring, path, points=POINTS[:2], units={"U": "J", "energy": "J"})
    with sqlite3.connect(path) as raw:
        stored = dict(raw.execute("SELECT key, value FROM meta").fetchall())
    raw.close()
    decoded = {key: json.loads(value) for key, value in stored.items()}
    assert decoded["swept_parameters"] == ["U"]
    assert isinstance(decoded["settings"], dict)
    assert decoded["settings"]["quantities"] == list(RECORD)
    assert decoded["mode_labels"] == ["mode 0", "mode 1", "mode 2", "mode 3"]
    assert decoded["units"] == {"U": "J", "energy": "J"}
    with ResultsStore.open(path) as store:
        assert store.meta["swept_parameters"] == ["U"]
        assert store.mode_labels == ("mode 0", "mode 1", "mode 2", "mode 3")
        assert store.units == {"U": "J", "energy": "J"}
        table = store.to_table()
    assert table.mode_labels == ("mode 0", "mode 1", "mode 2", "mode 3")
    assert table.units == {"U": "J", "energy": "J"}


def test_nan_energy_is_not_reported_as_a_duplicate(ring: Model, tmp_path: Path) -> None:
    # Defect 5 at the store itself: SQLite stores NaN as NULL, which used to hit the
    # NOT NULL constraint and be reported as "already stored ... another sweep".
    from fockmill.store.sweeps import PointResult

    path = tmp_path / "ring.sqlite"
    sweep(ring, path, points=POINTS[:1])
    nan = float("nan")
    row = PointResult(
        index=1,
        parameters={"J": 1.0, "U": 9.0},
        energy=nan,
        gap=nan,
        levels=None,
        observables={"entanglement_entropy": nan},
        residual=nan,
        method="dense",
        seconds=0.1,
        finished="2026-01-01T00:00:00+00:00",
    )
    with ResultsStore.open(path) as store:
        store.add_point(row)
        stored = store.rows()[1]
    assert stored.status == "failed"
    assert "not finite" in stored.message
    assert stored.energy is None and stored.residual is None
    assert stored.observables == {"entanglement_entropy": None}
