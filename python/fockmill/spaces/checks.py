"""Checks where an expression meets a space: the space's type and the terms' modes, powers and
coefficients."""

from __future__ import annotations

import cmath

import numpy as np

from fockmill.algebra.expressions import LadderExpr, format_monomial, key_of_row
from fockmill.exceptions import ModeIndexError, SpaceError
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["MAX_POWER", "check_not_empty", "check_space", "check_terms"]

#: Largest creation or annihilation power of one mode in a term (the largest cutoff).
MAX_POWER = 65_535


def check_space(space: object) -> FockSpace:
    """The space (a FockSpace or a SymmetricSpace sector), or a clear error."""
    if not isinstance(space, FockSpace | SymmetricSpace):
        raise TypeError(
            f"expected a fm.FockSpace; got {type(space).__name__} (a fm.SymmetricSpace "
            "sector is accepted too)"
        )
    return space  # type: ignore[return-value]


def check_not_empty(space: object, what: str) -> None:
    """Refuse a space without states (an empty symmetry sector, say): the one message
    every entry point gives for it."""
    if getattr(space, "dim", 1) == 0:
        raise SpaceError(
            f"{what} needs a space with states, but {space!r} is empty (dim 0: no basis "
            "state has these quantum numbers); choose another sector label, total or "
            "cutoffs"
        )


def check_terms(e: LadderExpr, s: FockSpace) -> None:
    """Refuse terms on missing modes, with absurd powers or non-finite coefficients.

    Raises
    ------
    ModeIndexError
        A term acts on a mode beyond the space.
    ValueError
        A power above :data:`MAX_POWER` or a NaN/inf coefficient.
    """
    native_terms, blocks = e.to_native_parts()
    for re, im, factors in native_terms:
        key = tuple(factors)
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
        coefficient = complex(re, im)
        if not cmath.isfinite(coefficient):
            raise ValueError(
                f"term {format_monomial(key)} has the coefficient {coefficient}, which is not "
                "finite; check the parameters for NaN, inf or overflow"
            )
    # Array-backed terms: finite coefficients and small powers by construction.
    for creators, modes, _re, _im in blocks:
        if modes.size and int(modes.max()) >= s.modes:
            row = modes[int(np.argmax(modes.max(axis=1)))]
            mode = int(row.max())
            key = key_of_row(row, creators)
            raise ModeIndexError(
                f"term {format_monomial(key)} acts on mode {mode}, but the space has only "
                f"{s.modes} modes (valid indices 0..{s.modes - 1}); use a space with more "
                "modes or give a coefficient array with one index per mode of the space"
            )
