"""Command-line options that several commands share, written once."""

from __future__ import annotations

import argparse

__all__ = ["add_overrides", "add_threads", "positive_int"]


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
