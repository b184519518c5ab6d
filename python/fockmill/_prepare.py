"""Turn a user's expression and space into the compiled (native) operator, checking types.

:func:`compile_operator` is the one place where an expression meets a space type; the
public entry point is :func:`fockmill.prepare` (``_problem.py``), which calls it once.
"""

from __future__ import annotations

import cmath
import numbers
from typing import Any

import numpy as np

from fockmill import _native
from fockmill._args import check_threads
from fockmill._expr import LadderExpr, format_monomial
from fockmill._space import FockSpace
from fockmill._symmetry import SymmetricSpace
from fockmill.exceptions import ModeIndexError

__all__ = [
    "MAX_POWER",
    "as_expr",
    "check_space",
    "check_terms",
    "check_threads",
    "compile_operator",
]

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
        raise TypeError(
            f"expected a fm.FockSpace; got {type(space).__name__} (a fm.SymmetricSpace "
            "sector is accepted too)"
        )
    return space  # type: ignore[return-value]


def check_terms(e: LadderExpr, s: FockSpace) -> None:
    """Refuse terms on missing modes, with absurd powers or non-finite coefficients.

    Raises
    ------
    ModeIndexError
        A term acts on a mode beyond the space.
    ValueError
        A power above :data:`MAX_POWER` or a NaN/inf coefficient.
    """
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


def compile_operator(expr: object, space: object, target: object = None) -> Any:
    """Validate ``expr`` against ``space`` and return the compiled native operator.

    The result follows the native operator protocol (``is_real``, ``dim``,
    ``build_csr``, ``matvec``, ``matmat``, ``estimate_nnz``, ``lanczos_ground``): see
    DEVELOPERS.md. ``target`` (None: ``space``) is the space products land in.

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
    if target is not None and target != s:
        from fockmill._between import compile_between

        return compile_between(e, s, target)
    check_terms(e, s)
    if isinstance(s, SymmetricSpace):
        return s._compile(e)
    return _native.NativeOperator(s.native, e.to_native())
