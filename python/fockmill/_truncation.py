"""Truncation diagnostics: is a cutoff high enough for the state it produced?"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill._expr import LadderExpr
from fockmill._observe import top_level_weights
from fockmill._prepare import as_expr, check_space
from fockmill._solve import GroundState, ground_state
from fockmill._space import FockSpace

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
        Whether the last step met both tolerances.
    ground : GroundState
        The ground state at the last cutoffs.
    space : FockSpace
        The space at the last cutoffs.
    """

    cutoffs: list[tuple[int, ...]]
    energies: list[float]
    top_weights: list[npt.NDArray[np.float64]]
    converged: bool
    ground: GroundState
    space: FockSpace
    dims: list[int] = field(default_factory=list)


def converge_cutoffs(
    expr: LadderExpr,
    space: FockSpace,
    *,
    energy_tol: float = 1e-8,
    weight_tol: float = 1e-6,
    step: int = 1,
    max_cutoff: int = 200,
    modes: Sequence[int] | None = None,
    **solve_options: Any,
) -> CutoffScan:
    """Raise cutoffs until the ground energy and the top-level weights settle.

    Starting from ``space``'s cutoffs, each round raises the cutoff of every mode in
    ``modes`` (default: every mode whose cutoff truncates the sector) by ``step`` and
    solves again. It stops when the energy changed by less than ``energy_tol`` (absolute)
    since the previous round *and* every raised mode's top-level weight is below
    ``weight_tol``.

    Parameters
    ----------
    expr : LadderExpr
        The Hamiltonian (expressions do not depend on cutoffs).
    space : FockSpace
        Starting space; total, weights and modulus are kept.
    energy_tol, weight_tol : float
        Stopping tolerances.
    step : int
        Cutoff increment per round.
    max_cutoff : int
        Never raise a cutoff beyond this; the scan then stops unconverged.
    modes : sequence of int, optional
        Modes whose cutoffs are raised.
    **solve_options
        Passed to :func:`ground_state` (``method``, ``tol``, ``threads``...). The
        cutoff warning is off during the scan: the scan is the diagnostic.

    Returns
    -------
    CutoffScan
    """
    e = as_expr(expr)
    s = check_space(space)
    if not isinstance(s, FockSpace):
        raise TypeError("converge_cutoffs needs a fm.FockSpace; pass the sector's .base")
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
    solve_options.setdefault("cutoff_warning", None)
    scan_cutoffs: list[tuple[int, ...]] = []
    energies: list[float] = []
    weights: list[npt.NDArray[np.float64]] = []
    dims: list[int] = []
    current = s
    while True:
        g = ground_state(e, current, **solve_options)
        w = top_level_weights(current, g.vector)
        scan_cutoffs.append(current.cutoffs)
        energies.append(g.energy)
        weights.append(w)
        dims.append(current.dim)
        settled_weights = all(w[i] < weight_tol for i in chosen)
        settled_energy = len(energies) >= 2 and abs(energies[-1] - energies[-2]) < energy_tol
        if (settled_energy and settled_weights) or not chosen:
            return CutoffScan(scan_cutoffs, energies, weights, True, g, current, dims)
        raised = list(current.cutoffs)
        for i in chosen:
            raised[i] = min(raised[i] + step, max_cutoff)
        if tuple(raised) == current.cutoffs:
            return CutoffScan(scan_cutoffs, energies, weights, False, g, current, dims)
        current = current.with_cutoffs(raised)
