"""Jump operators of a Lindblad master equation, each with its explicit rate.

The master equation (ħ = 1) is

    dρ/dt = −i[H, ρ] + Σ_k γ_k (L_k ρ L_k† − ½{L_k† L_k, ρ})

with ``L_k`` the jump operator and ``γ_k >= 0`` its rate, kept apart (never folded
into the operator).

Truncation convention of the dissipator
---------------------------------------
``H`` is the normal-ordered expression restricted to the truncated space (``P H P``).
In the dissipator, ``L_k`` is likewise the operator's matrix on the truncated space,
``P L_k P``, but ``L_k† L_k`` is the *product of the truncated matrices*
``(P L_k† P)(P L_k P)``, not the normal-ordered ``L_k† L_k`` restricted to the space.
With that choice ``Tr(L ρ L†) = Tr(L† L ρ)`` holds exactly on the truncated space, so the
truncated master equation preserves the trace. For a pump ``L = a†`` the normal-ordered
``a a† = n + 1`` would give ``n + 1`` on the top level while the truncated ``a†`` moves
nothing out of it: the trace would leak. The product reads 0 there instead. For loss
``L = a`` and dephasing ``L = n`` both readings agree.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Any

from fockmill.algebra.expressions import LadderExpr, as_expr, lowering, number, raising
from fockmill.exceptions import ModeIndexError

__all__ = ["Jump", "check_jumps", "dephasing", "jump", "loss", "pump"]


@dataclass(frozen=True)
class Jump:
    """One dissipation channel: a jump operator and its rate.

    Attributes
    ----------
    operator : LadderExpr
        ``L_k`` (any expression; its matrix is taken on the truncated space).
    rate : float
        ``γ_k >= 0`` (same units as the Hamiltonian, ħ = 1).
    label : str
        A short description for messages and tables (``"loss(0)"``, ``"jump"``).
    """

    operator: LadderExpr
    rate: float
    label: str = "jump"

    def __post_init__(self) -> None:
        object.__setattr__(self, "operator", as_expr(self.operator))
        object.__setattr__(self, "rate", _check_rate(self.rate, self.label))
        if self.operator.is_zero():
            raise ValueError(
                f"{self.label}: the jump operator is zero; drop the jump or give a nonzero operator"
            )

    def __repr__(self) -> str:
        return f"Jump({self.label}: L = {self.operator}, rate = {self.rate:g})"


def _check_rate(rate: object, label: str) -> float:
    if isinstance(rate, bool) or not isinstance(rate, numbers.Real):
        raise TypeError(
            f"{label}: the rate must be a real number >= 0 (e.g. 0.1); got {rate!r} of type "
            f"{type(rate).__name__}"
        )
    value = float(rate)
    if not math.isfinite(value):
        raise ValueError(f"{label}: the rate must be finite; got {value}")
    if value < 0:
        raise ValueError(
            f"{label}: the rate must be >= 0 (a rate is a probability per unit time); got "
            f"{value}. Put any sign or phase into the operator, not the rate"
        )
    return value


def jump(operator: Any, rate: float) -> Jump:
    """A jump with operator ``L`` (any expression) and rate ``γ >= 0``.

    Parameters
    ----------
    operator : LadderExpr
        The jump operator ``L``.
    rate : float
        The rate ``γ``: the dissipator is ``γ (L ρ L† − ½{L†L, ρ})``.

    Returns
    -------
    Jump

    Examples
    --------
    >>> import fockmill as fm
    >>> fm.jump(fm.lowering(0) - fm.lowering(1), 0.2)   # loss of an antisymmetric mode
    Jump(jump: L = 1.0·a0 - 1.0·a1, rate = 0.2)
    """
    return Jump(as_expr(operator), rate, "jump")


def _mode(i: object) -> int:
    return lowering(i).modes()[0]  # type: ignore[arg-type]


def loss(i: int, rate: float) -> Jump:
    """Loss of quanta from mode ``i``: ``L = a_i`` with rate ``γ``.

    Examples
    --------
    >>> import fockmill as fm
    >>> fm.loss(0, 1.0)
    Jump(loss(0): L = 1.0·a0, rate = 1)
    """
    m = _mode(i)
    return Jump(lowering(m), rate, f"loss({m})")


def pump(i: int, rate: float) -> Jump:
    """Incoherent pumping of mode ``i``: ``L = a_i†`` with rate ``γ``."""
    m = _mode(i)
    return Jump(raising(m), rate, f"pump({m})")


def dephasing(i: int, rate: float) -> Jump:
    """Pure dephasing of mode ``i``: ``L = n_i`` with rate ``γ``."""
    m = _mode(i)
    return Jump(number(m), rate, f"dephasing({m})")


def check_jumps(jumps: Any, modes: int) -> list[Jump]:
    """The jumps as a list, each acting only on modes ``0 .. modes − 1``.

    Raises
    ------
    TypeError
        ``jumps`` is not a sequence of :class:`Jump` (from ``fm.jump``, ``fm.loss``, ...).
    ModeIndexError
        A jump acts on a mode the space does not have.
    """
    if isinstance(jumps, Jump):
        jumps = [jumps]
    if jumps is None or isinstance(jumps, (str, bytes)) or not hasattr(jumps, "__iter__"):
        raise TypeError(
            "jumps must be a list of jumps, e.g. [fm.loss(0, 0.1), fm.pump(1, 0.02)]; got "
            f"{jumps!r}"
        )
    out: list[Jump] = []
    for k, item in enumerate(jumps):
        if not isinstance(item, Jump):
            raise TypeError(
                f"jumps[{k}] is {item!r} of type {type(item).__name__}; make each with "
                "fm.jump(operator, rate), fm.loss(i, rate), fm.pump(i, rate) or "
                "fm.dephasing(i, rate)"
            )
        top = max(item.operator.modes(), default=-1)
        if top >= modes:
            raise ModeIndexError(
                f"jumps[{k}] ({item.label}, L = {item.operator}) acts on mode {top} but the "
                f"space has {modes} modes (0 .. {modes - 1}); fix the mode index or add modes"
            )
        out.append(item)
    return out
