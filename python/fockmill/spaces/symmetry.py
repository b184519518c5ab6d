"""Symmetry sectors: groups of mode permutations and their one-dimensional representations.

A :class:`ModePermutation` moves the occupation of mode ``i`` to mode ``images[i]``. A
:class:`SymmetricSpace` restricts a :class:`~fockmill.FockSpace` to the states with
``g|ψ⟩ = exp(2πi q / g.order)|ψ⟩`` for each generator ``g`` and its label ``q``; its
basis is one symmetrised state per orbit of basis states (see the Rust module
``symmetry`` for the construction). Matrices, operators and solvers accept a sector in
place of a space for Hamiltonians that commute with every generator; observables accept
any expression (they expand the state to the base space first).
"""

from __future__ import annotations

import cmath
import math
import numbers
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import numpy.typing as npt

import fockmill._native as _native
from fockmill.algebra.expressions import LadderExpr, MonomialKey, format_monomial
from fockmill.exceptions import SymmetryError
from fockmill.settings.checks import check_threads
from fockmill.spaces.fock import Charge, FockSpace

__all__ = [
    "ModePermutation",
    "SymmetricSpace",
    "ring_reflection",
    "ring_translation",
    "torus_translations",
]

#: Relative tolerance of the invariance check (coefficients compared to the largest).
INVARIANCE_TOL = 1e-12


def _weights_at(space: FockSpace, mode: int) -> int | tuple[int, ...]:
    """The weight of ``mode`` in the space's charge (one per charge with several)."""
    if not space.several:
        return space.weights[mode]
    return tuple(
        c.weights if isinstance(c.weights, int) else c.weights[mode] for c in space.charges
    )


class ModePermutation:
    """A permutation of the modes, acting on states by moving occupations.

    Parameters
    ----------
    images : sequence of int
        ``images[i]`` is the mode the occupation of mode ``i`` moves to; must list each
        of ``0 .. len(images) - 1`` exactly once.

    Raises
    ------
    TypeError
        When ``images`` is not a sequence of integers.
    SymmetryError
        When it is not a bijection of ``0 .. len(images) - 1``.

    Notes
    -----
    On operators the permutation acts as ``g a_i g⁻¹ = a_{images[i]}``. ``g * h``
    applies ``h`` first, then ``g``.

    Examples
    --------
    >>> t = ModePermutation([1, 2, 0])
    >>> t.order, (t * t).images, t.inverse().images
    (3, (2, 0, 1), (2, 0, 1))
    """

    __slots__ = ("_images", "_order")

    def __init__(self, images: Sequence[int]) -> None:
        if isinstance(images, str | bytes) or not isinstance(images, Sequence | np.ndarray):
            raise TypeError(
                f"images must be a sequence of mode indices such as [1, 2, 0]; got {images!r}"
            )
        values: list[int] = []
        for i, v in enumerate(images):
            if isinstance(v, bool | np.bool_) or not isinstance(v, numbers.Integral):
                raise TypeError(f"images[{i}] must be an integer mode index; got {v!r}")
            values.append(int(v))
        m = len(values)
        if m == 0:
            raise SymmetryError("a permutation needs at least one mode; give images of modes")
        if sorted(values) != list(range(m)):
            missing = sorted(set(range(m)) - set(values))
            raise SymmetryError(
                f"images {values} are not a bijection of the modes 0..{m - 1} (missing "
                f"{missing}); list every mode exactly once"
            )
        self._images = tuple(values)
        order = 1
        seen = [False] * m
        for start in range(m):
            length = 0
            i = start
            while not seen[i]:
                seen[i] = True
                i = values[i]
                length += 1
            if length:
                order = order * length // math.gcd(order, length)
        self._order = order

    @property
    def images(self) -> tuple[int, ...]:
        """Where the occupation of each mode moves."""
        return self._images

    @property
    def modes(self) -> int:
        """Number of modes permuted."""
        return len(self._images)

    @property
    def order(self) -> int:
        """Smallest ``m >= 1`` with ``g**m`` the identity."""
        return self._order

    def __mul__(self, other: ModePermutation) -> ModePermutation:
        if not isinstance(other, ModePermutation):
            return NotImplemented
        if other.modes != self.modes:
            raise SymmetryError(
                f"cannot compose permutations of {self.modes} and {other.modes} modes"
            )
        return ModePermutation([self._images[j] for j in other._images])

    def __pow__(self, exponent: int) -> ModePermutation:
        if isinstance(exponent, bool) or not isinstance(exponent, numbers.Integral):
            return NotImplemented
        e = int(exponent) % self._order
        out = ModePermutation(list(range(self.modes)))
        for _ in range(e):
            out = self * out
        return out

    def inverse(self) -> ModePermutation:
        """The inverse permutation."""
        inv = [0] * self.modes
        for i, j in enumerate(self._images):
            inv[j] = i
        return ModePermutation(inv)

    def apply(self, expr: LadderExpr) -> LadderExpr:
        """The expression with every mode ``i`` renamed ``images[i]`` (``g O g⁻¹``)."""
        moved: dict[MonomialKey, complex] = {}
        for c, key in expr.terms():
            moved[_move(key, self._images)] = c
        return LadderExpr.from_terms(moved)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, ModePermutation):
            return NotImplemented
        return self._images == other._images

    def __hash__(self) -> int:
        return hash(self._images)

    def __repr__(self) -> str:
        return f"ModePermutation({list(self._images)})"


