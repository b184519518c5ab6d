"""Ready-made parametrised Hamiltonians of coupled bosonic modes.

Each builder returns a :class:`fockmill.models.model.Model`: parameter-independent pieces
(ladder-operator expressions) on one Fock space, plus a default value for the
parameter that multiplies each piece, ``H(p) = Σ_k p_k · pieces[k]``. A parameter
sweep therefore builds every piece's matrix once and only recombines coefficients.

Builders
--------
bose_hubbard
    Bosons hopping on any graph with on-site interaction; pieces ``J``, ``U``, ``mu``.
jaynes_cummings_hubbard
    A chain or ring of cavities, each holding one two-level emitter; pieces ``wc``,
    ``we``, ``g``, ``J``.
kerr_network
    Nonlinear oscillators with per-mode frequencies and Kerr shifts, cross-Kerr and
    exchange couplings; one unit-default scale factor per family: ``frequency_scale``,
    ``kerr_scale``, ``cross_kerr_scale``, ``exchange_scale`` (the old names ``omega``,
    ``kerr``, ``cross_kerr``, ``exchange`` still work, with a DeprecationWarning).
lowest_landau_level
    Bosons in the lowest Landau level of a disk (a rapidly rotating trap) with a
    contact interaction, at fixed particle number and angular momentum; piece ``g``.
with_drives
    Adds coherent (one-photon) and two-photon drives to any model and moves it to the
    Fock space those drives leave invariant; pieces ``drive``, ``two_photon``.

Lattice helpers ``chain_edges``, ``ring_edges`` and ``rectangular_edges`` return edge
lists for :func:`bose_hubbard`.
"""

from __future__ import annotations

# Imports carry a leading underscore so that dir(fockmill.models.builders) lists only the builders.
import cmath as _cmath
import math as _math
import numbers as _numbers
from collections.abc import Iterable, Mapping, Sequence
from typing import Any as _Any
from typing import TypeAlias
from typing import cast as _cast

import numpy as _np

from fockmill.algebra.arrays import pair_interaction
from fockmill.algebra.expressions import LadderExpr, MonomialKey
from fockmill.models.model import Model
from fockmill.spaces.fock import FockSpace

__all__ = [
    "KERR_NETWORK_RENAMED",
    "Edge",
    "bose_hubbard",
    "chain_edges",
    "jaynes_cummings_hubbard",
    "kerr_network",
    "landau_level_interaction",
    "lowest_landau_level",
    "rectangular_edges",
    "ring_edges",
    "with_drives",
]

KERR_NETWORK_RENAMED: dict[str, str] = {
    "omega": "frequency_scale",
    "kerr": "kerr_scale",
    "cross_kerr": "cross_kerr_scale",
    "exchange": "exchange_scale",
}
"""Deprecated parameter names of :func:`kerr_network` -> their current names.

The old names read as if they set one frequency or one coupling; each actually scales
a whole family of terms. They are accepted (with a DeprecationWarning) for one release.
"""


def __dir__() -> list[str]:
    return sorted(__all__)


Edge: TypeAlias = tuple[int, int] | tuple[int, int, complex]
"""A bond ``(i, j)`` or ``(i, j, t_ij)`` with a per-bond hopping factor ``t_ij``."""

Cutoff: TypeAlias = int | Sequence[int]


# -- argument checks -------------------------------------------------------------------


def _old_keywords(
    builder: str,
    old_names: Mapping[str, _Any],
    renamed: Mapping[str, str],
    current: dict[str, _Any],
) -> dict[str, _Any]:
    """Keywords under their current names, accepting the older ones with a warning."""
    import warnings

    for old, value in old_names.items():
        if old not in renamed:
            raise TypeError(f"{builder}() got an unexpected keyword argument {old!r}")
        new = renamed[old]
        warnings.warn(
            f"{builder}({old}=...) is now {builder}({new}=...), the name of the parameter it "
            "sets in model files and sweeps",
            DeprecationWarning,
            stacklevel=3,
        )
        current[new] = value
    return current


def _index(value: object, what: str) -> int:
    """A non-negative integer index, or a clear error."""
    if isinstance(value, (bool, _np.bool_)) or not isinstance(value, (_numbers.Integral)):
        raise TypeError(f"{what} must be a non-negative integer; got {value!r}")
    index = int(value)
    if index < 0:
        raise ValueError(f"{what} must be a non-negative integer; got {index}")
    return index


def _count(value: object, what: str, minimum: int) -> int:
    """An integer count >= ``minimum``, or a clear error."""
    if isinstance(value, (bool, _np.bool_)) or not isinstance(value, (_numbers.Integral)):
        raise TypeError(f"{what} must be an integer >= {minimum}; got {value!r}")
    count = int(value)
    if count < minimum:
        raise ValueError(f"{what} must be an integer >= {minimum}; got {count}")
    return count


