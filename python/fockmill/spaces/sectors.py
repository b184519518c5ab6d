"""Which symmetry sector (or sectors) a sweep or a model file solves in.

A :class:`SectorChoice` is a list of mode permutations, each with a label, where at
most one label may be ``"all"``: then every label of that generator is solved (for a
translation, every momentum: a dispersion ``E(k)``). Sweeps, model files and the
command line share it; the sectors themselves are :class:`~fockmill.SymmetricSpace`.
"""

from __future__ import annotations

import cmath
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import SymmetryError
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import (
    ModePermutation,
    SymmetricSpace,
    ring_reflection,
    ring_translation,
)

__all__ = ["ALL", "SectorChoice", "sector_choice"]

ALL = "all"
"""The label meaning "every label of this generator" (every momentum of a translation)."""


@dataclass(frozen=True)
class SectorChoice:
    """Generators with labels; at most one label is None ("all").

    Attributes
    ----------
    generators : tuple of ModePermutation
        The symmetries.
    labels : tuple of int or None
        The label of each generator (``0 .. order - 1``), None for every label.
    names : tuple of str
        What each generator is, for messages and titles (``"translation"``,
        ``"reflection"``, ``"symmetry.permutations[0]"``, ...).

    Examples
    --------
    >>> import fockmill as fm
    >>> choice = sector_choice([(fm.ring_translation(4), "all")], names=["translation"])
    >>> choice.scan, choice.scan_labels()
    (0, [0, 1, 2, 3])
    """

    generators: tuple[ModePermutation, ...]
    labels: tuple[int | None, ...]
    names: tuple[str, ...]

    @property
    def scan(self) -> int | None:
        """Index of the generator whose every label is solved, or None."""
        for n, label in enumerate(self.labels):
            if label is None:
                return n
        return None

    @property
    def modes(self) -> int:
        """Number of modes the generators permute."""
        return self.generators[0].modes

    def scan_labels(self) -> list[int]:
        """The labels solved along the scanned generator (``[]`` without one)."""
        n = self.scan
        return [] if n is None else list(range(self.generators[n].order))

    def pairs(self, label: int | None = None) -> list[tuple[ModePermutation, int]]:
        """``(generator, label)`` pairs, with ``label`` for the scanned generator."""
        out: list[tuple[ModePermutation, int]] = []
        for g, q in zip(self.generators, self.labels, strict=True):
            if q is None:
                if label is None:
                    raise ValueError("give the label of the scanned generator")
                q = label
            out.append((g, q))
        return out

    def sector(
        self, space: FockSpace, label: int | None = None, *, threads: int | None = None
    ) -> SymmetricSpace:
        """The sector of ``space`` (``label``: the scanned generator's label)."""
        return SymmetricSpace(space, self.pairs(label), threads=threads)

    def check_invariant(self, expr: LadderExpr) -> None:
        """Refuse (SymmetryError) an expression some generator does not leave invariant."""
        vacuum = FockSpace(modes=self.modes, cutoff=1, total=0)
        for n, g in enumerate(self.generators):
            try:
                SymmetricSpace(vacuum, [(g, 0)]).check_invariant(expr)
            except SymmetryError as exc:
                text = str(exc).replace("generator 0", self.names[n], 1)
                raise SymmetryError(text) from None

    def describe(self, label: int | None = None) -> str:
        """Short text for titles and tables: ``translation q = 1/6, reflection 0``."""
        parts = []
        for g, q, name in zip(self.generators, self.labels, self.names, strict=True):
            shown = name.removeprefix("symmetry.")
            if q is None and label is None:
                if shown.startswith("translation"):
                    parts.append(f"{shown}: every momentum k = 2π·q/{g.order}")
                else:
                    parts.append(f"{shown}: every label 0..{g.order - 1}")
                continue
            value = label if q is None else q
            if shown.startswith("translation"):
                parts.append(f"{shown} k = 2π·{value}/{g.order}")
            elif g.order == 2:
                parts.append(f"{shown} {'even' if value == 0 else 'odd'}")
            else:
                parts.append(f"{shown} label {value}/{g.order}")
        return ", ".join(parts)

    def momenta(self) -> np.ndarray:
        """``2π q / order`` of the scanned labels, folded into ``(-π, π]``."""
        n = self.scan
        if n is None:
            return np.zeros(0)
        order = self.generators[n].order
        q = np.arange(order)
        k = 2 * np.pi * q / order
        return np.where(k > np.pi + 1e-12, k - 2 * np.pi, k)

    def characters(self, label: int | None = None) -> list[complex]:
        """The character of each generator (``label`` for the scanned one)."""
        return [cmath.exp(2j * cmath.pi * q / g.order) for g, q in self.pairs(label)]

    def as_meta(self) -> dict[str, Any]:
        """JSON-ready description (stored with sweep results)."""
        return {
            "generators": [list(g.images) for g in self.generators],
            "labels": [ALL if q is None else int(q) for q in self.labels],
            "names": list(self.names),
            "orders": [g.order for g in self.generators],
            "description": self.describe(),
        }

    @classmethod
    def from_meta(cls, meta: Mapping[str, Any]) -> SectorChoice:
        """Inverse of :meth:`as_meta`."""
        return sector_choice(
            [
                (ModePermutation(images), label)
                for images, label in zip(meta["generators"], meta["labels"], strict=True)
            ],
            names=list(meta.get("names") or ()) or None,
        )


