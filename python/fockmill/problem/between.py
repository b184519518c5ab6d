"""Operators that carry one space's states into another: ``a_0`` from the N-quanta
sector to N − 1, ``a_0† a_1†`` from N to N + 2, anything from a sector into the full
truncated space, and an operator with a definite character (a momentum component such as
``Σ_j e^{2πikj/L} n_j``) from one symmetry sector into another. Matrices have shape
``(target.dim, space.dim)``.

``compile_operator`` (in ``_prepare``) calls :func:`compile_between` when a problem's
target differs from its space; ``fm.build_matrix`` / ``fm.build_operator`` /
``fm.prepare`` with ``target=`` reach it that way."""

from __future__ import annotations

import fockmill._native as _native
from fockmill.exceptions import SpaceError, SymmetryError
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["compile_between", "same_space"]


def same_space(space: object, target: object) -> bool:
    """Whether ``target`` is None or the same space as ``space`` (square case)."""
    return target is None or target is space or target == space


def _check_fock(space: object, name: str) -> FockSpace:
    if not isinstance(space, FockSpace):
        raise TypeError(
            f"{name} must be a fm.FockSpace for an operator between spaces; got "
            f"{type(space).__name__}"
        )
    return space


def compile_between(
    expr: object, space: object, target: object, *, project: bool = False
) -> _native.NativeOperator:
    """Validate ``expr`` as an operator from ``space`` into ``target``; compile it.

    Parameters
    ----------
    expr : LadderExpr
        The operator (numbers mean multiples of the identity).
    space, target : FockSpace or SymmetricSpace
        Source and target; same number of modes and the same cutoffs. Two sectors need
        the same generators, an ``expr`` with a definite character under each
        (``g A g⁻¹ = χ_A(g) A``) and target labels equal to the source's shifted by
        ``expr``'s (:meth:`SymmetricSpace.operator_labels`).
    project : bool
        Drop the part of the image outside ``target`` instead of refusing the term
        (used for adjoints of checked operators).

    Raises
    ------
    ChargeError
        A term carries states of ``space`` outside ``target``; the message names the
        term, its charge and both sectors.
    SpaceError
        The spaces differ in modes or cutoffs (or, both being sectors, in weights).
    SymmetryError
        Between sectors: other generators, no definite character, or a target whose
        labels are not the source's shifted by ``expr``'s (the message names them).
    ModeIndexError, ValueError, TypeError
        Bad mode indices, powers, coefficients or argument types.
    """
    from fockmill.algebra.expressions import as_expr
    from fockmill.spaces.checks import check_terms

    e = as_expr(expr)
    if isinstance(space, SymmetricSpace) and isinstance(target, SymmetricSpace):
        if space.modes != target.modes:
            raise SpaceError(
                f"space has {space.modes} modes and target has {target.modes}; an operator "
                "between sectors needs the same modes"
            )
        check_terms(e, space.base)
        return space._compile_into(e, target, project=project)
    if isinstance(space, SymmetricSpace) or isinstance(target, SymmetricSpace):
        which = "space" if isinstance(space, SymmetricSpace) else "target"
        raise SymmetryError(
            f"{which} is a fm.SymmetricSpace but the other is not; an operator between "
            "spaces goes from a sector to a sector (give both as sectors of the same "
            "generators) or between plain spaces (use sector.expand / sector.project to "
            "move vectors between a sector and its base space)"
        )
    s = _check_fock(space, "space")
    t = _check_fock(target, "target")
    if s.modes != t.modes:
        raise SpaceError(
            f"space has {s.modes} modes and target has {t.modes}; an operator between spaces "
            "needs the same modes (change only the total)"
        )
    check_terms(e, s)
    terms, blocks = e.to_native_parts()
    return _native.NativeOperator.between(s.native, t.native, terms, blocks=blocks, project=project)
