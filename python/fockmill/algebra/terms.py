"""Term strings: ladder-operator expressions written as text, in model files and in
Python (:func:`parse_terms`).

One vocabulary: the factor words are the names of the Python functions
(``raising``, ``lowering``, ``number``), and the printed form of an expression
(``str(expr)``, e.g. ``-1.0·a1† a0 + 0.5·a0†^2 a0^2``) reads back as the same
expression. A term is an optional coefficient followed by factors, read left to right
as an operator product (then normal ordered symbolically, so
``lowering(0) raising(0)`` is ``n_0 + 1``)::

    terms       := term (("+" | "-") term)*            (parse_terms only)
    term        := [coefficient] ["·"] factor*
    coefficient := real number ("0.5", "-2", "1e-3", "2j") or a complex one in
                   parentheses ("(0.3-0.1j)"); default 1; a lone sign means ±1
    factor      := word "(" mode ")" ["^" power]      (optionally separated by "*")
                 | "a" index ["†"] ["^" power]        (the printed form)
                 | "1"                                (the identity)
    word        := "raising" (a†) | "lowering" (a) | "number" (n = a†a);
                   the older spellings "raise", "lower", "count" are still read
    mode        := a mode index ("0"), a mode label of the model ("cavity 1"),
                   or "@" in a per-mode template (the mode it is applied to)
    power       := a positive integer

Examples: ``"raising(0)^2 lowering(1)"``, ``"-0.5 number(site 2)^2"``,
``"(0+1j) raising(cavity 0) lowering(cavity 1)"``, ``"number(@)"``, ``"0.5·a0† a1"``.

Errors carry the 1-based column of the offending character.
"""

from __future__ import annotations

import cmath
import re
from collections.abc import Sequence
from dataclasses import dataclass

from fockmill.algebra.expressions import LadderExpr, lowering, number, raising

__all__ = ["WORDS", "TermSyntaxError", "parse_term", "parse_terms"]

WORDS: dict[str, str] = {
    "raising": "a†",
    "lowering": "a",
    "number": "n = a†a",
    "raise": "a† (older spelling of raising)",
    "lower": "a (older spelling of lowering)",
    "count": "n = a†a (older spelling of number)",
}
"""Factor words and the operator each stands for."""

_FACTORS = {
    "raising": raising,
    "lowering": lowering,
    "number": number,
    "raise": raising,
    "lower": lowering,
    "count": number,
}
_PRINTED = re.compile(r"a(\d+)(†?)")

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


def _power(text: str, position: int) -> tuple[int, int]:
    """An optional ``^k`` at ``position``: the power and the position after it."""
    if position < len(text) and text[position] == "^":
        match = _INTEGER.match(text, position + 1)
        if not match:
            raise TermSyntaxError(position + 2, "expected a positive integer power after '^'")
        power = int(match.group())
        if not 1 <= power <= MAX_POWER:
            raise TermSyntaxError(
                position + 2, f"expected a power from 1 to {MAX_POWER}; got {power}"
            )
        return power, match.end()
    return 1, position


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
        while position < length and text[position] in " \t*·":
            position += 1

    skip_blanks()
    if position >= length:
        raise TermSyntaxError(1, 'empty term; expected e.g. "0.5 raising(0) lowering(1)"')
    coefficient: complex = 1.0
    sign = 1.0
    if text[position] in "+-" and not _REAL.match(text, position):
        sign = -1.0 if text[position] == "-" else 1.0
        position += 1
        skip_blanks()
    if position < length and text[position] == "(":
        close = text.find(")", position)
        if close < 0:
            raise TermSyntaxError(position + 1, "'(' of a complex coefficient is never closed")
        inner = text[position + 1 : close].replace(" ", "")
        try:
            coefficient = sign * complex(inner)
        except ValueError:
            raise TermSyntaxError(
                position + 2, f"expected a complex number such as (0.3-0.1j); got {inner!r}"
            ) from None
        position = close + 1
    else:
        match = _REAL.match(text, position)
        if match:
            coefficient = sign * float(match.group())
            position = match.end()
            if position < length and text[position] == "j":
                coefficient = sign * complex(0.0, float(match.group()))
                position += 1
        else:
            coefficient = sign
    if not cmath.isfinite(coefficient):
        raise TermSyntaxError(1, f"the coefficient {coefficient} is not finite")
    expr = LadderExpr.scalar(coefficient)
    factors = 0
    while True:
        skip_blanks()
        if position >= length:
            break
        start = position
        if text[position] == "1" and (position + 1 >= length or text[position + 1] in " \t*·"):
            position += 1  # the identity, as printed for a constant term
            factors += 1
            continue
        printed = _PRINTED.match(text, position)
        if printed:
            mode = _resolve_mode(printed.group(1), position + 2, labels, modes, here)
            position = printed.end()
            power, position = _power(text, position)
            factor = raising(mode) if printed.group(2) else lowering(mode)
            expr = expr * factor**power
            factors += 1
            continue
        match = _WORD.match(text, position)
        if not match or match.group() not in WORDS:
            found = match.group() if match else text[position]
            raise TermSyntaxError(
                start + 1,
                f"expected raising(...), lowering(...), number(...) or a printed factor such "
                f"as a0† or a1; got {found!r}",
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
        power, position = _power(text, position)
        factor = _FACTORS[word](mode)
        expr = expr * factor**power
        factors += 1
    return expr


def _split_terms(text: str) -> list[tuple[int, str]]:
    """The terms of a sum with their 0-based start columns: split at ``+``/``-`` outside
    parentheses that follow a blank (so ``1e-3`` and ``(0.3-0.1j)`` stay whole)."""
    pieces: list[tuple[int, str]] = []
    depth = 0
    start = 0
    for i, char in enumerate(text):
        if char == "(":
            depth += 1
        elif char == ")":
            depth -= 1
        elif char in "+-" and depth == 0 and i > 0 and text[i - 1] in " \t":
            if text[start:i].strip():
                pieces.append((start, text[start:i]))
                start = i
    pieces.append((start, text[start:]))
    return pieces


def parse_terms(text: str, *, labels: Sequence[str] = (), modes: int | None = None) -> LadderExpr:
    """An expression from a sum of term strings, e.g. the printed form of another one.

    Parameters
    ----------
    text : str
        Terms joined by ``+`` or ``-`` (see the module docstring), for example
        ``"-1.0·a1† a0 - 1.0·a0† a1 + 0.5·number(0)^2"``.
    labels : sequence of str, optional
        Mode labels that may stand for indices (``labels[i]`` names mode ``i``).
    modes : int, optional
        Number of modes, to refuse larger indices (default: any index).

    Returns
    -------
    LadderExpr

    Raises
    ------
    ValueError
        For text that does not follow the syntax, naming the column and what was
        expected.

    Examples
    --------
    >>> import fockmill as fm
    >>> h = fm.raising(0) * fm.lowering(1) + 0.5 * fm.number(1) ** 2
    >>> fm.parse_terms(str(h)) == h
    True
    >>> print(fm.parse_terms("2 raising(0) lowering(0) - 1"))
    2.0·a0† a0 - 1.0·1
    """
    if not isinstance(text, str):
        raise TypeError(f"parse_terms takes a string; got {type(text).__name__}")
    count = len(labels) if modes is None and labels else modes
    bound = count if count is not None else 2**31
    total = LadderExpr()
    for start, piece in _split_terms(text):
        try:
            total = total + parse_term(piece, list(labels), bound)
        except TermSyntaxError as error:
            raise ValueError(
                f"column {start + error.column}: {error.problem} in {text!r}"
            ) from None
    return total
