"""The ``fockmill`` command: solve, sweep, show, plot, demo and the workflow commands."""

from fockmill.cli.commands import main

__all__ = ["main"]
