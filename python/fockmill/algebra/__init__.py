"""Ladder-operator expressions: creation, annihilation and number operators kept
normal ordered, and the term strings of model files.
"""

from fockmill.algebra.expressions import (
    LadderExpr,
    as_expr,
    format_monomial,
    identity,
    lowering,
    number,
    raising,
)
from fockmill.algebra.terms import TermSyntaxError, parse_term, parse_terms

__all__ = [
    "LadderExpr",
    "TermSyntaxError",
    "as_expr",
    "format_monomial",
    "identity",
    "lowering",
    "number",
    "parse_term",
    "parse_terms",
    "raising",
]
