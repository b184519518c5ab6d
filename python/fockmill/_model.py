"""A parametrised Hamiltonian: parameter-independent pieces on one Fock space.

``H(p) = constant + Σ_k p_k · pieces[k]``. Sweeps build each piece once and only
recombine coefficients per parameter point.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from dataclasses import dataclass, field

from fockmill._expr import LadderExpr
from fockmill._space import FockSpace

__all__ = ["Model"]


@dataclass(frozen=True)
class Model:
    """A Hamiltonian linear in named parameters, on a fixed Fock space.

    Attributes
    ----------
    name : str
        Short identifier (e.g. ``"bose-hubbard"``).
    space : FockSpace
        The basis (cutoffs, conserved total or parity sector).
    pieces : Mapping[str, LadderExpr]
        Parameter name -> the expression that parameter multiplies.
    parameters : Mapping[str, float]
        Default value of every parameter in ``pieces``.
    constant : LadderExpr
        Parameter-independent part (zero by default).
    mode_labels : tuple of str
        Human-readable label of each mode (``"cavity 0"``, ``"emitter 0"``, ...).
    """

    name: str
    space: FockSpace
    pieces: Mapping[str, LadderExpr]
    parameters: Mapping[str, float]
    constant: LadderExpr = field(default_factory=LadderExpr)
    mode_labels: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        missing = set(self.pieces) - set(self.parameters)
        if missing:
            raise ValueError(f"parameters without a default value: {sorted(missing)}")
        extra = set(self.parameters) - set(self.pieces)
        if extra:
            raise ValueError(f"parameters that multiply no piece: {sorted(extra)}")

    def values(self, **overrides: float) -> dict[str, float]:
        """Parameter values: the defaults with ``overrides`` applied.

        Raises
        ------
        KeyError
            For a parameter the model does not have.
        """
        unknown = set(overrides) - set(self.parameters)
        if unknown:
            raise KeyError(
                f"unknown parameter(s) {sorted(unknown)} for model {self.name!r}; "
                f"known: {sorted(self.parameters)}"
            )
        out = dict(self.parameters)
        out.update({k: float(v) for k, v in overrides.items()})
        return out

    def hamiltonian(self, **overrides: float) -> LadderExpr:
        """``constant + Σ_k p_k · pieces[k]`` at the given parameter values."""
        values = self.values(**overrides)
        h = self.constant
        for name, piece in self.pieces.items():
            if values[name] != 0.0:
                h = h + values[name] * piece
        return h

    def fingerprint(self) -> str:
        """A stable hash of the space and the pieces (not of the parameter values)."""
        text = repr(self.space) + "|" + str(self.constant) + "|"
        text += "|".join(f"{k}={self.pieces[k]}" for k in sorted(self.pieces))
        return hashlib.sha256(text.encode()).hexdigest()[:16]
