"""Tests of the ``fockmill`` command line: subcommands, output formats, exit codes."""

from __future__ import annotations

import csv
import io
import json
import math
import signal
import subprocess
import sys
import time
from pathlib import Path

import fockmill.cli.commands as cli
import numpy as np
import pytest
from fockmill.store.sweeps import FORMAT_MARKER, ResultsStore
from test_store import committed
from test_sweep import pair_closed_form

# Invented example: two coupled resonators holding two photons, U swept.
PAIR_TOML = """\
[model]
kind = "bose-hubbard"
lattice = "chain"
sites = 2
total = 2

[parameters]
J = 1.0
U = 2.0

[sweep.U]
values = [0.0, 1.0, 2.5, 4.0, 8.0]

[record]
quantities = [
    "energy", "gap", "populations", "number_variances", "one_body_matrix", "entanglement_entropy"
]
levels = 2
"""

REPO = Path(__file__).resolve().parents[1]


def run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    code = cli.main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def assert_one_line_error(err: str, *fragments: str) -> None:
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("fockmill: error: ")
    for fragment in fragments:
        assert fragment in lines[0]


@pytest.fixture
def pair_file(tmp_path: Path) -> Path:
    path = tmp_path / "pair.toml"
    path.write_text(PAIR_TOML)
    return path


