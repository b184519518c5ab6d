"""Command-line options that several commands share, written once."""

from __future__ import annotations

import argparse
import sys
from typing import Any

__all__ = [
    "add_long_run",
    "add_overrides",
    "add_threads",
    "positive_int",
    "progress_option",
    "solver_keywords",
    "units_of",
]


def positive_int(text: str) -> int:
    """An argparse type: an integer >= 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive integer, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a positive integer, got {text!r}")
    return value


def add_overrides(parser: argparse.ArgumentParser) -> None:
    """``--set NAME=VALUE`` (repeatable): change parameters for this run."""
    parser.add_argument(
        "--set",
        dest="overrides",
        metavar="NAME=VALUE",
        action="append",
        default=[],
        help="change one parameter for this run (repeatable), e.g. --set U=2.5",
    )


def add_threads(parser: argparse.ArgumentParser) -> None:
    """``--threads N``: wins over the model file's ``[solver] threads``."""
    parser.add_argument(
        "--threads",
        type=positive_int,
        metavar="N",
        help="threads (default: [solver] threads, else all cores)",
    )


def solver_keywords(model_file: Any, threads: int | None = None) -> dict[str, Any]:
    """The file's ``[solver]`` table as run_sweep keywords (the same words); ``threads``
    from the command line wins over the file's."""
    solver = dict(getattr(model_file, "solver", None) or {})
    keys = ("method", "tol", "seed", "max_iterations", "threads")
    chosen = {key: solver[key] for key in keys if key in solver}
    if threads is not None:
        chosen["threads"] = threads
    return chosen


def units_of(model_file: Any) -> dict[str, str]:
    """The model file's units (parameter or "energy" -> unit), when it gives any."""
    units = getattr(model_file, "units", None) or {}
    return {str(k): str(v) for k, v in dict(units).items()}


def add_long_run(parser: argparse.ArgumentParser, *, checkpoint: bool = True) -> None:
    """``--no-progress`` and (with ``checkpoint``) ``--checkpoint PATH``."""
    parser.add_argument(
        "--no-progress", action="store_true", help="hide the progress bar of the computation"
    )
    if checkpoint:
        parser.add_argument(
            "--checkpoint",
            metavar="STATE.npz",
            help="keep the run's state in this file (every few minutes and at the end); "
            "the same command with the same file continues an interrupted run or prints "
            "the finished result at once",
        )


def progress_option(args: argparse.Namespace) -> bool:
    """``progress=`` of a command: a bar on stderr unless ``--no-progress``, when stderr
    is a terminal and tqdm is installed (a log file gets no bar)."""
    if getattr(args, "no_progress", False):
        return False
    try:
        if not sys.stderr.isatty():
            return False
    except (AttributeError, ValueError):
        return False
    try:
        import tqdm  # noqa: F401
    except ImportError:
        return False
    return True