def _real(value: object, what: str) -> float:
    """A finite real number, or a clear error."""
    if isinstance(value, (bool, _np.bool_)) or not isinstance(value, (_numbers.Real)):
        raise TypeError(f"{what} must be a finite real number; got {value!r}")
    result = float(value)
    if not _math.isfinite(result):
        raise ValueError(f"{what} must be finite; got {value!r}")
    return result


def _amplitude(value: object, what: str) -> complex:
    """A finite real or complex number, or a clear error."""
    if isinstance(value, (bool, _np.bool_)) or not isinstance(value, (_numbers.Number)):
        raise TypeError(f"{what} must be a finite real or complex number; got {value!r}")
    result = complex(_cast(complex, value))
    if not _cmath.isfinite(result):
        raise ValueError(f"{what} must be finite; got {value!r}")
    return result


def _mode_in_range(value: object, modes: int, what: str) -> int:
    index = _index(value, what)
    if index >= modes:
        raise ValueError(
            f"{what} is {index} but the model has {modes} modes (numbered 0..{modes - 1})"
        )
    return index


# -- monomial keys -----------------------------------------------------------------------


def _pair_key(i: int, p_i: int, q_i: int, j: int, p_j: int, q_j: int) -> MonomialKey:
    """The key of ``(a_i†^p_i a_i^q_i)(a_j†^p_j a_j^q_j)`` for ``i != j`` (sorted by mode)."""
    if i < j:
        return ((i, p_i, q_i), (j, p_j, q_j))
    return ((j, p_j, q_j), (i, p_i, q_i))


def _add_exchange(terms: dict[MonomialKey, complex], i: int, j: int, weight: complex) -> None:
    """Add ``weight·a_i† a_j + conj(weight)·a_j† a_i`` (Hermitian for any complex weight)."""
    for key, value in (
        (_pair_key(i, 1, 0, j, 0, 1), weight),
        (_pair_key(j, 1, 0, i, 0, 1), weight.conjugate()),
    ):
        terms[key] = terms.get(key, 0j) + value


def _expr(terms: Mapping[MonomialKey, complex]) -> LadderExpr:
    return LadderExpr({key: value for key, value in terms.items() if value != 0})


def _number_sum(modes: Iterable[int], weights: Iterable[float] | None = None) -> LadderExpr:
    """``Σ_i w_i n_i`` (all ``w_i = 1`` by default)."""
    mode_list = list(modes)
    weight_list = [1.0] * len(mode_list) if weights is None else list(weights)
    return _expr({((m, 1, 1),): complex(w) for m, w in zip(mode_list, weight_list, strict=True)})


# -- lattices ----------------------------------------------------------------------------


def chain_edges(sites: int, periodic: bool = False) -> list[tuple[int, int]]:
    """Nearest-neighbour bonds of a chain ``0 - 1 - … - (sites-1)``.

    Parameters
    ----------
    sites : int
        Number of sites (>= 1).
    periodic : bool, default False
        Also join the last site to the first (a ring; needs ``sites >= 3``).

    Returns
    -------
    list of (int, int)
        Bonds ``(i, i + 1)``, then ``(sites - 1, 0)`` when periodic.

    Raises
    ------
    ValueError
        If ``sites < 1``, or ``periodic`` with fewer than 3 sites (the closing bond
        would repeat bond ``(0, 1)`` or join a site to itself).

    Examples
    --------
    >>> chain_edges(3)
    [(0, 1), (1, 2)]
    >>> chain_edges(3, periodic=True)
    [(0, 1), (1, 2), (2, 0)]
    """
    count = _count(sites, "sites", 1)
    edges = [(i, i + 1) for i in range(count - 1)]
    if periodic:
        if count < 3:
            raise ValueError(
                f"a periodic chain needs at least 3 sites; got sites={count}, where the "
                "closing bond would repeat an existing bond or be a self-loop. "
                "Use periodic=False"
            )
        edges.append((count - 1, 0))
    return edges


def ring_edges(sites: int) -> list[tuple[int, int]]:
    """Bonds of a ring of ``sites >= 3`` sites; same as ``chain_edges(sites, periodic=True)``.

    Parameters
    ----------
    sites : int
        Number of sites (>= 3).

    Returns
    -------
    list of (int, int)

    Raises
    ------
    ValueError
        If ``sites < 3``.

    Examples
    --------
    >>> ring_edges(4)
    [(0, 1), (1, 2), (2, 3), (3, 0)]
    """
    return chain_edges(sites, periodic=True)


