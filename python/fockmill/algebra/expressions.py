"""Normal-ordered polynomials in bosonic creation and annihilation operators.

A :class:`LadderExpr` is a finite sum of monomials in the ladder operators
``a_i`` (annihilation) and ``a_i†`` (creation) of numbered bosonic modes.
Every expression is kept *normal ordered* at all times: within one mode all
creation operators stand left of all annihilation operators, and factors on
different modes commute, so a monomial is fully described by one
``(mode, p, q)`` triple per mode present, meaning ``(a_mode†)^p (a_mode)^q``.
Products are brought back to normal order symbolically with the canonical
commutation relation ``[a_i, a_j†] = δ_ij``.

Why normal order matters for truncated bases
--------------------------------------------
A Hamiltonian is turned into a matrix by restricting each normal-ordered
monomial to the truncated Fock space: with ``P`` the projector onto the kept
occupation numbers the matrix is ``P H P``. This is exact for every monomial,
including at the cutoff. For example ``a a†`` normal-orders to ``a†a + 1``,
whose restriction is ``n + 1`` on every kept state. Multiplying the truncated
matrices of ``a`` and ``a†`` instead gives ``n + 1`` everywhere except the top
state, where the truncated ``a†`` has already dropped the component above the
cutoff and the product wrongly reads 0. Building expressions symbolically
first and truncating last avoids this error.

Monomial keys and the text format
---------------------------------
A monomial key is a tuple of ``(mode, p, q)`` triples sorted by mode, one per
mode present, each with ``p + q > 0``; the empty tuple is the identity. Keys are
rendered in normal order, creators left, as space-separated factors such as
``a0†^2 a3† a0``: the mode index
directly after ``a``, ``†`` for creation, and ``^k`` only when ``k > 1``. The
Rust core renders monomials in the same format.
"""

from __future__ import annotations

import cmath
import math
import numbers
from collections.abc import Callable, Iterable, Mapping
from typing import Any, ClassVar, NoReturn, TypeAlias, cast

import numpy as np
import numpy.typing as npt

__all__ = [
    "Factor",
    "LadderExpr",
    "ModeIndex",
    "MonomialKey",
    "NativeBlock",
    "NativeTerm",
    "Scalar",
    "TermBlock",
    "as_expr",
    "format_monomial",
    "identity",
    "key_of_row",
    "lowering",
    "number",
    "raising",
]

Factor: TypeAlias = tuple[int, int, int]
"""One ``(mode, p, q)`` triple meaning ``(a_mode†)^p (a_mode)^q``."""

MonomialKey: TypeAlias = tuple[Factor, ...]
"""Factors sorted by mode, one per mode; ``()`` is the identity."""

ModeIndex: TypeAlias = int | np.integer[Any]
"""A mode index: a non-negative Python or numpy integer."""

Scalar: TypeAlias = int | float | complex | np.number[Any]
"""A plain number accepted as a coefficient."""

NativeTerm: TypeAlias = tuple[float, float, list[Factor]]
"""``(real part, imaginary part, factors)``: one term in the binding's form."""

NativeBlock: TypeAlias = tuple[
    int, "npt.NDArray[np.int64]", "npt.NDArray[np.float64]", "npt.NDArray[np.float64]"
]
"""``(creators, modes, re, im)``: array-backed terms in the binding's form."""


def _reject_number_as(value: object, what: str, instead: str) -> NoReturn:
    raise TypeError(f"{what} must be {instead}; got {value!r} of type {type(value).__name__}")


def _validate_mode(mode: object) -> int:
    """Return ``mode`` as a plain int, or raise a clear error."""
    if isinstance(mode, (bool, np.bool_)):
        raise TypeError(
            f"mode must be a non-negative int, got the bool {mode!r}; "
            "pass the mode index as an int such as 0 or 1"
        )
    if not isinstance(mode, (int, np.integer)):
        _reject_number_as(mode, "mode", "a non-negative int (a mode index such as 0)")
    index = int(mode)
    if index < 0:
        raise ValueError(
            f"mode must be a non-negative int, got {index}; modes are numbered 0, 1, 2, ..."
        )
    return index


def _validate_power(power: object, mode: int) -> int:
    if isinstance(power, (bool, np.bool_)) or not isinstance(power, (int, np.integer)):
        _reject_number_as(power, f"powers in the factor for mode {mode}", "non-negative ints")
    value = int(power)
    if value < 0:
        raise ValueError(
            f"powers in the factor for mode {mode} must be non-negative, got {value}; "
            "use raising(mode) for a creation operator instead of a negative power"
        )
    return value


def _is_number(value: object) -> bool:
    """True for numbers usable as coefficients (bools excluded)."""
    if isinstance(value, (bool, np.bool_)):
        return False
    return isinstance(value, (numbers.Number, np.number))


def _coefficient(value: object) -> complex:
    """Return ``value`` as a finite Python complex, or raise naming the bad value."""
    if isinstance(value, (bool, np.bool_)):
        raise TypeError(
            f"coefficients must be finite numbers, got the bool {value!r}; pass 1 or 0 instead"
        )
    if not _is_number(value):
        _reject_number_as(
            value,
            "coefficients",
            "finite numbers (int, float, complex or a numpy number)",
        )
    try:
        result = complex(cast(complex, value))
    except (OverflowError, TypeError, ValueError) as error:
        raise ValueError(
            f"coefficients must be finite numbers; {value!r} does not fit in a complex float"
        ) from error
    if not cmath.isfinite(result):
        raise ValueError(f"coefficients must be finite numbers; got {value!r}")
    return result


