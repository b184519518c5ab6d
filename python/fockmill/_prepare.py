"""Turn a user's expression and space into the compiled operator, checking types."""

from __future__ import annotations

import cmath
import numbers

import numpy as np

from fockmill import _native
from fockmill._args import check_threads
from fockmill._expr import LadderExpr, format_monomial
from fockmill._space import FockSpace
from fockmill._symmetry import SymmetricSpace
from fockmill.exceptions import ModeIndexError

__all__ = ["MAX_POWER", "as_expr", "check_space", "check_threads", "prepare"]

#: Largest creation or annihilation power of one mode in a term (the largest cutoff).
MAX_POWER = 65_535


def as_expr(expr: object) -> LadderExpr:
    """An expression, accepting plain numbers as multiples of the identity."""
    if isinstance(expr, LadderExpr):
        return expr
    if isinstance(expr, numbers.Number | np.number) and not isinstance(expr, bool):
        return LadderExpr.scalar(expr)  # type: ignore[arg-type]
    raise TypeError(
        f"expected a LadderExpr built from fm.lowering/raising/number; got {type(expr).__name__}"
    )


def check_space(space: object) -> FockSpace:
    """The space (a FockSpace or a SymmetricSpace sector), or a clear error."""
    if not isinstance(space, FockSpace | SymmetricSpace):
        raise TypeError(f"expected a fm.FockSpace or fm.SymmetricSpace; got {type(space).__name__}")
    return space  # type: ignore[return-value]


def prepare(expr: object, space: object) -> _native.NativeOperator:
    """Validate ``expr`` against ``space`` and return the compiled operator.

    Raises
    ------
    ChargeError
        A term changes the conserved charge.
    ModeIndexError
        A term acts on a mode beyond the space.
    TypeError
        For arguments of the wrong type.
    """
    e = as_expr(expr)
    s = check_space(space)
    for coefficient, key in e.terms():
        for mode, p, q in key:
            if mode >= s.modes:
                raise ModeIndexError(
                    f"term {format_monomial(key)} acts on mode {mode}, but the space has only "
                    f"{s.modes} modes (valid indices 0..{s.modes - 1}); use a space with more "
                    "modes or fix the index"
                )
            if p > MAX_POWER or q > MAX_POWER:
                raise ValueError(
                    f"term {format_monomial(key)} has a power above {MAX_POWER}; such powers "
                    "vanish on every supported space, drop the term"
                )
        if not cmath.isfinite(coefficient):
            raise ValueError(
                f"term {format_monomial(key)} has the coefficient {coefficient}, which is not "
                "finite; check the parameters for NaN, inf or overflow"
            )
    if isinstance(s, SymmetricSpace):
        return s._compile(e)  # type: ignore[return-value]
    return _native.NativeOperator(s.native, e.to_native())