def rectangular_edges(rows: int, cols: int, periodic: bool = False) -> list[tuple[int, int]]:
    """Nearest-neighbour bonds of a ``rows × cols`` square lattice.

    Site ``(r, c)`` has index ``r * cols + c`` (row-major).

    Parameters
    ----------
    rows, cols : int
        Lattice size (each >= 1).
    periodic : bool, default False
        Wrap around in each direction whose length is at least 3 (a torus).

    Returns
    -------
    list of (int, int)
        Horizontal bonds row by row, then vertical bonds, then wrapping bonds.

    Raises
    ------
    ValueError
        If ``rows`` or ``cols`` is below 1.

    Notes
    -----
    In a direction of length 1 the wrapping bond would be a self-loop, and with length
    2 it would repeat the existing bond, so periodic boundaries add nothing there.

    Examples
    --------
    >>> rectangular_edges(2, 2)
    [(0, 1), (2, 3), (0, 2), (1, 3)]
    """
    n_rows = _count(rows, "rows", 1)
    n_cols = _count(cols, "cols", 1)

    def site(r: int, c: int) -> int:
        return r * n_cols + c

    edges = [(site(r, c), site(r, c + 1)) for r in range(n_rows) for c in range(n_cols - 1)]
    edges += [(site(r, c), site(r + 1, c)) for r in range(n_rows - 1) for c in range(n_cols)]
    if periodic:
        if n_cols >= 3:
            edges += [(site(r, n_cols - 1), site(r, 0)) for r in range(n_rows)]
        if n_rows >= 3:
            edges += [(site(n_rows - 1, c), site(0, c)) for c in range(n_cols)]
    return edges


def _checked_edges(
    edges: Iterable[Sequence[_Any]], sites: int | None
) -> tuple[list[tuple[int, int, complex]], int]:
    """Validate an edge list; return ``(i, j, t_ij)`` triples and the number of sites."""
    if isinstance(edges, (str, bytes)) or not isinstance(edges, Iterable):
        raise TypeError(f"edges must be an iterable of (i, j) or (i, j, t) tuples; got {edges!r}")
    checked: list[tuple[int, int, complex]] = []
    seen: dict[frozenset[int], int] = {}
    for k, edge in enumerate(edges):
        if isinstance(edge, (str, bytes)) or not isinstance(edge, (Sequence, _np.ndarray)):
            raise TypeError(f"edge {k} must be a tuple (i, j) or (i, j, t); got {edge!r}")
        if len(edge) not in (2, 3):
            raise ValueError(
                f"edge {k} must have 2 entries (i, j) or 3 entries (i, j, t); got {tuple(edge)!r}"
            )
        i = _index(edge[0], f"site i of edge {k}")
        j = _index(edge[1], f"site j of edge {k}")
        factor = _amplitude(edge[2], f"hopping factor of edge {k}") if len(edge) == 3 else 1 + 0j
        if i == j:
            raise ValueError(
                f"edge {k} ({i}, {j}) is a self-loop; on-site energies belong in "
                "interaction or chemical_potential, not in the edge list"
            )
        bond = frozenset((i, j))
        if bond in seen:
            raise ValueError(
                f"edge {k} ({i}, {j}) repeats edge {seen[bond]}; list each bond once "
                "(the hopping term already includes both directions)"
            )
        seen[bond] = k
        checked.append((i, j, factor))
    largest = max((max(i, j) for i, j, _ in checked), default=-1)
    if sites is None:
        if not checked:
            raise ValueError("no edges and no sites; pass sites=... for a lattice without bonds")
        return checked, largest + 1
    count = _count(sites, "sites", 1)
    if largest >= count:
        k, (i, j, _) = next((k, e) for k, e in enumerate(checked) if max(e[0], e[1]) >= count)
        raise ValueError(
            f"edge {k} ({i}, {j}) names site {max(i, j)} but sites={count} "
            f"(sites are numbered 0..{count - 1}); raise sites or fix the edge"
        )
    return checked, count


# -- builders ----------------------------------------------------------------------------


