"""Faults around results files: one writer per file, claimed before any work, and the
temporaries of a killed writer cleaned up by the next run (never while their writer
lives). The standard is the project rule that a crash must leave nothing that blocks
or confuses a later run (common practice, no source)."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import fockmill.cli.commands as cli
import pytest
from fockmill.exceptions import StoreError
from fockmill.store.claims import claim, claim_path, describe_leftover
from fockmill.store.workflows import is_workflow_file
from test_cli import PAIR_TOML
from test_workflows import PAIR_QUENCH

# A writer that claims a results file, starts its temporary like ResultsStore.create
# does, says so, and then waits to be killed.
HOLDER = textwrap.dedent(
    """
    import sqlite3, sys, time
    from pathlib import Path
    from fockmill.store.claims import claim, temporary_path

    target = Path(sys.argv[1])
    held = claim(target)
    temporary = temporary_path(target)
    connection = sqlite3.connect(str(temporary), isolation_level=None)
    connection.execute("BEGIN IMMEDIATE")
    connection.execute("CREATE TABLE meta (key TEXT, value TEXT)")
    connection.execute("INSERT INTO meta VALUES ('format', 'unfinished')")
    print(temporary, flush=True)
    time.sleep(600)
    """
)


def start_holder(target: Path) -> tuple[subprocess.Popen[str], Path]:
    process = subprocess.Popen(
        [sys.executable, "-c", HOLDER, str(target)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert process.stdout is not None
    line = process.stdout.readline().strip()
    assert line, process.stderr.read() if process.stderr else "no output"
    return process, Path(line)


def stop(process: subprocess.Popen[str]) -> None:
    if process.poll() is None:
        os.kill(process.pid, signal.SIGKILL)
    process.communicate()  # waits and closes the pipes


def leftovers(directory: Path, name: str) -> list[Path]:
    return sorted(
        p for p in directory.iterdir() if p.name.startswith(f".{name}.") and ".creating" in p.name
    )


def main(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    code = cli.main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


# -- leftovers of a killed writer -------------------------------------------------------------


def test_rerun_removes_the_temporaries_of_a_killed_quench(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model = tmp_path / "pair.toml"
    model.write_text(PAIR_QUENCH)
    out = tmp_path / "q.sqlite"
    process, temporary = start_holder(out)
    stop(process)  # killed in the first moments of writing: the temporary stays
    left = leftovers(tmp_path, out.name)
    assert temporary in left and any(p.name.endswith("-journal") for p in left), left

    # show says what the leftover is (and that nobody is writing it).
    code, _, err = main(["show", str(temporary)], capsys)
    assert code == 2
    assert re.search(rf"temporary file left by process {process.pid}", err), err
    assert "holds no results" in err and "q.sqlite" in err

    # The same command again cleans up and writes the file.
    code, _, err = main(["quench", str(model), "--out", str(out)], capsys)
    assert code == 0, err
    assert is_workflow_file(out)
    assert leftovers(tmp_path, out.name) == []
    assert not claim_path(out).exists()


def test_rerun_removes_the_temporaries_of_a_killed_sweep(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model = tmp_path / "pair.toml"
    model.write_text(PAIR_TOML)
    out = tmp_path / "r.sqlite"
    process, _ = start_holder(out)
    stop(process)
    assert leftovers(tmp_path, out.name)
    code, _, err = main(
        ["sweep", str(model), "--out", str(out), "--workers", "1", "--no-progress"], capsys
    )
    assert code == 0, err
    assert leftovers(tmp_path, out.name) == []


def test_a_live_writers_temporaries_are_left_alone(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model = tmp_path / "pair.toml"
    model.write_text(PAIR_QUENCH)
    out = tmp_path / "q.sqlite"
    process, temporary = start_holder(out)
    try:
        code, _, err = main(["quench", str(model), "--out", str(out)], capsys)
        assert code == 2
        assert temporary.exists()  # not removed under a live writer
        code, _, err = main(["show", str(temporary)], capsys)
        assert code == 2
        assert f"being written now by fockmill process {process.pid}" in err, err
        assert describe_leftover(claim_path(out)) is not None
    finally:
        stop(process)


# -- two writers ----------------------------------------------------------------------------


@pytest.mark.parametrize("command", ["quench", "sweep"])
def test_second_writer_stops_at_once_naming_the_first(
    command: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model = tmp_path / "pair.toml"
    model.write_text(PAIR_QUENCH if command == "quench" else PAIR_TOML)
    out = tmp_path / "same.sqlite"
    process, _ = start_holder(out)
    try:
        argv = [command, str(model), "--out", str(out)]
        if command == "sweep":
            argv += ["--workers", "1", "--no-progress"]
        code, stdout, err = main(argv, capsys)
        assert code == 2
        assert stdout == ""
        lines = err.strip().splitlines()
        assert len(lines) == 1, err
        assert re.search(r"being written by another fockmill process \d+", lines[0]), err
        assert str(claim_path(out)) in lines[0]  # the other writer's claim file
        assert not out.exists()
    finally:
        stop(process)


def test_workflow_claims_before_computing(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """The second workflow writer must stop before its computation starts."""
    import fockmill.workflows.run as runs

    started: list[str] = []

    def spy(*args: object, **kwargs: object) -> object:
        started.append("quench")
        raise AssertionError("computed although the file was claimed")

    monkeypatch.setattr(runs, "run_quench", spy)
    model = tmp_path / "pair.toml"
    model.write_text(PAIR_QUENCH)
    out = tmp_path / "same.sqlite"
    with claim(out):
        code, _, err = main(["quench", str(model), "--out", str(out)], capsys)
    assert code == 2 and started == [], err


def test_claim_is_released_and_reusable(tmp_path: Path) -> None:
    out = tmp_path / "x.sqlite"
    with claim(out) as held:
        with pytest.raises(StoreError, match=r"claim file"):
            claim(out)
        assert held.path.exists()
    assert not held.path.exists()
    with claim(out):
        pass


def test_claim_left_by_a_killed_process_is_taken_over(tmp_path: Path) -> None:
    out = tmp_path / "x.sqlite"
    process, _ = start_holder(out)
    stop(process)
    assert claim_path(out).exists()  # the file stays, the lock went with the process
    text = describe_leftover(claim_path(out))
    assert text is not None and "nobody holds it now" in text
    with claim(out) as held:
        assert held.removed  # the killed writer's temporary and journal


# -- a tolerance that cannot be met -----------------------------------------------------------


def test_evolve_warns_when_tol_is_below_round_off() -> None:
    """tol = 1e-300 cannot be met in double precision (machine epsilon 2.2e-16, IEEE 754;
    common practice, no source): evolve says so, and stays quiet at a reachable tol."""
    import warnings

    import fockmill as fm
    import numpy as np
    from fockmill.exceptions import AccuracyWarning

    h = fm.LadderExpr()
    for i in range(6):
        j = (i + 1) % 6
        h = h - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 1.5 * fm.number(i) * (fm.number(i) - 1)
    space = fm.FockSpace(6, 6, total=6)
    psi = np.zeros(space.dim)
    psi[0] = 1.0
    with pytest.warns(AccuracyWarning, match=r"tol=1e-300 was not met; the error estimate is"):
        ev = fm.evolve(h, space, psi, [0.0, 5.0], tol=1e-300)
    assert ev.error_estimate > 1e-300
    with warnings.catch_warnings():
        warnings.simplefilter("error", AccuracyWarning)
        fm.evolve(h, space, psi, [0.0, 5.0], tol=1e-8)


# -- max_iterations counts matrix-vector products on every method -------------------------------


@pytest.mark.parametrize("method", ["csr", "operator", "lanczos"])
@pytest.mark.parametrize("k", [1, 2, 3])
def test_max_iterations_bounds_the_products(method: str, k: int) -> None:
    """The documented meaning of max_iterations (a product budget) holds for every
    method; eigsh's own maxiter counts restarts of ~20 products each (scipy's eigsh
    documentation), so it needs the product count enforced separately."""
    import warnings

    import fockmill as fm
    from fockmill.exceptions import ConvergenceError
    from test_sweep import hubbard_ring

    model = hubbard_ring(sites=8, particles=8, cutoff=8)
    h = model.hamiltonian(U=1.0)
    for budget in (45, 240):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                if k == 1:
                    found = fm.ground_state(h, model.space, method=method, max_iterations=budget)
                else:
                    found = fm.lowest_levels(
                        h, model.space, k=k, method=method, max_iterations=budget
                    )
            except ConvergenceError as exc:
                spent = re.search(r"(\d+) products", str(exc))
                if spent is not None:
                    assert int(spent.group(1)) <= budget, str(exc)
                else:
                    assert f"max_iterations={budget} matrix-vector products" in str(exc)
                continue
        assert found.products <= budget, (method, k, budget, found.products)


# -- sweeps: exit status, failures in words, show, solve = sweep -----------------------------

# Invented: a ring of six sites holding six bosons at U = 1e308, where the products
# overflow double precision.
OVERFLOW_TOML = """\
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 6
total = 6

