"""What the tests that run a child interpreter share: the Bose–Hubbard ring and the
process status readers (``HELPERS``, Python source to put at the top of a child's code;
it names ``fm``, which the code that follows imports), and running the child for the
JSON object on its last line (``run_child``).

Tests that measure a process's own memory (its limits, its peak) run it alone in a
fresh interpreter so that nothing else in the test session counts.
"""

from __future__ import annotations

import json
import subprocess
import sys
from collections.abc import Mapping

#: Source of ``ring(sites)``, the unit-interaction Bose–Hubbard ring (J = U = 1),
#: ``unit(sites)``, its unit-filled number sector, and ``status(key)``, a size field of
#: ``/proc/self/status`` in bytes (Linux kernel documentation,
#: Documentation/filesystems/proc.rst). No braces: a child's code may go through
#: ``str.format``.
HELPERS = """
def ring(sites):
    h = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        h = h - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        h = h + 0.5 * fm.number(i) * (fm.number(i) - 1)
    return h

def unit(sites):
    return fm.FockSpace(modes=sites, cutoff=sites, total=sites)

def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key + ":"):
            return int(line.split()[1]) * 1024
    raise RuntimeError("no " + key)
"""


def run_child(code: str, *args: str, env: Mapping[str, str] | None = None) -> dict[str, object]:
    """Run ``code`` with ``args`` in a fresh interpreter, which must exit normally, and
    return the JSON object printed on its last line."""
    child = subprocess.run(
        [sys.executable, "-c", code, *args],
        capture_output=True,
        text=True,
        env=None if env is None else dict(env),
        timeout=600,
    )
    assert child.returncode == 0, (
        f"child exited with {child.returncode} (134 = abort on a failed allocation)\n"
        f"{child.stderr[-2000:]}"
    )
    result: dict[str, object] = json.loads(child.stdout.strip().splitlines()[-1])
    return result