def bose_hubbard(
    edges: Iterable[Sequence[_Any]],
    *,
    sites: int | None = None,
    J: float = 1.0,
    U: float = 1.0,
    mu: float = 0.0,
    cutoff: Cutoff | None = None,
    total: int | None = None,
    **old_names: _Any,
) -> Model:
    """Bosons hopping on a graph with on-site interaction (Bose–Hubbard model).

    ``H = −J Σ_(ij) t_ij (a_i† a_j + a_j† a_i) + (U/2) Σ_i n_i (n_i − 1) − μ Σ_i n_i``

    Parameters
    ----------
    edges : iterable of (i, j) or (i, j, t_ij)
        Bonds of the graph, each listed once. ``t_ij`` (default 1) scales the hopping
        on that bond; a complex ``t_ij`` gives ``t_ij a_i† a_j + conj(t_ij) a_j† a_i``
        (a Peierls phase).
    sites : int, optional
        Number of sites; default ``1 + `` the largest site index in ``edges``.
    J, U, mu : float, default 1.0, 1.0, 0.0
        Defaults of the parameters of the same names (hopping, interaction, chemical
        potential), the names model files and sweeps use. The older keywords
        ``hopping``, ``interaction`` and ``chemical_potential`` still work for one
        release, with a DeprecationWarning.
    cutoff : int or sequence of int, optional
        Highest occupation per site. Defaults to ``total`` when ``total`` is given
        (then nothing is truncated); required otherwise.
    total : int, optional
        Conserved particle number; None keeps the whole truncated space.

    Returns
    -------
    Model
        Named ``"bose-hubbard"``, one mode per site (labels ``"site i"``), pieces
        ``"J"`` = ``−Σ t_ij (a_i† a_j + h.c.)``, ``"U"`` = ``½ Σ_i a_i†² a_i²`` and
        ``"mu"`` = ``−Σ_i n_i``.

    Raises
    ------
    ValueError
        For self-loops, repeated bonds (in either direction), sites out of range,
        no edges and no ``sites``, or neither ``cutoff`` nor ``total``.
    TypeError
        For non-integer site indices or non-numeric hopping factors.
    SpaceError
        For an invalid space (cutoff < 1, negative total, ...).

    Notes
    -----
    ``½ n (n − 1)`` equals the normal-ordered ``½ a†² a²``, so the interaction costs
    nothing for zero or one particle on a site.

    Examples
    --------
    >>> model = bose_hubbard(chain_edges(3), total=3, U=4.0)
    >>> model.space.dim, sorted(model.parameters)
    (10, ['J', 'U', 'mu'])
    """
    given = _old_keywords(
        "bose_hubbard",
        old_names,
        {"hopping": "J", "interaction": "U", "chemical_potential": "mu"},
        {"J": J, "U": U, "mu": mu},
    )
    J, U, mu = given["J"], given["U"], given["mu"]
    checked, count = _checked_edges(edges, sites)
    if cutoff is None:
        if total is None:
            raise ValueError(
                "give cutoff=... (highest occupation per site) or total=... (a fixed "
                "particle number, which also caps every site)"
            )
        # A site can hold at most every particle; keep at least one level per site.
        cutoff = max(_index(total, "total"), 1)
    space = FockSpace(count, cutoff, total)
    hop: dict[MonomialKey, complex] = {}
    for i, j, factor in checked:
        _add_exchange(hop, i, j, -factor)
    pieces = {
        "J": _expr(hop),
        "U": _expr({((i, 2, 2),): 0.5 + 0j for i in range(count)}),
        "mu": -_number_sum(range(count)),
    }
    parameters = {"J": _real(J, "J"), "U": _real(U, "U"), "mu": _real(mu, "mu")}
    labels = tuple(f"site {i}" for i in range(count))
    return Model("bose-hubbard", space, pieces, parameters, mode_labels=labels)


def jaynes_cummings_hubbard(
    sites: int,
    *,
    wc: float = 1.0,
    we: float = 1.0,
    g: float = 0.1,
    J: float = 0.0,
    periodic: bool = False,
    cavity_cutoff: int,
    total: int | None = None,
    **old_names: _Any,
) -> Model:
    """A chain (or ring) of cavities, each coupled to one two-level emitter.

    ``H = Σ_s [ω_c a_s† a_s + ω_e σ_s† σ_s + g (a_s† σ_s + σ_s† a_s)]
    − J Σ_<s s'> (a_s† a_s' + a_s'† a_s)``

    Parameters
    ----------
    sites : int
        Number of cavity–emitter sites (>= 1).
    wc, we : float, default 1.0
        Defaults of parameters ``"wc"`` (cavity frequency) and ``"we"`` (emitter
        frequency).
    g : float, default 0.1
        Default of parameter ``"g"`` (cavity–emitter exchange on each site).
    J : float, default 0.0
        Default of parameter ``"J"`` (photon hopping between neighbouring cavities).
        The keywords are the parameters' names in model files and sweeps; the older
        ``cavity_frequency``, ``emitter_frequency``, ``coupling`` and ``hopping`` still
        work for one release, with a DeprecationWarning.
    periodic : bool, default False
        Join the last cavity to the first (needs ``sites >= 3``).
    cavity_cutoff : int
        Highest photon number kept in each cavity (keyword, required).
    total : int, optional
        Conserved number of excitations (photons plus excited emitters); None keeps
        the whole truncated space.

    Returns
    -------
    Model
        Named ``"jaynes-cummings-hubbard"`` with ``2 * sites`` modes in the order
        cavity 0, emitter 0, cavity 1, emitter 1, … (labels ``"cavity s"``,
        ``"emitter s"``); every emitter is a mode with cutoff 1. Pieces ``"wc"`` =
        ``Σ a†a``, ``"we"`` = ``Σ σ†σ``, ``"g"`` = ``Σ (a†σ + σ†a)`` and ``"J"`` =
        ``−Σ_<s s'> (a_s† a_s' + h.c.)`` (zero for one site).

    Raises
    ------
    ValueError
        If ``sites < 1``, or ``periodic`` with fewer than 3 sites.
    SpaceError
        For ``cavity_cutoff < 1`` or a negative ``total``.

    Notes
    -----
    A two-level emitter is a bosonic mode truncated at one quantum: restricted to
    occupations 0 and 1, ``a`` acts as the lowering operator ``σ``. All modes weigh 1 in
    the conserved charge, which every term of ``H`` conserves.

    Examples
    --------
    >>> model = jaynes_cummings_hubbard(2, cavity_cutoff=2, total=1)
    >>> model.mode_labels
    ('cavity 0', 'emitter 0', 'cavity 1', 'emitter 1')
    >>> model.space.dim
    4
    """
    given = _old_keywords(
        "jaynes_cummings_hubbard",
        old_names,
        {"cavity_frequency": "wc", "emitter_frequency": "we", "coupling": "g", "hopping": "J"},
        {"wc": wc, "we": we, "g": g, "J": J},
    )
    count = _count(sites, "sites", 1)
    cut = _count(cavity_cutoff, "cavity_cutoff", 1)
    bonds = chain_edges(count, periodic=periodic)
    space = FockSpace(2 * count, [cut, 1] * count, total)
    cavities = [2 * s for s in range(count)]
    emitters = [2 * s + 1 for s in range(count)]
    exchange: dict[MonomialKey, complex] = {}
    for s in range(count):
        _add_exchange(exchange, cavities[s], emitters[s], 1 + 0j)
    hop: dict[MonomialKey, complex] = {}
    for s, t in bonds:
        _add_exchange(hop, cavities[s], cavities[t], -1 + 0j)
    pieces = {
        "wc": _number_sum(cavities),
        "we": _number_sum(emitters),
        "g": _expr(exchange),
        "J": _expr(hop),
    }
    parameters = {
        "wc": _real(given["wc"], "wc"),
        "we": _real(given["we"], "we"),
        "g": _real(given["g"], "g"),
        "J": _real(given["J"], "J"),
    }
    labels = tuple(label for s in range(count) for label in (f"cavity {s}", f"emitter {s}"))
    return Model("jaynes-cummings-hubbard", space, pieces, parameters, mode_labels=labels)


