"""Truncated multi-mode Fock spaces, optionally restricted to conserved charges."""

from __future__ import annotations

import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

import fockmill._native as _native
from fockmill.exceptions import SizeLimitError, SpaceError
from fockmill.settings.checks import check_threads

__all__ = ["Charge", "FockSpace"]

_MAX_WEIGHT = 2**32 - 1
_MAX_TOTAL = 2**63 - 1


def _describe_size(
    cutoffs: list[int], weights: list[int] | None, total: int | None, modulus: int | None
) -> str:
    """The exact number of states in words, when cheap to count; else a bound."""
    full = 1
    for c in cutoffs:
        full *= c + 1
    if total is None:
        return f"{full:,} (about 10^{len(str(full)) - 1})"
    w = weights if weights is not None else [1] * len(cutoffs)
    span = modulus if modulus is not None else total + 1
    if span * sum(c + 1 for c in cutoffs) > 10**7:
        return f"at most {full:,}"
    counts = [0] * span
    counts[0] = 1
    for c, weight in zip(cutoffs, w, strict=True):
        new = [0] * span
        for r, n in enumerate(counts):
            if n:
                for v in range(c + 1):
                    t = r + weight * v
                    if modulus is not None:
                        t %= modulus
                    elif t >= span:
                        break
                    new[t] += n
        counts = new
    exact = counts[total % modulus if modulus is not None else total]
    return f"{exact:,}"


def _charge_weights(charge: Charge, index: int, modes: int) -> list[int]:
    """The weights of ``charge`` as one integer per mode, or a clear error."""
    if isinstance(charge.weights, int):
        return [charge.weights] * modes
    if len(charge.weights) != modes:
        raise SpaceError(
            f"charges[{index}] has {len(charge.weights)} weights but the space has {modes} "
            "modes; give one weight per mode (or one integer for all)"
        )
    return list(charge.weights)