def _unit_root(turn: Any) -> complex:
    """``exp(2πi·turn)`` for a fraction of a turn, exact at multiples of a quarter turn."""
    quarter = (turn * 4) % 4
    if quarter.denominator == 1:
        return (1 + 0j, 1j, -1 + 0j, -1j)[int(quarter)]
    return cmath.exp(2j * cmath.pi * float(turn))


def _move(key: MonomialKey, images: Sequence[int]) -> MonomialKey:
    return tuple(sorted((images[m], p, q) for m, p, q in key))


def _check_count(value: object, name: str, minimum: int) -> int:
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Integral):
        raise TypeError(f"{name} must be an integer >= {minimum}; got {value!r}")
    if int(value) < minimum:
        raise SymmetryError(f"{name} must be >= {minimum}; got {value}")
    return int(value)


def ring_translation(sites: int, *, orbitals: int = 1) -> ModePermutation:
    """Translation by one site of a ring: site ``s`` moves to ``s + 1 (mod sites)``.

    Parameters
    ----------
    sites : int
        Number of sites (>= 1).
    orbitals : int
        Modes per site; mode ``s * orbitals + o`` is orbital ``o`` of site ``s`` (for
        example a cavity and an emitter per site).

    Examples
    --------
    >>> ring_translation(4).images
    (1, 2, 3, 0)
    """
    n = _check_count(sites, "sites", 1)
    k = _check_count(orbitals, "orbitals", 1)
    return ModePermutation([((i // k + 1) % n) * k + i % k for i in range(n * k)])


def ring_reflection(sites: int, *, orbitals: int = 1) -> ModePermutation:
    """Reflection of a ring (or open chain) about its centre: site ``s`` to ``sites-1-s``.

    With :func:`ring_translation` it only gives a one-dimensional representation at
    momentum labels 0 and ``sites/2``.

    Examples
    --------
    >>> ring_reflection(4).images
    (3, 2, 1, 0)
    """
    n = _check_count(sites, "sites", 1)
    k = _check_count(orbitals, "orbitals", 1)
    return ModePermutation([(n - 1 - i // k) * k + i % k for i in range(n * k)])


def torus_translations(
    rows: int, cols: int, *, orbitals: int = 1
) -> tuple[ModePermutation, ModePermutation]:
    """The two commuting unit translations of a ``rows × cols`` torus.

    Site ``(r, c)`` is site ``r * cols + c``. Returns ``(along_cols, along_rows)``:
    ``(r, c) → (r, c + 1)`` and ``(r, c) → (r + 1, c)``, periodic.

    Examples
    --------
    >>> tx, ty = torus_translations(2, 3)
    >>> tx.images, ty.images
    ((1, 2, 0, 4, 5, 3), (3, 4, 5, 0, 1, 2))
    """
    nr = _check_count(rows, "rows", 1)
    nc = _check_count(cols, "cols", 1)
    k = _check_count(orbitals, "orbitals", 1)

    def site(r: int, c: int) -> int:
        return (r % nr) * nc + c % nc

    along_cols = []
    along_rows = []
    for i in range(nr * nc * k):
        s, o = divmod(i, k)
        r, c = divmod(s, nc)
        along_cols.append(site(r, c + 1) * k + o)
        along_rows.append(site(r + 1, c) * k + o)
    return ModePermutation(along_cols), ModePermutation(along_rows)


class SymmetricSpace:
    """The sector of a Fock space with given characters of a group of mode permutations.

    Parameters
    ----------
    space : FockSpace
        The base space (any cutoffs, weights, total or modulus); every generator must map
        each mode to a mode with the same cutoff and weight.
    symmetries : sequence of (ModePermutation, int)
        Generators ``g`` with labels ``q`` in ``range(g.order)``: the sector holds the
        states with ``g|ψ⟩ = exp(2πi q / g.order)|ψ⟩``. The labels must define a
        one-dimensional representation of the group the generators generate.
    threads : int, optional
        Threads for enumerating the orbits (default: all cores).
    orbit_table : bool or None, optional
        Whether to keep a table from every base state to its orbit's sector state (4
        bytes per base state, one more when some character is not 1): products and
        builds then find each image's column with one read instead of a search over
        the group, and groups that are not rotations of the mode order are enumerated
        in one pass over the base space. ``None`` (default) keeps it when the group has
        at most 256 elements and the table takes at most a quarter of the memory
        available; ``True`` insists (``SizeLimitError`` with the size when it does not
        fit); ``False`` never keeps it. Results are the same either way, to the bit.

    Raises
    ------
    TypeError
        For arguments of the wrong type.
    SymmetryError
        For a permutation of the wrong size or one that breaks the cutoffs or weights,
        labels out of range, or labels that are no one-dimensional representation (for
        a translation with a reflection only momentum labels 0 and L/2 are).

    Notes
    -----
    The basis is one normalised state per orbit whose stabiliser has the trivial
    character, ``|r̃⟩ = o_r^{-1/2} Σ_{s ∈ orbit(r)} χ(g_s)^* |s⟩``, labelled by the
    orbit's first state in the base order and sorted by it. An empty sector
    (``dim == 0``) is allowed. Enumerating it walks the whole base space once and keeps
    one bit per base state (``base.dim / 8`` bytes) plus 8 bytes per sector state, and
    the orbit table when it is kept.
    Matrices on a sector are complex128 unless every character is real (±1) and the
    coefficients are real.

    Examples
    --------
    >>> import fockmill as fm
    >>> base = fm.FockSpace(modes=4, cutoff=4, total=4)
    >>> t, r = fm.ring_translation(4), fm.ring_reflection(4)
    >>> [fm.SymmetricSpace(base, [(t, k)]).dim for k in range(4)]
    [10, 8, 9, 8]
    >>> fm.SymmetricSpace(base, [(t, 0), (r, 0)]).dim
    8
    """

    __slots__ = ("_base", "_native", "_symmetries")

    def __init__(
        self,
        space: FockSpace,
        symmetries: Sequence[tuple[ModePermutation, int]],
        *,
        threads: int | None = None,
        orbit_table: bool | None = None,
    ) -> None:
        if not isinstance(space, FockSpace):
            raise TypeError(f"space must be a fm.FockSpace; got {type(space).__name__}")
        if isinstance(symmetries, str | bytes) or not isinstance(symmetries, Sequence):
            raise TypeError(
                "symmetries must be a list of (fm.ModePermutation, label) pairs; got "
                f"{symmetries!r}"
            )
        pairs: list[tuple[ModePermutation, int]] = []
        for n, item in enumerate(symmetries):
            if not isinstance(item, tuple | list) or len(item) != 2:
                raise TypeError(
                    f"symmetries[{n}] must be a (fm.ModePermutation, label) pair; got {item!r}"
                )
            g, q = item
            if not isinstance(g, ModePermutation):
                raise TypeError(
                    f"symmetries[{n}][0] must be a fm.ModePermutation; got {type(g).__name__}"
                )
            if isinstance(q, bool | np.bool_) or not isinstance(q, numbers.Integral):
                raise TypeError(f"the label of generator {n} must be an integer; got {q!r}")
            q = int(q)
            if g.modes != space.modes:
                raise SymmetryError(
                    f"generator {n} ({g!r}) permutes {g.modes} modes but the space has "
                    f"{space.modes}; give one image per mode"
                )
            for i, j in enumerate(g.images):
                if space.cutoffs[i] != space.cutoffs[j] or _weights_at(space, i) != _weights_at(
                    space, j
                ):
                    raise SymmetryError(
                        f"generator {n} ({g!r}) moves mode {i} (cutoff {space.cutoffs[i]}, "
                        f"weight {_weights_at(space, i)}) to mode {j} (cutoff "
                        f"{space.cutoffs[j]}, weight {_weights_at(space, j)}); a symmetry "
                        "must map each mode to one with the same cutoff and weight (in every "
                        "conserved charge)"
                    )
            if not 0 <= q < g.order:
                raise SymmetryError(
                    f"the label of generator {n} ({g!r}) is {q}, but it has order {g.order}: "
                    f"labels run over 0..{g.order - 1} (the character is "
                    "exp(2πi·label/order))"
                )
            pairs.append((g, q))
        if orbit_table is not None and not isinstance(orbit_table, bool):
            raise TypeError(
                f"orbit_table must be True, False or None (automatic); got {orbit_table!r}"
            )
        try:
            native = _native.NativeSymmetricSpace(
                space.native,
                [(list(g.images), q) for g, q in pairs],
                check_threads(threads),
                orbit_table,
            )
        except SymmetryError as exc:
            names = "; ".join(f"generator {n} = {g!r}" for n, (g, _) in enumerate(pairs))
            raise SymmetryError(f"{exc} ({names})") from None
        self._base = space
        self._symmetries = tuple(pairs)
        self._native = native

    # -- what the rest of the package asks of a space -----------------------------

    @property
    def base(self) -> FockSpace:
        """The base Fock space."""
        return self._base

    @property
    def symmetries(self) -> tuple[tuple[ModePermutation, int], ...]:
        """The ``(generator, label)`` pairs."""
        return self._symmetries

    @property
    def dim(self) -> int:
        """Number of sector states (0 for an empty sector)."""
        return int(self._native.dim)

    @property
    def orbit_table_bytes(self) -> int:
        """Bytes of the sector's orbit table (0 without one; see ``orbit_table``)."""
        return int(self._native.orbit_table_bytes)

    @property
    def group_order(self) -> int:
        """Number of elements of the group the generators generate."""
        return int(self._native.order)

    @property
    def is_real(self) -> bool:
        """Whether every character is real (±1)."""
        return bool(self._native.is_real)

    @property
    def native(self) -> _native.NativeSymmetricSpace:
        """The compiled sector (for the binding layer)."""
        return self._native

    @property
    def modes(self) -> int:
        """Number of modes of the base space."""
        return self._base.modes

    @property
    def cutoffs(self) -> tuple[int, ...]:
        """Cutoffs of the base space."""
        return self._base.cutoffs

    @property
    def weights(self) -> tuple[int, ...]:
        """Weights of the base space."""
        return self._base.weights

    @property
    def several(self) -> bool:
        """Whether the base space fixes several charges."""
        return self._base.several

    @property
    def charges(self) -> tuple[Charge, ...]:
        """The conserved charges of the base space."""
        return self._base.charges

    def conserves(self, changes: Mapping[int, int]) -> bool:
        """As :meth:`FockSpace.conserves` of the base space."""
        return self._base.conserves(changes)

    @property
    def total(self) -> int | None:
        """Conserved total of the base space."""
        return self._base.total

    @property
    def modulus(self) -> int | None:
        """Modulus of the base space's charge."""
        return self._base.modulus

    def binding_cutoffs(self) -> tuple[bool, ...]:
        """As :meth:`FockSpace.binding_cutoffs` of the base space."""
        return self._base.binding_cutoffs()

    def characters(self) -> list[complex]:
        """The character ``exp(2πi q / order)`` of each generator, in order."""
        return [cmath.exp(2j * cmath.pi * q / g.order) for g, q in self._symmetries]

    def representatives(self) -> npt.NDArray[np.int64]:
        """Base-space index of each sector state's orbit representative, ascending."""
        return self._native.representatives().astype(np.int64)

    # -- vectors ------------------------------------------------------------------

    def _vector(self, v: npt.ArrayLike, n: int, what: str) -> npt.NDArray[Any]:
        arr = np.asarray(v)
        if arr.dtype.kind not in "fciu" or arr.dtype.kind == "b":
            raise TypeError(f"{what} must be a float or complex array; got dtype {arr.dtype}")
        if arr.ndim != 1 or arr.shape[0] != n:
            raise ValueError(f"{what} must have shape ({n},); got {arr.shape}")
        out = np.ascontiguousarray(arr, dtype=np.complex128 if arr.dtype.kind == "c" else float)
        if not np.all(np.isfinite(out)):
            raise ValueError(f"{what} contains NaN or inf; give finite amplitudes")
        return out

    def expand(self, v: npt.ArrayLike, *, threads: int | None = None) -> npt.NDArray[Any]:
        """The base-space vector of a sector vector (preserves norms and inner products).

        Costs one pass over the base space (``|G|`` short comparisons per base state).
        """
        x = self._vector(v, self.dim, "the sector vector")
        return self._native.expand(x, check_threads(threads))

    def project(self, w: npt.ArrayLike, *, threads: int | None = None) -> npt.NDArray[Any]:
        """The sector components of a base-space vector: the adjoint of :meth:`expand`.

        ``project(expand(v)) == v``; ``expand(project(w))`` is the part of ``w`` in the
        sector.
        """
        x = self._vector(w, self._base.dim, "the base-space vector")
        return self._native.project(x, check_threads(threads))

    # -- operators ----------------------------------------------------------------

    def check_invariant(self, expr: LadderExpr) -> None:
        """Refuse an expression that some generator does not leave invariant.

        Raises
        ------
        SymmetryError
            Naming the first term whose image under a generator has another coefficient.
        """
        terms = {key: c for c, key in expr.terms()}
        scale = max((abs(c) for c in terms.values()), default=0.0)
        for n, (g, _) in enumerate(self._symmetries):
            for key, c in terms.items():
                moved = _move(key, g.images)
                other = terms.get(moved, 0.0)
                if abs(other - c) > INVARIANCE_TOL * scale:
                    raise SymmetryError(
                        f"the operator is not invariant under generator {n} ({g!r}): it maps "
                        f"the term {c}·{format_monomial(key)} to {format_monomial(moved)}, whose "
                        f"coefficient is {other}; only operators commuting with every generator "
                        "can be built or solved on a sector (use the base space, or make the "
                        "couplings symmetric)"
                    )

    def group(self) -> list[ModePermutation]:
        """Every element of the group the generators make (the identity first)."""
        identity = ModePermutation(list(range(self.modes)))
        elements = [identity]
        seen = {identity}
        for element in elements:  # grows while it is read: a breadth-first closure
            for g, _ in self._symmetries:
                product = g * element
                if product not in seen:
                    seen.add(product)
                    elements.append(product)
        return elements

    def symmetrize(self, expr: LadderExpr) -> LadderExpr:
        """The group average ``(1/|G|) Σ_g g O g⁻¹`` of ``expr``: invariant, and with the
        same expectation value as ``expr`` in every state of every one-dimensional
        sector (``⟨ψ|g O g⁻¹|ψ⟩ = |χ(g)|² ⟨ψ|O|ψ⟩``), so an observable such as the
        occupation of one site can be measured inside a momentum sector.

        Examples
        --------
        >>> import fockmill as fm
        >>> sector = fm.SymmetricSpace(
        ...     fm.FockSpace(modes=3, cutoff=1, total=1), [(fm.ring_translation(3), 0)]
        ... )
        >>> print(sector.symmetrize(fm.number(0)))
        0.3333333333333333·a0† a0 + 0.3333333333333333·a1† a1 + 0.3333333333333333·a2† a2
        """
        elements = self.group()
        total = LadderExpr()
        for g in elements:
            total = total + g.apply(expr)
        return total * (1.0 / len(elements))

    def operator_labels(self, expr: LadderExpr) -> tuple[int, ...]:
        """The label ``p`` of each generator under which ``expr`` has a definite character,
        ``g A g⁻¹ = exp(2πi p / g.order) A``.

        ``A`` then carries this sector (labels ``q``) into the sector with labels
        ``q + p`` (mod each order): ``g A|ψ⟩ = χ_A(g) χ(g) A|ψ⟩``. An invariant operator
        has every ``p = 0``; the zero operator has every label and gets 0. With the
        labels' convention ``g|ψ⟩ = exp(2πi q / order)|ψ⟩`` and ``g a_j g⁻¹ = a_{g(j)}``,
        the density wave ``Σ_j exp(2πi k j / L) n_j`` of a ring has ``p = −k mod L``.

        Raises
        ------
        SymmetryError
            ``expr`` has no definite character under some generator (the message names
            the generator and a term whose image breaks it).

        Examples
        --------
        >>> import cmath, fockmill as fm
        >>> t = fm.ring_translation(4)
        >>> sector = fm.SymmetricSpace(fm.FockSpace(modes=4, cutoff=2, total=2), [(t, 0)])
        >>> rho = sum(cmath.exp(2j * cmath.pi * j / 4) * fm.number(j) for j in range(4))
        >>> sector.operator_labels(rho)
        (3,)
        """
        return tuple(0 if p is None else p for p in self._labels(expr))

    def _labels(self, expr: LadderExpr) -> list[int | None]:
        """:meth:`operator_labels`, None for every generator when ``expr`` is zero."""
        try:
            found = self._native.operator_labels(expr.to_native())
        except SymmetryError as exc:
            names = "; ".join(f"generator {n} = {g!r}" for n, (g, _) in enumerate(self._symmetries))
            raise SymmetryError(f"{exc} ({names})") from None
        return [None if p is None else int(p) for p in found]

    def component(self, expr: LadderExpr, labels: Sequence[int]) -> LadderExpr:
        """The part of ``expr`` with the character of ``labels`` under the generators:
        ``O_p = |G|^{-1/2} Σ_{g ∈ G} χ_p(g)^* g O g⁻¹``, ``χ_p(g_k) = exp(2πi p_k / order_k)``.

        ``h O_p h⁻¹ = χ_p(h) O_p`` for every ``h``, so ``O_p`` carries a sector with labels
        ``q`` into ``q + p``. For ``O = n_0`` on a ring of ``L`` sites this is the density
        wave ``L^{-1/2} Σ_j exp(−2πi p j / L) n_j``; for ``O = a_0`` the annihilator
        ``a_κ`` removing momentum ``κ = −2πp/L`` in the sectors' convention (the momentum
        label of the sector rises by ``p``). The group is this sector's; the sector's own
        labels play no part.

        Raises
        ------
        SymmetryError
            ``labels`` has the wrong length, a label out of range, or labels that make no
            one-dimensional representation (a translation with a reflection at a momentum
            other than 0 or L/2).

        Examples
        --------
        >>> import fockmill as fm
        >>> t = fm.ring_translation(2)
        >>> sector = fm.SymmetricSpace(fm.FockSpace(modes=2, cutoff=1, total=1), [(t, 0)])
        >>> print(sector.component(fm.number(0), [1]))
        0.7071067811865475·a0† a0 - 0.7071067811865475·a1† a1
        """
        from fractions import Fraction

        gens = [g for g, _ in self._symmetries]
        if isinstance(labels, str | bytes) or not isinstance(labels, Sequence | np.ndarray):
            raise TypeError(
                f"labels must be a sequence of integers, one per generator; got {labels!r}"
            )
        if len(labels) != len(gens):
            raise SymmetryError(f"give one label per generator ({len(gens)}); got {list(labels)}")
        steps: list[Fraction] = []
        for n, (g, p) in enumerate(zip(gens, labels, strict=True)):
            if isinstance(p, bool | np.bool_) or not isinstance(p, numbers.Integral):
                raise TypeError(f"label {n} must be an integer; got {p!r}")
            if not 0 <= int(p) < g.order:
                raise SymmetryError(
                    f"label {n} is {p}, but generator {n} ({g!r}) has order {g.order}: labels "
                    f"run over 0..{g.order - 1}"
                )
            steps.append(Fraction(int(p), g.order))
        identity = ModePermutation(list(range(self.modes)))
        phases: dict[ModePermutation, Fraction] = {identity: Fraction(0)}
        elements = [identity]
        for element in elements:  # grows while it is read: a breadth-first closure
            for n, g in enumerate(gens):
                product = g * element
                phase = (phases[element] + steps[n]) % 1
                if product not in phases:
                    phases[product] = phase
                    elements.append(product)
                elif phases[product] != phase:
                    raise SymmetryError(
                        f"the labels {list(labels)} make no one-dimensional representation of "
                        "the group (a relation among the generators would need two different "
                        "characters; a translation with a reflection allows only momentum 0 "
                        "or L/2); choose other labels"
                    )
        acc: dict[MonomialKey, complex] = {}
        for element in elements:
            root = _unit_root(-phases[element])
            for c, key in expr.terms():
                moved = _move(key, element.images)
                acc[moved] = acc.get(moved, 0j) + c * root
        # Cancellations leave rounding residues: drop them and snap parts that vanish
        # exactly, so that a real component stays real and a zero one is zero.
        scale = max((abs(c) for c, _ in expr.terms()), default=0.0) * len(elements)
        clean: dict[MonomialKey, complex] = {}
        for key, value in acc.items():
            re = value.real if abs(value.real) > 1e-14 * scale else 0.0
            im = value.imag if abs(value.imag) > 1e-14 * scale else 0.0
            if re or im:
                clean[key] = complex(re, im) / math.sqrt(len(elements))
        return LadderExpr.from_terms(clean)

    def target_for(self, expr: LadderExpr, base: FockSpace | None = None) -> SymmetricSpace:
        """The sector ``expr`` carries this sector into: the same generators with the
        labels shifted by ``expr``'s (:meth:`operator_labels`), over ``base`` (default
        this sector's base; give the base with the total ``expr`` lands in, e.g. one
        quantum fewer for a lowering operator).

        Raises
        ------
        SymmetryError
            ``expr`` has no definite character, or the shifted labels make no
            one-dimensional representation (a translation with a reflection at a
            momentum other than 0 or L/2).

        Examples
        --------
        >>> import cmath, fockmill as fm
        >>> t = fm.ring_translation(4)
        >>> base = fm.FockSpace(modes=4, cutoff=2, total=2)
        >>> a_k = sum(cmath.exp(-2j * cmath.pi * j / 4) * fm.lowering(j) for j in range(4))
        >>> fm.SymmetricSpace(base, [(t, 0)]).target_for(
        ...     a_k, fm.FockSpace(modes=4, cutoff=2, total=1)).symmetries[0][1]
        1
        """
        labels = self.operator_labels(expr)
        pairs = [(g, (q + p) % g.order) for (g, q), p in zip(self._symmetries, labels, strict=True)]
        return SymmetricSpace(self._base if base is None else base, pairs)

    def _compile(self, expr: LadderExpr) -> _native.NativeOperator:
        """The compiled operator of an invariant ``expr`` on this sector."""
        try:
            self.check_invariant(expr)
        except SymmetryError as exc:
            # An operator with a definite character lands in a shifted sector: say which.
            try:
                labels = self.operator_labels(expr)
            except SymmetryError:
                raise exc from None
            shifted = [
                (q + p) % g.order for (g, q), p in zip(self._symmetries, labels, strict=True)
            ]
            raise SymmetryError(
                f"{exc}. The operator has a definite character (labels {list(labels)}), so it "
                f"carries this sector (labels {[q for _, q in self._symmetries]}) into the "
                f"sector with labels {shifted}: pass that sector as target= (for example "
                "sector.target_for(A))"
            ) from None
        terms, blocks = expr.to_native_parts()
        return _native.NativeOperator.on_sector(self._native, terms, blocks=blocks)

    def _compile_into(
        self, expr: LadderExpr, target: SymmetricSpace, *, project: bool = False
    ) -> _native.NativeOperator:
        """The compiled operator of ``expr`` from this sector into the sector ``target``.

        Raises
        ------
        SymmetryError
            Different generators, no definite character, or target labels that are not
            this sector's shifted by ``expr``'s (naming the labels expected).
        """
        mine = [g for g, _ in self._symmetries]
        theirs = [g for g, _ in target.symmetries]
        if mine != theirs:
            raise SymmetryError(
                f"the source sector has generators {mine} and the target {theirs}; an "
                "operator between sectors needs the same generators in the same order (only "
                "the labels and the total may differ): build the target with "
                "source.target_for(A, base)"
            )
        found = self._labels(expr)
        labels = [0 if p is None else p for p in found]
        expected = [(q + p) % g.order for (g, q), p in zip(self._symmetries, labels, strict=True)]
        given = [q for _, q in target.symmetries]
        if given != expected and any(p is not None for p in found):
            wrong = [n for n, (a, b) in enumerate(zip(given, expected, strict=True)) if a != b]
            raise SymmetryError(
                f"the operator carries labels {list(labels)} (g A g⁻¹ = exp(2πi·label/order) A "
                f"for each generator), so from the source labels "
                f"{[q for _, q in self._symmetries]} it lands in labels {expected}, but the "
                f"target has {given} (generator {wrong[0]}: expected label "
                f"{expected[wrong[0]]}, got {given[wrong[0]]}); pass the target with labels "
                f"{expected}, for example source.target_for(A, base)"
            )
        return _native.NativeOperator.between_sectors(
            self._native, target.native, expr.to_native(), project=project
        )

    def __reduce__(self) -> tuple[Any, ...]:
        return (_rebuild_sector, (self._base, self._symmetries))

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, SymmetricSpace):
            return NotImplemented
        return self._base == other._base and self._symmetries == other._symmetries

    def __hash__(self) -> int:
        return hash((self._base, self._symmetries))

    def __repr__(self) -> str:
        labels = ", ".join(f"({g!r}, {q})" for g, q in self._symmetries)
        return f"SymmetricSpace({self._base!r}, [{labels}]) with dim={self.dim}"


def _rebuild_sector(
    base: FockSpace, symmetries: tuple[tuple[ModePermutation, int], ...]
) -> SymmetricSpace:
    """Unpickle a :class:`SymmetricSpace` (the orbits are enumerated again)."""
    return SymmetricSpace(base, list(symmetries))
