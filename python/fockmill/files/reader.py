"""Reading a parsed TOML document with errors that name the key path, and the value
readers shared by every section of a model file (axes, term strings, charge checks)."""

from __future__ import annotations

import datetime
import difflib
import math
import re
from collections.abc import Mapping, Sequence
from typing import Any, NoReturn

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr
from fockmill.algebra.terms import TermSyntaxError, parse_term
from fockmill.exceptions import ModelFileError
from fockmill.models.model import Model

MAX_MODES = 4096
MAX_CUTOFF = 65535
MAX_TOTAL = 2**31 - 1
MAX_POINTS = 1_000_000
_SPACINGS = ("linear", "geometric")
_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def join_key(path: str, key: str | int) -> str:
    if isinstance(key, int):
        return f"{path}[{key}]"
    part = key if _BARE_KEY.match(key) else '"' + key.replace('"', '\\"') + '"'
    return f"{path}.{part}" if path else part


def toml_type(value: object) -> str:
    if isinstance(value, bool):
        return "boolean"
    if isinstance(value, int):
        return "integer"
    if isinstance(value, float):
        return "float"
    if isinstance(value, str):
        return "string"
    if isinstance(value, list):
        return "array"
    if isinstance(value, dict):
        return "table"
    if isinstance(value, (datetime.date, datetime.time)):
        return "date/time"
    return type(value).__name__


def describe_value(value: object) -> str:
    if isinstance(value, dict):
        return "a table"
    text = repr(value)
    if len(text) > 60:
        text = text[:57] + "..."
    return f"{text} ({toml_type(value)})"


