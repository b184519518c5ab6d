"""Truncation diagnostics: is a cutoff high enough for the state it produced?"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr, as_expr
from fockmill.observables.observe import top_level_weights
from fockmill.problem.eigensolve import GroundState
from fockmill.problem.problem import Problem, as_problem
from fockmill.solvers.ground import ground_state
from fockmill.spaces.checks import check_space
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["CutoffScan", "converge_cutoffs"]


@dataclass(frozen=True)
class CutoffScan:
    """History of :func:`converge_cutoffs`.

    Attributes
    ----------
    cutoffs : list of tuple of int
        Cutoffs tried, in order.
    energies : list of float
        Ground energy at each.
    top_weights : list of numpy.ndarray
        Top-level weight of every mode at each.
    converged : bool
        Whether every scanned mode converged (see ``mode_converged``).
    ground : GroundState
        The ground state at the last cutoffs.
    space : FockSpace or SymmetricSpace
        The space at the last cutoffs (a sector of the raised base space when the scan
        started from a sector).
    dims : list of int
        Dimension of the space at each step (the cost of each solve).
    raised : list of tuple of int
        The modes whose cutoffs were raised to reach each step (``()`` for the start).
    mode_converged : tuple of bool
        Per mode: its top-level weight at the last cutoffs is below ``weight_tol`` and,
        if it was raised, its last raise moved the energy by less than ``energy_tol``.
        Modes that were not scanned report their weight test only.
    energy_changes : dict of int to float
        Per raised mode: ``|ΔE|`` caused by its last raise.
    """

    cutoffs: list[tuple[int, ...]]
    energies: list[float]
    top_weights: list[npt.NDArray[np.float64]]
    converged: bool
    ground: GroundState
    space: FockSpace | SymmetricSpace
    dims: list[int] = field(default_factory=list)
    raised: list[tuple[int, ...]] = field(default_factory=list)
    mode_converged: tuple[bool, ...] = ()
    energy_changes: dict[int, float] = field(default_factory=dict)


def _orbits(space: FockSpace | SymmetricSpace) -> list[tuple[int, ...]]:
    """The modes each mode is mapped to by the sector's group (itself alone for a space)."""
    modes = space.modes
    if not isinstance(space, SymmetricSpace):
        return [(i,) for i in range(modes)]
    # Union-find over the generators' cycles: the group's orbits on modes.
    parent = list(range(modes))

    def root(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for g, _ in space.symmetries:
        for i, j in enumerate(g.images):
            parent[root(i)] = root(j)
    return [tuple(j for j in range(modes) if root(j) == root(i)) for i in range(modes)]


def _with_cutoffs(
    space: FockSpace | SymmetricSpace, cutoffs: Sequence[int]
) -> FockSpace | SymmetricSpace:
    if isinstance(space, SymmetricSpace):
        return SymmetricSpace(space.base.with_cutoffs(cutoffs), list(space.symmetries))
    return space.with_cutoffs(cutoffs)


def converge_cutoffs(
    expr: LadderExpr | Problem,
    space: FockSpace | SymmetricSpace | None = None,
    *,
    energy_tol: float = 1e-8,
    weight_tol: float = 1e-6,
    step: int = 1,
    max_cutoff: int = 200,
    modes: Sequence[int] | None = None,
    one_at_a_time: bool = True,
    **solve_options: Any,
) -> CutoffScan:
    """Raise cutoffs, only where the state needs it, until the ground state settles.

    Each round solves, measures every mode's top-level weight (the probability of its
    highest kept level) and raises by ``step`` the cutoff of the scanned mode with the
    largest weight at or above ``weight_tol`` (``one_at_a_time=True``, the default:
    measured priority), or of every such mode at once (``one_at_a_time=False``). Modes
    whose top level carries no weight are never raised, so the dimension grows only
    along the modes that need it. A mode has converged when its top-level weight is
    below ``weight_tol`` and its last raise (if any) changed the energy by less than
    ``energy_tol``; when all weights are small but the last change was not, the
    heaviest mode is raised once more to check. The scan stops when every scanned mode
    has converged, or when the modes that still need raising are at ``max_cutoff``.

    Parameters
    ----------
    expr : LadderExpr or Problem
        The Hamiltonian (expressions do not depend on cutoffs), or a prepared problem
        whose space is the starting space (its compiled operator solves the first
        round; each raised space is compiled once).
    space : FockSpace or SymmetricSpace
        Starting space (omitted with a Problem); total, weights and modulus are kept.
        For a sector the scan solves in the sector, and raising a mode raises every mode
        the symmetries map it to (their cutoffs must stay equal); the sector's labels are
        kept.
    energy_tol, weight_tol : float
        Tolerances (absolute energy change per raise; top-level probability).
    step : int
        Cutoff increment per raise.
    max_cutoff : int
        Never raise a cutoff beyond this.
    modes : sequence of int, optional
        Modes that may be raised (default: every mode whose cutoff truncates the
        sector).
    one_at_a_time : bool, default True
        Raise one mode per round (the heaviest top level) or all modes above
        ``weight_tol`` together.
    **solve_options
        Passed to :func:`ground_state` (``method``, ``tol``, ``threads``...). The
        cutoff warning is off during the scan: the scan is the diagnostic.

    Returns
    -------
    CutoffScan
        With the per-step history and the per-mode verdict ``mode_converged``.

    Raises
    ------
    TypeError, ValueError
        For non-integer ``step``/``max_cutoff``/``modes``, non-positive tolerances or
        ``max_cutoff`` below the starting cutoffs.
    """
    first: Problem | None = None
    if isinstance(expr, Problem):
        first = as_problem(expr, space)
        e, s = first.expr, first.space
    else:
        e = as_expr(expr)
        s = check_space(space)
    if not isinstance(s, FockSpace | SymmetricSpace):
        raise TypeError(
            f"converge_cutoffs needs a fm.FockSpace or fm.SymmetricSpace; got {type(s).__name__}"
        )
    for name, value in (("step", step), ("max_cutoff", max_cutoff)):
        if isinstance(value, bool) or not isinstance(value, int | np.integer):
            raise TypeError(f"{name} must be a positive integer; got {value!r}")
    if step < 1:
        raise ValueError(f"step must be >= 1; got {step}")
    if max_cutoff < max(s.cutoffs):
        raise ValueError(
            f"max_cutoff={max_cutoff} is below the starting cutoffs {s.cutoffs}; the scan only "
            f"raises cutoffs, so pass max_cutoff >= {max(s.cutoffs)} or start lower"
        )
    for name, tol in (("energy_tol", energy_tol), ("weight_tol", weight_tol)):
        if isinstance(tol, bool) or not isinstance(tol, float | int) or not tol > 0:
            raise ValueError(f"{name} must be a positive number such as 1e-8; got {tol!r}")
    binding = s.binding_cutoffs()
    chosen = [i for i in range(s.modes) if binding[i]] if modes is None else list(modes)
    for i in chosen:
        if isinstance(i, bool) or not isinstance(i, int | np.integer):
            raise TypeError(f"modes must list integer mode indices; got {i!r}")
        if not 0 <= i < s.modes:
            raise ValueError(f"mode {i} is not in the space (0..{s.modes - 1})")
    chosen = sorted({int(i) for i in chosen})
    solve_options.setdefault("cutoff_warning", None)
    scan_cutoffs: list[tuple[int, ...]] = []
    energies: list[float] = []
    weights: list[npt.NDArray[np.float64]] = []
    dims: list[int] = []
    raised_log: list[tuple[int, ...]] = []
    changes: dict[int, float] = {}
    current: FockSpace | SymmetricSpace = s
    orbits = _orbits(s)
    raised_now: tuple[int, ...] = ()
    while True:
        # The first round solves the given problem (compiled once by the caller).
        g = ground_state(
            first if first is not None else e, None if first else current, **solve_options
        )
        first = None
        w = top_level_weights(current, g.vector)
        if energies:
            for i in raised_now:
                changes[i] = abs(g.energy - energies[-1])
        scan_cutoffs.append(current.cutoffs)
        energies.append(g.energy)
        weights.append(w)
        dims.append(current.dim)
        raised_log.append(raised_now)

        def settled(i: int, w: npt.NDArray[np.float64] = w) -> bool:
            return bool(w[i] < weight_tol) and changes.get(i, 0.0) < energy_tol

        verdict = tuple(settled(i) for i in range(current.modes))
        raisable = [i for i in chosen if current.cutoffs[i] < max_cutoff]
        heavy = [i for i in raisable if w[i] >= weight_tol]
        if not heavy:
            unsettled = [i for i in raisable if not settled(i)]
            if all(verdict[i] for i in chosen):
                heavy = []
            elif unsettled:
                # Weights are small but the last raise still moved the energy: check again.
                heavy = [max(unsettled, key=lambda i: (w[i], -i))]
        if not heavy:
            done = all(verdict[i] for i in chosen)
            return CutoffScan(
                scan_cutoffs,
                energies,
                weights,
                done,
                g,
                current,
                dims,
                raised_log,
                verdict,
                changes,
            )
        if one_at_a_time:
            heavy = [max(heavy, key=lambda i: (w[i], -i))]
        heavy = sorted({j for i in heavy for j in orbits[i]})
        new_cutoffs = list(current.cutoffs)
        for i in heavy:
            new_cutoffs[i] = min(new_cutoffs[i] + step, max_cutoff)
        raised_now = tuple(heavy)
        current = _with_cutoffs(current, new_cutoffs)