def _pair_table(
    table: Mapping[tuple[int, int], _Any] | None, modes: int, what: str, *, real: bool
) -> list[tuple[int, int, complex]]:
    """Validate a ``{(i, j): value}`` mapping of distinct, unordered mode pairs."""
    if table is None:
        return []
    if not isinstance(table, Mapping):
        raise TypeError(f"{what} must be a dict {{(i, j): value}}; got {table!r}")
    seen: dict[frozenset[int], tuple[int, int]] = {}
    out: list[tuple[int, int, complex]] = []
    for pair, raw in table.items():
        if not isinstance(pair, tuple) or len(pair) != 2:
            raise TypeError(f"{what} keys must be mode pairs (i, j); got {pair!r}")
        i = _mode_in_range(pair[0], modes, f"mode i of {what}[{pair!r}]")
        j = _mode_in_range(pair[1], modes, f"mode j of {what}[{pair!r}]")
        if i == j:
            raise ValueError(
                f"{what}[{pair!r}] couples mode {i} to itself; give on-site terms through "
                "frequencies or self_kerr"
            )
        bond = frozenset((i, j))
        if bond in seen:
            raise ValueError(
                f"{what}[{pair!r}] repeats {what}[{seen[bond]!r}]; give each pair once"
            )
        seen[bond] = (i, j)
        value = (
            complex(_real(raw, f"{what}[{pair!r}]"))
            if real
            else _amplitude(raw, f"{what}[{pair!r}]")
        )
        out.append((i, j, value))
    return out


