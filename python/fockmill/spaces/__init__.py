"""Truncated Fock spaces and conserved-charge sectors, mode permutations and their
symmetry sectors.
"""

from fockmill.spaces.checks import check_space, check_terms
from fockmill.spaces.fock import Charge, FockSpace
from fockmill.spaces.sectors import SectorChoice
from fockmill.spaces.symmetry import (
    ModePermutation,
    SymmetricSpace,
    ring_reflection,
    ring_translation,
    torus_translations,
)

__all__ = [
    "Charge",
    "FockSpace",
    "ModePermutation",
    "SectorChoice",
    "SymmetricSpace",
    "check_space",
    "check_terms",
    "ring_reflection",
    "ring_translation",
    "torus_translations",
]
