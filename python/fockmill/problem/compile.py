"""Turn a user's expression and space into the compiled (native) operator, checking types.

:func:`compile_operator` is the one place where an expression meets a space type; the
public entry point is :func:`fockmill.prepare` (``problem.py``), which calls it once.
"""

from __future__ import annotations

from typing import Any

import fockmill._native as _native
from fockmill.algebra.expressions import as_expr
from fockmill.spaces.checks import check_space, check_terms
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["compile_operator"]


def compile_operator(expr: object, space: object, target: object = None) -> Any:
    """Validate ``expr`` against ``space`` and return the compiled native operator.

    The result is a ``fockmill._native.NativeOperator`` of the kind the space asks for
    (on a space, on a sector, between two spaces), answering one protocol: see
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
        from fockmill.problem.between import compile_between

        return compile_between(e, s, target)
    check_terms(e, s)
    if isinstance(s, SymmetricSpace):
        return s._compile(e)
    terms, blocks = e.to_native_parts()
    return _native.NativeOperator.on_space(s.native, terms, blocks=blocks)
