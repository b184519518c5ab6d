"""The prepared problem: an expression compiled on a space once, its memory plan,
its matrices and matrix-free operators, and the eigensolvers that run on it.
"""

from fockmill.problem.builders import build_matrix, build_operator, estimate_memory
from fockmill.problem.eigensolve import GroundState, Levels, choose_method
from fockmill.problem.memory import MemoryEstimate, SolvePlan, available_memory
from fockmill.problem.problem import LadderOperator, Problem, as_problem, prepare

__all__ = [
    "GroundState",
    "LadderOperator",
    "Levels",
    "MemoryEstimate",
    "Problem",
    "SolvePlan",
    "as_problem",
    "available_memory",
    "build_matrix",
    "build_operator",
    "choose_method",
    "estimate_memory",
    "prepare",
]
