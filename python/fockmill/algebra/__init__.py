"""Ladder-operator expressions: creation, annihilation and number operators kept
normal ordered, and the term strings of model files.
"""

from fockmill.algebra.arrays import pair_interaction, quadratic_form
from fockmill.algebra.expressions import (
    LadderExpr,
    TermBlock,
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
    "TermBlock",
    "TermSyntaxError",
    "as_expr",
    "format_monomial",
    "identity",
    "lowering",
    "number",
    "pair_interaction",
    "parse_term",
    "parse_terms",
    "quadratic_form",
    "raising",
]
