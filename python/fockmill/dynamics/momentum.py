"""Momentum-resolved spectra: ``S(q, ω)`` for every momentum of a sector's group in one
call, each momentum computed between two symmetry sectors only.

For a state ``ψ`` in the sector with labels ``q₀`` and a probe ``O`` (``n_0`` for the
dynamic structure factor, ``a_0`` for the quantum-removal part of a single-particle
spectral function), the map holds, for each label shift ``p``,

``S(p, ω) = −(1/π) Im ⟨ψ|O_p† (ω + E_ref + iη − H)⁻¹ O_p|ψ⟩``,

where ``O_p = |G|^{-1/2} Σ_g χ_p(g)^* g O g⁻¹`` is ``O``'s component with the character
of ``p`` (:meth:`SymmetricSpace.component`): it carries the sector ``q₀`` into ``q₀ + p``,
so each row is a Lanczos continued fraction in that one sector, ``|G|`` times smaller
than the whole space.
"""

from __future__ import annotations

import itertools
import numbers
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr, as_expr
from fockmill.dynamics.krylov import as_float_array, check_common, check_positive, check_state
from fockmill.dynamics.spectral import (
    SpectralPoles,
    function_from_start,
    poles_from_start,
    spectral_start,
)
from fockmill.exceptions import SymmetryError
from fockmill.problem.problem import Problem, problem_and_arguments
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["MomentumSpectrum", "momentum_spectrum"]


@dataclass(frozen=True)
class MomentumSpectrum:
    """A momentum-resolved spectrum (see :func:`momentum_spectrum`).

    Attributes
    ----------
    labels : numpy.ndarray
        ``(n, generators)`` int: the label shift ``p`` of each row, one per generator.
    momenta : numpy.ndarray
        The momentum each row adds, ``2π p / order`` folded into ``(-π, π]`` (in units
        of the inverse lattice spacing): shape ``(n,)`` for one generator, else
        ``(n, generators)``. A sector with label ``q`` has momentum ``2πq/order``, as in
        :class:`~fockmill.Dispersion`.
    omegas : numpy.ndarray
        ``(w,)`` frequencies.
    intensity : numpy.ndarray
        ``(n, w)``: ``S(p, ω)``, Lorentzian-broadened by ``eta``.
    norms : numpy.ndarray
        ``(n,)``: ``⟨ψ|O_p†O_p|ψ⟩``, each row's integral over all ω (for ``O = n_0`` the
        static structure factor).
    dims : numpy.ndarray
        ``(n,)``: dimension of the sector each row lands in.
    reference_energy : float
        ``E_ref``.
    eta : float
        The broadening.
    orders : tuple of int
        The order of each generator (labels run over ``0 .. order - 1``).
    poles : tuple of SpectralPoles or None
        Each row's poles and weights, when asked for.
    """

    labels: npt.NDArray[np.int64]
    momenta: npt.NDArray[np.float64]
    omegas: npt.NDArray[np.float64]
    intensity: npt.NDArray[np.float64]
    norms: npt.NDArray[np.float64]
    dims: npt.NDArray[np.int64]
    reference_energy: float
    eta: float
    orders: tuple[int, ...]
    poles: tuple[SpectralPoles, ...] | None = None


@dataclass(frozen=True)
class _Row:
    """One computed row of the map."""

    dim: int
    values: npt.NDArray[np.float64]
    norm: float
    poles: SpectralPoles | None


def _negated(p: tuple[int, ...], orders: Sequence[int]) -> tuple[int, ...]:
    return tuple((-d) % o for d, o in zip(p, orders, strict=True))


