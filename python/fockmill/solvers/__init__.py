"""Ground states, lowest levels, dispersions and cutoff convergence from an
expression and a space, or a prepared problem.
"""

from fockmill.solvers.cutoffs import CutoffScan, converge_cutoffs
from fockmill.solvers.ground import ground_state, lowest_levels
from fockmill.solvers.momentum import Dispersion, momentum_levels

__all__ = [
    "CutoffScan",
    "Dispersion",
    "converge_cutoffs",
    "ground_state",
    "lowest_levels",
    "momentum_levels",
]
