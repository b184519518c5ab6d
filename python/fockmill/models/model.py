"""A parametrised Hamiltonian: parameter-independent pieces on one Fock space.

``H(p) = constant + Σ_k p_k · pieces[k]``. Sweeps build each piece once and only
recombine coefficients per parameter point.
"""

from __future__ import annotations

import hashlib
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

from fockmill.algebra.expressions import LadderExpr
from fockmill.spaces.fock import FockSpace

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
    renamed : Mapping[str, str]
        Deprecated parameter name -> current name. :meth:`values`,
        :meth:`hamiltonian` and :meth:`canonical_names` accept the old names with a
        ``DeprecationWarning``.
    """

    name: str
    space: FockSpace
    pieces: Mapping[str, LadderExpr]
    parameters: Mapping[str, float]
    constant: LadderExpr = field(default_factory=LadderExpr)
    mode_labels: tuple[str, ...] = ()
    renamed: Mapping[str, str] = field(default_factory=dict)

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
        overrides = self.canonical_names(overrides)
        unknown = set(overrides) - set(self.parameters)
        if unknown:
            raise KeyError(
                f"unknown parameter(s) {sorted(unknown)} for model {self.name!r}; "
                f"known: {sorted(self.parameters)}"
            )
        out = dict(self.parameters)
        out.update({k: float(v) for k, v in overrides.items()})
        return out

    def canonical_names(self, values: Mapping[str, float]) -> dict[str, float]:
        """``values`` with deprecated parameter names replaced by their current names.

        Warns
        -----
        DeprecationWarning
            For each deprecated name used.

        Raises
        ------
        KeyError
            When a deprecated name and its current name are both given.
        """
        out: dict[str, float] = {}
        for name, value in values.items():
            current = self.renamed.get(name)
            if current is not None and current not in self.parameters:
                current = None
            if current is None:
                out[name] = value
                continue
            warnings.warn(
                f"parameter {name!r} of model {self.name!r} is now called {current!r}; "
                "the old name will be removed in the next release",
                DeprecationWarning,
                stacklevel=3,
            )
            if current in values:
                raise KeyError(f"both {name!r} and its new name {current!r} were given")
            out[current] = value
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
