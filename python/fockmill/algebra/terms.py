"""The term syntax of model files: a user's own ladder-operator terms as short strings.

A term is an optional coefficient followed by factors, read left to right as an
operator product (then normal ordered symbolically, so ``lower(0) raise(0)`` is
``n_0 + 1``)::

    term        := [coefficient] factor*
    coefficient := real number ("0.5", "-2", "1e-3") or a complex one in
                   parentheses ("(0.3-0.1j)"); default 1; a lone sign means ±1
    factor      := word "(" mode ")" ["^" power]     (optionally separated by "*")
    word        := "raise" (a†) | "lower" (a) | "count" (n = a†a)
    mode        := a mode index ("0"), a mode label of the model ("cavity 1"),
                   or "@" in a per-mode template (the mode it is applied to)
    power       := a positive integer

Examples: ``"raise(0)^2 lower(1)"``, ``"-0.5 count(site 2)^2"``,
``"(0+1j) raise(cavity 0) lower(cavity 1)"``, ``"count(@)"``.

Errors carry the 1-based column of the offending character.
"""

from __future__ import annotations

import cmath
import re
from collections.abc import Sequence
from dataclasses import dataclass

from fockmill.algebra.expressions import LadderExpr, lowering, number, raising

__all__ = ["WORDS", "TermSyntaxError", "parse_term"]

WORDS: dict[str, str] = {"raise": "a†", "lower": "a", "count": "n = a†a"}
"""Factor words and the operator each stands for."""

MAX_POWER = 64

_REAL = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_WORD = re.compile(r"[A-Za-z_]+")
_INTEGER = re.compile(r"\d+")


@dataclass
class TermSyntaxError(Exception):
    """A term string does not follow the syntax (``column`` is 1-based)."""

    column: int
    problem: str

    def __str__(self) -> str:
        return f"column {self.column}: {self.problem}"


def _resolve_mode(
    text: str, column: int, labels: Sequence[str], modes: int, here: int | None
) -> int:
    name = text.strip()
    if name == "@":
        if here is None:
            raise TermSyntaxError(
                column,
                "'@' stands for the mode a per_mode template is applied to; "
                "use it only in per_mode, or write a mode index or label here",
            )
        return here
    if _INTEGER.fullmatch(name):
        index = int(name)
        if index >= modes:
            raise TermSyntaxError(
                column, f"mode {index} does not exist; the model has modes 0..{modes - 1}"
            )
        return index
    if name in labels:
        return labels.index(name)
    shown = ", ".join(repr(label) for label in labels[:4])
    more = ", ..." if len(labels) > 4 else ""
    raise TermSyntaxError(
        column,
        f"{name!r} is neither a mode index (0..{modes - 1}) nor a mode label ({shown}{more})",
    )


def parse_term(text: str, labels: Sequence[str], modes: int, here: int | None = None) -> LadderExpr:
    """Turn one term string into an expression.

    Parameters
    ----------
    text : str
        The term (see the module docstring).
    labels : sequence of str
        Mode labels of the model (``labels[i]`` names mode ``i``).
    modes : int
        Number of modes.
    here : int, optional
        The mode ``@`` stands for (per-mode templates only).

    Returns
    -------
    LadderExpr

    Raises
    ------
    TermSyntaxError
        With the column and what was expected.
    """
    position = 0
    length = len(text)

    def skip_blanks() -> None:
        nonlocal position
        while position < length and text[position] in " \t*":
            position += 1

    skip_blanks()
    if position >= length:
        raise TermSyntaxError(1, 'empty term; expected e.g. "0.5 raise(0) lower(1)"')
    coefficient: complex = 1.0
    if text[position] == "(":
        close = text.find(")", position)
        if close < 0:
            raise TermSyntaxError(position + 1, "'(' of a complex coefficient is never closed")
        inner = text[position + 1 : close].replace(" ", "")
        try:
            coefficient = complex(inner)
        except ValueError:
            raise TermSyntaxError(
                position + 2, f"expected a complex number such as (0.3-0.1j); got {inner!r}"
            ) from None
        position = close + 1
    else:
        match = _REAL.match(text, position)
        if match:
            coefficient = float(match.group())
            position = match.end()
        elif text[position] in "+-":
            coefficient = -1.0 if text[position] == "-" else 1.0
            position += 1
    if not cmath.isfinite(coefficient):
        raise TermSyntaxError(1, f"the coefficient {coefficient} is not finite")
    expr = LadderExpr.scalar(coefficient)
    factors = 0
    while True:
        skip_blanks()
        if position >= length:
            break
        start = position
        match = _WORD.match(text, position)
        if not match or match.group() not in WORDS:
            found = match.group() if match else text[position]
            raise TermSyntaxError(
                start + 1,
                f"expected raise(...), lower(...) or count(...); got {found!r}",
            )
        word = match.group()
        position = match.end()
        if position >= length or text[position] != "(":
            raise TermSyntaxError(position + 1, f"expected '(' and a mode after {word!r}")
        close = text.find(")", position)
        if close < 0:
            raise TermSyntaxError(position + 1, f"'(' after {word!r} is never closed")
        mode = _resolve_mode(text[position + 1 : close], position + 2, labels, modes, here)
        position = close + 1
        power = 1
        if position < length and text[position] == "^":
            match = _INTEGER.match(text, position + 1)
            if not match:
                raise TermSyntaxError(position + 2, "expected a positive integer power after '^'")
            power = int(match.group())
            if not 1 <= power <= MAX_POWER:
                raise TermSyntaxError(
                    position + 2, f"expected a power from 1 to {MAX_POWER}; got {power}"
                )
            position = match.end()
        factor = {"raise": raising, "lower": lowering, "count": number}[word](mode)
        expr = expr * factor**power
        factors += 1
    return expr