@pytest.fixture
def pair_results(pair_file: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> Path:
    out = tmp_path / "pair.sqlite"
    code, stdout, _ = run(
        ["sweep", str(pair_file), "--out", str(out), "--workers", "1", "--no-progress"], capsys
    )
    assert code == 0
    assert "5 points" in stdout
    return out


def test_help_lists_subcommands(capsys: pytest.CaptureFixture[str]) -> None:
    code, out, _ = run(["--help"], capsys)
    assert code == 0
    for name in ("solve", "sweep", "show", "plot", "demo", "exit status"):
        assert name in out
    for name in ("solve", "sweep", "show", "plot", "demo"):
        code, out, _ = run([name, "--help"], capsys)
        assert code == 0
        assert out.startswith(f"usage: fockmill {name}")


@pytest.mark.parametrize(
    ("argv", "fragments"),
    [
        (["frobnicate"], ("invalid choice", "frobnicate")),
        ([], ("choose a subcommand",)),
        (["sweep", "model.toml"], ("--out", "fockmill sweep --help")),
        (["sweep", "m.toml", "--out", "r.sqlite", "--workers", "0"], ("positive integer",)),
        (["solve", "no/such/model.toml"], ("no/such/model.toml", "not found")),
        (["show", "no/such/results.sqlite"], ("no/such/results.sqlite", "not found")),
    ],
)
def test_usage_errors_exit_2(
    argv: list[str], fragments: tuple[str, ...], capsys: pytest.CaptureFixture[str]
) -> None:
    code, out, err = run(argv, capsys)
    assert code == 2
    assert out == ""
    assert_one_line_error(err, *fragments)


def test_bad_toml_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "broken.toml"
    path.write_text('[model]\nkind = = "bose-hubbard"\n')
    code, _, err = run(["solve", str(path)], capsys)
    assert code == 2
    assert_one_line_error(err, "broken.toml", "TOML")


def test_schema_error_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "odd.toml"
    path.write_text(PAIR_TOML.replace('kind = "bose-hubbard"', 'kind = "bose-hubbard"\ncolour = 3'))
    code, _, err = run(["sweep", str(path), "--out", str(tmp_path / "r.sqlite")], capsys)
    assert code == 2
    assert_one_line_error(err, "odd.toml", "colour")
    assert not (tmp_path / "r.sqlite").exists()


def test_real_process_exit_codes(tmp_path: Path) -> None:
    missing = subprocess.run(
        [sys.executable, "-m", "fockmill", "solve", str(tmp_path / "absent.toml")],
        capture_output=True,
        text=True,
        check=False,
    )
    assert missing.returncode == 2
    assert_one_line_error(missing.stderr, "absent.toml")
    usage = subprocess.run(
        [sys.executable, "-m", "fockmill", "bogus"], capture_output=True, text=True, check=False
    )
    assert usage.returncode == 2
    assert_one_line_error(usage.stderr, "bogus")


def test_solve_matches_closed_form(pair_file: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # Reference: the two-boson, two-site closed form derived in test_sweep.pair_closed_form.
    code, out, _ = run(["solve", str(pair_file), "--set", "U=3.0", "--format", "json"], capsys)
    assert code == 0
    row = json.loads(out)
    expected = pair_closed_form(1.0, 3.0)
    assert row["parameters"]["U"] == 3.0
    assert row["energy"] == pytest.approx(expected["energy"], abs=1e-10)
    assert row["gap"] == pytest.approx(expected["gap"], abs=1e-10)
    assert row["observables"]["entanglement_entropy"] == pytest.approx(
        expected["entanglement_entropy"], abs=1e-10
    )
    code, text, _ = run(["solve", str(pair_file)], capsys)
    assert code == 0
    assert f"E0={pair_closed_form(1.0, 2.0)['energy']:.10g}" in text
    assert "site 0=" in text


def test_solve_rejects_unknown_override(
    pair_file: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    code, _, err = run(["solve", str(pair_file), "--set", "V=1"], capsys)
    assert code == 2
    assert_one_line_error(err, "'V'")
    code, _, err = run(["solve", str(pair_file), "--set", "U=lots"], capsys)
    assert code == 2
    assert_one_line_error(err, "not a number")


def test_sweep_resumes_and_show_formats(
    pair_file: Path, pair_results: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    with ResultsStore.open(pair_results) as store:
        first = store.rows()
        assert store.meta["format"] == FORMAT_MARKER
        assert len(store.meta["model_text_hash"]) == 64
    code, out, _ = run(
        ["sweep", str(pair_file), "--out", str(pair_results), "--workers", "1", "--no-progress"],
        capsys,
    )
    assert code == 0
    assert "5 points" in out
    with ResultsStore.open(pair_results) as store:
        assert store.rows() == first  # nothing redone, nothing duplicated

    code, table, _ = run(["show", str(pair_results)], capsys)
    assert code == 0
    lines = table.splitlines()
    assert lines[0].startswith("# model bose-hubbard")
    assert lines[1] == "# modes (order of per-mode lists): site 0, site 1"
    assert lines[2].split()[:4] == ["point", "U", "energy", "gap"]
    assert len([ln for ln in lines if not ln.startswith("#")]) == 1 + 5

    code, text, _ = run(["show", str(pair_results), "--format", "csv"], capsys)
    assert code == 0
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == 5
    for row in rows:
        # Reference: closed form for two bosons on two sites (test_sweep.pair_closed_form).
        expected = pair_closed_form(1.0, float(row["U"]))
        assert float(row["energy"]) == pytest.approx(expected["energy"], abs=1e-9)
        assert float(row["one_body_matrix_0_1"]) == pytest.approx(expected["hopping"], abs=1e-9)

    code, text, _ = run(["show", str(pair_results), "--format", "json"], capsys)
    assert code == 0
    document = json.loads(text)
    assert document["meta"]["format"] == FORMAT_MARKER
    assert [r["point"] for r in document["rows"]] == list(range(5))


def test_sweep_without_grid_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "single.toml"
    path.write_text(PAIR_TOML.replace("[sweep.U]\nvalues = [0.0, 1.0, 2.5, 4.0, 8.0]\n", ""))
    code, _, err = run(["sweep", str(path), "--out", str(tmp_path / "r.sqlite")], capsys)
    assert code == 2
    assert_one_line_error(err, "no sweep grid")


def test_sweep_refuses_foreign_output(
    pair_file: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    foreign = tmp_path / "photo.sqlite"
    foreign.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(200))
    code, _, err = run(["sweep", str(pair_file), "--out", str(foreign), "--workers", "1"], capsys)
    assert code == 2
    assert_one_line_error(err, "photo.sqlite", "not a fockmill results file")


def test_sweep_on_local_dask_cluster(
    pair_file: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    pytest.importorskip(
        "distributed", reason="dask.distributed is not installed (extra fockmill[cluster])"
    )
    out = tmp_path / "dask.sqlite"
    code, _, _ = run(
        ["sweep", str(pair_file), "--out", str(out), "--dask-local", "1", "--no-progress"], capsys
    )
    assert code == 0
    with ResultsStore.open(out) as store:
        rows = store.rows()
    for row in rows:
        # Reference: closed form for two bosons on two sites (test_sweep.pair_closed_form).
        expected = pair_closed_form(1.0, row.parameters["U"])
        assert row.energy == pytest.approx(expected["energy"], abs=1e-10)


def test_plot_writes_png(
    pair_results: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    image = pytest.importorskip("matplotlib.image", reason="matplotlib is not installed")
    figure = tmp_path / "figs" / "pair.png"
    code, out, _ = run(
        ["plot", str(pair_results), "--out", str(figure), "--y", "energy,gap,populations"], capsys
    )
    assert code == 0
    assert str(figure) in out
    assert figure.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)
    pixels = image.imread(figure)
    assert pixels.ndim == 3 and pixels.shape[0] > 100 and pixels.shape[1] > 100
    assert np.ptp(pixels) > 0  # something was drawn


@pytest.mark.parametrize(
    ("extra", "fragment"),
    [(["--y", "magnetisation"], "cannot plot"), (["--x", "J"], "not a swept parameter")],
)
def test_plot_bad_quantity_exit_2(
    pair_results: Path,
    tmp_path: Path,
    extra: list[str],
    fragment: str,
    capsys: pytest.CaptureFixture[str],
) -> None:
    code, _, err = run(
        ["plot", str(pair_results), "--out", str(tmp_path / "x.png"), *extra], capsys
    )
    assert code == 2
    assert_one_line_error(err, fragment)


def test_interrupt_exits_130(
    pair_results: Path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    def interrupted(args: object, out: object) -> int:
        raise KeyboardInterrupt

    monkeypatch.setitem(cli._COMMANDS, "show", interrupted)
    code, _, err = run(["show", str(pair_results)], capsys)
    assert code == 130
    assert "interrupted" in err
    assert "Traceback" not in err


def test_demo_runs_bundled_model(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    pytest.importorskip("matplotlib", reason="matplotlib is not installed")
    out_dir = tmp_path / "demo"
    code, out, _ = run(
        ["demo", "--out-dir", str(out_dir), "--workers", "1", "--no-progress"], capsys
    )
    assert code == 0
    assert "invented" in out
    with ResultsStore.open(out_dir / "ring_kerr_crossover.sqlite") as store:
        rows = store.rows()
    assert len(rows) == 25
    # Limits (Fisher, Weichman, Grinstein & Fisher, Phys. Rev. B 40, 546 (1989), for the
    # Mott and superfluid sides of the Bose–Hubbard model; the finite-ring numbers are
    # common practice, no source): the Mott-like side has Var n → 0 and a gap of order
    # U; the superfluid-like side has the larger number fluctuations.
    variances = [row.observables["number_variances"][0] for row in rows]
    assert variances[0] > 0.5 > 0.05 > variances[-1]
    assert rows[-1].gap > 0.5 * rows[-1].parameters["U"]
    assert (out_dir / "ring_kerr_crossover.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert math.isclose(min(r.parameters["U"] for r in rows), 0.5)


def test_bundled_demo_model_matches_example() -> None:
    example = REPO / "examples" / "models" / "ring_kerr_crossover.toml"
    if not example.is_file():
        pytest.skip("examples/ is not present (installed package without the source tree)")
    bundled = REPO / "python" / "fockmill" / "cli" / "demo_model.toml"
    assert bundled.read_text() == example.read_text(), (
        "python/fockmill/cli/demo_model.toml must be a copy of "
        "examples/models/ring_kerr_crossover.toml; copy it over"
    )


# Invented example: an eight-site ring, large enough that a sweep runs for a while.
SLOW_RING_TOML = """\
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 8
total = 8

[sweep.U]
start = 0.5
stop = 20.0
num = 400

[record]
quantities = ["energy", "gap"]
"""


def test_ctrl_c_during_pool_sweep_exits_130_and_keeps_rows(tmp_path: Path) -> None:
    model = tmp_path / "slow.toml"
    model.write_text(SLOW_RING_TOML)
    results = tmp_path / "slow.sqlite"
    process = subprocess.Popen(
        [
            *(sys.executable, "-m", "fockmill", "sweep", str(model)),
            *("--out", str(results), "--workers", "2", "--no-progress"),
        ],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        # A test runner may start us with SIGINT ignored; the child must see it.
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL),
    )
    try:
        deadline = time.monotonic() + 120
        while committed(results) < 3:
            assert process.poll() is None, process.communicate()
            assert time.monotonic() < deadline, "the sweep committed no points in time"
            time.sleep(0.02)
        process.send_signal(signal.SIGINT)
        _, err = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            process.kill()
            process.communicate()
    assert process.returncode == 130
    assert "interrupted" in err and "Traceback" not in err
    with ResultsStore.open(results) as store:
        assert store.integrity_ok()
        assert 3 <= len(store.rows()) < 400


def test_optional_dependencies_load_lazily() -> None:
    # Project rule: `import fockmill` needs only numpy and scipy; tqdm, matplotlib and
    # dask load only inside the functions that use them.
    probe = (
        "import sys, fockmill, fockmill.sweeps.run, fockmill.store.sweeps, fockmill.plots.sweeps\n"
        "import fockmill.cli\n"
        "print(sorted(m for m in ('tqdm', 'matplotlib', 'dask', 'distributed') "
        "if m in sys.modules))"
    )
    result = subprocess.run(
        [sys.executable, "-c", probe], capture_output=True, text=True, check=True
    )
    assert result.stdout.strip() == "[]"


# -- failures, retries, messages (issue 8 item 5, issue 12) -------------------------------


def test_show_lists_failed_points_and_retry_is_explicit(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # J = 1.5e308 overflows the hopping matrix elements (√2 J > max float): that point
    # fails, the other is solved (reference: the two-boson closed form of
    # test_sweep.pair_closed_form).
    path = tmp_path / "pair.toml"
    path.write_text(
        PAIR_TOML.replace(
            "[sweep.U]\nvalues = [0.0, 1.0, 2.5, 4.0, 8.0]", "[sweep.J]\nvalues = [1.0, 1.5e308]"
        )
    )
    out = tmp_path / "pair.sqlite"
    argv = ["sweep", str(path), "--out", str(out), "--workers", "1", "--no-progress"]
    code, text, _ = run(argv, capsys)
    assert code == 1  # a failed point fails the command (issue 17); the rest is saved
    assert "1 failed" in text
    code, table, _ = run(["show", str(out)], capsys)
    assert code == 0
    assert "failed points" in table
    failure = [line for line in table.splitlines() if "J=1.5e+308" in line]
    assert failure and failure[0].split(": failed: ", 1)[1].strip()  # the reason
    with ResultsStore.open(out) as store:
        first = store.rows()
    assert first[0].energy == pytest.approx(pair_closed_form(1.0, 2.0)["energy"], abs=1e-10)
    code, text, _ = run([*argv, "--retry-failed"], capsys)
    assert code == 1
    with ResultsStore.open(out) as store:
        again = store.rows()
    assert again[0] == first[0]  # the finished point is kept
    assert again[1].status == "failed"
    assert again[1].finished >= first[1].finished


def test_show_on_a_file_that_is_not_results(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    notes = tmp_path / "notes.sqlite"
    notes.write_text("invented lab notes, not a database\n" * 20)
    code, _, err = run(["show", str(notes)], capsys)
    assert code == 2
    assert_one_line_error(err, "notes.sqlite", "not an SQLite database")
    assert "new path" not in err
    assert "fockmill sweep" in err


def test_solve_reports_the_whole_time(pair_file: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, text, _ = run(["solve", str(pair_file)], capsys)
    assert code == 0
    assert "total" in text
    code, out, _ = run(["solve", str(pair_file), "--format", "json"], capsys)
    row = json.loads(out)
    assert row["status"] == "ok"
    assert row["total_seconds"] >= row["seconds"] > 0
