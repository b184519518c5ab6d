"""Every example in the package's docstrings runs and prints what it shows.

The examples are worked cases written next to the code (each names its own source where
it checks physics); this test keeps them true. Common practice, no source.
"""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import fockmill
import pytest


def _modules() -> list[str]:
    names = [
        info.name
        for info in pkgutil.walk_packages(fockmill.__path__, prefix="fockmill.")
        if not info.name.endswith("__main__")
    ]
    return sorted(names)


def test_every_module_is_seen() -> None:
    # If the walk missed the subpackages, the parametrised test below would pass empty.
    assert {"fockmill.dynamics.evolve", "fockmill.spaces.fock", "fockmill.cli.commands"} <= set(
        _modules()
    )


@pytest.mark.parametrize("name", _modules())
def test_docstring_examples_run(name: str) -> None:
    module = importlib.import_module(name)
    finder = doctest.DocTestFinder(exclude_empty=True)
    runner = doctest.DocTestRunner(optionflags=doctest.NORMALIZE_WHITESPACE | doctest.ELLIPSIS)
    for test in finder.find(module, name):
        runner.run(test)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} docstring example(s) of {name} failed"