def sector_choice(
    pairs: SectorChoice | Sequence[tuple[ModePermutation, int | str]],
    *,
    names: Sequence[str] | None = None,
    modes: int | None = None,
) -> SectorChoice:
    """Check ``[(generator, label or "all"), ...]`` and make a :class:`SectorChoice`.

    Raises
    ------
    TypeError
        For entries that are not (ModePermutation, int or "all") pairs.
    SymmetryError
        For no generators, generators of another number of modes than ``modes``, a
        label out of range, more than one "all", labels that are no one-dimensional
        representation, or "all" on a generator whose labels cannot all be combined
        with the other labels (a translation with a reflection).
    """
    if isinstance(pairs, SectorChoice):
        return pairs
    if isinstance(pairs, str | bytes) or not isinstance(pairs, Sequence):
        raise TypeError(
            f'symmetry must be a list of (fm.ModePermutation, label or "all") pairs; got {pairs!r}'
        )
    if not pairs:
        raise SymmetryError("symmetry needs at least one (fm.ModePermutation, label) pair")
    generators: list[ModePermutation] = []
    labels: list[int | None] = []
    for n, item in enumerate(pairs):
        if not isinstance(item, tuple | list) or len(item) != 2:
            raise TypeError(
                f"symmetry[{n}] must be a (fm.ModePermutation, label) pair; got {item!r}"
            )
        g, q = item
        if not isinstance(g, ModePermutation):
            raise TypeError(f"symmetry[{n}][0] must be a fm.ModePermutation; got {g!r}")
        if isinstance(q, str):
            if q != ALL:
                raise TypeError(
                    f'the label of symmetry[{n}] must be an integer or "all"; got {q!r}'
                )
            labels.append(None)
        elif isinstance(q, bool | np.bool_) or not isinstance(q, numbers.Integral):
            raise TypeError(f'the label of symmetry[{n}] must be an integer or "all"; got {q!r}')
        else:
            if not 0 <= int(q) < g.order:
                raise SymmetryError(
                    f"the label of symmetry[{n}] ({g!r}) is {q}, but it has order {g.order}: "
                    f'labels run over 0..{g.order - 1}, or "all"'
                )
            labels.append(int(q))
        generators.append(g)
    count = modes if modes is not None else generators[0].modes
    for n, g in enumerate(generators):
        if g.modes != count:
            raise SymmetryError(
                f"symmetry[{n}] ({g!r}) permutes {g.modes} modes but the model has {count}; "
                "give one image per mode"
            )
    if sum(q is None for q in labels) > 1:
        raise SymmetryError('at most one generator can have the label "all"')
    given = (
        list(names)
        if names is not None
        else [_default_name(g, n) for n, g in enumerate(generators)]
    )
    if len(given) != len(generators):
        raise ValueError("give one name per generator")
    choice = SectorChoice(tuple(generators), tuple(labels), tuple(given))
    check_representation(choice)
    return choice


def check_representation(choice: SectorChoice) -> None:
    """Refuse labels that are no one-dimensional representation (for every scanned label).

    The check is the sector's own, on the one-state space of the vacuum, so it costs
    nothing however large the model.
    """
    vacuum = FockSpace(modes=choice.modes, cutoff=1, total=0)
    labels: list[int | None] = list(choice.scan_labels()) or [None]
    for label in labels:
        try:
            choice.sector(vacuum, label, threads=1)
        except SymmetryError as error:
            exc = _named(str(error), choice.names)
            if label is None:
                raise SymmetryError(exc) from None
            scanned = choice.names[choice.scan or 0]
            others = [name for n, name in enumerate(choice.names) if n != (choice.scan or 0)]
            known = {"translation", "reflection"} <= {n.split(".")[-1] for n in choice.names}
            why = (
                "a translation and a reflection share sectors only at momenta 0 and L/2"
                if known
                else "the generators do not commute there"
            )
            raise SymmetryError(
                f'{scanned} = "all" scans every label, but at label {label} it does not '
                f"combine with {', '.join(others)} into a one-dimensional representation "
                f"({why}); drop {', '.join(others)} to scan every label, or give {scanned} "
                "one label"
            ) from None


def _named(text: str, names: Sequence[str]) -> str:
    """A sector's message with ``generator n`` replaced by the generators' own names."""
    for n in reversed(range(len(names))):
        text = text.replace(f"generator {n}", names[n])
    return text


def _default_name(g: ModePermutation, n: int) -> str:
    """``"translation"`` or ``"reflection"`` for a ring's (any modes per site), else
    ``symmetry[n]``: the name titles and tables show."""
    modes = g.modes
    for orbitals in range(1, modes + 1):
        if modes % orbitals:
            continue
        sites = modes // orbitals
        if sites >= 3 and g == ring_translation(sites, orbitals=orbitals):
            return "translation"
        if sites >= 2 and g == ring_reflection(sites, orbitals=orbitals):
            return "reflection"
    return f"symmetry[{n}]"
