"""Exceptions and warnings raised by fockmill.

Every class subclasses the builtin that callers already catch, so ``except ValueError``
keeps working; the specific classes let callers tell the cases apart.
"""

from __future__ import annotations

__all__ = [
    "ChargeError",
    "ConvergenceError",
    "CutoffWarning",
    "ModeIndexError",
    "NotHermitianError",
    "SizeLimitError",
    "SpaceError",
    "SymmetryError",
]


class SpaceError(ValueError):
    """A Fock-space specification is inconsistent, or its sector holds no state."""


class ChargeError(ValueError):
    """A term changes the quantity the space conserves (it would leave the sector)."""


class ModeIndexError(ValueError, IndexError):
    """A term acts on a mode the space does not have."""


class NotHermitianError(ValueError):
    """A Hermitian operator was required (an energy, a ground state) but not given."""


class SymmetryError(ValueError):
    """A symmetry is invalid for the space, its labels are no one-dimensional
    representation, or an operator to be used on a sector does not commute with it."""


class SizeLimitError(MemoryError):
    """A request would exceed the available memory or the index types; refused up front."""


class ConvergenceError(RuntimeError):
    """An iterative eigensolver did not reach its tolerance."""


class CutoffWarning(UserWarning):
    """A state has weight on the highest kept level of a mode whose cutoff truncates."""


# Errors that belong to the file formats live beside them; re-exported here so that
# every exception fockmill raises can be imported from one place.
from fockmill._modelfile import ModelFileError  # noqa: E402
from fockmill._store import StoreError  # noqa: E402

__all__ += ["ModelFileError", "StoreError"]