def _time_reversal(
    problem: Problem, sector: SymmetricSpace, psi: npt.NDArray[Any], probe: object
) -> bool:
    """Whether ``S(−p, ω) = S(p, ω)`` holds exactly, so that rows ``−p`` can copy rows ``p``.

    Complex conjugation ``K`` in the Fock basis is antiunitary with ``KHK = H`` when
    ``H`` has real coefficients; it maps the component ``O_p`` of a real probe to
    ``O_{−p}`` and fixes a real ``ψ``, so ``⟨ψ|O_{−p}† R(z) O_{−p}|ψ⟩ = ⟨ψ|O_p† R(z) O_p|ψ⟩``
    for the resolvent ``R(z) = (z − H)⁻¹`` of the Hermitian ``H`` (time-reversal
    symmetry: common practice, no source). ``ψ`` is real in the Fock basis when its
    sector coefficients are (up to one global phase) and the sector's labels are their
    own negatives (momentum 0 or π, reflection parity): its basis states are then real.
    A callable probe is not inspected, so it turns the pairing off.
    """
    if not isinstance(probe, LadderExpr) or not probe.is_real() or not problem.expr.is_real():
        return False
    if any((2 * q) % g.order for g, q in sector.symmetries):
        return False
    if psi.dtype.kind != "c":
        return True
    largest = psi[int(np.argmax(np.abs(psi)))]
    if largest == 0:
        return True
    real = psi * (abs(largest) / largest)
    return bool(np.max(np.abs(real.imag)) <= 1e-13 * max(float(np.max(np.abs(real.real))), 1e-300))


def fold_momenta(labels: npt.ArrayLike, orders: Sequence[int]) -> npt.NDArray[np.float64]:
    """``2π p / order`` per generator, folded into ``(-π, π]``; shape ``(n,)`` for one
    generator, else ``(n, generators)``."""
    p = np.asarray(labels, dtype=np.float64).reshape(-1, len(orders))
    k = 2 * np.pi * p / np.asarray(orders, dtype=np.float64)
    k = np.where(k > np.pi + 1e-12, k - 2 * np.pi, k)
    return np.asarray(k[:, 0] if len(orders) == 1 else k, dtype=np.float64)


def _rows(labels: object, orders: list[int]) -> tuple[list[tuple[int, ...]], bool]:
    """The label shifts to compute, and whether the caller listed them."""
    if labels is None:
        return [tuple(p) for p in itertools.product(*(range(o) for o in orders))], False
    if isinstance(labels, str | bytes) or not isinstance(labels, Sequence | np.ndarray):
        raise TypeError(
            "labels must be a list of label shifts (an integer each for one generator, a "
            f"tuple per generator otherwise) or None for all; got {labels!r}"
        )
    rows: list[tuple[int, ...]] = []
    for n, item in enumerate(labels):
        values = (item,) if isinstance(item, numbers.Integral) else item
        if isinstance(values, str | bytes) or not isinstance(values, Sequence | np.ndarray):
            raise TypeError(f"labels[{n}] must be an integer or a tuple of integers; got {item!r}")
        if len(values) != len(orders):
            raise SymmetryError(
                f"labels[{n}] = {item!r} gives {len(values)} label(s) but the sector has "
                f"{len(orders)} generator(s); give one label per generator"
            )
        row = []
        for value, order in zip(values, orders, strict=True):
            if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Integral):
                raise TypeError(f"labels[{n}] must hold integers; got {item!r}")
            row.append(int(value) % order)
        rows.append(tuple(row))
    if not rows:
        raise ValueError("labels is empty; give at least one label shift, or None for all")
    return rows, True