def kerr_network(
    frequencies: Sequence[float],
    *,
    self_kerr: float | Sequence[float] = 0.0,
    cross_kerr: Mapping[tuple[int, int], float] | None = None,
    couplings: Mapping[tuple[int, int], complex] | None = None,
    cutoff: Cutoff,
    total: int | None = None,
) -> Model:
    """Coupled nonlinear (Kerr) oscillators.

    ``H = Σ_i ω_i n_i + Σ_i (K_i/2) a_i†² a_i² + Σ_(ij) χ_ij n_i n_j
    + Σ_(ij) (g_ij a_i† a_j + conj(g_ij) a_j† a_i)``

    Parameters
    ----------
    frequencies : sequence of float
        ``ω_i``, one per mode; their number sets the number of modes.
    self_kerr : float or sequence of float, default 0.0
        ``K_i``: one value for every mode or one per mode.
    cross_kerr : dict {(i, j): float}, optional
        ``χ_ij`` for distinct mode pairs, each pair once.
    couplings : dict {(i, j): float or complex}, optional
        Exchange ``g_ij`` for distinct mode pairs, each pair once.
    cutoff : int or sequence of int
        Highest occupation per mode (keyword, required).
    total : int, optional
        Conserved total number of quanta; None keeps the whole truncated space.

    Returns
    -------
    Model
        Named ``"kerr-network"`` with labels ``"mode i"``. The given per-mode and
        per-pair values are built into four pieces, each multiplied by a unit-default
        scale factor of the whole family: ``"frequency_scale"`` (``Σ ω_i n_i``),
        ``"kerr_scale"`` (``Σ (K_i/2) a_i†² a_i²``), ``"cross_kerr_scale"``
        (``Σ χ_ij n_i n_j``) and ``"exchange_scale"`` (``Σ g_ij a_i† a_j + h.c.``). A
        family with no terms is a zero piece. The names used before 0.2 (``"omega"``,
        ``"kerr"``, ``"cross_kerr"``, ``"exchange"``) are deprecated aliases
        (see ``KERR_NETWORK_RENAMED``).

    Raises
    ------
    ValueError
        For no modes, a ``self_kerr`` list of the wrong length, non-finite values,
        pairs out of range, self-pairs or repeated pairs.
    TypeError
        For non-numeric values or malformed pair keys.
    SpaceError
        For an invalid space (cutoff < 1, negative total, ...).

    Notes
    -----
    ``K/2 a†² a² = K/2 n (n − 1)``, so a lone oscillator has ``E_n = ω n + K n(n−1)/2``.

    Examples
    --------
    >>> model = kerr_network([1.0, 1.2], self_kerr=-0.1, couplings={(0, 1): 0.05}, cutoff=3)
    >>> model.space.dim, model.parameters["exchange_scale"]
    (16, 1.0)
    """
    if isinstance(frequencies, (str, bytes)) or not isinstance(
        frequencies, (Sequence, _np.ndarray)
    ):
        raise TypeError(f"frequencies must be a sequence of numbers; got {frequencies!r}")
    omegas = [_real(w, f"frequencies[{i}]") for i, w in enumerate(frequencies)]
    modes = len(omegas)
    if modes == 0:
        raise ValueError("frequencies is empty; give one frequency per mode")
    if isinstance(self_kerr, (Sequence, _np.ndarray)) and not isinstance(self_kerr, (str, bytes)):
        kerrs = [_real(k, f"self_kerr[{i}]") for i, k in enumerate(self_kerr)]
        if len(kerrs) != modes:
            raise ValueError(
                f"self_kerr has {len(kerrs)} entries but there are {modes} modes; "
                "give one value per mode or a single number"
            )
    else:
        kerrs = [_real(self_kerr, "self_kerr")] * modes
    cross = _pair_table(cross_kerr, modes, "cross_kerr", real=True)
    exchange = _pair_table(couplings, modes, "couplings", real=False)
    space = FockSpace(modes, cutoff, total)
    exchange_terms: dict[MonomialKey, complex] = {}
    for i, j, g in exchange:
        _add_exchange(exchange_terms, i, j, g)
    pieces = {
        "frequency_scale": _number_sum(range(modes), omegas),
        "kerr_scale": _expr({((i, 2, 2),): complex(0.5 * k) for i, k in enumerate(kerrs)}),
        "cross_kerr_scale": _expr({_pair_key(i, 1, 1, j, 1, 1): chi for i, j, chi in cross}),
        "exchange_scale": _expr(exchange_terms),
    }
    parameters = dict.fromkeys(pieces, 1.0)
    labels = tuple(f"mode {i}" for i in range(modes))
    return Model(
        "kerr-network",
        space,
        pieces,
        parameters,
        mode_labels=labels,
        renamed=KERR_NETWORK_RENAMED,
    )


def landau_level_interaction(
    orbitals: int,
) -> tuple[_np.ndarray[_Any, _np.dtype[_np.int64]], _np.ndarray[_Any, _np.dtype[_np.float64]]]:
    """Contact-interaction elements between lowest-Landau-level orbitals of a disk.

    ``V[m1, m2, m3, m4] = δ(m1 + m2, m3 + m4) (m1 + m2)! / (2^(m1 + m2)
    sqrt(m1! m2! m3! m4!))``, in units of ``g_2D / (2π a²)`` (see
    :func:`lowest_landau_level`), so that ``V[0, 0, 0, 0] = 1``.

    Parameters
    ----------
    orbitals : int
        Number of orbitals ``M``; angular momenta ``m = 0 … M − 1``.

    Returns
    -------
    indices : ndarray of int64, shape (n, 4)
        Every ``(m1, m2, m3, m4)`` with ``m1 + m2 = m3 + m4``, all below ``M``.
    values : ndarray of float64, shape (n,)
        The elements, ready for :func:`fockmill.pair_interaction` as
        ``pair_interaction((indices, values))``.

    Examples
    --------
    >>> indices, values = landau_level_interaction(2)
    >>> [(tuple(i), float(v)) for i, v in zip(indices.tolist(), values) if i[0] == 0]
    [((0, 0, 0, 0), 1.0), ((0, 1, 0, 1), 0.5), ((0, 1, 1, 0), 0.5)]
    """
    count = _count(orbitals, "orbitals", 1)
    m = _np.arange(count, dtype=_np.int64)
    m1, m2, m3 = (a.reshape(-1) for a in _np.meshgrid(m, m, m, indexing="ij"))
    m4 = m1 + m2 - m3
    keep = (m4 >= 0) & (m4 < count)
    indices = _np.stack((m1[keep], m2[keep], m3[keep], m4[keep]), axis=1)
    total = indices[:, 0] + indices[:, 1]
    # Logarithms keep the factorials finite for many orbitals.
    from scipy.special import gammaln

    log_value = (
        gammaln(total + 1.0) - total * _math.log(2.0) - 0.5 * gammaln(indices + 1.0).sum(axis=1)
    )
    return _np.ascontiguousarray(indices), _np.exp(log_value)


