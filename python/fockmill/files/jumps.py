"""The ``[jumps.NAME]`` tables of a model file: dissipation channels with their rates.

Each table makes one rate parameter ``NAME`` (like ``[terms.NAME]`` makes a Hamiltonian
parameter) and the jump operators it sets: in the master equation

    dρ/dt = −i[H, ρ] + Σ_k γ_k (L_k ρ L_k† − ½{L_k†L_k, ρ})

every listed operator ``L`` is one channel of rate ``γ = weight · NAME``. The rate is a
parameter like any other: a default here, a value in ``[parameters]``, a grid in
``[sweep.NAME]``, ``--set NAME=...`` on the command line, a unit in ``[units]``.

Keys (``docs/model-files.md`` has the user-facing table):

``rate``
    Default value of the rate parameter (a number >= 0; required).
``description``
    What the rate is, for axis labels (1 to 80 characters).
``per_mode``
    A term-string template with ``@`` for the mode (``"lowering(@)"``): one channel
    per mode in ``modes`` (default every mode), with rate ``weights[k] · NAME``.
``modes``, ``weights``
    The modes ``per_mode`` is applied to (indices or labels) and the weight of each
    (numbers >= 0, default 1).
``operators``
    Further channels, each a term string or an array of term strings (summed into one
    operator): ``["lowering(0)", ["lowering(0)", "-1 lowering(1)"]]``.
"""

from __future__ import annotations

import dataclasses
import re
from collections.abc import Mapping
from typing import Any

from fockmill.algebra.expressions import LadderExpr
from fockmill.files.reader import Reader, join_key, read_modes, read_term
from fockmill.models.model import Model

__all__ = ["JUMP_KEYS", "describe_jumps", "parse_jumps"]

JUMP_KEYS: tuple[str, ...] = (
    "rate",
    "description",
    "per_mode",
    "modes",
    "weights",
    "operators",
)
"""Keys of a ``[jumps.NAME]`` table."""

#: Most channels one file may declare (each costs products per Liouvillian application).
MAX_CHANNELS = 4096

_RATE_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")


def _rate(reader: Reader, value: object, path: str) -> float:
    rate = reader.number(value, path)
    if rate < 0:
        reader.fail(
            path,
            f"expected a rate >= 0 (a probability per unit time); got {rate:g}. Put any sign "
            "or phase into the operator, never into the rate",
        )
    return rate


def _weights(reader: Reader, table: Mapping[str, Any], path: str, count: int) -> list[float]:
    if "weights" not in table:
        return [1.0] * count
    where = join_key(path, "weights")
    items = reader.array(table["weights"], where, "numbers >= 0 (one per mode)")
    if len(items) != count:
        reader.fail(
            where, f"expected {count} numbers (one per mode in {path}.modes); got {len(items)}"
        )
    out = []
    for k, item in enumerate(items):
        spot = join_key(where, k)
        weight = reader.number(item, spot)
        if weight < 0:
            reader.fail(spot, f"expected a weight >= 0 (it multiplies a rate); got {weight:g}")
        out.append(weight)
    return out


def _check_sector(reader: Reader, operator: LadderExpr, path: str, text: str, model: Model) -> None:
    """A jump must map the model's space into itself: with a conserved total (or its
    parity) it may not change it."""
    space = model.space
    if space.total is None:
        return
    modulus = space.modulus or 0
    for charge in sorted(operator.charge(space.weights)):
        if (charge % modulus if modulus else charge) != 0:
            kept = f"Σ w_i n_i mod {modulus}" if modulus else "the total number of quanta"
            reader.fail(
                path,
                f"{text!r} changes {kept} by {charge}, which model.total keeps fixed; a jump "
                "such as loss or pumping needs the whole truncated space: drop model.total "
                "and give model.cutoff",
            )


def _operator(reader: Reader, item: object, path: str, model: Model) -> tuple[LadderExpr, str]:
    """One channel of ``operators``: a term string or an array of them (summed)."""
    if isinstance(item, list):
        terms = reader.array(item, path, "term strings (summed into one jump operator)")
        total = LadderExpr()
        for k, text in enumerate(terms):
            total = total + read_term(reader, text, join_key(path, k), model)
        return total, " + ".join(str(t) for t in terms)
    if not isinstance(item, str):
        reader.wrong(
            path, 'a term string such as "lowering(0)", or an array of them (summed)', item
        )
    return read_term(reader, item, path, model), item


