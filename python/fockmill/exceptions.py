"""Exceptions and warnings raised by fockmill.

Every class subclasses the builtin that callers already catch, so ``except ValueError``
keeps working; the specific classes let callers tell the cases apart. Every exception
class fockmill raises is defined here, and this module imports nothing from the
package (the file-format modules import their errors from here).
"""

from __future__ import annotations

__all__ = [
    "AccuracyWarning",
    "ChargeError",
    "CheckpointError",
    "ConvergenceError",
    "CutoffWarning",
    "ModeIndexError",
    "ModelFileError",
    "NotHermitianError",
    "NotUniqueError",
    "PoolStartError",
    "SizeLimitError",
    "SpaceError",
    "StateFileError",
    "StoreError",
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


class NotUniqueError(ValueError):
    """An open system has more than one stationary state (the Liouvillian has several
    zero modes), so none can be returned as *the* stationary state."""


class CutoffWarning(UserWarning):
    """A state has weight on the highest kept level of a mode whose cutoff truncates."""


class AccuracyWarning(UserWarning):
    """A requested tolerance lies below what double-precision round-off allows; the
    result is as accurate as round-off permits, and its error estimate says how much."""


class ModelFileError(ValueError):
    """A model file is not valid TOML or does not follow the schema.

    Attributes
    ----------
    source : str
        The file path (or ``"<string>"`` for text).
    key : str or None
        Dotted key path of the offending entry (``"sweep.U.num"``), None for the
        whole file.
    problem : str
        What was expected and what was found.
    """

    def __init__(self, source: str, key: str | None, problem: str) -> None:
        self.source = source
        self.key = key
        self.problem = problem
        where = f"{source}: {key}: " if key else f"{source}: "
        super().__init__(where + problem)

    def __reduce__(self) -> tuple[type[ModelFileError], tuple[str, str | None, str]]:
        return (type(self), (self.source, self.key, self.problem))


class StateFileError(ValueError):
    """A state file is not a fockmill state file, is damaged, or does not fit the basis."""


class CheckpointError(ValueError):
    """A checkpoint file belongs to another problem or other settings, or is damaged."""


class StoreError(ValueError):
    """A results file is missing, foreign, damaged, or belongs to another sweep."""


class PoolStartError(RuntimeError):
    """The worker processes of a sweep's process pool could not start."""