class Reader:
    """Typed access to a parsed TOML document that reports errors by key path."""

    def __init__(self, source: str) -> None:
        self.source = source

    def fail(self, path: str | None, problem: str) -> NoReturn:
        raise ModelFileError(self.source, path, problem)

    def wrong(self, path: str, expected: str, got: object) -> NoReturn:
        self.fail(path, f"expected {expected}; got {describe_value(got)}")

    def check_keys(
        self, table: Mapping[str, object], path: str, allowed: Sequence[str], hint: str = ""
    ) -> None:
        for key in table:
            if key not in allowed:
                close = (
                    difflib.get_close_matches(key, allowed, n=1)
                    or [k for k in allowed if key.startswith(k) or k.startswith(key)][:1]
                )
                suggestion = f" (did you mean {close[0]!r}?)" if close else ""
                self.fail(
                    join_key(path, key),
                    f"unknown key{suggestion}{hint}; expected one of "
                    + ", ".join(repr(k) for k in allowed),
                )

    def table(self, value: object, path: str) -> dict[str, Any]:
        if not isinstance(value, dict):
            self.wrong(path, "a table", value)
        return value

    def integer(self, value: object, path: str, minimum: int, maximum: int) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            self.wrong(path, f"an integer from {minimum} to {maximum}", value)
        if not minimum <= value <= maximum:
            self.wrong(path, f"an integer from {minimum} to {maximum}", value)
        return value

    def number(self, value: object, path: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.wrong(path, "a finite number", value)
        result = float(value)
        if not math.isfinite(result):
            self.wrong(path, "a finite number", value)
        return result

    def boolean(self, value: object, path: str) -> bool:
        if not isinstance(value, bool):
            self.wrong(path, "true or false", value)
        return value

    def choice(self, value: object, path: str, options: Sequence[str]) -> str:
        expected = "one of " + ", ".join(f'"{o}"' for o in options)
        if not isinstance(value, str):
            self.wrong(path, expected, value)
        if value not in options:
            close = difflib.get_close_matches(value, options, n=1)
            suggestion = f' (did you mean "{close[0]}"?)' if close else ""
            self.fail(path, f"expected {expected}; got {value!r}{suggestion}")
        return value

    def array(self, value: object, path: str, what: str, *, non_empty: bool = True) -> list[Any]:
        if not isinstance(value, list):
            self.wrong(path, f"an array of {what}", value)
        if non_empty and not value:
            self.fail(path, f"expected a non-empty array of {what}; got []")
        return value

    def required(self, table: Mapping[str, Any], key: str, path: str, expected: str) -> Any:
        if key not in table:
            self.fail(join_key(path, key), f"missing; expected {expected}")
        return table[key]


def read_axis(reader: Reader, value: object, path: str) -> npt.NDArray[np.float64]:
    table = reader.table(value, path)
    reader.check_keys(table, path, ["values", "start", "stop", "num", "spacing"])
    if "values" in table:
        extra = sorted(set(table) - {"values"})
        if extra:
            reader.fail(
                join_key(path, extra[0]),
                "expected either values = [...] or start/stop/num, not both",
            )
        items = reader.array(table["values"], join_key(path, "values"), "numbers")
        if len(items) > MAX_POINTS:
            reader.fail(
                join_key(path, "values"), f"expected at most {MAX_POINTS} values; got {len(items)}"
            )
        return np.array(
            [reader.number(v, join_key(join_key(path, "values"), k)) for k, v in enumerate(items)],
            dtype=np.float64,
        )
    if not table:
        reader.fail(path, "empty; expected values = [...] or start, stop and num")
    start = reader.number(
        reader.required(table, "start", path, "a number (or give values = [...])"),
        join_key(path, "start"),
    )
    stop = reader.number(reader.required(table, "stop", path, "a number"), join_key(path, "stop"))
    num = reader.integer(
        reader.required(table, "num", path, "an integer >= 2"), join_key(path, "num"), 2, MAX_POINTS
    )
    spacing = reader.choice(table.get("spacing", "linear"), join_key(path, "spacing"), _SPACINGS)
    if spacing == "geometric":
        if start == 0 or stop == 0 or (start > 0) != (stop > 0):
            reader.fail(
                join_key(path, "spacing"),
                f'"geometric" needs start and stop of the same sign, both nonzero; '
                f"got start={start}, stop={stop}",
            )
        return np.geomspace(start, stop, num)
    return np.linspace(start, stop, num)


def read_term(
    reader: Reader, text: object, path: str, model: Model, here: int | None = None
) -> LadderExpr:
    if not isinstance(text, str):
        reader.wrong(path, 'a term string such as "0.5 raising(0) lowering(1)"', text)
    labels = list(model.mode_labels) or [f"mode {i}" for i in range(model.space.modes)]
    try:
        return parse_term(text, labels, model.space.modes, here)
    except TermSyntaxError as error:
        reader.fail(path, f"{error} in {text!r}")


def read_modes(reader: Reader, table: Mapping[str, Any], path: str, model: Model) -> list[int]:
    """The modes listed under ``table["modes"]`` (indices or mode labels, each once), or
    every mode when the key is absent."""
    modes = model.space.modes
    if "modes" not in table:
        return list(range(modes))
    mpath = join_key(path, "modes")
    labels = list(model.mode_labels)
    picked: list[int] = []
    for k, item in enumerate(reader.array(table["modes"], mpath, "mode indices or labels")):
        if isinstance(item, str):
            if item not in labels:
                shown = ", ".join(repr(label) for label in labels[:4])
                shown += ", ..." if len(labels) > 4 else ""
                reader.fail(
                    join_key(mpath, k),
                    f"{item!r} is not a mode label of this model; give a mode index "
                    f"(0..{modes - 1})" + (f" or a label ({shown})" if labels else ""),
                )
            mode = labels.index(item)
        else:
            mode = reader.integer(item, join_key(mpath, k), 0, modes - 1)
        if mode in picked:
            reader.fail(join_key(mpath, k), f"mode {mode} is listed twice")
        picked.append(mode)
    return picked


def check_charge(reader: Reader, expr: LadderExpr, path: str, text: str, model: Model) -> None:
    """A term must keep the model's sector (a conserved total or its parity)."""
    space = model.space
    if space.total is None or expr.is_zero():
        return
    modulus = space.modulus or 0
    for charge in sorted(expr.charge(space.weights)):
        if (charge % modulus if modulus else charge) != 0:
            kept = f"Σ w_i n_i mod {modulus}" if modulus else "the total number of quanta"
            reader.fail(
                path,
                f"{text!r} changes {kept} by {charge}, so it leaves the model's sector "
                "(model.total); pair creations with annihilations, or drop model.total",
            )