def _validate_key(key: object) -> MonomialKey:
    """Check a user-supplied monomial key and return it as a tuple of int triples."""
    if not isinstance(key, (tuple, list)):
        raise TypeError(
            f"a monomial key must be a tuple of (mode, p, q) triples, got {key!r}; "
            "use () for the identity"
        )
    factors: list[Factor] = []
    for factor in key:
        if not isinstance(factor, (tuple, list)) or len(factor) != 3:
            raise TypeError(
                f"each factor of a monomial key must be a (mode, p, q) triple, got {factor!r} "
                f"in key {key!r}"
            )
        mode = _validate_mode(factor[0])
        creation = _validate_power(factor[1], mode)
        annihilation = _validate_power(factor[2], mode)
        if creation + annihilation == 0:
            raise ValueError(
                f"factor {tuple(factor)!r} in key {key!r} has p + q == 0; "
                "leave out modes that carry no operator"
            )
        if factors and mode <= factors[-1][0]:
            raise ValueError(
                f"monomial key {key!r} must list each mode once, sorted by mode; "
                "to combine operators on one mode multiply expressions with *"
            )
        factors.append((mode, creation, annihilation))
    return tuple(factors)


def _single_mode_product(
    left_creation: int, left_annihilation: int, right_creation: int, right_annihilation: int
) -> list[tuple[int, int, int]]:
    """Normal-order ``(a†^p1 a^q1)(a†^p2 a^q2)`` on one mode.

    Returns ``(weight, p, q)`` triples with exact integer weights, from
    ``a^q a†^p = Σ_k C(q, k) C(p, k) k! a†^(p-k) a^(q-k)``.
    """
    contractions = min(left_annihilation, right_creation)
    return [
        (
            math.comb(left_annihilation, k) * math.comb(right_creation, k) * math.factorial(k),
            left_creation + right_creation - k,
            left_annihilation + right_annihilation - k,
        )
        for k in range(contractions + 1)
    ]


def _multiply_monomials(left: MonomialKey, right: MonomialKey) -> list[tuple[int, MonomialKey]]:
    """Normal-order the product of two monomials as ``(integer weight, key)`` pairs."""
    partial: list[tuple[int, MonomialKey]] = [(1, ())]
    i = j = 0
    while i < len(left) or j < len(right):
        if j == len(right) or (i < len(left) and left[i][0] < right[j][0]):
            partial = [(weight, (*key, left[i])) for weight, key in partial]
            i += 1
        elif i == len(left) or right[j][0] < left[i][0]:
            partial = [(weight, (*key, right[j])) for weight, key in partial]
            j += 1
        else:
            mode, p1, q1 = left[i]
            _, p2, q2 = right[j]
            i += 1
            j += 1
            expanded: list[tuple[int, MonomialKey]] = []
            for weight, key in partial:
                for extra, creation, annihilation in _single_mode_product(p1, q1, p2, q2):
                    factor: MonomialKey = (
                        ((mode, creation, annihilation),) if creation + annihilation else ()
                    )
                    expanded.append((weight * extra, key + factor))
            partial = expanded
    return partial


def _format_power(symbol: str, power: int) -> str:
    return symbol if power == 1 else f"{symbol}^{power}"


def format_monomial(key: Iterable[Factor]) -> str:
    """Render a monomial key in the project's text format.

    Parameters
    ----------
    key : iterable of (int, int, int)
        ``(mode, p, q)`` triples sorted by mode; empty for the identity.

    Returns
    -------
    str
        Space-separated factors in normal order: every creation factor (by mode)
        before every annihilation factor (by mode), ``^k`` shown only for ``k > 1``;
        ``"1"`` for the identity. Factors of different modes commute, so this is the
        same operator as the mode-sorted key, written the way it is read.

    Examples
    --------
    >>> format_monomial(((0, 2, 1), (3, 1, 0)))
    'a0†^2 a3† a0'
    >>> format_monomial(((0, 0, 1), (1, 1, 0)))
    'a1† a0'
    >>> format_monomial(())
    '1'
    """
    creators = [_format_power(f"a{mode}†", p) for mode, p, _ in key if p]
    annihilators = [_format_power(f"a{mode}", q) for mode, _, q in key if q]
    parts = creators + annihilators
    return " ".join(parts) if parts else "1"


def _format_coefficient(value: complex) -> str:
    # Adding 0.0 turns a negative zero into +0.0 so it never prints as "-0".
    tidy = complex(value.real + 0.0, value.imag + 0.0)
    if tidy.imag == 0:
        return repr(tidy.real)
    return repr(tidy)


def _is_negative(value: complex) -> bool:
    """True when the coefficient reads best with a leading minus sign."""
    if value.imag == 0:
        return value.real < 0
    return value.real == 0 and value.imag < 0


def _key_count(key: MonomialKey) -> tuple[int, int]:
    """Numbers of creation and annihilation operators of a monomial."""
    return (sum(p for _, p, _ in key), sum(q for _, _, q in key))


