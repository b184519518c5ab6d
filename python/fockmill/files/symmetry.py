"""The ``[symmetry]`` table of model files: which symmetry sector(s) to solve in.

Keys (all optional, at least one; see ``docs/model-files.md``):

``translation``
    The lattice translation's label: an integer ``q`` (momentum ``k = 2πq/L``) or
    ``"all"`` (every momentum: a dispersion). Rings and chains of Bose–Hubbard sites
    and Jaynes–Cummings–Hubbard chains (unit cell: cavity and emitter) translate by one
    site; periodic rectangles take two labels ``[along a row, along a column]``
    (one of them may be ``"all"``). A chain or an open rectangle is not translation
    invariant and is refused.
``reflection``
    ``0`` (even) or ``1`` (odd) under the reflection ``site s → L-1-s`` of chains and
    rings (a point reflection ``(r, c) → (rows-1-r, cols-1-c)`` of rectangles); with
    a translation only at momentum 0 or L/2.
``permutations``, ``labels``
    Explicit generators ``[[images of modes 0..M-1], ...]`` (mode ``i`` moves to
    ``images[i]``) and one label each (an integer, or ``"all"``).

At most one label in the table is ``"all"``. Everything is checked before any
computation: bijections, cutoffs and weights kept, labels in range, a
one-dimensional representation, and every part of the model invariant.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from fockmill.exceptions import SymmetryError
from fockmill.files.reader import Reader
from fockmill.models.model import Model
from fockmill.spaces.sectors import ALL, SectorChoice, check_representation
from fockmill.spaces.symmetry import (
    ModePermutation,
    ring_reflection,
    ring_translation,
    torus_translations,
)

__all__ = ["SYMMETRY_KEYS", "parse_symmetry"]

SYMMETRY_KEYS = ("translation", "reflection", "permutations", "labels")
_PATH = "symmetry"


def _label(reader: Reader, value: object, path: str, order: int) -> int | None:
    """An integer label in ``0 .. order-1`` or ``"all"`` (None)."""
    if value == ALL:
        return None
    if isinstance(value, bool) or not isinstance(value, int):
        reader.wrong(path, f'an integer label from 0 to {order - 1}, or "all"', value)
    if not 0 <= value < order:
        reader.fail(
            path,
            f"label {value} is out of range: this symmetry has order {order}, so labels run "
            f'over 0..{order - 1} (the character is exp(2πi·label/{order})), or "all"',
        )
    return value


def _lattice(model_table: Mapping[str, Any]) -> tuple[str, int, int, int, int]:
    """(kind of lattice, sites, rows, cols, orbitals per site) of an already-checked [model]."""
    kind = model_table.get("kind")
    if kind == "jaynes-cummings-hubbard":
        sites = int(model_table["sites"])
        return "chain", sites, 1, sites, 2
    if kind == "bose-hubbard":
        lattice = str(model_table.get("lattice"))
        if lattice in ("chain", "ring"):
            sites = int(model_table["sites"])
            return "chain", sites, 1, sites, 1
        if lattice == "rectangle":
            rows, cols = int(model_table["rows"]), int(model_table["cols"])
            return "rectangle", rows * cols, rows, cols, 1
        return "edges", 0, 0, 0, 1
    return "none", 0, 0, 0, 1


def _no_lattice(reader: Reader, path: str, model_table: Mapping[str, Any]) -> None:
    kind = model_table.get("kind")
    what = (
        'model.lattice = "edges" gives no lattice'
        if kind == "bose-hubbard"
        else f'model.kind = "{kind}" has no lattice'
    )
    reader.fail(
        path,
        f"{what}, so there is no built-in {path.rsplit('.', 1)[-1]}; list the mode "
        "permutation as symmetry.permutations = [[...]] with symmetry.labels = [...]",
    )


def _translations(
    reader: Reader, value: object, model_table: Mapping[str, Any]
) -> list[tuple[ModePermutation, int | None, str]]:
    path = f"{_PATH}.translation"
    lattice, sites, rows, cols, orbitals = _lattice(model_table)
    if lattice in ("edges", "none"):
        _no_lattice(reader, path, model_table)
    if lattice == "chain":
        if isinstance(value, list):
            reader.wrong(
                path, 'one label (an integer or "all") for a one-dimensional lattice', value
            )
        t = ring_translation(sites, orbitals=orbitals)
        return [(t, _label(reader, value, path, t.order), path)]
    along_cols, along_rows = torus_translations(rows, cols)
    if not isinstance(value, list) or len(value) != 2:
        reader.wrong(
            path,
            'two labels [along a row, along a column] for a rectangle, each an integer or "all"',
            value,
        )
    out = []
    for k, (g, item) in enumerate(zip((along_cols, along_rows), value, strict=True)):
        out.append((g, _label(reader, item, f"{path}[{k}]", g.order), f"{path}[{k}]"))
    return out


def _reflection(
    reader: Reader, value: object, model_table: Mapping[str, Any]
) -> tuple[ModePermutation, int | None, str]:
    path = f"{_PATH}.reflection"
    lattice, sites, _, _, orbitals = _lattice(model_table)
    if lattice in ("edges", "none"):
        _no_lattice(reader, path, model_table)
    if value == ALL:
        reader.wrong(path, "0 (even) or 1 (odd)", value)
    if isinstance(value, bool) or value not in (0, 1):
        reader.wrong(path, "0 (even) or 1 (odd)", value)
    g = ring_reflection(sites, orbitals=orbitals)
    if g.order == 1:
        reader.fail(path, "a lattice of one site has no reflection; drop symmetry.reflection")
    return g, int(value), path


def _explicit(
    reader: Reader, table: Mapping[str, Any], model: Model
) -> list[tuple[ModePermutation, int | None, str]]:
    ppath, lpath = f"{_PATH}.permutations", f"{_PATH}.labels"
    if "labels" not in table:
        reader.fail(lpath, 'missing; expected one label per permutation (an integer or "all")')
    if "permutations" not in table:
        reader.fail(ppath, "missing; symmetry.labels belong to symmetry.permutations")
    rows = reader.array(table["permutations"], ppath, "mode permutations [[...], ...]")
    labels = reader.array(table["labels"], lpath, 'labels (integers or "all")')
    if len(labels) != len(rows):
        reader.fail(lpath, f"expected {len(rows)} labels (one per permutation); got {len(labels)}")
    modes = model.space.modes
    out = []
    for k, images in enumerate(rows):
        path = f"{ppath}[{k}]"
        items = reader.array(images, path, "mode indices (the image of each mode)")
        if len(items) != modes:
            reader.fail(path, f"expected {modes} images (one per mode); got {len(items)}")
        for i, v in enumerate(items):
            reader.integer(v, f"{path}[{i}]", 0, modes - 1)
        try:
            g = ModePermutation(items)
        except SymmetryError as exc:
            reader.fail(path, f"{exc}")
        out.append((g, _label(reader, labels[k], f"{lpath}[{k}]", g.order), path))
    return out


def _check_modes(reader: Reader, g: ModePermutation, path: str, model: Model) -> None:
    space = model.space
    names = list(model.mode_labels) or [f"mode {i}" for i in range(space.modes)]
    for i, j in enumerate(g.images):
        if space.cutoffs[i] != space.cutoffs[j] or space.weights[i] != space.weights[j]:
            reader.fail(
                path,
                f"moves {names[i]} (cutoff {space.cutoffs[i]}, weight {space.weights[i]}) to "
                f"{names[j]} (cutoff {space.cutoffs[j]}, weight {space.weights[j]}); a "
                "symmetry must map each mode to one with the same cutoff and weight: give "
                "those modes equal cutoffs, or use another permutation",
            )


def _check_invariant(
    reader: Reader,
    g: ModePermutation,
    path: str,
    model: Model,
    model_table: Mapping[str, Any],
) -> None:
    parts = [(f"{name!r} terms", piece) for name, piece in model.pieces.items()]
    parts.append(("fixed terms and drives", model.constant))
    one = SectorChoice((g,), (0,), (path,))
    periodic = model_table.get("lattice") == "ring" or bool(model_table.get("periodic", False))
    for what, expr in parts:
        try:
            one.check_invariant(expr)
        except SymmetryError as exc:
            if path.startswith(f"{_PATH}.translation") and not periodic:
                hint = (
                    ' (an open lattice has ends: use lattice = "ring", periodic = true, or '
                    "drop the translation)"
                )
            else:
                hint = (
                    " (the lattice has the symmetry but these terms break it: give every "
                    "mode they act on the same coefficient, or drop the symmetry)"
                )
            reader.fail(
                path,
                f"the model's {what} are not invariant under this symmetry{hint}: {exc}",
            )


def parse_symmetry(
    reader: Reader, value: object, model_table: Mapping[str, Any], model: Model
) -> SectorChoice:
    """The checked ``[symmetry]`` table of a model file.

    Parameters
    ----------
    reader : Reader
        The model file's reader (errors name the file and key path).
    value : object
        The parsed ``[symmetry]`` table.
    model_table : Mapping
        The file's ``[model]`` table (already checked), for the lattice.
    model : Model
        The finished model (terms, drives and all), whose every part must be invariant.

    Returns
    -------
    SectorChoice
    """
    table = reader.table(value, _PATH)
    reader.check_keys(table, _PATH, list(SYMMETRY_KEYS))
    if not table:
        reader.fail(_PATH, 'empty; give translation = 0 (or "all"), reflection, or permutations')
    generators: list[tuple[ModePermutation, int | None, str]] = []
    if "translation" in table:
        generators += _translations(reader, table["translation"], model_table)
    if "reflection" in table:
        generators.append(_reflection(reader, table["reflection"], model_table))
    if "permutations" in table or "labels" in table:
        generators += _explicit(reader, table, model)
    scanned = [path for _, q, path in generators if q is None]
    if len(scanned) > 1:
        reader.fail(
            scanned[1],
            f'only one label can be "all" (already {scanned[0]}); fix the others to one label',
        )
    for g, _, path in generators:
        _check_modes(reader, g, path, model)
    choice = SectorChoice(
        tuple(g for g, _, _ in generators),
        tuple(q for _, q, _ in generators),
        tuple(path for _, _, path in generators),
    )
    try:
        check_representation(choice)
    except SymmetryError as exc:
        where = (
            f"{_PATH}.labels"
            if "labels" in table
            else f"{_PATH}.reflection"
            if "reflection" in table
            else _PATH
        )
        text = str(exc)
        if '"all" scans every label' not in text:
            text = f"these labels are no one-dimensional representation of the group: {text}"
        reader.fail(where, text)
    for g, _, path in generators:
        _check_invariant(reader, g, path, model, model_table)
    return choice
