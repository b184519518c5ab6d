"""fockmill: many coupled bosonic modes in truncated, number-conserving Fock bases.

Build ladder-operator expressions symbolically (normal ordered), choose a Fock space
(per-mode cutoffs, optionally a conserved weighted total or its parity), and get sparse
matrices, matrix-free operators, ground states and observables computed in Rust.

Public names
------------
FockSpace
    Truncated multi-mode Fock space or conserved-charge sector.
lowering, raising, number, identity, LadderExpr
    Ladder-operator expressions.
build_matrix, build_operator, LadderOperator
    ``scipy.sparse.csr_array`` and matrix-free ``LinearOperator``.
estimate_memory, available_memory, MemoryEstimate
    Size planning before a build.
"""

from fockmill import exceptions
from fockmill._build import build_matrix
from fockmill._expr import LadderExpr, format_monomial, identity, lowering, number, raising
from fockmill._memory import MemoryEstimate, available_memory, estimate_memory
from fockmill._native import __version__
from fockmill._operator import LadderOperator, build_operator
from fockmill._space import FockSpace

__all__ = [
    "FockSpace",
    "LadderExpr",
    "LadderOperator",
    "MemoryEstimate",
    "__version__",
    "available_memory",
    "build_matrix",
    "build_operator",
    "estimate_memory",
    "exceptions",
    "format_monomial",
    "identity",
    "lowering",
    "number",
    "raising",
]