def key_of_row(row: Iterable[int], creators: int) -> MonomialKey:
    """The monomial key of one block row (creator modes, then annihilator modes).

    Examples
    --------
    >>> key_of_row([0, 0, 2, 1], 2)
    ((0, 2, 0), (1, 0, 1), (2, 0, 1))
    """
    counts: dict[int, list[int]] = {}
    for position, mode in enumerate(row):
        pair = counts.setdefault(int(mode), [0, 0])
        pair[0 if position < creators else 1] += 1
    return tuple((mode, p, q) for mode, (p, q) in sorted(counts.items()))


class TermBlock:
    """Terms with the same numbers of creation and annihilation operators, as arrays.

    Row ``r`` of :attr:`modes` lists the modes of the creation operators of term ``r``
    (the first ``count[0]`` columns, ascending) then those of its annihilation operators
    (ascending); a mode repeats for a power above one. Rows are unique, sorted, and
    their coefficients nonzero and finite. Blocks live inside a :class:`LadderExpr`
    (made by :func:`fockmill.quadratic_form` and :func:`fockmill.pair_interaction`) so
    that many terms cost arrays, not one Python object each.

    Parameters
    ----------
    count : (int, int)
        Numbers of creation and annihilation operators of every term.
    modes : ndarray of int, shape (n, count[0] + count[1])
        Modes of each term, in any order within the creators and the annihilators;
        repeated rows are summed.
    coefs : ndarray of complex, shape (n,)
        Coefficients; finite.
    """

    __slots__ = ("coefs", "count", "modes")
    count: tuple[int, int]
    modes: npt.NDArray[np.int64]
    coefs: npt.NDArray[np.complex128]

    def __init__(
        self,
        count: tuple[int, int],
        modes: npt.NDArray[np.int64],
        coefs: npt.NDArray[np.complex128],
    ) -> None:
        creators, annihilators = count
        width = creators + annihilators
        rows = np.array(modes, dtype=np.int64, copy=True).reshape(-1, width)
        values = np.asarray(coefs, dtype=np.complex128).reshape(-1)
        if creators > 1:
            rows[:, :creators].sort(axis=1)
        if annihilators > 1:
            rows[:, creators:].sort(axis=1)
        if rows.shape[0] > 1:
            base = int(rows.max()) + 1
            if width and base**width < 2**62:
                # One integer per row (mixed radix): a single sort, same order as lexsort.
                keys = rows @ (base ** np.arange(width - 1, -1, -1, dtype=np.int64))
                order = np.argsort(keys, kind="stable")
                keys = keys[order]
                changed = keys[1:] != keys[:-1]
            else:
                order = np.lexsort(rows.T[::-1])
                changed = np.any(rows[order][1:] != rows[order][:-1], axis=1)
            rows = rows[order]
            values = values[order]
            starts = np.flatnonzero(np.concatenate(([True], changed)))
            if starts.size < rows.shape[0]:
                values = np.add.reduceat(values, starts)
                rows = rows[starts]
        keep = values != 0
        if not keep.all():
            rows, values = rows[keep], values[keep]
        rows = np.ascontiguousarray(rows)
        values = np.ascontiguousarray(values)
        rows.flags.writeable = False
        values.flags.writeable = False
        self.count = (creators, annihilators)
        self.modes = rows
        self.coefs = values

    @classmethod
    def from_keys(
        cls, count: tuple[int, int], items: list[tuple[MonomialKey, complex]]
    ) -> TermBlock:
        """A block from monomial keys (all with ``count`` operators) and coefficients."""
        rows = [
            [mode for mode, p, _ in key for _ in range(p)]
            + [mode for mode, _, q in key for _ in range(q)]
            for key, _ in items
        ]
        return cls(
            count,
            np.array(rows, dtype=np.int64).reshape(len(rows), sum(count)),
            np.array([value for _, value in items], dtype=np.complex128),
        )

    @classmethod
    def concatenate(cls, blocks: list[TermBlock]) -> TermBlock:
        """The sum of blocks with one count (equal rows summed, zeros dropped)."""
        return cls(
            blocks[0].count,
            np.concatenate([b.modes for b in blocks]),
            np.concatenate([b.coefs for b in blocks]),
        )

    def __len__(self) -> int:
        return int(self.coefs.shape[0])

    def scaled(self, factor: complex, *, divide: bool = False) -> TermBlock:
        """The block times ``factor`` (divided by it when ``divide``)."""
        with np.errstate(over="ignore", invalid="ignore"):
            values = self.coefs / factor if divide else self.coefs * factor
        if not np.all(np.isfinite(values)):
            raise ValueError(
                "an operation produced a coefficient that is not finite; coefficients must "
                "be finite numbers (check for overflow, NaN or inf parameters)"
            )
        return TermBlock(self.count, self.modes, values)

    def adjoint(self) -> TermBlock:
        """The adjoint terms: creators and annihilators swapped, coefficients conjugated."""
        creators = self.count[0]
        swapped = np.concatenate((self.modes[:, creators:], self.modes[:, :creators]), axis=1)
        return TermBlock((self.count[1], creators), swapped, self.coefs.conj())

    def same_as(self, other: TermBlock) -> bool:
        """Whether both blocks hold the same terms exactly."""
        return (
            self.count == other.count
            and self.modes.shape == other.modes.shape
            and bool(np.array_equal(self.modes, other.modes))
            and bool(np.array_equal(self.coefs, other.coefs))
        )

    def used_modes(self) -> set[int]:
        """The modes the terms act on."""
        return {int(m) for m in np.unique(self.modes)}

    def is_real(self) -> bool:
        """Whether every coefficient has imaginary part 0."""
        return not np.any(self.coefs.imag)

    def largest(self) -> float:
        """The largest coefficient magnitude (0 for an empty block)."""
        return float(np.abs(self.coefs).max()) if len(self) else 0.0

    def anti_hermitian_largest(self) -> float:
        """Largest magnitude of ``X - X†`` (a block whose adjoint has the same count)."""
        mirrored = self.adjoint()
        difference = TermBlock(
            self.count,
            np.concatenate((self.modes, mirrored.modes)),
            np.concatenate((self.coefs, -mirrored.coefs)),
        )
        return difference.largest()

    def charges(self, weights: Mapping[int, int | float]) -> set[int | float]:
        """The distinct charges ``Σ w (created − annihilated)`` of the terms."""
        if not len(self):
            return set()
        top = int(self.modes.max())
        table = np.array([weights.get(m, 0) for m in range(top + 1)])
        signs = np.array([1] * self.count[0] + [-1] * self.count[1])
        values = (table[self.modes] * signs).sum(axis=1)
        return {v.item() for v in np.unique(values)}

    def items(self) -> Iterable[tuple[MonomialKey, complex]]:
        """``(key, coefficient)`` per term: one Python object per term."""
        creators = self.count[0]
        for row, value in zip(self.modes.tolist(), self.coefs.tolist(), strict=True):
            yield key_of_row(row, creators), complex(value)

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        return (TermBlock, (self.count, np.array(self.modes), np.array(self.coefs)))


