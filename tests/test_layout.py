"""The package's layering, beyond what import-linter sees.

import-linter (``make lint``, ``[tool.importlinter]`` in pyproject.toml) checks that the
subpackages are layered and that no modules import each other in a cycle. It cannot see
the compiled module (not a ``.py`` file), so it records ``fockmill._native`` as the root
package and the contracts ignore imports of the root; this test makes sure that nothing
else hides behind that exemption. Common practice, no source.
"""

from __future__ import annotations

import ast
from pathlib import Path

import fockmill

PACKAGE = Path(fockmill.__file__).parent
TOP_LEVEL_ALLOWED = {"__init__.py", "__main__.py", "exceptions.py"}


def _modules() -> list[Path]:
    return sorted(
        p for p in PACKAGE.rglob("*.py") if p.name != "__init__.py" or p.parent != PACKAGE
    )


def test_no_module_imports_the_root_package() -> None:
    offenders = []
    for path in _modules():
        if path.parent == PACKAGE:
            continue
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module == "fockmill":
                offenders.append(f"{path.relative_to(PACKAGE)}:{node.lineno}")
            if isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name == "fockmill":
                        offenders.append(f"{path.relative_to(PACKAGE)}:{node.lineno}")
    assert offenders == [], (
        "import what you need from its subpackage (or `import fockmill._native as _native`), "
        f"never from the root package: {offenders}"
    )


def test_top_level_holds_only_the_entry_points() -> None:
    loose = {p.name for p in PACKAGE.glob("*.py")} - TOP_LEVEL_ALLOWED
    assert loose == set(), f"modules belong in a subpackage: {sorted(loose)}"


def test_every_subpackage_says_what_it_holds() -> None:
    for init in PACKAGE.glob("*/__init__.py"):
        doc = ast.get_docstring(ast.parse(init.read_text(encoding="utf-8")))
        assert doc, f"{init.parent.name}/__init__.py has no docstring"
