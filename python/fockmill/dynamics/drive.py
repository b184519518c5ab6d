"""Time-dependent Hamiltonians ``H(t) = H0 + Σ_k f_k(t) H_k``: the parts, their real
coefficient functions, and piecewise-linear tables of such functions.

:func:`fockmill.evolve` propagates a :class:`TimeDependent` with a commutator-free
exponential integrator (``fockmill.dynamics.cfqm``); this module only describes the
Hamiltonian and checks it.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr, as_expr
from fockmill.dynamics.krylov import check_hermitian
from fockmill.problem.problem import Problem

__all__ = ["PiecewiseLinear", "TimeDependent", "piecewise_linear"]

#: Most time-dependent parts (each costs one product per Krylov step).
MAX_PARTS = 64


class PiecewiseLinear:
    """A real function of time interpolating a table linearly between its points.

    Made by :func:`piecewise_linear`. Before the first time it keeps the first value,
    after the last time the last value.

    Attributes
    ----------
    breakpoints : numpy.ndarray
        The table's times (strictly increasing), where the slope may change; the
        integrator of :func:`fockmill.evolve` ends a step on each of them.
    values : numpy.ndarray
        The values at those times.
    """

    def __init__(self, times: npt.NDArray[np.float64], values: npt.NDArray[np.float64]) -> None:
        self.breakpoints = times
        self.values = values
        self.breakpoints.flags.writeable = False
        self.values.flags.writeable = False

    def __call__(self, t: float) -> float:
        return float(np.interp(t, self.breakpoints, self.values))

    def __repr__(self) -> str:
        pairs = ", ".join(
            f"({t:g}, {v:g})" for t, v in zip(self.breakpoints, self.values, strict=True)
        )
        return f"piecewise_linear[{pairs}]"


def _finite_array(values: object, name: str) -> npt.NDArray[np.float64]:
    try:
        arr = np.array(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise TypeError(f"{name} must be a sequence of real numbers; got {values!r}") from None
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(f"{name} must be a non-empty 1-D sequence of numbers; got {values!r}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} contains NaN or inf; give finite numbers")
    return arr


def piecewise_linear(times: Sequence[float], values: Sequence[float]) -> PiecewiseLinear:
    """A coefficient function for :class:`TimeDependent` from a table of points.

    Parameters
    ----------
    times : sequence of float
        Strictly increasing times (at least one).
    values : sequence of float
        The function's value at each time; linear in between, constant outside.

    Returns
    -------
    PiecewiseLinear
        Callable ``f(t) -> float`` with ``breakpoints`` (the times).

    Raises
    ------
    ValueError
        Lengths differ, times not strictly increasing, NaN or inf.

    Examples
    --------
    >>> import fockmill as fm
    >>> ramp = fm.piecewise_linear([0.0, 20.0], [2.0, 10.0])
    >>> ramp(5.0), ramp(-1.0), ramp(30.0)
    (4.0, 2.0, 10.0)
    """
    t = _finite_array(times, "times")
    v = _finite_array(values, "values")
    if t.size != v.size:
        raise ValueError(
            f"times and values must have the same length; got {t.size} times and {v.size} values"
        )
    if np.any(np.diff(t) <= 0):
        k = int(np.nonzero(np.diff(t) <= 0)[0][0])
        raise ValueError(
            f"times must be strictly increasing; times[{k}] = {t[k]} >= times[{k + 1}] = "
            f"{t[k + 1]}. For a sudden jump use two close times"
        )
    return PiecewiseLinear(t, v)


def _as_part(part: object, what: str) -> LadderExpr | Problem:
    """An expression (numbers are multiples of the identity) or a prepared problem."""
    if isinstance(part, Problem):
        if not part.is_square:
            raise ValueError(f"{what} is an operator between two spaces; a Hamiltonian is square")
        check_hermitian(part.expr, what)
        return part
    try:
        expr = as_expr(part)
    except TypeError:
        raise TypeError(
            f"{what} must be a LadderExpr (or a number, or a prepared fm.Problem); got "
            f"{type(part).__name__}"
        ) from None
    check_hermitian(expr, what)
    return expr


class TimeDependent:
    """A Hamiltonian ``H(t) = H0 + Σ_k f_k(t) H_k`` with real functions ``f_k``.

    Give it to :func:`fockmill.evolve` in place of ``H``.

    Parameters
    ----------
    H0 : LadderExpr, number or Problem
        The constant part (0 for none).
    parts : sequence of (LadderExpr, callable) pairs
        Each ``H_k`` (a Hermitian expression, a number meaning a multiple of the
        identity, or a prepared :class:`~fockmill.Problem`, whose compiled operator is
        then reused) with its coefficient ``f_k``: any callable ``t -> real number``,
        such as :func:`piecewise_linear`. A callable with a ``breakpoints`` attribute (a
        sequence of times) has the integrator end a step on each of them, where it may
        have a kink.

    Attributes
    ----------
    H0 : LadderExpr or Problem
    parts : tuple of (LadderExpr or Problem, callable)

    Raises
    ------
    TypeError
        A part that is not an expression, a coefficient that is not callable, a pair
        that is not a pair.
    NotHermitianError
        A part is not Hermitian (named: ``H0`` or ``part k``).

    Notes
    -----
    Every part must conserve the space's sector (and on a symmetry sector be invariant
    under its group); :func:`fockmill.evolve` checks this and compiles each part once.
    The coefficients are checked when evaluated: a value that is not a finite real
    number raises ``ValueError`` naming the part and the time.

    Examples
    --------
    >>> import fockmill as fm
    >>> hop = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    >>> H = fm.TimeDependent(-hop, [(fm.number(0), fm.piecewise_linear([0, 1], [0, 2]))])
    >>> H.coefficients(0.5), H.breakpoints()
    ([1.0], [0.0, 1.0])
    >>> space = fm.FockSpace(modes=2, cutoff=1, total=1)
    >>> ev = fm.evolve(H, space, [1.0, 0.0], [0.0, 2.0], observables={"n0": fm.number(0)})
    >>> ev.steps > 0, ev.error_estimate < 1e-10
    (True, True)
    """

    def __init__(self, H0: Any, parts: Sequence[tuple[Any, Callable[[float], float]]]) -> None:
        self.H0: LadderExpr | Problem = _as_part(H0, "H0 (the constant part)")
        if isinstance(parts, str | bytes) or not isinstance(parts, Sequence):
            raise TypeError(
                "parts must be a list of (H_k, f_k) pairs, e.g. [(fm.number(0), "
                f"lambda t: t)]; got {type(parts).__name__}"
            )
        if len(parts) > MAX_PARTS:
            raise ValueError(f"at most {MAX_PARTS} time-dependent parts; got {len(parts)}")
        checked: list[tuple[LadderExpr | Problem, Callable[[float], float]]] = []
        for k, pair in enumerate(parts, start=1):
            if not isinstance(pair, tuple | list) or len(pair) != 2:
                raise TypeError(
                    f"part {k} must be a pair (H_{k}, f_{k}) of an expression and a function "
                    f"of t; got {pair!r}"
                )
            expr, f = pair
            what = f"part {k} (H_{k}) of the time-dependent Hamiltonian"
            term = _as_part(expr, what)
            if not callable(f):
                raise TypeError(
                    f"the coefficient f_{k} of part {k} must be a function of t (a callable "
                    f"such as lambda t: 2 * t, or fm.piecewise_linear(times, values)); got "
                    f"{type(f).__name__}. For a constant coefficient put c * H_{k} into H0"
                )
            checked.append((term, f))
        self.parts: tuple[tuple[LadderExpr | Problem, Callable[[float], float]], ...] = tuple(
            checked
        )

    def breakpoints(self) -> list[float]:
        """Sorted times where some coefficient announces a kink (``f.breakpoints``)."""
        out: set[float] = set()
        for k, (_, f) in enumerate(self.parts, start=1):
            points = getattr(f, "breakpoints", None)
            if points is None:
                continue
            try:
                arr = np.asarray(points, dtype=np.float64).reshape(-1)
            except (TypeError, ValueError):
                raise TypeError(
                    f"the coefficient f_{k} of part {k} has a breakpoints attribute that is "
                    f"not a sequence of times: {points!r}"
                ) from None
            out.update(float(x) for x in arr if math.isfinite(x))
        return sorted(out)

    def coefficients(self, t: float) -> list[float]:
        """``[f_1(t), f_2(t), ...]``, each checked to be a finite real number.

        Raises
        ------
        ValueError
            A coefficient returned NaN, inf, a complex or a non-number (naming the part).
        """
        out: list[float] = []
        for k, (_, f) in enumerate(self.parts, start=1):
            value = f(t)
            if isinstance(value, np.ndarray) and value.shape == ():
                value = value[()]
            if isinstance(value, bool) or not isinstance(value, numbers.Real):
                raise ValueError(
                    f"the coefficient f_{k} of part {k} returned {value!r} at t = {t!r}; it "
                    "must return a real number (a float). Take the real part, or split a "
                    "complex coefficient into two Hermitian parts"
                )
            x = float(value)
            if not math.isfinite(x):
                raise ValueError(
                    f"the coefficient f_{k} of part {k} returned {x} at t = {t!r}; it must "
                    "return a finite real number"
                )
            out.append(x)
        return out

    def __repr__(self) -> str:
        return f"TimeDependent(H0 and {len(self.parts)} time-dependent part(s))"
