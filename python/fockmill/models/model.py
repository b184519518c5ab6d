"""A parametrised Hamiltonian: parameter-independent pieces on one Fock space.

``H(p) = constant + Σ_k p_k · pieces[k]``. Sweeps build each piece once and only
recombine coefficients per parameter point.

An open model also has jumps: rate parameter ``r`` -> the jump operators it sets, each
with a weight, so that channel ``(L, w)`` has rate ``w · r`` in the master equation
``dρ/dt = −i[H, ρ] + Σ_k γ_k (L_k ρ L_k† − ½{L_k†L_k, ρ})``. The Liouvillian is linear
in the rates as the Hamiltonian is in its parameters: rates are parameters like any
other (defaults, sweeps, overrides), they just multiply no piece of ``H``.
"""

from __future__ import annotations

import hashlib
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

from fockmill.algebra.expressions import LadderExpr
from fockmill.spaces.fock import FockSpace

__all__ = ["Model", "jump_channels"]


def jump_channels(
    jumps: Mapping[str, tuple[tuple[LadderExpr, float], ...]], values: Mapping[str, float]
) -> list[tuple[str, LadderExpr, float]]:
    """The channels of ``jumps`` (see :attr:`Model.jumps`) at parameter ``values``:
    ``(label, L, rate)`` with ``rate = weight · values[name]``, labelled ``"NAME"`` (one
    channel) or ``"NAME[k]"``.

    Raises
    ------
    ValueError
        A rate parameter is negative or not finite at these values.
    """
    out: list[tuple[str, LadderExpr, float]] = []
    for name, channels in jumps.items():
        value = float(values[name])
        if not (value >= 0 and value < float("inf")):
            raise ValueError(
                f"rate {name} = {value!r}: a rate must be a finite number >= 0 (a "
                "probability per unit time)"
            )
        for k, (operator, weight) in enumerate(channels):
            label = name if len(channels) == 1 else f"{name}[{k}]"
            out.append((label, operator, weight * value))
    return out


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
    jumps : Mapping[str, tuple of (LadderExpr, float)]
        Rate parameter -> its jump operators, each with a weight ``w >= 0``: the channel's
        rate is ``w`` times the parameter's value (empty for a closed system). A rate
        parameter has a default in ``parameters`` and multiplies no piece of ``H``.
    """

    name: str
    space: FockSpace
    pieces: Mapping[str, LadderExpr]
    parameters: Mapping[str, float]
    constant: LadderExpr = field(default_factory=LadderExpr)
    mode_labels: tuple[str, ...] = ()
    renamed: Mapping[str, str] = field(default_factory=dict)
    jumps: Mapping[str, tuple[tuple[LadderExpr, float], ...]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        missing = (set(self.pieces) | set(self.jumps)) - set(self.parameters)
        if missing:
            raise ValueError(f"parameters without a default value: {sorted(missing)}")
        extra = set(self.parameters) - set(self.pieces) - set(self.jumps)
        if extra:
            raise ValueError(f"parameters that multiply no piece: {sorted(extra)}")
        both = sorted(set(self.pieces) & set(self.jumps))
        if both:
            raise ValueError(
                f"{both} both multiply Hamiltonian pieces and set jump rates; give the rates "
                "their own names"
            )
        for name, channels in self.jumps.items():
            if not channels:
                raise ValueError(f"rate parameter {name!r} sets no jump; drop it")
            for operator, weight in channels:
                if not isinstance(operator, LadderExpr) or operator.is_zero():
                    raise ValueError(f"rate parameter {name!r}: a jump operator is zero")
                if not (weight >= 0 and weight < float("inf")):
                    raise ValueError(
                        f"rate parameter {name!r}: weight {weight!r} is not a finite "
                        "number >= 0 (rates are never negative)"
                    )

    @property
    def is_open(self) -> bool:
        """Whether the model has jumps (a master equation rather than a Hamiltonian)."""
        return bool(self.jumps)

    def channels(self, **overrides: float) -> list[tuple[str, LadderExpr, float]]:
        """The jump channels at the given parameter values: ``(label, L, rate)`` with
        ``rate = weight · value`` of the rate parameter, labels ``"NAME"`` (one channel)
        or ``"NAME[k]"``.

        Raises
        ------
        ValueError
            A rate parameter is negative or not finite at these values.
        KeyError
            For a parameter the model does not have.
        """
        return jump_channels(self.jumps, self.values(**overrides))

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
        if self.jumps:  # closed models keep their fingerprints
            text += "|jumps|" + "|".join(
                f"{k}=" + ";".join(f"{w!r}*{op}" for op, w in self.jumps[k])
                for k in sorted(self.jumps)
            )
        return hashlib.sha256(text.encode()).hexdigest()[:16]
