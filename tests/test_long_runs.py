"""Long runs: checkpoints (SIGKILL and resume, refusal of another run's file, finished
results returned at once) and progress reports (monotone records, no bar off a
terminal).

References: dense/scipy solutions of the same problems (scipy.sparse.linalg.eigsh for
energies, scipy.sparse.linalg.expm_multiply for evolutions, the dense Lindblad
generator's null vector, exact diagonalisation), and the uninterrupted run itself: a
resumed run repeats the uninterrupted arithmetic, so its numbers must be equal to it
(common practice, no source).
"""

from __future__ import annotations

import itertools
import json
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path
from typing import Any

import fockmill as fm
import numpy as np
import pytest
import scipy.sparse.linalg as sla
from fockmill.exceptions import CheckpointError
from fockmill.settings.progress import ProgressRecord, make_progress

# -- the model: an invented Bose-Hubbard ring ------------------------------------------


def hubbard(sites: int, interaction: float = 2.0) -> fm.LadderExpr:
    """H = −Σ (a_i† a_{i+1} + h.c.) + U/2 Σ n_i (n_i − 1) on a ring."""
    h = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        h = h - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 0.5 * interaction * fm.number(i) * (fm.number(i) - 1)
    return h


SITES = 8
SPACE_ARGS = {"modes": SITES, "cutoff": SITES, "total": SITES}  # 6,435 states


def space() -> fm.FockSpace:
    return fm.FockSpace(**SPACE_ARGS)


def eigsh_levels(k: int) -> np.ndarray:
    """Reference: scipy's eigsh on the stored matrix."""
    matrix = fm.build_matrix(hubbard(SITES), space())
    values = sla.eigsh(matrix, k=k, which="SA", tol=1e-12)[0]
    return np.sort(values)


def start_state() -> np.ndarray:
    """An invented start: one quantum per site (a Mott product state)."""
    s = space()
    psi = np.zeros(s.dim)
    psi[s.index([1] * SITES)] = 1.0
    return psi


# -- a run killed with SIGKILL and resumed ---------------------------------------------

CHILD = textwrap.dedent(
    """
    import json, sys, time
    sys.path.insert(0, {tests!r})
    import numpy as np
    import fockmill as fm
    from test_long_runs import hubbard, space, start_state, SITES

    def slow(record):
        # Slows the run so the parent can kill it mid-way; prints what it saw.
        print(json.dumps({{"products": record.products}}), flush=True)
        time.sleep({pause})

    task = {task!r}
    if task == "ground":
        fm.ground_state(hubbard(SITES), space(), method="lanczos", tol=1e-10,
                        progress=slow, checkpoint={path!r}, checkpoint_every=0.05,
                        cutoff_warning=None)
    elif task == "levels":
        fm.lowest_levels(hubbard(SITES), space(), 3, method="lanczos", tol=1e-10,
                         progress=slow, checkpoint={path!r}, checkpoint_every=0.05)
    else:
        fm.evolve(hubbard(SITES), space(), psi0=start_state(),
                  times=np.linspace(0.0, 2.0, 9), observables={{"n0": fm.number(0)}},
                  krylov_dim=6, tol=1e-9, progress=slow, checkpoint={path!r},
                  checkpoint_every=0.05, cutoff_warning=None)
    """
)


def _status(path: Path) -> str | None:
    """The checkpoint's status, or None while there is none (or it is being replaced)."""
    if not path.exists():
        return None
    try:
        with np.load(path) as npz:
            return str(json.loads(str(npz["meta"]))["status"])
    except Exception:
        return None


