"""The memory plan of a Lanczos solve against its measured peak (issue 19, item 6).

Each case runs in its own interpreter, so that the peak is the solve's own: the child
prepares the problem, asks for ``Problem.memory_plan`` (the numbers the solver's
stored-or-matrix-free choice uses), resets the kernel's resident high-water mark
(writing ``5`` to ``/proc/self/clear_refs``, Linux kernel documentation,
Documentation/filesystems/proc.rst, "clear_refs") and runs the solve; the peak is then
``VmHWM`` from ``/proc/self/status``. The solve's measured growth above the resident
memory at planning time must be within 10 % of the planned growth, plus a fixed
allowance (see ``ALLOWANCE``). Before the fix, the default ground state on a sector with
truncating cutoffs expanded the sector vector into the base space, with a copy, for the
cutoff check (twice the base space's dimension in vectors, missing from the plan): the
stored-sector case below (6,472,168 base states) would grow by 2 × 52 MB more than
its ~50 MB plan (computed from the sizes, not measured).
"""

from __future__ import annotations

import sys
import textwrap

import pytest
from child_runs import HELPERS, run_child

pytestmark = pytest.mark.skipif(
    not sys.platform.startswith("linux"), reason="/proc/self/status and clear_refs are Linux"
)

#: Fixed allowance above 10 % of the planned growth: the stacks and per-thread scratch
#: of the two worker threads, heap blocks the allocator keeps after a free (the build's
#: row counts are freed before the vectors are allocated but may stay mapped), page
#: rounding and the Python objects of the result. Measured on the three cases below:
#: below 3 MiB (common practice, no source: an allowance of a few times that).
ALLOWANCE = 8 * 2**20

CHILD = HELPERS + textwrap.dedent(
    """
    import json, sys
    import fockmill as fm
    from fockmill.exceptions import ConvergenceError

    case = sys.argv[1]
    sites, cutoff, store, cap = {
        "sector-stored": (14, 3, None, None),
        "sector-free": (15, 4, False, 4),
        "full": (12, 12, None, 60),
    }[case]
    base = fm.FockSpace(modes=sites, cutoff=cutoff, total=sites)
    if case == "full":
        space = base
    else:
        space = fm.SymmetricSpace(
            base, [(fm.ring_translation(sites), 0), (fm.ring_reflection(sites), 0)]
        )
    problem = fm.prepare(ring(sites), space, threads=2)
    problem.estimate  # the method choice's estimate, kept by the problem
    plan = problem.memory_plan(store_matrix=store)
    with open("/proc/self/clear_refs", "w") as f:
        f.write("5")
    reset = status("VmHWM") <= status("VmRSS") + 2**20
    energy = None
    try:
        # Default cutoff_warning: the cutoff check runs after the solve (cutoff 3 truncates).
        g = problem.ground_state(
            method="lanczos", tol=1e-8, store_matrix=store, max_iterations=cap
        )
        energy = g.energy
    except ConvergenceError:
        pass  # a capped solve: its vectors and tables were all allocated
    print(json.dumps(dict(
        dim=space.dim, stored=plan.stored, resident=plan.resident_bytes,
        added=plan.added_bytes, planned=plan.peak_bytes, peak=status("VmHWM"),
        reset=reset, energy=energy,
    )))
    """
)


@pytest.mark.parametrize(
    ("case", "stored"),
    [("sector-stored", True), ("sector-free", False), ("full", False)],
)
def test_solve_peaks_within_its_plan(case: str, stored: bool) -> None:
    r = run_child(CHILD, case)
    if not r["reset"]:
        pytest.skip("the kernel does not reset the resident high-water mark (clear_refs)")
    assert r["stored"] is stored
    added = int(r["added"])  # type: ignore[call-overload]
    grown = int(r["peak"]) - int(r["resident"])  # type: ignore[call-overload]
    assert added > 4 * ALLOWANCE, r  # the case is large enough to test the plan
    assert abs(grown - added) <= 0.10 * added + ALLOWANCE, (
        f"{case}: the solve grew by {grown / 2**20:.1f} MiB, planned {added / 2**20:.1f} MiB ({r})"
    )