def _as_count(value: object, name: str, minimum: int) -> int:
    """A non-negative integer argument, or a clear error."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (numbers.Integral)):
        raise TypeError(
            f"{name} must be an integer >= {minimum}; got {value!r} of type {type(value).__name__}"
        )
    value = int(value)
    if value < minimum:
        raise SpaceError(f"{name} must be >= {minimum}; got {value}")
    return value


def _per_mode(value: object, modes: int | None, name: str, minimum: int) -> list[int]:
    """An int (same for every mode) or a sequence of ints, one per mode."""
    if isinstance(value, (numbers.Integral, np.integer)) and not isinstance(value, bool):
        if modes is None:
            raise TypeError(f"give modes=... when {name} is a single integer")
        return [_as_count(value, name, minimum)] * modes
    if isinstance(value, (str, bytes)) or not isinstance(value, (Sequence, np.ndarray)):
        raise TypeError(
            f"{name} must be an integer or a sequence of integers (one per mode); got {value!r}"
        )
    items = [_as_count(v, f"{name}[{i}]", minimum) for i, v in enumerate(value)]
    if modes is not None and len(items) != modes:
        raise SpaceError(
            f"{name} has {len(items)} entries but modes={modes}; give one entry per mode"
        )
    return items


@dataclass(frozen=True)
class Charge:
    """One conserved charge ``Σ_i w_i n_i`` of a :class:`FockSpace`, fixed to ``total``
    exactly, or modulo ``modulus`` when one is given.

    Parameters
    ----------
    weights : int or sequence of int
        Non-negative weight of each mode (one integer: the same for every mode). A
        weight of 0 leaves a mode out of this charge.
    total : int
        The value the charge keeps (the residue class when ``modulus`` is set).
    modulus : int or None
        Conserve the charge only modulo this integer (>= 2), e.g. the number of momenta
        of a ring for the total momentum.

    Raises
    ------
    SpaceError
        A negative weight or total, or a modulus below 2.
    TypeError
        Non-integer values.

    Examples
    --------
    The number of quanta and the total momentum ``Σ_k k n_k`` modulo 4 on a ring of
    four momenta:

    >>> import fockmill as fm
    >>> space = fm.FockSpace(cutoff=[3] * 4, charges=[
    ...     fm.Charge(weights=1, total=3),
    ...     fm.Charge(weights=[0, 1, 2, 3], total=1, modulus=4)])
    >>> space.dim
    5
    """

    weights: int | tuple[int, ...]
    total: int
    modulus: int | None = None

    def __post_init__(self) -> None:
        w = self.weights
        if isinstance(w, (numbers.Integral, np.integer)) and not isinstance(w, bool):
            object.__setattr__(self, "weights", _as_count(w, "Charge.weights", 0))
        else:
            object.__setattr__(self, "weights", tuple(_per_mode(w, None, "Charge.weights", 0)))
        object.__setattr__(self, "total", _as_count(self.total, "Charge.total", 0))
        if self.modulus is not None:
            object.__setattr__(self, "modulus", _as_count(self.modulus, "Charge.modulus", 2))


def _as_charge(item: object, index: int) -> Charge:
    """A :class:`Charge` from a Charge or a mapping with its fields, or a clear error."""
    if isinstance(item, Charge):
        return item
    if isinstance(item, Mapping):
        unknown = sorted(set(item) - {"weights", "total", "modulus"})
        if unknown or "weights" not in item or "total" not in item:
            raise SpaceError(
                f"charges[{index}] must have the keys weights, total and optionally modulus; "
                f"got {sorted(item)}; write fm.Charge(weights=..., total=..., modulus=...)"
            )
        try:
            return Charge(item["weights"], item["total"], item.get("modulus"))
        except (SpaceError, TypeError) as exc:
            raise type(exc)(f"charges[{index}]: {exc}") from None
    raise TypeError(
        f"charges[{index}] must be a fm.Charge(weights=..., total=..., modulus=...); got {item!r}"
    )


def _several_error(count: int, name: str) -> SpaceError:
    """The error for reading a one-charge attribute of a several-charge space."""
    return SpaceError(
        f"this space fixes {count} charges at once, so it has no single `{name}`; read "
        "space.charges instead (one fm.Charge per conserved charge, each with its weights, "
        "total and modulus)"
    )


class FockSpace:
    """A truncated Fock space of bosonic modes, optionally a sector of conserved charges.

    Mode ``i`` holds ``0 .. cutoff_i`` quanta. With ``total`` given, only states with
    ``Σ_i weight_i · n_i == total`` are kept (``≡ total (mod modulus)`` when a modulus
    is given); without it the space is the full truncated product space. With
    ``charges`` the space keeps several such charges at once, each exact or modulo its
    own modulus (the number of quanta and the total momentum modulo L; the numbers of
    two species of bosons).

    Parameters
    ----------
    modes : int, optional
        Number of modes. May be omitted when ``cutoff`` is a sequence.
    cutoff : int or sequence of int
        Highest occupation kept per mode (>= 1). A two-level emitter has cutoff 1.
    total : int or None
        Conserved weighted number of quanta; None keeps every state.
    weights : sequence of int, optional
        Non-negative weight of each mode in the conserved charge (default all 1).
        A weight of 0 leaves a mode out of the count.
    modulus : int or None
        Conserve the charge only modulo this integer (>= 2), e.g. 2 for parity
        sectors of squeezing or two-photon drives. Needs ``total`` (the residue).
    charges : sequence of Charge, optional
        Several conserved charges at once (instead of ``total``, ``weights`` and
        ``modulus``): each :class:`Charge` (or a mapping with the keys ``weights``,
        ``total`` and ``modulus``) is kept, exactly or modulo its modulus. One charge
        gives the same space as the keywords; an empty list the full space. On a space
        with several charges, ``total``, ``weights`` and ``modulus`` raise
        :class:`SpaceError`: read :attr:`charges`.

    Raises
    ------
    SpaceError
        For cutoffs < 1, modes < 1, negative totals or weights, wrong-length weights, a
        modulus < 2 or without total, ``charges`` together with ``total``, ``weights``
        or ``modulus``, and sectors that contain no state.
    TypeError
        For non-integer arguments.
    SizeLimitError
        When the dimension or the ranking tables exceed what the core supports (with
        several charges: the product of each exact charge's ``total + 1`` and each
        modular charge's modulus, times the occupations of every mode, above 2^26
        entries; refused before anything is allocated).

    Notes
    -----
    Basis order: occupation tuples ``(n_0, …, n_{M-1})`` sorted lexicographically
    ascending with mode 0 most significant, restricted to the sector. This is the
    relative order of the ``numpy.kron`` product basis. Ranking a state and unranking an
    index both take O(M) table look-ups, with several charges too (their residues are
    combined into one mixed-radix residue).

    Examples
    --------
    >>> space = FockSpace(modes=3, cutoff=2, total=2)
    >>> space.dim
    6
    >>> space.occupations()[:3].tolist()
    [[0, 0, 2], [0, 1, 1], [0, 2, 0]]
    >>> int(space.index([1, 1, 0]))
    4

    Two species of bosons on two sites (modes 0, 1: species A; modes 2, 3: species B),
    two of A and one of B:

    >>> two = FockSpace(cutoff=[2] * 4, charges=[
    ...     Charge(weights=[1, 1, 0, 0], total=2), Charge(weights=[0, 0, 1, 1], total=1)])
    >>> two.dim
    6
    >>> two.state(0)
    (0, 2, 0, 1)
    """

    __slots__ = ("_charges", "_cutoffs", "_modulus", "_native", "_total", "_weights")

    def __init__(
        self,
        modes: int | None = None,
        cutoff: int | Sequence[int] = 1,
        total: int | None = None,
        *,
        weights: Sequence[int] | None = None,
        modulus: int | None = None,
        charges: Sequence[Charge | Mapping[str, Any]] | None = None,
    ) -> None:
        if modes is not None:
            modes = _as_count(modes, "modes", 1)
        cutoffs = _per_mode(cutoff, modes, "cutoff", 1)
        if not cutoffs:
            raise SpaceError("a Fock space needs at least one mode; pass modes >= 1")
        if charges is not None:
            named = (("total", total), ("weights", weights), ("modulus", modulus))
            given = [n for n, v in named if v is not None]
            if given:
                raise SpaceError(
                    f"give either charges=[...] or {'/'.join(given)}=..., not both; put that "
                    "charge into the list as fm.Charge(weights=..., total=..., modulus=...)"
                )
            if isinstance(charges, (str, bytes, Mapping)) or not isinstance(charges, Sequence):
                raise TypeError(
                    "charges must be a list of fm.Charge(weights=..., total=..., modulus=...); "
                    f"got {charges!r}"
                )
            listed = [_as_charge(c, n) for n, c in enumerate(charges)]
            if len(listed) >= 2:
                self._init_several(cutoffs, listed)
                return
            if listed:
                weights = _charge_weights(listed[0], 0, len(cutoffs))
                total, modulus = listed[0].total, listed[0].modulus
        weight_list = None if weights is None else _per_mode(weights, len(cutoffs), "weights", 0)
        total_value = None if total is None else _as_count(total, "total", 0)
        modulus_value = None if modulus is None else _as_count(modulus, "modulus", 2)
        if modulus_value is not None and total_value is None:
            raise SpaceError(
                "a modulus needs a total (the residue class); pass total=0 or total=1 for "
                "the even or odd parity sector"
            )
        if weight_list is not None and max(weight_list) > _MAX_WEIGHT:
            raise SpaceError(
                f"weights must be at most {_MAX_WEIGHT}; got {max(weight_list)}. Divide all "
                "weights by their common factor"
            )
        if total_value is not None and total_value > _MAX_TOTAL:
            raise SpaceError(f"total must be at most {_MAX_TOTAL}; got {total_value}")
        if modulus_value is not None and modulus_value > _MAX_TOTAL:
            raise SpaceError(f"modulus must be at most {_MAX_TOTAL}; got {modulus_value}")
        try:
            self._native = _native.NativeSpace(cutoffs, weight_list, total_value, modulus_value)
        except SizeLimitError as exc:
            size = _describe_size(cutoffs, weight_list, total_value, modulus_value)
            reason = (
                str(exc)
                if "ranking tables" in str(exc)
                else ("the dimension of the space exceeds the supported 2^52 states")
            )
            raise SizeLimitError(
                f"this space has {size} states and cannot be used ({reason}); restrict it "
                "to a conserved total (total=...), lower the cutoffs or use fewer modes"
            ) from None
        self._cutoffs = tuple(cutoffs)
        self._weights = tuple(self._native.weights)
        self._total = total_value
        self._modulus = modulus_value
        self._charges: tuple[Charge, ...] = (
            ()
            if total_value is None
            else (
                Charge(
                    self._weights,
                    total_value % modulus_value if modulus_value else total_value,
                    modulus_value,
                ),
            )
        )

    def _init_several(self, cutoffs: list[int], listed: list[Charge]) -> None:
        """Set up a space fixing two or more charges."""
        modes = len(cutoffs)
        spec: list[tuple[list[int], int, int | None]] = []
        for n, charge in enumerate(listed):
            w = _charge_weights(charge, n, modes)
            if max(w) > _MAX_WEIGHT:
                raise SpaceError(
                    f"charges[{n}] has a weight above {_MAX_WEIGHT} ({max(w)}); divide its "
                    "weights by their common factor"
                )
            for name, value in (("total", charge.total), ("modulus", charge.modulus)):
                if value is not None and value > _MAX_TOTAL:
                    raise SpaceError(
                        f"charges[{n}].{name} must be at most {_MAX_TOTAL}; got {value}"
                    )
            spec.append((w, charge.total, charge.modulus))
        try:
            self._native = _native.NativeSpace(cutoffs, charges=spec)
        except SizeLimitError as exc:
            full = 1
            for c in cutoffs:
                full *= c + 1
            reason = (
                str(exc)
                if "ranking tables" in str(exc)
                else "the dimension of the space exceeds the supported 2^52 states"
            )
            raise SizeLimitError(
                f"this space has at most {full:,} states and cannot be used ({reason}); "
                "lower the totals, moduli or cutoffs, or use fewer modes"
            ) from None
        self._cutoffs = tuple(cutoffs)
        self._weights = tuple(spec[0][0])
        self._total = None
        self._modulus = None
        self._charges = tuple(Charge(tuple(w), t, m) for w, t, m in self._native.charges)

    @property
    def modes(self) -> int:
        """Number of modes."""
        return len(self._cutoffs)

    @property
    def dim(self) -> int:
        """Number of basis states."""
        return int(self._native.dim)

    @property
    def cutoffs(self) -> tuple[int, ...]:
        """Highest occupation kept in each mode."""
        return self._cutoffs

    @property
    def several(self) -> bool:
        """Whether the space fixes two or more charges (see :attr:`charges`)."""
        return len(self._charges) >= 2

    @property
    def charges(self) -> tuple[Charge, ...]:
        """The conserved charges, one :class:`Charge` each (weights one per mode, modular
        totals reduced): none for the full space, one for a ``total=`` sector."""
        return self._charges

    @property
    def weights(self) -> tuple[int, ...]:
        """Weight of each mode in the conserved charge.

        Raises
        ------
        SpaceError
            On a space with several charges: read :attr:`charges`.
        """
        if self.several:
            raise _several_error(len(self._charges), "weights")
        return self._weights

    @property
    def total(self) -> int | None:
        """The conserved total (the residue when a modulus is set), or None.

        Raises
        ------
        SpaceError
            On a space with several charges: read :attr:`charges`.
        """
        if self.several:
            raise _several_error(len(self._charges), "total")
        if self._total is not None and self._modulus is not None:
            return self._total % self._modulus
        return self._total

    @property
    def modulus(self) -> int | None:
        """The modulus of the conserved charge, or None.

        Raises
        ------
        SpaceError
            On a space with several charges: read :attr:`charges`.
        """
        if self.several:
            raise _several_error(len(self._charges), "modulus")
        return self._modulus

    def conserves(self, changes: Mapping[int, int]) -> bool:
        """Whether changing the occupations by ``changes`` (mode to Δn) keeps every
        conserved charge (exactly, or modulo its modulus).

        Examples
        --------
        >>> space = FockSpace(modes=3, cutoff=2, total=2)
        >>> space.conserves({0: -1, 2: 1}), space.conserves({0: 1})
        (True, False)
        """
        for k, charge in enumerate(self._charges):
            weights = _charge_weights(charge, k, self.modes)
            delta = sum(weights[m] * dn for m, dn in changes.items())
            if (delta % charge.modulus if charge.modulus else delta) != 0:
                return False
        return True

    @property
    def native(self) -> _native.NativeSpace:
        """The compiled space object (for the binding layer)."""
        return self._native

    def with_cutoffs(self, cutoff: int | Sequence[int]) -> FockSpace:
        """The same sector specification with other cutoffs."""
        if self.several:
            return FockSpace(self.modes, cutoff, charges=self._charges)
        return FockSpace(
            self.modes, cutoff, self._total, weights=self._weights, modulus=self._modulus
        )

    def binding_cutoffs(self) -> tuple[bool, ...]:
        """Whether each mode's cutoff actually truncates the sector.

        A cutoff does not truncate when the conserved total alone already caps the
        mode's occupation at or below it (``cutoff_i >= total // weight_i``).
        """
        binding = [True] * self.modes
        for charge in self._charges:
            if charge.modulus is not None:
                continue
            weights = _charge_weights(charge, 0, self.modes)
            for i, (c, w) in enumerate(zip(self._cutoffs, weights, strict=True)):
                if w > 0 and c >= charge.total // w:
                    binding[i] = False
        return tuple(binding)

    def occupations(self, *, threads: int | None = None) -> npt.NDArray[np.unsignedinteger[Any]]:
        """Occupation numbers of every basis state.

        Returns
        -------
        numpy.ndarray
            Shape ``(dim, modes)``; row ``k`` is basis state ``k``. ``uint8`` when no
            mode can hold more than 255 quanta in this sector, else ``uint16``.
        """
        return self._native.occupations(check_threads(threads))

    def index(self, occupations: npt.ArrayLike, *, strict: bool = True) -> Any:
        """Basis index of one state or of each row of a 2-D array of states.

        Parameters
        ----------
        occupations : array_like of int
            Shape ``(modes,)`` for one state or ``(m, modes)`` for several.
        strict : bool
            True (default): a state outside this space is an error. False: its index is
            ``-1`` (for vectorised look-ups that filter afterwards).

        Returns
        -------
        int or numpy.ndarray
            The rank(s); with ``strict=False``, ``-1`` where a state is not in this space.

        Raises
        ------
        ValueError
            With ``strict=True``, for a state outside the space: the message names the
            state and the constraint it breaks (a cutoff, the conserved total).

        Examples
        --------
        >>> import fockmill as fm
        >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
        >>> space.index([1, 1])
        1
        >>> space.index([2, 1], strict=False)
        -1
        """
        occ = np.asarray(occupations)
        if occ.dtype.kind not in "iub":
            raise TypeError(f"occupations must be integers; got dtype {occ.dtype}")
        single = occ.ndim == 1
        if occ.ndim not in (1, 2) or occ.shape[-1] != self.modes:
            raise ValueError(
                f"occupations must have shape ({self.modes},) or (m, {self.modes}); got {occ.shape}"
            )
        occ2 = np.ascontiguousarray(occ.reshape(-1, self.modes), dtype=np.int64)
        ranks = self._native.index(occ2)
        if strict and (ranks < 0).any():
            bad = occ2[int(np.argmax(ranks < 0))]
            raise ValueError(self._why_outside(bad) + "; pass strict=False to get -1 instead")
        return int(ranks[0]) if single else ranks

    def _why_outside(self, occupations: npt.NDArray[np.int64]) -> str:
        """Which constraint of this space a state breaks, in words."""
        state = tuple(int(n) for n in occupations)
        for mode, (n, cutoff) in enumerate(zip(state, self.cutoffs, strict=True)):
            if n < 0 or n > cutoff:
                return (
                    f"the state {state} is not in this space: mode {mode} holds {n} quanta, "
                    f"outside 0..{cutoff} (its cutoff)"
                )
        if self.several:
            for k, c in enumerate(self._charges):
                weights = _charge_weights(c, k, self.modes)
                q = sum(w * n for w, n in zip(weights, state, strict=True))
                broken = (q - c.total) % c.modulus != 0 if c.modulus else q != c.total
                if broken:
                    kept = f"{c.total} mod {c.modulus}" if c.modulus else f"{c.total}"
                    return (
                        f"the state {state} is not in this space: charge {k} (weights "
                        f"{weights}) is {q}, but the space keeps {kept}"
                    )
        charge = sum(w * n for w, n in zip(self.weights, state, strict=True))
        what = "the number of quanta" if set(self.weights) == {1} else "Σ w_i n_i"
        if self.modulus:
            return (
                f"the state {state} is not in this space: {what} is {charge} ≡ "
                f"{charge % self.modulus} mod {self.modulus}, but the space keeps "
                f"{self.total} mod {self.modulus}"
            )
        return (
            f"the state {state} is not in this space: {what} is {charge}, but the space "
            f"keeps total={self.total}"
        )

    def basis_vector(
        self, occupations: npt.ArrayLike, *, dtype: npt.DTypeLike = np.float64
    ) -> npt.NDArray[Any]:
        """The unit vector of one basis state, given by its occupations.

        Parameters
        ----------
        occupations : array_like of int
            Shape ``(modes,)``.
        dtype : numpy dtype
            float64 (default) or complex128.

        Returns
        -------
        numpy.ndarray
            Shape ``(dim,)``: 1 at ``index(occupations)``, 0 elsewhere.

        Raises
        ------
        ValueError
            For a state outside the space (see :meth:`index`).

        Examples
        --------
        >>> import fockmill as fm
        >>> fm.FockSpace(modes=2, cutoff=2, total=2).basis_vector([2, 0]).tolist()
        [0.0, 0.0, 1.0]
        """
        occ = np.asarray(occupations)
        if occ.ndim != 1:
            raise ValueError(
                f"basis_vector takes one state of shape ({self.modes},); got shape {occ.shape}"
            )
        vector = np.zeros(self.dim, dtype=dtype)
        vector[self.index(occ)] = 1
        return vector

    def state(self, index: int) -> tuple[int, ...]:
        """Occupations of basis state ``index`` (unranked in O(M log cutoff)).

        Raises
        ------
        IndexError
            When ``index`` is not in ``0 .. dim - 1``.
        """
        k = _as_count(index, "index", 0)
        if k >= self.dim:
            raise IndexError(f"basis index {k} is out of range for dim {self.dim}")
        return tuple(self._native.state(k))

    def __reduce__(self) -> tuple[Any, ...]:
        # Rebuilt from its specification: the ranking tables are cheap to recompute.
        if self.several:
            return (_rebuild_several, (self._cutoffs, self._charges))
        return (
            _rebuild_space,
            (self._cutoffs, self._weights, self._total, self._modulus),
        )

    def _key(self) -> tuple[Any, ...]:
        """What identifies the space (for equality and hashing)."""
        if self.several:
            return (self._cutoffs, self._charges)
        return (self._cutoffs, self._weights, self.total, self._modulus)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, FockSpace):
            return NotImplemented
        return self._key() == other._key()

    def __hash__(self) -> int:
        return hash(self._key())

    def __repr__(self) -> str:
        parts = [f"modes={self.modes}"]
        if len(set(self._cutoffs)) == 1:
            parts.append(f"cutoff={self._cutoffs[0]}")
        else:
            parts.append(f"cutoff={list(self._cutoffs)}")
        if self.several:
            listed = ", ".join(
                f"Charge(weights={_charge_weights(c, k, self.modes)}, total={c.total}"
                + (f", modulus={c.modulus})" if c.modulus else ")")
                for k, c in enumerate(self._charges)
            )
            parts.append(f"charges=[{listed}]")
            return f"FockSpace({', '.join(parts)}) with dim={self.dim}"
        if self._total is not None:
            parts.append(f"total={self.total}")
        if any(w != 1 for w in self._weights):
            parts.append(f"weights={list(self._weights)}")
        if self._modulus is not None:
            parts.append(f"modulus={self._modulus}")
        return f"FockSpace({', '.join(parts)}) with dim={self.dim}"


def _rebuild_space(
    cutoffs: tuple[int, ...],
    weights: tuple[int, ...],
    total: int | None,
    modulus: int | None,
) -> FockSpace:
    """Unpickle a :class:`FockSpace`."""
    return FockSpace(len(cutoffs), list(cutoffs), total, weights=list(weights), modulus=modulus)


def _rebuild_several(cutoffs: tuple[int, ...], charges: tuple[Charge, ...]) -> FockSpace:
    """Unpickle a :class:`FockSpace` with several charges."""
    return FockSpace(len(cutoffs), list(cutoffs), charges=list(charges))