def parse_jumps(
    reader: Reader, value: object, model: Model
) -> tuple[Model, dict[str, str], dict[str, tuple[str, ...]]]:
    """Read ``[jumps]`` into the model's rate parameters and channels.

    Returns
    -------
    (Model, dict, dict)
        The model with ``jumps`` and the rate defaults in ``parameters``; the
        descriptions of the rates; and, per rate, the operators as written (one text per
        channel, for tables and results files).
    """
    sections = reader.table(value, "jumps")
    if not sections:
        reader.fail("jumps", "empty; expected one [jumps.NAME] table per rate, e.g. [jumps.kappa]")
    parameters = dict(model.parameters)
    jumps: dict[str, tuple[tuple[LadderExpr, float], ...]] = {}
    descriptions: dict[str, str] = {}
    written: dict[str, tuple[str, ...]] = {}
    count = 0
    for name, raw in sections.items():
        path = join_key("jumps", name)
        table = reader.table(raw, path)
        reader.check_keys(table, path, JUMP_KEYS)
        if name in model.parameters or name in model.renamed:
            reader.fail(
                path,
                f"{name!r} is a Hamiltonian parameter of model {model.name!r}; a rate is a "
                "parameter of its own: pick a new name such as kappa or gamma",
            )
        if not _RATE_NAME.match(name):
            reader.fail(
                path, "a rate name must start with a letter and hold only letters, digits and _"
            )
        rate = _rate(
            reader,
            reader.required(table, "rate", path, "a number >= 0 (the default rate)"),
            join_key(path, "rate"),
        )
        if "description" in table:
            text = table["description"]
            if not isinstance(text, str) or not text.strip() or len(text) > 80:
                reader.wrong(
                    join_key(path, "description"), "a short text (1 to 80 characters)", text
                )
            descriptions[name] = text.strip()
        if "per_mode" not in table and "operators" not in table:
            reader.fail(
                path,
                'expected per_mode = "lowering(@)" (one jump per mode) and/or operators = '
                '["lowering(0)", ...] (one jump each)',
            )
        for key in ("modes", "weights"):
            if key in table and "per_mode" not in table:
                reader.fail(join_key(path, key), 'only meaningful with per_mode = "..."')
        channels: list[tuple[LadderExpr, float]] = []
        texts: list[str] = []
        if "per_mode" in table:
            ppath = join_key(path, "per_mode")
            template = table["per_mode"]
            if not isinstance(template, str) or "@" not in template:
                reader.wrong(
                    ppath, 'a term string using @ for the mode, e.g. "lowering(@)"', template
                )
            modes = read_modes(reader, table, path, model)
            weights = _weights(reader, table, path, len(modes))
            for mode, weight in zip(modes, weights, strict=True):
                operator = read_term(reader, template, ppath, model, here=mode)
                shown = template.replace("@", str(mode))
                if operator.is_zero():
                    reader.fail(ppath, f"{shown!r} is zero; a jump needs a nonzero operator")
                _check_sector(reader, operator, ppath, shown, model)
                channels.append((operator, weight))
                texts.append(shown if weight == 1 else f"{weight:g} × {shown}")
        if "operators" in table:
            opath = join_key(path, "operators")
            items = reader.array(table["operators"], opath, "jump operators (term strings)")
            for k, item in enumerate(items):
                spot = join_key(opath, k)
                operator, text = _operator(reader, item, spot, model)
                if operator.is_zero():
                    reader.fail(spot, f"{text!r} is zero; a jump needs a nonzero operator")
                _check_sector(reader, operator, spot, text, model)
                channels.append((operator, 1.0))
                texts.append(text)
        count += len(channels)
        if count > MAX_CHANNELS:
            reader.fail(path, f"expected at most {MAX_CHANNELS} jump channels in all; got more")
        jumps[name] = tuple(channels)
        parameters[name] = rate
        written[name] = tuple(texts)
    try:
        model = dataclasses.replace(model, parameters=parameters, jumps=jumps)
    except ValueError as error:  # the model's own checks (kept in one place)
        reader.fail("jumps", str(error))
    return model, descriptions, written


def describe_jumps(
    model: Model,
    values: Mapping[str, float] | None = None,
    texts: Mapping[str, tuple[str, ...]] | None = None,
) -> list[str]:
    """One line per rate parameter: ``kappa = 0.1: lowering(0), lowering(1)`` (the
    operators as written in the file when ``texts`` has them, else as expressions)."""
    values = dict(model.parameters) if values is None else dict(values)
    lines = []
    for name, channels in model.jumps.items():
        shown_texts = list((texts or {}).get(name, ()))
        if len(shown_texts) != len(channels):
            shown_texts = [str(op) if w == 1 else f"{w:g} × ({op})" for op, w in channels]
        shown = ", ".join(shown_texts[:4])
        if len(channels) > 4:
            shown += f", … ({len(channels)} jumps)"
        lines.append(f"{name} = {values.get(name, float('nan')):g}: {shown}")
    return lines
