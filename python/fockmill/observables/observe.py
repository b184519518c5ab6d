"""Observables of a state vector, computed in one pass over the basis in Rust.

None of these build a matrix: expectation values come from per-monomial sums
``Σ_r conj(ψ_r) (m ψ)_r`` and occupation statistics from the state's weights.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import numpy.typing as npt

import fockmill._native as _native
from fockmill.algebra.expressions import MonomialKey, as_expr
from fockmill.exceptions import SizeLimitError
from fockmill.settings.checks import check_threads
from fockmill.spaces.checks import check_space
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = [
    "entanglement_entropy",
    "expectation",
    "number_variances",
    "occupation_distribution",
    "one_body_matrix",
    "populations",
    "top_level_weights",
]


def _is_prepared(obj: object) -> bool:
    """A prepared problem (``fockmill.prepare``), recognised by its protocol: this layer
    sits below the problem layer and does not import it."""
    return all(hasattr(obj, name) for name in ("native", "matvec", "expr", "space", "shape"))


def check_vector(
    space: FockSpace | SymmetricSpace, vector: npt.ArrayLike, name: str = "vector"
) -> npt.NDArray[Any]:
    """A contiguous float64/complex128 copy-free view of a state of the space, or an error."""
    v = np.asarray(vector)
    if v.ndim != 1 or v.shape[0] != space.dim:
        raise ValueError(
            f"{name} must have shape ({space.dim},) to match the space; got {v.shape}. "
            "Pass a state of this space (e.g. GroundState.vector)"
        )
    if v.dtype.kind not in "fciu" or v.dtype.kind == "b":
        raise TypeError(f"{name} must be a float or complex array; got dtype {v.dtype}")
    v = np.ascontiguousarray(v, dtype=np.complex128 if v.dtype.kind == "c" else np.float64)
    if not np.all(np.isfinite(v)):
        raise ValueError(f"{name} contains NaN or inf")
    if not np.any(v):
        raise ValueError(f"{name} is zero; pass a nonzero state")
    return v


def _norm_sq(v: npt.NDArray[Any]) -> float:
    return float(np.vdot(v, v).real)


def _conserving(key: MonomialKey, space: FockSpace) -> bool:
    changes: dict[int, int] = {}
    for m, p, q in key:
        changes[m] = changes.get(m, 0) + p - q
    return space.conserves(changes)


def _check_modes(key: MonomialKey, space: FockSpace) -> None:
    for m, _, _ in key:
        if m >= space.modes:
            from fockmill.exceptions import ModeIndexError

            raise ModeIndexError(
                f"the expression acts on mode {m}, but the space has only {space.modes} modes"
            )


def _monomial_values(
    space: FockSpace, keys: list[MonomialKey], v: npt.NDArray[Any], threads: int | None
) -> npt.NDArray[np.complex128]:
    """⟨v|m|v⟩ for each monomial (unnormalised); 0 for those that leave the sector."""
    out = np.zeros(len(keys), dtype=np.complex128)
    keep = [i for i, k in enumerate(keys) if _conserving(k, space)]
    if keep:
        values = _native.monomial_expectations(
            space.native, [list(keys[i]) for i in keep], v, check_threads(threads)
        )
        out[keep] = values
    return out


def expectation(
    expr: Any,
    space: Any = None,
    vector: npt.ArrayLike | None = None,
    *,
    threads: int | None = None,
) -> float | complex:
    """``⟨ψ|O|ψ⟩ / ⟨ψ|ψ⟩`` without building the matrix of ``O``.

    Parameters
    ----------
    expr : LadderExpr or Problem
        The observable ``O`` (any expression; plain numbers mean multiples of 1), or a
        prepared problem (:func:`fockmill.prepare`; then ``space`` is omitted and its
        compiled operator is used: ``expectation(problem, psi)``).
    space : FockSpace or SymmetricSpace
        The space ``vector`` lives in.
    vector : array_like
        The state ``ψ`` (need not be normalised).
    threads : int, optional
        Worker threads.

    Returns
    -------
    float or complex
        A float when ``expr`` is Hermitian, else a complex number. Terms that change
        the conserved charge have zero expectation in a sector state and are skipped.

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> fm.expectation(fm.number(0), space, np.array([0.0, 0.0, 1.0]))
    2.0
    """
    if _is_prepared(expr):
        if (
            vector is None
            and space is not None
            and not isinstance(space, FockSpace | SymmetricSpace)
        ):
            space, vector = None, space  # expectation(problem, psi)
        if space is not None and space != expr.space:
            raise ValueError(
                "a prepared Problem already carries its space; pass the Problem alone or "
                "prepare the expression again on the other space"
            )
        if expr.shape[0] != expr.shape[1]:
            raise ValueError(
                "an expectation value needs a square operator; this Problem maps between two spaces"
            )
        v = check_vector(expr.space, vector)
        total = complex(np.vdot(v, expr.matvec(v))) / _norm_sq(v)
        return float(total.real) if expr.expr.is_hermitian() else total
    e = as_expr(expr)
    s = check_space(space)
    if vector is None:
        raise TypeError("expectation needs the state: expectation(O, space, psi)")
    v = check_vector(s, vector)
    if isinstance(s, SymmetricSpace):  # any expression: through the base space
        return expectation(e, s.base, s.expand(v, threads=threads), threads=threads)
    terms = e.terms()
    for _, key in terms:
        _check_modes(key, s)
    values = _monomial_values(s, [k for _, k in terms], v, threads)
    total = complex(sum(c * val for (c, _), val in zip(terms, values, strict=True)))
    total /= _norm_sq(v)
    if e.is_hermitian():
        return float(total.real)
    return total


def occupation_distribution(
    space: FockSpace | SymmetricSpace, vector: npt.ArrayLike, *, threads: int | None = None
) -> npt.NDArray[np.float64]:
    """Probability ``P_i(n)`` of finding ``n`` quanta in mode ``i``.

    Returns
    -------
    numpy.ndarray
        Shape ``(modes, max_cutoff + 1)``; row ``i`` is zero beyond ``cutoffs[i]``.
        Each row sums to 1.
    """
    s = check_space(space)
    v = check_vector(s, vector)
    if isinstance(s, SymmetricSpace):
        # From the representatives: no base-space vector (|G| times the sector's size).
        flat = s.native.occupation_distributions(v, check_threads(threads)) / _norm_sq(v)
    else:
        flat = _native.occupation_distributions(s.native, v, check_threads(threads)) / _norm_sq(v)
    out = np.zeros((s.modes, max(s.cutoffs) + 1))
    start = 0
    for i, c in enumerate(s.cutoffs):
        out[i, : c + 1] = flat[start : start + c + 1]
        start += c + 1
    return out


def populations(
    space: FockSpace | SymmetricSpace, vector: npt.ArrayLike, *, threads: int | None = None
) -> npt.NDArray[np.float64]:
    """Mean occupation ``⟨n_i⟩`` of every mode, shape ``(modes,)``."""
    dist = occupation_distribution(space, vector, threads=threads)
    return dist @ np.arange(dist.shape[1], dtype=np.float64)


def number_variances(
    space: FockSpace | SymmetricSpace, vector: npt.ArrayLike, *, threads: int | None = None
) -> npt.NDArray[np.float64]:
    """Number fluctuations ``⟨n_i²⟩ − ⟨n_i⟩²`` of every mode, shape ``(modes,)``."""
    dist = occupation_distribution(space, vector, threads=threads)
    n = np.arange(dist.shape[1], dtype=np.float64)
    mean = dist @ n
    return np.maximum(dist @ (n * n) - mean * mean, 0.0)


def top_level_weights(
    space: FockSpace | SymmetricSpace, vector: npt.ArrayLike, *, threads: int | None = None
) -> npt.NDArray[np.float64]:
    """Weight ``P_i(cutoff_i)`` of each mode's highest kept level, shape ``(modes,)``.

    A weight that is not small means the cutoff may be too low for this state (unless
    the conserved total already caps the mode there: see ``FockSpace.binding_cutoffs``).
    """
    s = check_space(space)
    dist = occupation_distribution(s, vector, threads=threads)
    return dist[np.arange(s.modes), np.asarray(s.cutoffs)]


def one_body_matrix(
    space: FockSpace | SymmetricSpace, vector: npt.ArrayLike, *, threads: int | None = None
) -> npt.NDArray[Any]:
    """The one-body density matrix ``G[i, j] = ⟨a_i† a_j⟩``, shape ``(modes, modes)``.

    Returns
    -------
    numpy.ndarray
        Hermitian; float64 when the state is real, else complex128. Its diagonal is
        :func:`populations`; its eigenvalues are the natural-orbital occupations.
    """
    s = check_space(space)
    v = check_vector(s, vector)
    if isinstance(s, SymmetricSpace):
        return one_body_matrix(s.base, s.expand(v, threads=threads), threads=threads)
    m = s.modes
    pairs = [(i, j) for i in range(m) for j in range(i + 1, m)]
    keys: list[MonomialKey] = [((i, 1, 0), (j, 0, 1)) for i, j in pairs]
    off = _monomial_values(s, keys, v, threads) / _norm_sq(v) if keys else np.zeros(0)
    g = np.zeros((m, m), dtype=np.complex128)
    g[np.diag_indices(m)] = populations(s, v, threads=threads)
    for (i, j), val in zip(pairs, off, strict=True):
        g[i, j] = val
        g[j, i] = np.conj(val)
    return g.real.copy() if v.dtype.kind == "f" else g


def entanglement_entropy(
    space: FockSpace | SymmetricSpace,
    vector: npt.ArrayLike,
    subsystem: Sequence[int],
    *,
    max_block_bytes: int = 2**31,
) -> float:
    """Von Neumann entropy ``S = −Tr ρ_A ln ρ_A`` of the modes in ``subsystem``.

    Parameters
    ----------
    space : FockSpace or SymmetricSpace
        The space of the state.
    vector : array_like
        The (pure) state; normalised internally.
    subsystem : sequence of int
        Modes of part A; the rest form part B.
    max_block_bytes : int
        Largest dense block of the coefficient matrix allowed (refused beyond).

    Returns
    -------
    float
        The entropy in nats (natural logarithm).

    Notes
    -----
    The state is reshaped into a matrix ``Ψ[a, b]`` over the distinct occupations of A
    and B. With a conserved total, ``Ψ`` is block diagonal in the charge of A, so each
    block is handled separately and ``ρ_A`` is never formed whole. The eigenvalues of
    each block's ``Ψ Ψ†`` (on its smaller side) are the Schmidt weights.
    """
    s = check_space(space)
    v = check_vector(s, vector)
    if isinstance(s, SymmetricSpace):
        return entanglement_entropy(s.base, s.expand(v), subsystem, max_block_bytes=max_block_bytes)
    if isinstance(subsystem, str | bytes) or not isinstance(subsystem, Sequence | np.ndarray):
        raise TypeError(
            f"subsystem must be a sequence of mode indices such as [0, 1]; got {subsystem!r}"
        )
    for i in subsystem:
        if isinstance(i, bool | np.bool_) or not isinstance(i, int | np.integer):
            raise TypeError(f"subsystem must list integer mode indices; got {i!r}")
    a = sorted({int(i) for i in subsystem})
    if any(i < 0 or i >= s.modes for i in a) or len(a) != len(list(subsystem)):
        raise ValueError(
            f"subsystem must list distinct modes in 0..{s.modes - 1}; got {list(subsystem)}"
        )
    b = [i for i in range(s.modes) if i not in a]
    if not a or not b:
        return 0.0
    v = v / np.sqrt(_norm_sq(v))
    occ = s.occupations().astype(np.int64)
    _, ia = np.unique(occ[:, a], axis=0, return_inverse=True)
    _, ib = np.unique(occ[:, b], axis=0, return_inverse=True)
    ia, ib = ia.reshape(-1), ib.reshape(-1)
    # The subsystem's value of every conserved charge labels the Schmidt blocks.
    columns = [np.zeros(s.dim, np.int64)]
    for charge in s.charges:
        weights = np.broadcast_to(np.asarray(charge.weights, dtype=np.int64), (s.modes,))
        column = occ[:, a] @ weights[a]
        columns.append(column % charge.modulus if charge.modulus else column)
    _, block_of = np.unique(np.stack(columns, axis=1), axis=0, return_inverse=True)
    block_of = block_of.reshape(-1)
    entropy = 0.0
    for q in np.unique(block_of):
        sel = np.nonzero(block_of == q)[0]
        ra, ra_inv = np.unique(ia[sel], return_inverse=True)
        rb, rb_inv = np.unique(ib[sel], return_inverse=True)
        nbytes = ra.size * rb.size * v.itemsize
        if nbytes > max_block_bytes:
            raise SizeLimitError(
                f"a Schmidt block of {ra.size} x {rb.size} would need {nbytes / 2**30:.2f} GiB; "
                "choose a smaller subsystem or raise max_block_bytes"
            )
        block = np.zeros((ra.size, rb.size), dtype=v.dtype)
        block[ra_inv.reshape(-1), rb_inv.reshape(-1)] = v[sel]
        gram = block @ block.conj().T if ra.size <= rb.size else block.conj().T @ block
        p = np.linalg.eigvalsh(gram)
        p = p[p > 1e-300]
        entropy -= float(np.sum(p * np.log(p)))
    return entropy