[parameters]
U = 1.0

[sweep.U]
values = [1e308, 1.7e308]

[record]
quantities = ["energy", "gap"]
levels = 2
"""


@pytest.mark.parametrize("method", ["csr", "operator"])
def test_sweep_of_failing_points_exits_1_with_reasons_in_words(
    method: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from fockmill.store.sweeps import ResultsStore

    model = tmp_path / "huge.toml"
    model.write_text(
        OVERFLOW_TOML.replace("levels = 2\n", f'levels = 2\n[solver]\nmethod = "{method}"\n')
    )
    out = tmp_path / "huge.sqlite"
    code, text, err = main(
        ["sweep", str(model), "--out", str(out), "--workers", "1", "--no-progress"], capsys
    )
    assert code == 1, (text, err)  # failed points: status 1, distinct from bad input (2)
    with ResultsStore.open(out) as store:
        rows = store.rows()
    assert rows and all(row.status != "ok" for row in rows)
    for row in rows:
        assert not row.message.startswith("ArpackError"), row.message
        assert re.search(r"overflow|not finite", row.message), row.message


def test_sweep_exits_0_when_every_point_is_ok(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    model = tmp_path / "pair.toml"
    model.write_text(PAIR_TOML)
    code, _, err = main(
        [
            "sweep",
            str(model),
            "--out",
            str(tmp_path / "r.sqlite"),
            "--workers",
            "1",
            "--no-progress",
        ],
        capsys,
    )
    assert code == 0, err


def test_show_works_on_a_file_with_no_finished_point(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from fockmill.store.sweeps import ResultsStore

    out = tmp_path / "new.sqlite"
    ResultsStore.create(out, {"model_name": "invented", "points": 5}).close()
    code, text, err = main(["show", str(out)], capsys)
    assert code == 0, err
    assert "0 of 5 points finished" in text
    assert "no point has finished yet" in text
    for fmt in ("csv", "json"):
        code, _, err = main(["show", str(out), "--format", fmt], capsys)
        assert code == 0, err


ONE_STATE_SECTOR = """\
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 4
total = 1

[parameters]
U = 1.0

[symmetry]
translation = 1

[record]
levels = 3
"""


def test_solve_and_sweep_apply_the_same_checks(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # Invented: one boson on a 4-site ring, momentum sector q = 1 (a single state).
    model = tmp_path / "one.toml"
    model.write_text(ONE_STATE_SECTOR + "\n[sweep.U]\nvalues = [1.0, 2.0]\n")
    code, _, solve_err = main(["solve", str(model)], capsys)
    assert code == 2
    code, _, sweep_err = main(
        ["sweep", str(model), "--out", str(tmp_path / "o.sqlite"), "--workers", "1"], capsys
    )
    assert code == 2
    assert "levels must be between 1 and the space's dimension 1; got 3" in solve_err
    assert solve_err == sweep_err