def momentum_spectrum(
    H: LadderExpr | Problem,
    space: SymmetricSpace | None = None,
    psi: npt.ArrayLike | None = None,
    A: LadderExpr | Callable[[tuple[int, ...]], LadderExpr] | None = None,
    omegas: npt.ArrayLike | None = None,
    *,
    labels: Sequence[int | Sequence[int]] | None = None,
    base: FockSpace | None = None,
    eta: float = 0.05,
    poles: bool = False,
    reference_energy: float | None = None,
    tol: float = 1e-6,
    max_steps: int | None = None,
    method: str = "auto",
    threads: int | None = None,
    memory_limit: int | None = None,
) -> MomentumSpectrum:
    """The momentum-resolved map ``S(p, ω)`` of a probe, one symmetry sector per momentum.

    Parameters
    ----------
    H : LadderExpr or Problem
        A Hermitian Hamiltonian commuting with the sector's generators.
    space : SymmetricSpace
        The sector of ``psi`` (for example momentum 0 of a ring's translation).
    psi : array_like
        A normalised state of ``space`` (its ground state, say).
    A : LadderExpr or callable
        The probe. An expression ``O`` (``fm.number(0)`` for the dynamic structure
        factor, ``fm.lowering(0)`` for quantum removal) is resolved into its momentum
        components ``O_p`` (:meth:`SymmetricSpace.component`); a callable receives the
        label shifts ``p`` (a tuple, one per generator) and returns the probe of that row,
        which must carry the labels ``p`` (:meth:`SymmetricSpace.operator_labels`).
    omegas : array_like
        Frequencies, one-dimensional.
    labels : list, optional
        The label shifts to compute (integers for one generator, tuples otherwise);
        default every combination. Rows whose shifted labels make no one-dimensional
        representation (a translation with a reflection away from momentum 0 and L/2)
        are left out of the default list and refused when listed.
    base : FockSpace, optional
        The base space the probe lands in (default: the sector's; one quantum fewer for
        ``fm.lowering(0)``).
    eta, reference_energy, tol, max_steps, method, threads, memory_limit
        As for :func:`fockmill.spectral_function`; ``E_ref`` (default ``⟨ψ|H|ψ⟩``) is the
        same for every row.
    poles : bool
        Also return each row's poles and weights (:func:`fockmill.spectral_poles`).

    Returns
    -------
    MomentumSpectrum

    Raises
    ------
    TypeError
        ``space`` is not a sector, or arguments of the wrong type.
    SymmetryError
        A listed label shift is out of range or makes no one-dimensional representation,
        or a callable's probe does not carry its row's labels.
    ChargeError
        The probe does not land in ``base``.
    ConvergenceError
        A row's continued fraction did not settle (raise ``max_steps``, ``eta`` or ``tol``).

    Notes
    -----
    Each row needs ``H`` on one sector with labels ``q₀ + p``, so memory and time scale
    with the sector's dimension, about ``1/|G|`` of the whole space's; the map costs
    ``|G|`` such spectra, or about half as many when time reversal holds: for a real
    ``H``, a real probe and a real ``ψ`` in a sector whose labels are their own negatives
    (momentum 0 or π, any reflection parity), ``S(−p, ω) = S(p, ω)`` and rows ``−p``
    are copies of rows ``p``. Summed over all rows, ``Σ_p S(p, ω) = Σ_{g} S_{gOg⁻¹}(ω)``: the
    local spectra of all images of ``O``.

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> L = 4
    >>> hop = sum(fm.raising(j) * fm.lowering((j + 1) % L) for j in range(L))
    >>> h = -(hop + hop.adjoint())
    >>> t = fm.ring_translation(L)
    >>> sector = fm.SymmetricSpace(fm.FockSpace(modes=L, cutoff=1, total=1), [(t, 0)])
    >>> ground = fm.ground_state(h, sector)
    >>> m = fm.momentum_spectrum(h, sector, ground.vector, fm.number(0), np.array([0.0, 2.0]),
    ...                          eta=0.1)
    >>> m.momenta.round(3).tolist(), m.norms.round(3).tolist()
    ([0.0, 1.571, 3.142, -1.571], [0.25, 0.25, 0.25, 0.25])
    """
    threads, memory_limit = check_common(threads, memory_limit)
    problem, (psi, A, omegas) = problem_and_arguments(
        H, space, (psi, A, omegas), threads=threads, memory_limit=memory_limit
    )
    if psi is None or A is None or omegas is None:
        raise TypeError("momentum_spectrum needs psi=, A= and omegas=")
    sector = problem.space
    if not isinstance(sector, SymmetricSpace):
        raise TypeError(
            "momentum_spectrum needs the state's symmetry sector (a fm.SymmetricSpace, e.g. "
            "momentum 0 of fm.ring_translation(L)); got "
            f"{type(sector).__name__}. For one spectrum on a plain space use "
            "fm.spectral_function"
        )
    eta = check_positive(eta, "eta", "0.05")
    tol = check_positive(tol, "tol", "1e-6")
    grid = as_float_array(omegas, "omegas")
    if not isinstance(poles, bool):
        raise TypeError(f"poles must be True or False; got {poles!r}")
    landing = sector.base if base is None else base
    if not isinstance(landing, FockSpace):
        raise TypeError(f"base must be a fm.FockSpace or None; got {type(landing).__name__}")
    probe: Callable[[tuple[int, ...]], LadderExpr]
    if callable(A) and not isinstance(A, LadderExpr):
        user = A

        def probe(p: tuple[int, ...]) -> LadderExpr:
            return as_expr(user(p))

    else:
        local = as_expr(A)

        def probe(p: tuple[int, ...]) -> LadderExpr:
            return sector.component(local, p)

    v = check_state(sector, psi, "psi")
    if reference_energy is None:
        ref = float(np.vdot(v, problem.matvec(v)).real)
    else:
        if isinstance(reference_energy, bool) or not isinstance(reference_energy, numbers.Real):
            raise TypeError(
                f"reference_energy must be a real number or None; got {reference_energy!r}"
            )
        ref = float(reference_energy)
        if not np.isfinite(ref):
            raise ValueError("reference_energy must be finite")
    gens = [g for g, _ in sector.symmetries]
    orders = [g.order for g in gens]
    rows, listed = _rows(labels, orders)
    mirrored = _time_reversal(problem, sector, v, A)

    def one_row(p: tuple[int, ...]) -> _Row | None:
        """Row ``p``, or None when its labels make no one-dimensional representation
        and the row was not asked for by name."""
        shifted = [(g, (q + d) % g.order) for (g, q), d in zip(sector.symmetries, p, strict=True)]
        try:
            a_p = probe(p)
            if landing == sector.base and not any(p):
                target = sector
            else:
                target = SymmetricSpace(landing, shifted, threads=threads)
        except SymmetryError:
            if listed:
                raise
            return None  # no one-dimensional representation: not part of the default map
        if target.dim == 0 or a_p.is_zero():
            empty = np.zeros(0)
            nothing = SpectralPoles(empty, empty, 0.0, ref, 0, True) if poles else None
            return _Row(target.dim, np.zeros(grid.size), 0.0, nothing)
        start = spectral_start(problem, v, a_p, None if target == sector else target, ref)
        values = function_from_start(
            start, grid, eta=eta, tol=tol, max_steps=max_steps, method=method
        )
        found = poles_from_start(start, max_steps=max_steps, method=method) if poles else None
        return _Row(target.dim, values, start.norm, found)

    # Under time reversal rows -p copy rows p; the others are computed.
    computed: list[tuple[int, ...]] = []
    for p in rows:
        if p not in computed and not (mirrored and _negated(p, orders) in computed):
            computed.append(p)
    results = {p: one_row(p) for p in computed}
    kept: list[tuple[int, ...]] = []
    done_rows: list[_Row] = []
    for p in rows:
        row = results[p] if p in results else results[_negated(p, orders)]
        if row is None:
            continue
        kept.append(p)
        done_rows.append(row)
    maps = [row.values for row in done_rows]
    norms = [row.norm for row in done_rows]
    dims = [row.dim for row in done_rows]
    found = [row.poles for row in done_rows if row.poles is not None]
    shifts = np.asarray(kept, dtype=np.int64).reshape(len(kept), len(orders))
    return MomentumSpectrum(
        labels=shifts,
        momenta=fold_momenta(shifts, orders),
        omegas=grid.copy(),
        intensity=np.asarray(maps, dtype=np.float64).reshape(len(kept), grid.size),
        norms=np.asarray(norms, dtype=np.float64),
        dims=np.asarray(dims, dtype=np.int64),
        reference_energy=ref,
        eta=eta,
        orders=tuple(orders),
        poles=tuple(found) if poles else None,
    )