def _rebuild(terms: dict[MonomialKey, complex], blocks: tuple[TermBlock, ...]) -> LadderExpr:
    """Unpickle an expression with blocks."""
    return LadderExpr._assemble(terms, blocks)


class LadderExpr:
    """An immutable, normal-ordered polynomial in bosonic ladder operators.

    Parameters
    ----------
    terms : mapping of monomial key to number, optional
        Coefficient of each monomial. Keys are tuples of ``(mode, p, q)``
        triples sorted by mode with one triple per mode and ``p + q > 0``;
        ``()`` is the identity. Terms whose coefficient is exactly zero are
        dropped. Omit for the zero expression.

    Raises
    ------
    TypeError
        If a key is malformed or a coefficient is not a number.
    ValueError
        If a key repeats or misorders modes, has a negative power or an empty
        factor, or a coefficient is not finite.

    Notes
    -----
    Arithmetic with ``+``, ``-``, ``*``, ``/`` (by a number) and ``**`` (by a
    non-negative int) returns new expressions; numbers act as multiples of the
    identity. Products are normal-ordered with ``[a_i, a_j†] = δ_ij`` using
    exact integer weights. ``==`` compares term dictionaries exactly.

    Examples
    --------
    >>> a = lowering(0)
    >>> a * a.adjoint()
    LadderExpr(1.0·a0† a0 + 1.0·1)
    >>> LadderExpr({((0, 1, 1),): 2.0}) == 2 * number(0)
    True
    """

    __slots__ = ("_blocks", "_full", "_terms")
    _terms: dict[MonomialKey, complex]
    # Array-backed terms (see TermBlock), one block per (creators, annihilators) count,
    # sorted by that count; a monomial is either in ``_terms`` or in a block, never both.
    _blocks: tuple[TermBlock, ...]
    # Every term as a dict, made on first request when there are blocks.
    _full: dict[MonomialKey, complex] | None

    # Make numpy scalars and arrays on the left hand operations over to us.
    __array_priority__: ClassVar[float] = 1000.0
    __array_ufunc__: ClassVar[None] = None
    __hash__: ClassVar[None] = None  # type: ignore[assignment]

    def __init__(self, terms: Mapping[MonomialKey, Scalar] | None = None) -> None:
        clean: dict[MonomialKey, complex] = {}
        if terms is not None:
            if not isinstance(terms, Mapping):
                raise TypeError(
                    f"terms must be a mapping from monomial key to coefficient, got "
                    f"{type(terms).__name__}; for example {{((0, 1, 0),): 1.0}} for a0†"
                )
            for raw_key, raw_value in terms.items():
                key = _validate_key(raw_key)
                value = _coefficient(raw_value)
                if value != 0:
                    clean[key] = value
        object.__setattr__(self, "_terms", clean)
        object.__setattr__(self, "_blocks", ())
        object.__setattr__(self, "_full", None)

    @classmethod
    def _wrap(cls, terms: dict[MonomialKey, complex]) -> LadderExpr:
        """Build from an already clean dict (canonical keys, no zeros); no copy."""
        for value in terms.values():
            if not cmath.isfinite(value):
                raise ValueError(
                    f"an operation produced the coefficient {value}; coefficients must be "
                    "finite numbers (check for overflow, NaN or inf parameters)"
                )
        expr = object.__new__(cls)
        object.__setattr__(expr, "_terms", terms)
        object.__setattr__(expr, "_blocks", ())
        object.__setattr__(expr, "_full", None)
        return expr

    @classmethod
    def _assemble(
        cls, terms: dict[MonomialKey, complex], blocks: Iterable[TermBlock]
    ) -> LadderExpr:
        """Build from a clean dict and canonical blocks, merging blocks of one count and
        moving dict terms whose count has a block into it (one home per monomial)."""
        by_count: dict[tuple[int, int], list[TermBlock]] = {}
        for block in blocks:
            by_count.setdefault(block.count, []).append(block)
        if not by_count:
            return cls._wrap(terms)
        loose: dict[tuple[int, int], list[tuple[MonomialKey, complex]]] = {}
        kept: dict[MonomialKey, complex] = {}
        for key, value in terms.items():
            count = _key_count(key)
            if count in by_count:
                loose.setdefault(count, []).append((key, value))
            else:
                kept[key] = value
        merged: list[TermBlock] = []
        for count in sorted(by_count):
            parts = by_count[count]
            if count in loose:
                parts = [*parts, TermBlock.from_keys(count, loose[count])]
            block = parts[0] if len(parts) == 1 else TermBlock.concatenate(parts)
            if len(block):
                merged.append(block)
        expr = cls._wrap(kept)
        object.__setattr__(expr, "_blocks", tuple(merged))
        return expr

    def _all_terms(self) -> dict[MonomialKey, complex]:
        """Every term as a dict (made once when the expression has blocks)."""
        if not self._blocks:
            return self._terms
        if self._full is None:
            full = dict(self._terms)
            for block in self._blocks:
                full.update(block.items())
            object.__setattr__(self, "_full", full)
        return cast(dict[MonomialKey, complex], self._full)

    @classmethod
    def from_terms(cls, terms: Mapping[MonomialKey, Scalar]) -> LadderExpr:
        """Build an expression from a mapping of monomial keys to coefficients.

        Parameters
        ----------
        terms : mapping of monomial key to number
            See :class:`LadderExpr` for the key format.

        Returns
        -------
        LadderExpr
            The expression; exactly-zero coefficients are dropped.

        Raises
        ------
        TypeError, ValueError
            On malformed keys or non-finite coefficients.

        Examples
        --------
        >>> LadderExpr.from_terms({((0, 1, 0), (2, 0, 1)): -0.5, (): 0})
        LadderExpr(-0.5·a0† a2)
        """
        return cls(terms)

    @classmethod
    def scalar(cls, value: Scalar) -> LadderExpr:
        """Return ``value`` times the identity.

        Parameters
        ----------
        value : int, float, complex or numpy number
            A finite coefficient.

        Returns
        -------
        LadderExpr
            ``value·1``, or the zero expression when ``value == 0``.

        Raises
        ------
        TypeError
            If ``value`` is not a number.
        ValueError
            If ``value`` is NaN or infinite.

        Examples
        --------
        >>> LadderExpr.scalar(2.5)
        LadderExpr(2.5·1)
        """
        coefficient = _coefficient(value)
        return cls._wrap({(): coefficient} if coefficient != 0 else {})

    # -- immutability and pickling -------------------------------------------------

    def __setattr__(self, name: str, value: object) -> None:
        raise AttributeError(
            "LadderExpr is immutable; build a new expression with +, -, * or from_terms"
        )

    def __delattr__(self, name: str) -> None:
        raise AttributeError("LadderExpr is immutable")

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        if self._blocks:
            return (_rebuild, (dict(self._terms), self._blocks))
        return (LadderExpr, (dict(self._terms),))

    def __copy__(self) -> LadderExpr:
        return self

    def __deepcopy__(self, memo: dict[int, object]) -> LadderExpr:
        return self

    # -- arithmetic ----------------------------------------------------------------

    def _coerce(self, other: object) -> LadderExpr:
        if isinstance(other, LadderExpr):
            return other
        return LadderExpr.scalar(_coefficient(other))

    def __add__(self, other: LadderExpr | Scalar) -> LadderExpr:
        right = self._coerce(other)
        merged = dict(self._terms)
        for key, value in right._terms.items():
            total = merged.get(key, 0j) + value
            if total == 0:
                merged.pop(key, None)
            else:
                merged[key] = total
        if not self._blocks and not right._blocks:
            return LadderExpr._wrap(merged)
        return LadderExpr._assemble(merged, self._blocks + right._blocks)

    def __radd__(self, other: Scalar) -> LadderExpr:
        return self._coerce(other) + self

    def __neg__(self) -> LadderExpr:
        negated = {key: -value for key, value in self._terms.items()}
        return LadderExpr._assemble(negated, [b.scaled(-1.0) for b in self._blocks])

    def __pos__(self) -> LadderExpr:
        return self

    def __sub__(self, other: LadderExpr | Scalar) -> LadderExpr:
        return self + (-self._coerce(other))

    def __rsub__(self, other: Scalar) -> LadderExpr:
        return self._coerce(other) + (-self)

    def _scale(self, factor: complex) -> LadderExpr:
        scaled: dict[MonomialKey, complex] = {}
        for key, value in self._terms.items():
            product = value * factor
            if product != 0:
                scaled[key] = product
        return LadderExpr._assemble(scaled, [b.scaled(factor) for b in self._blocks])

    def __mul__(self, other: LadderExpr | Scalar) -> LadderExpr:
        if not isinstance(other, LadderExpr):
            return self._scale(_coefficient(other))
        product: dict[MonomialKey, complex] = {}
        # Products of array-backed terms go term by term (one object per term).
        for left_key, left_value in self._all_terms().items():
            for right_key, right_value in other._all_terms().items():
                pair = left_value * right_value
                for weight, key in _multiply_monomials(left_key, right_key):
                    product[key] = product.get(key, 0j) + pair * weight
        return LadderExpr._wrap({key: value for key, value in product.items() if value != 0})

    def __rmul__(self, other: Scalar) -> LadderExpr:
        # Scalars commute with every operator, so the order does not matter.
        return self._scale(_coefficient(other))

    def __truediv__(self, other: Scalar) -> LadderExpr:
        if isinstance(other, LadderExpr):
            raise TypeError("cannot divide by a LadderExpr; only division by a number is defined")
        divisor = _coefficient(other)
        if divisor == 0:
            raise ZeroDivisionError("cannot divide a LadderExpr by zero; pass a nonzero number")
        divided: dict[MonomialKey, complex] = {}
        for key, value in self._terms.items():
            quotient = value / divisor
            if quotient != 0:
                divided[key] = quotient
        return LadderExpr._assemble(divided, [b.scaled(divisor, divide=True) for b in self._blocks])

    def __rtruediv__(self, other: object) -> NoReturn:
        raise TypeError(
            "cannot divide by a LadderExpr; operators have no inverse here, "
            "divide the expression by a number instead"
        )

    def __pow__(self, exponent: ModeIndex, modulo: None = None) -> LadderExpr:
        if modulo is not None:
            raise TypeError("pow() with a modulus is not defined for LadderExpr")
        if isinstance(exponent, (bool, np.bool_)) or not isinstance(exponent, (int, np.integer)):
            _reject_number_as(exponent, "the exponent", "a non-negative int")
        count = int(exponent)
        if count < 0:
            raise ValueError(
                f"the exponent must be a non-negative int, got {count}; "
                "ladder operators have no inverse"
            )
        # Left-to-right repeated product, so x**3 is exactly x*x*x even with floats.
        result = identity()
        for _ in range(count):
            result = result * self
        return result

    def adjoint(self) -> LadderExpr:
        """Return the Hermitian adjoint.

        Returns
        -------
        LadderExpr
            Coefficients conjugated and creation/annihilation powers swapped;
            a normal-ordered monomial stays normal ordered under this.

        Examples
        --------
        >>> (2j * raising(0) * lowering(1)).adjoint()
        LadderExpr(-2j·a1† a0)
        """
        return LadderExpr._assemble(
            {
                tuple((mode, q, p) for mode, p, q in key): value.conjugate()
                for key, value in self._terms.items()
            },
            [b.adjoint() for b in self._blocks],
        )

    # -- comparison ----------------------------------------------------------------

    def __eq__(self, other: object) -> bool:
        if isinstance(other, LadderExpr):
            mine = [b.count for b in self._blocks]
            if mine == [b.count for b in other._blocks]:
                return self._terms == other._terms and all(
                    a.same_as(b) for a, b in zip(self._blocks, other._blocks, strict=True)
                )
            return self._all_terms() == other._all_terms()
        if not _is_number(other):
            return NotImplemented
        try:
            return self._all_terms() == LadderExpr.scalar(other)._terms  # type: ignore[arg-type]
        except ValueError:
            return False  # NaN and infinities equal no expression

    # -- inspection ----------------------------------------------------------------

    def terms(self) -> list[tuple[complex, MonomialKey]]:
        """Return ``(coefficient, key)`` pairs sorted by key.

        Returns
        -------
        list of (complex, tuple)
            One pair per nonzero term, in a deterministic order.

        Examples
        --------
        >>> (3 + raising(1)).terms()
        [((3+0j), ()), ((1+0j), ((1, 1, 0),))]
        """
        every = self._all_terms()
        return [(every[key], key) for key in sorted(every)]

    def is_zero(self) -> bool:
        """Return True when the expression has no terms.

        Examples
        --------
        >>> (number(0) - number(0)).is_zero()
        True
        """
        return not self._terms and not self._blocks

    def term_count(self) -> int:
        """Return the number of terms, without making one object per term.

        Examples
        --------
        >>> (number(0) + 2 * raising(1) + 3).term_count()
        3
        """
        return len(self._terms) + sum(len(b) for b in self._blocks)

    def modes(self) -> tuple[int, ...]:
        """Return the sorted modes that carry an operator.

        Examples
        --------
        >>> (raising(3) * lowering(1) + 2).modes()
        (1, 3)
        """
        used = {mode for key in self._terms for mode, _, _ in key}
        for block in self._blocks:
            used.update(block.used_modes())
        return tuple(sorted(used))

    def max_mode(self) -> int:
        """Return the largest mode used, or -1 when the expression is a scalar.

        Examples
        --------
        >>> number(4).max_mode(), identity().max_mode()
        (4, -1)
        """
        used = self.modes()
        return used[-1] if used else -1

    def degree(self) -> int:
        """Return the largest total number of ladder operators in one term.

        Examples
        --------
        >>> (raising(0) ** 2 * lowering(1) + number(2)).degree()
        3
        """
        blocks = (sum(b.count) for b in self._blocks)
        return max([*(sum(p + q for _, p, q in key) for key in self._terms), *blocks], default=0)

    def is_real(self) -> bool:
        """Return True when every coefficient has imaginary part exactly 0.

        Examples
        --------
        >>> number(0).is_real(), (1j * number(0)).is_real()
        (True, False)
        """
        return all(value.imag == 0 for value in self._terms.values()) and all(
            b.is_real() for b in self._blocks
        )

    def is_hermitian(self, tol: float = 1e-12) -> bool:
        """Return True when the expression equals its adjoint within ``tol``.

        Parameters
        ----------
        tol : float, default 1e-12
            Relative tolerance: each coefficient of ``X - X†`` must be at most
            ``tol`` times the largest coefficient magnitude of ``X``. Use 0 for
            an exact check.

        Returns
        -------
        bool

        Raises
        ------
        ValueError
            If ``tol`` is negative or not finite.

        Examples
        --------
        >>> (raising(0) + lowering(0)).is_hermitian()
        True
        >>> raising(0).is_hermitian()
        False
        """
        if isinstance(tol, bool) or not isinstance(tol, (int, float, np.integer, np.floating)):
            _reject_number_as(tol, "tol", "a non-negative float")
        if not math.isfinite(tol) or tol < 0:
            raise ValueError(f"tol must be a finite non-negative float, got {tol!r}")
        if self.is_zero():
            return True
        if any(b.count[0] != b.count[1] for b in self._blocks):
            # A block's adjoint lives elsewhere: compare term by term.
            every = self._all_terms()
            scale = max(abs(value) for value in every.values())
            mirrored = self.adjoint()._all_terms()
            return all(
                abs(every.get(key, 0j) - mirrored.get(key, 0j)) <= tol * scale
                for key in every.keys() | mirrored.keys()
            )
        # Each block is mapped onto itself by the adjoint, and so is the dict.
        scale = max(
            [*(abs(value) for value in self._terms.values()), *(b.largest() for b in self._blocks)]
        )
        mirrored = {
            tuple((mode, q, p) for mode, p, q in key): value.conjugate()
            for key, value in self._terms.items()
        }
        if not all(
            abs(self._terms.get(key, 0j) - mirrored.get(key, 0j)) <= tol * scale
            for key in self._terms.keys() | mirrored.keys()
        ):
            return False
        return all(b.anti_hermitian_largest() <= tol * scale for b in self._blocks)

    def hermitian_part(self) -> LadderExpr:
        """Return ``(X + X†) / 2``.

        Examples
        --------
        >>> (2 * raising(0)).hermitian_part()
        LadderExpr(1.0·a0 + 1.0·a0†)
        """
        return (self + self.adjoint()) / 2

    def charge(self, weights: Mapping[int, float] | Iterable[float]) -> set[int | float]:
        """Return the set of charges ``Σ_i w_i (p_i - q_i)`` over the terms.

        A term with ``p_i`` creations and ``q_i`` annihilations on mode ``i``
        changes the conserved quantity ``Σ_i w_i n_i`` by this amount, so an
        expression conserves it exactly when the result is ``{0}``.

        Parameters
        ----------
        weights : mapping of mode to number, or sequence of numbers
            Weight ``w_i`` of each mode. A sequence must cover every mode used;
            modes missing from a mapping have weight 0.

        Returns
        -------
        set of int or float
            One entry per distinct charge; empty for the zero expression.

        Raises
        ------
        TypeError
            If a weight is not a real number.
        ValueError
            If a weight is not finite or a sequence is too short.

        Examples
        --------
        >>> (raising(0) * lowering(1) + raising(1) * lowering(0)).charge([1, 1])
        {0}
        >>> sorted((raising(0) + lowering(0) ** 2).charge([1]))
        [-2, 1]
        """
        lookup: dict[int, int | float]
        if isinstance(weights, Mapping):
            lookup = {_validate_mode(mode): _real_weight(w, mode) for mode, w in weights.items()}
        else:
            if isinstance(weights, (str, bytes)):
                _reject_number_as(weights, "weights", "a sequence or mapping of numbers")
            lookup = {mode: _real_weight(w, mode) for mode, w in enumerate(weights)}
            if self.max_mode() >= len(lookup):
                raise ValueError(
                    f"weights has {len(lookup)} entries but the expression uses mode "
                    f"{self.max_mode()}; give one weight per mode"
                )
        found = {sum(lookup.get(mode, 0) * (p - q) for mode, p, q in key) for key in self._terms}
        for block in self._blocks:
            found.update(block.charges(lookup))
        return found

    def filter(self, predicate: Callable[[complex, MonomialKey], bool]) -> LadderExpr:
        """Return the terms for which ``predicate(coefficient, key)`` is true.

        Parameters
        ----------
        predicate : callable
            Called with each coefficient and monomial key.

        Returns
        -------
        LadderExpr

        Examples
        --------
        >>> (number(0) + 2 * raising(1)).filter(lambda c, key: abs(c) > 1)
        LadderExpr(2.0·a1†)
        """
        return LadderExpr._wrap(
            {key: value for key, value in self._all_terms().items() if predicate(value, key)}
        )

    def to_native(self) -> list[NativeTerm]:
        """Return the terms in the form the native binding takes.

        Returns
        -------
        list of (float, float, list of (int, int, int))
            ``(real part, imaginary part, factors)`` per term, sorted by key,
            factors being ``(mode, p, q)`` triples sorted by mode.

        Examples
        --------
        >>> (0.5j * raising(0) * lowering(2)).to_native()
        [(0.0, 0.5, [(0, 1, 0), (2, 0, 1)])]
        """
        return [(value.real, value.imag, list(key)) for value, key in self.terms()]

    def to_native_parts(self) -> tuple[list[NativeTerm], list[NativeBlock]]:
        """Return the terms in the binding's form without one object per array term.

        Returns
        -------
        terms : list of (float, float, list of (int, int, int))
            The terms kept one by one, as :meth:`to_native`.
        blocks : list of (int, ndarray, ndarray, ndarray)
            The array-backed terms, one entry per count of ladder operators:
            ``(creators, modes, re, im)`` where row ``r`` of the int64 array ``modes``
            lists the modes of the creation operators (its first ``creators`` columns)
            then those of the annihilation operators of term ``r`` (a mode repeats for a
            power above one), and ``re[r] + 1j * im[r]`` is its coefficient.

        Examples
        --------
        >>> import numpy as np
        >>> import fockmill as fm
        >>> terms, blocks = (fm.quadratic_form(np.eye(2)) + 1).to_native_parts()
        >>> terms
        [(1.0, 0.0, [])]
        >>> creators, modes, re, im = blocks[0]
        >>> creators, modes.tolist(), re.tolist()
        (1, [[0, 0], [1, 1]], [1.0, 1.0])
        """
        terms = [(value.real, value.imag, list(key)) for key, value in sorted(self._terms.items())]
        blocks = [
            (
                b.count[0],
                b.modes,
                np.ascontiguousarray(b.coefs.real),
                np.ascontiguousarray(b.coefs.imag),
            )
            for b in self._blocks
        ]
        return terms, blocks

    # -- rendering -----------------------------------------------------------------

    def __str__(self) -> str:
        # Same order as terms(), except that the constant term goes last.
        ordered = [pair for pair in self.terms() if pair[1]]
        ordered += [pair for pair in self.terms() if not pair[1]]
        if not ordered:
            return "0"
        pieces: list[str] = []
        for position, (value, key) in enumerate(ordered):
            body = format_monomial(key)
            if position == 0:
                pieces.append(f"{_format_coefficient(value)}·{body}")
            elif _is_negative(value):
                pieces.append(f" - {_format_coefficient(-value)}·{body}")
            else:
                pieces.append(f" + {_format_coefficient(value)}·{body}")
        return "".join(pieces)

    def __repr__(self) -> str:
        return f"LadderExpr({self})"