def kill_mid_run(task: str, path: Path, pause: float = 0.02) -> int:
    """Start the task in a child, SIGKILL it once a running state is on disk; return
    the products the child had reported."""
    code = CHILD.format(tests=str(Path(__file__).parent), task=task, path=str(path), pause=pause)
    child = subprocess.Popen(
        [sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True
    )
    try:
        deadline = time.monotonic() + 120
        while _status(path) != "running":
            assert child.poll() is None, "the child finished before it could be killed"
            assert time.monotonic() < deadline, "no checkpoint within 120 s"
            time.sleep(0.01)
        time.sleep(0.1)  # a few more steps and snapshots, then the kill
        child.send_signal(signal.SIGKILL)
        out, _ = child.communicate(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
    assert child.returncode == -signal.SIGKILL
    assert _status(path) == "running", "the kill must leave a running state, not a result"
    seen = [json.loads(line)["products"] for line in out.splitlines() if line.startswith("{")]
    assert seen, "the child reported nothing before the kill"
    return max(seen)


def first_products(records: list[ProgressRecord]) -> int:
    return records[0].products if records else 0


@pytest.mark.slow
def test_ground_state_killed_and_resumed(tmp_path: Path) -> None:
    path = tmp_path / "ground.npz"
    kill_mid_run("ground", path)
    records: list[ProgressRecord] = []
    resumed = fm.ground_state(
        hubbard(SITES),
        space(),
        method="lanczos",
        tol=1e-10,
        progress=records.append,
        checkpoint=path,
        cutoff_warning=None,
    )
    whole = fm.ground_state(
        hubbard(SITES), space(), method="lanczos", tol=1e-10, cutoff_warning=None
    )
    # It continued from the saved state: its first report counts the products before.
    assert first_products(records) > 1
    # Same numbers as the uninterrupted run, and the eigsh reference to the tolerance.
    assert resumed.energy == whole.energy
    assert resumed.products == whole.products
    np.testing.assert_array_equal(resumed.vector, whole.vector)
    assert abs(resumed.energy - eigsh_levels(1)[0]) < 1e-9
    assert _status(path) == "finished"
    # A finished checkpoint returns the result at once, without solving.
    again_records: list[ProgressRecord] = []
    again = fm.ground_state(
        hubbard(SITES),
        space(),
        method="lanczos",
        tol=1e-10,
        progress=again_records.append,
        checkpoint=path,
        cutoff_warning=None,
    )
    assert again.energy == whole.energy and not again_records
    np.testing.assert_array_equal(again.vector, whole.vector)
    assert not list(tmp_path.glob(".*.partial")), "a killed write was left behind"


@pytest.mark.slow
def test_lowest_levels_killed_and_resumed(tmp_path: Path) -> None:
    path = tmp_path / "levels.npz"
    kill_mid_run("levels", path)
    records: list[ProgressRecord] = []
    resumed = fm.lowest_levels(
        hubbard(SITES),
        space(),
        3,
        method="lanczos",
        tol=1e-10,
        progress=records.append,
        checkpoint=path,
    )
    whole = fm.lowest_levels(hubbard(SITES), space(), 3, method="lanczos", tol=1e-10)
    assert first_products(records) > 1
    np.testing.assert_array_equal(resumed.energies, whole.energies)
    assert resumed.products == whole.products
    np.testing.assert_array_equal(resumed.vectors, whole.vectors)
    np.testing.assert_allclose(resumed.energies, eigsh_levels(3), atol=1e-8)
    again = fm.lowest_levels(
        hubbard(SITES), space(), 3, method="lanczos", tol=1e-10, checkpoint=path
    )
    np.testing.assert_array_equal(again.energies, whole.energies)


@pytest.mark.slow
def test_evolution_killed_and_resumed(tmp_path: Path) -> None:
    path = tmp_path / "evolve.npz"
    kill_mid_run("evolve", path, pause=0.05)
    times = np.linspace(0.0, 2.0, 9)
    options: dict[str, Any] = {
        "psi0": start_state(),
        "times": times,
        "observables": {"n0": fm.number(0)},
        "krylov_dim": 6,
        "tol": 1e-9,
        "cutoff_warning": None,
    }
    records: list[ProgressRecord] = []
    resumed = fm.evolve(
        hubbard(SITES), space(), progress=records.append, checkpoint=path, **options
    )
    whole = fm.evolve(hubbard(SITES), space(), **options)
    assert records and records[0].time is not None and records[0].time > 0.0
    np.testing.assert_array_equal(resumed.values["n0"], whole.values["n0"])
    np.testing.assert_array_equal(resumed.final, whole.final)
    assert (resumed.steps, resumed.products) == (whole.steps, whole.products)
    # Reference: scipy's expm_multiply on the stored matrix.
    matrix = fm.build_matrix(hubbard(SITES), space()).astype(np.complex128)
    states = sla.expm_multiply(
        -1j * matrix, start_state().astype(np.complex128), start=0.0, stop=2.0, num=9, endpoint=True
    )
    n0 = fm.build_matrix(fm.number(0), space())
    expected = np.array([np.vdot(s, n0 @ s).real for s in states])
    np.testing.assert_allclose(resumed.values["n0"], expected, atol=1e-7)
    np.testing.assert_allclose(resumed.final, states[-1], atol=1e-7)


# -- in-process interruptions (a callback that raises) ----------------------------------


class Stop(Exception):
    pass


def stop_after(count: int, seen: list[ProgressRecord]) -> Any:
    def report(record: ProgressRecord) -> None:
        seen.append(record)
        if len(seen) >= count:
            raise Stop

    return report


def test_a_raising_callback_stops_the_native_solver_cleanly(tmp_path: Path) -> None:
    # The exception propagates out of the Rust loop unchanged, a state stays on disk,
    # and the next run resumes to the uninterrupted result.
    path = tmp_path / "g.npz"
    h, s = hubbard(6), fm.FockSpace(modes=6, cutoff=6, total=6)
    seen: list[ProgressRecord] = []
    with pytest.raises(Stop):
        fm.ground_state(
            h,
            s,
            method="lanczos",
            progress=stop_after(25, seen),
            checkpoint=path,
            checkpoint_every=1e-6,
            cutoff_warning=None,
        )
    assert _status(path) == "running"
    resumed = fm.ground_state(h, s, method="lanczos", checkpoint=path, cutoff_warning=None)
    whole = fm.ground_state(h, s, method="lanczos", cutoff_warning=None)
    assert resumed.energy == whole.energy and resumed.products == whole.products


def test_time_dependent_evolution_resumes(tmp_path: Path) -> None:
    # A ramp of the interaction (invented values), stopped at a recorded time by a
    # raising callback, then resumed: same values as the uninterrupted run.
    path = tmp_path / "ramp.npz"
    sites = 4
    s = fm.FockSpace(modes=sites, cutoff=sites, total=sites)
    hop = hubbard(sites, interaction=0.0)
    kerr = 0.5 * sum((fm.number(i) * (fm.number(i) - 1) for i in range(sites)), fm.LadderExpr())
    H = fm.TimeDependent(hop, [(kerr, fm.piecewise_linear([0.0, 2.0], [1.0, 4.0]))])
    psi0 = np.zeros(s.dim)
    psi0[s.index([1] * sites)] = 1.0
    times = np.linspace(0.0, 2.0, 6)
    options = {"psi0": psi0, "times": times, "observables": {"n0": fm.number(0)}, "tol": 1e-8}
    seen: list[ProgressRecord] = []
    with pytest.raises(Stop):
        fm.evolve(
            H, s, progress=stop_after(3, seen), checkpoint=path, checkpoint_every=1e-6, **options
        )
    assert _status(path) == "running"
    resumed = fm.evolve(H, s, checkpoint=path, **options)
    whole = fm.evolve(H, s, **options)
    np.testing.assert_array_equal(resumed.values["n0"], whole.values["n0"])
    assert resumed.products == whole.products


# -- refusals ------------------------------------------------------------------------


def test_another_runs_checkpoint_is_refused_naming_difference_and_path(tmp_path: Path) -> None:
    path = tmp_path / "run.npz"
    h, s = hubbard(4), fm.FockSpace(modes=4, cutoff=4, total=4)
    fm.ground_state(h, s, method="lanczos", tol=1e-9, checkpoint=path)
    with pytest.raises(CheckpointError, match=r"tol=1e-09 there, tol=1e-10 here") as info:
        fm.ground_state(h, s, method="lanczos", tol=1e-10, checkpoint=path)
    assert str(path) in str(info.value)
    with pytest.raises(CheckpointError, match="Hamiltonian differs") as info:
        fm.ground_state(hubbard(4, 3.0), s, method="lanczos", tol=1e-9, checkpoint=path)
    assert str(path) in str(info.value)
    other = fm.FockSpace(modes=4, cutoff=3, total=4)
    with pytest.raises(CheckpointError, match="its space is") as info:
        fm.ground_state(h, other, method="lanczos", tol=1e-9, checkpoint=path)
    assert str(path) in str(info.value)
    with pytest.raises(CheckpointError, match="computation is ground_state where"):
        fm.lowest_levels(h, s, 2, method="lanczos", tol=1e-9, checkpoint=path)
    # The same run is accepted and answers from the file.
    again = fm.ground_state(h, s, method="lanczos", tol=1e-9, checkpoint=path)
    assert again.energy == fm.ground_state(h, s, method="lanczos", tol=1e-9).energy


def test_a_file_that_is_no_checkpoint_is_refused_and_kept(tmp_path: Path) -> None:
    path = tmp_path / "notes.npz"
    path.write_text("my notes")
    h, s = hubbard(4), fm.FockSpace(modes=4, cutoff=4, total=4)
    with pytest.raises(CheckpointError, match="not a fockmill checkpoint"):
        fm.ground_state(h, s, checkpoint=path)
    assert path.read_text() == "my notes"
    with pytest.raises(CheckpointError, match="does not exist"):
        fm.ground_state(h, s, checkpoint=tmp_path / "missing" / "run.npz")
    with pytest.raises(ValueError, match="checkpoint_every"):
        fm.ground_state(h, s, checkpoint=tmp_path / "a.npz", checkpoint_every=0)


def test_evolution_checkpoint_names_the_changed_setting(tmp_path: Path) -> None:
    path = tmp_path / "ev.npz"
    s = fm.FockSpace(modes=3, cutoff=3, total=3)
    psi0 = np.zeros(s.dim)
    psi0[0] = 1.0
    fm.evolve(hubbard(3), s, psi0=psi0, times=[0.0, 1.0], checkpoint=path)
    with pytest.raises(CheckpointError, match="times="):
        fm.evolve(hubbard(3), s, psi0=psi0, times=[0.0, 2.0], checkpoint=path)


# -- progress ------------------------------------------------------------------------


def monotone(records: list[ProgressRecord]) -> None:
    assert records, "no progress record"
    for a, b in itertools.pairwise(records):
        assert b.step >= a.step and b.products >= a.products and b.elapsed >= a.elapsed
        if a.time is not None and b.time is not None:
            assert b.time >= a.time


def test_progress_callables_receive_monotone_records() -> None:
    h, s = hubbard(6), fm.FockSpace(modes=6, cutoff=6, total=6)
    for run in (
        lambda p: fm.ground_state(h, s, method="lanczos", progress=p, cutoff_warning=None),
        lambda p: fm.ground_state(h, s, method="operator", progress=p, cutoff_warning=None),
        lambda p: fm.lowest_levels(h, s, 3, method="lanczos", progress=p),
    ):
        records: list[ProgressRecord] = []
        run(records.append)
        monotone(records)
        assert records[-1].residual is not None and records[-1].residual < 1e-6
    psi0 = np.zeros(s.dim)
    psi0[s.index([1] * 6)] = 1.0
    records = []
    fm.evolve(h, s, psi0=psi0, times=[0.0, 1.0, 3.0], progress=records.append, cutoff_warning=None)
    monotone(records)
    assert records[-1].time == pytest.approx(3.0)
    records = []
    fm.spectral_function(h, s, psi0, fm.number(0), np.linspace(-2, 2, 5), progress=records.append)
    monotone(records)
    records = []
    fm.thermal(h, s, [1.0], method="ftlm", samples=3, steps=20, progress=records.append)
    monotone(records)
    assert records[-1].step == 3


def test_open_system_solvers_report_progress() -> None:
    space1 = fm.FockSpace(modes=1, cutoff=8)
    h = fm.number(0) + 0.3 * (fm.lowering(0) + fm.raising(0))  # invented values
    jumps = [fm.loss(0, 1.0)]
    records: list[ProgressRecord] = []
    fm.stationary_state(h, space1, jumps, method="iterative", progress=records.append)
    monotone(records)
    records = []
    psi0 = np.zeros(space1.dim)
    psi0[2] = 1.0
    fm.evolve_density(h, space1, psi0, [0.0, 1.0], jumps, progress=records.append)
    monotone(records)
    assert records[-1].time == pytest.approx(1.0)
    records = []
    fm.sample_trajectories(h, space1, psi0, [0.0, 1.0], jumps, count=4, progress=records.append)
    monotone(records)
    assert records[-1].step == 4


def test_no_bar_off_a_terminal(capsys: pytest.CaptureFixture[str]) -> None:
    # Under pytest stderr is not a terminal: the default draws nothing.
    assert make_progress(None, "ground_state") is None
    h, s = hubbard(5), fm.FockSpace(modes=5, cutoff=5, total=5)
    fm.ground_state(h, s, method="lanczos", cutoff_warning=None)
    assert capsys.readouterr().err == ""


def test_default_bar_in_a_terminal_waits(monkeypatch: pytest.MonkeyPatch) -> None:
    pytest.importorskip("tqdm")

    class Terminal:
        def isatty(self) -> bool:
            return True

        def write(self, text: str) -> int:
            return len(text)

        def flush(self) -> None:
            pass

    monkeypatch.setattr(sys, "stderr", Terminal())
    reporter = make_progress(None, "ground_state")
    assert reporter is not None and reporter.bar is not None
    assert reporter.bar.delay > 0  # only runs longer than the delay show it
    reporter.close()


def test_progress_option_errors(monkeypatch: pytest.MonkeyPatch) -> None:
    with pytest.raises(TypeError, match="progress must be"):
        make_progress(5, "ground_state")  # type: ignore[arg-type]
    monkeypatch.setitem(sys.modules, "tqdm", None)
    with pytest.raises(ImportError, match=r"fockmill\[progress\]"):
        make_progress(True, "ground_state")
    assert make_progress(None, "ground_state") is None


# -- the command line ------------------------------------------------------------------

# Invented example: a ring of four sites holding four bosons.
RING_TOML = """\
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 4
total = 4

[parameters]
J = 1.0
U = 2.0

[record]
quantities = ["energy"]
levels = 1
"""


def test_cli_solve_keeps_and_reuses_a_checkpoint(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    import fockmill.cli.commands as cli

    model = tmp_path / "ring.toml"
    model.write_text(RING_TOML)
    state = tmp_path / "ring.npz"
    argv = ["solve", str(model), "--format", "json", "--checkpoint", str(state), "--no-progress"]
    assert cli.main(argv) == 0
    first = json.loads(capsys.readouterr().out)
    assert _status(state) == "finished"
    assert cli.main(argv) == 0
    second = json.loads(capsys.readouterr().out)
    assert second["energy"] == first["energy"]
    # Reference: the same ring solved densely (exact diagonalisation).
    s = fm.FockSpace(modes=4, cutoff=4, total=4)
    exact = np.linalg.eigvalsh(fm.build_matrix(hubbard(4), s).toarray())[0]
    assert first["energy"] == pytest.approx(exact, abs=1e-9)
    # Another interaction with the same file: refused, naming the difference.
    # (The point fails with the message; the command exits non-zero.)
    assert cli.main([*argv, "--set", "U=3.0"]) != 0
    captured = capsys.readouterr()
    said = captured.out + captured.err
    assert "Hamiltonian differs" in said and str(state) in said
