"""Dispersions: the lowest levels in every momentum sector of a translation."""

from __future__ import annotations

import numbers
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import SymmetryError
from fockmill.solvers.ground import lowest_levels
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import ModePermutation, SymmetricSpace

__all__ = ["Dispersion", "momentum_levels"]


@dataclass(frozen=True)
class Dispersion:
    """Lowest levels in every momentum sector of a translation.

    Attributes
    ----------
    labels : numpy.ndarray
        Momentum labels ``q = 0 .. order - 1`` (int).
    momenta : numpy.ndarray
        ``2π q / order`` folded into ``(-π, π]``.
    energies : numpy.ndarray
        Shape ``(order, levels)``, ascending in each row; NaN where a sector has fewer than
        ``levels`` states.
    dims : numpy.ndarray
        Dimension of each sector.
    """

    labels: npt.NDArray[np.int64]
    momenta: npt.NDArray[np.float64]
    energies: npt.NDArray[np.float64]
    dims: npt.NDArray[np.int64]

    @property
    def ground_label(self) -> int:
        """The label of the sector holding the lowest energy."""
        return int(self.labels[int(np.nanargmin(self.energies[:, 0]))])


def momentum_levels(
    expr: LadderExpr,
    space: FockSpace,
    translation: ModePermutation,
    levels: int = 1,
    *,
    extra: Sequence[tuple[ModePermutation, int]] = (),
    threads: int | None = None,
    **options: Any,
) -> Dispersion:
    """The lowest ``levels`` levels in each momentum sector of ``translation``: ``E(q)``.

    Parameters
    ----------
    expr : LadderExpr
        A Hermitian Hamiltonian commuting with ``translation`` (and ``extra``).
    space : FockSpace
        The base space.
    translation : ModePermutation
        The translation; its labels ``0 .. order - 1`` are the momenta.
    levels : int
        Levels per sector (fewer when a sector is smaller; NaN fills the row). Called
        ``k`` before 0.9; ``k=`` is still accepted with a DeprecationWarning.
    extra : sequence of (ModePermutation, int)
        Further fixed symmetries (for example a second torus direction with its label).
    threads : int, optional
        Threads for every solve.
    **options
        Passed to :func:`fockmill.lowest_levels` (method, tol, seed, ...).

    Raises
    ------
    TypeError
        ``translation`` is not a :class:`~fockmill.ModePermutation`.
    ValueError
        ``levels`` is not a positive integer.

    Returns
    -------
    Dispersion

    Examples
    --------
    >>> import fockmill as fm
    >>> hop = sum(fm.raising(i) * fm.lowering((i + 1) % 4) for i in range(4))
    >>> h = -(hop + hop.adjoint())
    >>> d = fm.momentum_levels(h, fm.FockSpace(modes=4, cutoff=1, total=1), fm.ring_translation(4))
    >>> d.energies[:, 0].round(6).tolist()
    [-2.0, 0.0, 2.0, 0.0]
    """
    if "k" in options:
        warnings.warn(
            "momentum_levels(k=...) is now momentum_levels(levels=...): in a function about "
            "momentum, k named the number of levels; pass levels= instead",
            DeprecationWarning,
            stacklevel=2,
        )
        levels = options.pop("k")
    k = levels
    if isinstance(space, SymmetricSpace):
        raise SymmetryError(
            "momentum_levels builds one sector per momentum from a fm.FockSpace; given a "
            "sector, pass its base space and its other symmetries instead: "
            "momentum_levels(H, sector.base, translation, extra=[(generator, label), ...])"
        )
    if not isinstance(translation, ModePermutation):
        raise TypeError(f"translation must be a fm.ModePermutation; got {translation!r}")
    if isinstance(k, bool) or not isinstance(k, numbers.Integral) or k < 1:
        raise ValueError(f"levels must be a positive integer; got {k!r}")
    order = translation.order
    energies = np.full((order, int(k)), np.nan)
    dims = np.zeros(order, dtype=np.int64)
    for q in range(order):
        sector = SymmetricSpace(space, [(translation, q), *extra], threads=threads)
        dims[q] = sector.dim
        n = min(int(k), sector.dim)
        if n == 0:
            continue
        found = lowest_levels(expr, sector, n, threads=threads, **options)
        energies[q, :n] = found.energies
    labels = np.arange(order, dtype=np.int64)
    momenta = 2 * np.pi * labels / order
    momenta = np.where(momenta > np.pi + 1e-12, momenta - 2 * np.pi, momenta)
    return Dispersion(labels=labels, momenta=momenta, energies=energies, dims=dims)
