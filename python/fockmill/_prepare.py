"""Turn a user's expression and space into the compiled operator, checking types."""

from __future__ import annotations

import numbers

import numpy as np

from fockmill import _native
from fockmill._args import check_threads
from fockmill._expr import LadderExpr
from fockmill._space import FockSpace

__all__ = ["as_expr", "check_space", "check_threads", "prepare"]


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
    """The space, or a clear error."""
    if not isinstance(space, FockSpace):
        raise TypeError(f"expected a fm.FockSpace; got {type(space).__name__}")
    return space


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
    return _native.NativeOperator(s.native, e.to_native())