def lowest_landau_level(
    orbitals: int | None = None,
    *,
    total: int,
    angular_momentum: int,
    g: float = 1.0,
) -> Model:
    """Bosons in the lowest Landau level of a disk with a contact interaction.

    ``H = (g/2) Σ V[m1, m2, m3, m4] a_m1† a_m2† a_m3 a_m4`` over the orbitals
    ``m = 0 … M − 1`` of angular momentum ``m``, with the elements of
    :func:`landau_level_interaction` (``V[0, 0, 0, 0] = 1``), at a fixed number of
    bosons ``N = Σ n_m`` and total angular momentum ``L = Σ m n_m``.

    Parameters
    ----------
    orbitals : int, optional
        Number of orbitals ``M``; default ``L + 1`` (no boson can sit in an orbital
        above ``L``, so more orbitals change nothing).
    total : int
        Number of bosons ``N`` (keyword, required).
    angular_momentum : int
        Total angular momentum ``L`` (keyword, required).
    g : float, default 1.0
        Default of the parameter ``g``: the interaction energy of two bosons in the
        orbital ``m = 0``, ``g = g_2D / (2π a²)`` for the contact potential
        ``g_2D δ²(r1 − r2)`` and orbitals ``z^m exp(−|z|²/2) / sqrt(π m!)`` with ``z``
        in units of the length ``a`` (the trap's oscillator length; ``a² = 2ℓ²`` with
        ``ℓ`` the magnetic length of the equivalent Landau problem).

    Returns
    -------
    Model
        Named ``"lowest-landau-level"``, mode ``m`` labelled ``"m = m"``, one piece
        ``"g"``. The space fixes both ``N`` and ``L`` through the one weighted charge
        ``Σ (m + K) n_m = L + K N`` with ``K = max(L + 1, (M − 1)(N − 1) − L + 1)``:
        no other ``(N', L')`` reaches that charge (``N' > N`` would need ``L' < 0``,
        ``N' < N`` an ``L'`` beyond ``(M − 1) N'``), so the sector is exactly the states
        with ``N`` bosons and angular momentum ``L``; ``model.space.weights`` are the
        ``m + K``.

    Raises
    ------
    ValueError
        For ``total < 1``, ``angular_momentum < 0`` or ``orbitals < 1``.
    TypeError
        For non-integer arguments or a non-real ``g``.
    SpaceError
        For a sector with no states (``L > (M − 1) N``).

    Notes
    -----
    The elements follow from ``∫ d²r |z|^(2s) exp(−2|z|²) = π s! / 2^(s+1)`` with
    ``s = m1 + m2`` and the angular integral, which keeps ``m1 + m2 = m3 + m4``;
    derivation in ``docs/model-files.md``. The energy of ``N`` bosons in ``m = 0`` is
    ``g N (N − 1) / 2``; the Laughlin state at ``L = N (N − 1)`` has zero energy.

    Examples
    --------
    >>> model = lowest_landau_level(total=3, angular_momentum=3)
    >>> model.space.dim, model.parameters
    (3, {'g': 1.0})
    """
    particles = _count(total, "total", 1)
    momentum = _index(angular_momentum, "angular_momentum")
    count = momentum + 1 if orbitals is None else _count(orbitals, "orbitals", 1)
    if momentum > (count - 1) * particles:
        from fockmill.exceptions import SpaceError

        raise SpaceError(
            f"no state of {particles} bosons in {count} orbitals (m = 0 … {count - 1}) has "
            f"angular momentum {momentum}: the most is {(count - 1) * particles}; give more "
            "orbitals or a smaller angular_momentum"
        )
    shift = max(momentum + 1, (count - 1) * (particles - 1) - momentum + 1)
    space = FockSpace(
        count,
        particles,
        momentum + shift * particles,
        weights=[m + shift for m in range(count)],
    )
    pieces = {"g": pair_interaction(landau_level_interaction(count))}
    labels = tuple(f"m = {m}" for m in range(count))
    return Model("lowest-landau-level", space, pieces, {"g": _real(g, "g")}, mode_labels=labels)


def _drive_terms(
    drives: Mapping[int, complex] | None, modes: int, what: str, power: int
) -> tuple[dict[MonomialKey, complex], list[int]]:
    """``Σ ε_m a_m†^power + conj(ε_m) a_m^power`` and the driven modes."""
    if drives is None:
        return {}, []
    if not isinstance(drives, Mapping):
        raise TypeError(f"{what} must be a dict {{mode: amplitude}}; got {drives!r}")
    terms: dict[MonomialKey, complex] = {}
    driven: list[int] = []
    for raw_mode, raw_amplitude in drives.items():
        mode = _mode_in_range(raw_mode, modes, f"{what} mode {raw_mode!r}")
        amplitude = _amplitude(raw_amplitude, f"{what}[{mode}]")
        terms[((mode, power, 0),)] = amplitude
        terms[((mode, 0, power),)] = amplitude.conjugate()
        driven.append(mode)
    return terms, driven