def _real_weight(value: object, mode: object) -> int | float:
    if isinstance(value, (bool, np.bool_)) or not isinstance(
        value, (int, float, np.integer, np.floating)
    ):
        _reject_number_as(value, f"the weight of mode {mode}", "a real number")
    if isinstance(value, (int, np.integer)):
        return int(value)
    result = float(value)
    if not math.isfinite(result):
        raise ValueError(f"the weight of mode {mode} must be finite, got {value!r}")
    return result


def _single_factor(mode: object, creation: int, annihilation: int) -> LadderExpr:
    return LadderExpr._wrap({((_validate_mode(mode), creation, annihilation),): 1 + 0j})


def lowering(mode: ModeIndex) -> LadderExpr:
    """Return the annihilation operator ``a_mode``.

    Parameters
    ----------
    mode : int
        Non-negative mode index (a Python or numpy integer).

    Returns
    -------
    LadderExpr

    Raises
    ------
    TypeError
        If ``mode`` is not an integer (bools and floats are rejected).
    ValueError
        If ``mode`` is negative.

    Examples
    --------
    >>> lowering(2)
    LadderExpr(1.0·a2)
    """
    return _single_factor(mode, 0, 1)


def raising(mode: ModeIndex) -> LadderExpr:
    """Return the creation operator ``a_mode†``.

    Parameters
    ----------
    mode : int
        Non-negative mode index (a Python or numpy integer).

    Returns
    -------
    LadderExpr

    Raises
    ------
    TypeError
        If ``mode`` is not an integer (bools and floats are rejected).
    ValueError
        If ``mode`` is negative.

    Examples
    --------
    >>> raising(0) ** 2
    LadderExpr(1.0·a0†^2)
    """
    return _single_factor(mode, 1, 0)


def number(mode: ModeIndex) -> LadderExpr:
    """Return the number operator ``a_mode† a_mode``.

    Parameters
    ----------
    mode : int
        Non-negative mode index (a Python or numpy integer).

    Returns
    -------
    LadderExpr

    Raises
    ------
    TypeError
        If ``mode`` is not an integer (bools and floats are rejected).
    ValueError
        If ``mode`` is negative.

    Examples
    --------
    >>> number(1) == raising(1) * lowering(1)
    True
    """
    return _single_factor(mode, 1, 1)


def identity() -> LadderExpr:
    """Return the identity operator.

    Returns
    -------
    LadderExpr

    Examples
    --------
    >>> identity()
    LadderExpr(1.0·1)
    """
    return LadderExpr._wrap({(): 1 + 0j})


def as_expr(expr: object) -> LadderExpr:
    """An expression, accepting plain numbers as multiples of the identity."""
    if isinstance(expr, LadderExpr):
        return expr
    if isinstance(expr, numbers.Number | np.number) and not isinstance(expr, bool):
        return LadderExpr.scalar(expr)  # type: ignore[arg-type]
    raise TypeError(
        f"expected a LadderExpr built from fm.lowering/raising/number; got {type(expr).__name__}"
    )