def _invariant_space(
    space: FockSpace, charge_steps: Iterable[int], cutoff: Cutoff | None
) -> FockSpace:
    """The smallest sector specification that terms changing the charge by ±steps keep.

    A charge conserved exactly (modulus 0) or modulo ``M`` stays conserved modulo
    ``gcd(M, steps...)``: 0 keeps the sector, 1 means the full space.
    """
    cutoffs = space.cutoffs if cutoff is None else cutoff
    if space.total is None:
        return FockSpace(space.modes, cutoffs, None, weights=space.weights)
    modulus = space.modulus or 0
    for step in charge_steps:
        modulus = _math.gcd(modulus, step)
    if modulus == 0:
        return FockSpace(
            space.modes, cutoffs, space.total, weights=space.weights, modulus=space.modulus
        )
    if modulus == 1:
        return FockSpace(space.modes, cutoffs, None, weights=space.weights)
    return FockSpace(
        space.modes, cutoffs, space.total % modulus, weights=space.weights, modulus=modulus
    )


def with_drives(
    model: Model,
    *,
    coherent: Mapping[int, complex] | None = None,
    two_photon: Mapping[int, complex] | None = None,
    cutoff: Cutoff | None = None,
) -> Model:
    """Add coherent and two-photon drives to a model (in the frame rotating with them).

    Adds ``Σ_m (ε_m a_m† + conj(ε_m) a_m)`` as piece ``"drive"`` and
    ``Σ_m (λ_m a_m†² + conj(λ_m) a_m²)`` as piece ``"two_photon"``, each with a
    unit-default scale parameter; for real amplitudes these are ``ε (a + a†)`` and
    ``λ (a†² + a²)``.

    Parameters
    ----------
    model : Model
        Any model, e.g. from :func:`kerr_network`.
    coherent : dict {mode: amplitude}, optional
        One-photon drive amplitude ``ε_m`` per driven mode.
    two_photon : dict {mode: amplitude}, optional
        Two-photon (parametric) drive amplitude ``λ_m`` per driven mode.
    cutoff : int or sequence of int, optional
        New per-mode cutoffs; default: keep the model's. Raise them when the model
        relied on a conserved total to cap occupations, since drives lift that cap.

    Returns
    -------
    Model
        Named ``"driven <name>"``, with the model's pieces plus ``"drive"`` and/or
        ``"two_photon"``, on the space the drives leave invariant (see Notes).

    Raises
    ------
    ValueError
        If neither drive is given, a mode is out of range, an amplitude is not
        finite, or the model already has a ``"drive"`` or ``"two_photon"`` piece.
    SpaceError
        If the resulting sector holds no state.

    Notes
    -----
    A drive changes the conserved charge ``Σ w_i n_i`` by ``±w_m`` (coherent) or
    ``±2 w_m`` (two-photon), so the number-conserving sector is no longer invariant.
    The charge remains conserved modulo the greatest common divisor ``d`` of those
    steps (and of any modulus the space already had): ``d = 1`` gives the full
    truncated space (``total=None``), ``d >= 2`` the sector ``Σ w_i n_i ≡ total
    (mod d)``. With unit weights this means: a coherent drive gives the full space,
    two-photon drives alone give the parity sector ``total % 2`` (``modulus=2``) of
    the original total, and a model already on the full space stays there.

    Examples
    --------
    >>> base = kerr_network([1.0], self_kerr=0.2, cutoff=8, total=0)
    >>> driven = with_drives(base, two_photon={0: 0.1})
    >>> driven.space.modulus, driven.space.total
    (2, 0)
    >>> with_drives(base, coherent={0: 0.1}).space.total is None
    True
    """
    if not isinstance(model, Model):
        raise TypeError(f"model must be a fockmill Model; got {type(model).__name__}")
    if not coherent and not two_photon:
        raise ValueError("give coherent={mode: amplitude} and/or two_photon={mode: amplitude}")
    clash = {"drive", "two_photon"} & set(model.pieces)
    if clash:
        raise ValueError(
            f"the model already has drive piece(s) {sorted(clash)}; pass all drives in one "
            "with_drives call on the undriven model"
        )
    space = model.space
    one_photon, coherent_modes = _drive_terms(coherent, space.modes, "coherent", 1)
    two_photons, squeezed_modes = _drive_terms(two_photon, space.modes, "two_photon", 2)
    steps = [space.weights[m] for m in coherent_modes]
    steps += [2 * space.weights[m] for m in squeezed_modes]
    new_space = _invariant_space(space, steps, cutoff)
    pieces = dict(model.pieces)
    parameters = dict(model.parameters)
    if one_photon:
        pieces["drive"] = _expr(one_photon)
        parameters["drive"] = 1.0
    if two_photons:
        pieces["two_photon"] = _expr(two_photons)
        parameters["two_photon"] = 1.0
    return Model(
        f"driven {model.name}",
        new_space,
        pieces,
        parameters,
        constant=model.constant,
        mode_labels=model.mode_labels,
        renamed=model.renamed,
        jumps=model.jumps,
    )
