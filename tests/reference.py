"""Dense numpy reference ("oracle") for checking ladder-operator matrices.

Slow and simple on purpose: everything is built on the full truncated product
space with ``np.kron`` and plain enumeration, so the tests compare the fast
code against an independent, obviously correct construction.

Conventions
-----------
* Mode ``i`` keeps occupations ``0..cutoffs[i]``.
* Basis states of the full space are ordered lexicographically in
  ``(n_0, ..., n_{M-1})`` with mode 0 most significant, which is both the
  order of ``itertools.product`` and the order of ``np.kron(A_0, A_1, ...)``.
* An expression's matrix is ``P X P``: each normal-ordered monomial restricted
  to the kept states (see :func:`dense_matrix`).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence

import numpy as np
from fockmill.algebra.expressions import LadderExpr
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "bounded_composition_count",
    "dense_matrix",
    "full_basis",
    "restrict",
    "sector_matrix",
    "sector_occupations",
    "single_mode_matrices",
]


def _check_cutoffs(cutoffs: Sequence[int]) -> list[int]:
    checked = [int(c) for c in cutoffs]
    if any(c < 0 for c in checked):
        raise ValueError(f"cutoffs must be non-negative, got {list(cutoffs)}")
    return checked


def single_mode_matrices(cutoff: int) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Return the truncated ``(a, a†)`` of one mode on occupations ``0..cutoff``.

    Uses ``a|n> = sqrt(n)|n-1>`` and ``a†|n> = sqrt(n+1)|n+1>`` (Sakurai &
    Napolitano, Modern Quantum Mechanics, 2nd ed. 2011, Sec. 2.3; from
    memory). The truncated ``a†`` maps the top state to zero.
    """
    if cutoff < 0:
        raise ValueError(f"cutoff must be non-negative, got {cutoff}")
    lowering = np.diag(np.sqrt(np.arange(1, cutoff + 1, dtype=np.float64)), k=1)
    return lowering, lowering.T.copy()


def full_basis(cutoffs: Sequence[int]) -> NDArray[np.int64]:
    """Return all occupations of the full truncated product space.

    Returns
    -------
    ndarray of shape (prod(cutoffs + 1), len(cutoffs))
        Rows in lexicographic order with mode 0 most significant, matching
        ``np.kron`` ordering.
    """
    checked = _check_cutoffs(cutoffs)
    rows = list(itertools.product(*(range(c + 1) for c in checked)))
    return np.array(rows, dtype=np.int64).reshape(len(rows), len(checked))


def _monomial_block(cutoff: int, creation: int, annihilation: int) -> NDArray[np.float64]:
    """Return ``P (a†^p a^q) P`` for one mode, computed without truncation error.

    Powers of truncated matrices are wrong near the top: the truncated ``a†``
    drops the state above the cutoff. Acting on kept states (``n <= cutoff``),
    ``a^q`` only lowers, and ``a†^p`` then climbs at most to ``cutoff + p``.
    Working with cutoff ``cutoff + p + q`` (more than enough) keeps every
    intermediate state, so cropping the result back to ``cutoff + 1`` rows and
    columns gives the exact restricted matrix elements.
    """
    big = cutoff + creation + annihilation
    lowering, raising = single_mode_matrices(big)
    block: NDArray[np.float64] = np.linalg.matrix_power(raising, creation) @ (
        np.linalg.matrix_power(lowering, annihilation)
    )
    return block[: cutoff + 1, : cutoff + 1]


def dense_matrix(expr: LadderExpr, cutoffs: Sequence[int]) -> NDArray[np.complex128]:
    """Return ``P X P`` on the full truncated product space as a dense matrix.

    For each monomial the single-mode blocks ``P_i (a_i†^p a_i^q) P_i`` are
    combined with ``np.kron`` in mode order. Since ``P = ⊗_i P_i`` and factors on
    different modes commute, this equals the monomial restricted to the kept
    states, which is the normal-ordered convention the package uses.
    """
    checked = _check_cutoffs(cutoffs)
    if expr.max_mode() >= len(checked):
        raise ValueError(
            f"expression uses mode {expr.max_mode()} but only {len(checked)} cutoffs given"
        )
    dimension = math.prod(c + 1 for c in checked)
    total: NDArray[np.complex128] = np.zeros((dimension, dimension), dtype=np.complex128)
    for coefficient, key in expr.terms():
        powers = {mode: (p, q) for mode, p, q in key}
        term: NDArray[np.complex128] = np.ones((1, 1), dtype=np.complex128)
        for mode, cutoff in enumerate(checked):
            creation, annihilation = powers.get(mode, (0, 0))
            block = _monomial_block(cutoff, creation, annihilation)
            term = np.kron(term, block).astype(np.complex128, copy=False)
        total += coefficient * term
    return total


def _as_rows(occupations: ArrayLike) -> list[tuple[int, ...]]:
    return [tuple(int(n) for n in row) for row in np.asarray(occupations)]


def restrict(
    matrix: NDArray[np.complex128],
    occupations_full: ArrayLike,
    selected_occupations: ArrayLike,
) -> NDArray[np.complex128]:
    """Return the submatrix on ``selected_occupations``, in their order.

    Parameters
    ----------
    matrix : ndarray
        Operator on the space whose basis is ``occupations_full``.
    occupations_full : array_like of shape (D, M)
        Basis of ``matrix``, one occupation tuple per row.
    selected_occupations : array_like of shape (K, M)
        States to keep; each must appear in ``occupations_full``.
    """
    position = {row: index for index, row in enumerate(_as_rows(occupations_full))}
    try:
        indices = [position[row] for row in _as_rows(selected_occupations)]
    except KeyError as missing:
        raise ValueError(f"occupation {missing.args[0]} is not in the full basis") from None
    return matrix[np.ix_(indices, indices)]


def sector_occupations(
    cutoffs: Sequence[int],
    weights: Sequence[int] | None = None,
    total: int | None = None,
    modulus: int | None = None,
) -> NDArray[np.int64]:
    """Brute-force the states with ``Σ w_i n_i == total`` (or ``≡ total mod modulus``).

    Rows are in lexicographic order (mode 0 most significant), the same
    relative order as :func:`full_basis`. With ``total=None`` every state is
    kept. Weights default to 1 for every mode.
    """
    basis = full_basis(cutoffs)
    if total is None:
        if modulus is not None:
            raise ValueError("modulus needs a total to compare against")
        return basis
    weight_vector = np.ones(basis.shape[1], dtype=np.int64) if weights is None else weights
    charges = basis @ np.asarray(weight_vector, dtype=np.int64)
    keep = charges == total if modulus is None else (charges - total) % modulus == 0
    selected: NDArray[np.int64] = basis[keep]
    return selected


def bounded_composition_count(total: int, cutoffs: Sequence[int]) -> int:
    """Count ``(n_0, ..., n_{M-1})`` with ``0 <= n_i <= c_i`` and ``Σ n_i == total``.

    Inclusion-exclusion over the set ``S`` of modes forced above their cutoff,
    each unbounded count given by stars and bars::

        Σ_{S ⊆ modes} (-1)^|S| C(total - Σ_{i∈S}(c_i + 1) + M - 1, M - 1)

    Source: the principle of inclusion-exclusion applied to stars and bars,
    Stanley, Enumerative Combinatorics vol. 1, 2nd ed. (2012), Sec. 2.1 and
    Sec. 1.2 (from memory; section numbers not re-checked).
    """
    checked = _check_cutoffs(cutoffs)
    modes = len(checked)
    if total < 0:
        return 0
    if modes == 0:
        return 1 if total == 0 else 0
    count = 0
    for size in range(modes + 1):
        for subset in itertools.combinations(checked, size):
            remaining = total - sum(c + 1 for c in subset)
            if remaining >= 0:
                count += (-1) ** size * math.comb(remaining + modes - 1, modes - 1)
    return count


def sector_matrix(
    expr: LadderExpr,
    cutoffs: Sequence[int],
    total: int | None = None,
    weights: Sequence[int] | None = None,
    modulus: int | None = None,
) -> NDArray[np.complex128]:
    """Return ``P X P`` on a sector, by acting with every monomial on every state by hand.

    For sectors whose full product space is too large for :func:`dense_matrix`: the
    states come from :func:`sector_occupations` (brute force), and each normal-ordered
    monomial ``a_i†^p a_i^q`` acts as ``a^q`` then ``a†^p`` with
    ``a|n> = sqrt(n)|n-1>``, ``a†|n> = sqrt(n+1)|n+1>`` (Sakurai & Napolitano, Modern
    Quantum Mechanics, 2nd ed. 2011, Sec. 2.3); results above a cutoff or outside the
    sector are dropped. A plain Python loop, independent of the package's Rust code.
    """
    checked = _check_cutoffs(cutoffs)
    basis = sector_occupations(checked, weights, total, modulus)
    return between_matrix(expr, checked, basis, basis)


def between_matrix(
    expr: LadderExpr, cutoffs: Sequence[int], columns: ArrayLike, rows: ArrayLike
) -> NDArray[np.complex128]:
    """Return ``<row| X |column>`` for lists of occupation tuples, by hand.

    Each normal-ordered monomial ``a_i†^p a_i^q`` acts on each column state as ``a^q``
    then ``a†^p`` with ``a|n> = sqrt(n)|n-1>``, ``a†|n> = sqrt(n+1)|n+1>`` (Sakurai &
    Napolitano, Modern Quantum Mechanics, 2nd ed. 2011, Sec. 2.3); results above a
    cutoff or not among ``rows`` are dropped. A plain Python loop, independent of the
    package's Rust code.
    """
    checked = _check_cutoffs(cutoffs)
    position = {state: k for k, state in enumerate(_as_rows(rows))}
    basis = _as_rows(columns)
    out: NDArray[np.complex128] = np.zeros((len(position), len(basis)), dtype=np.complex128)
    terms = expr.terms()
    for column, state in enumerate(basis):
        for coefficient, key in terms:
            occupation = list(state)
            amplitude = 1.0
            for mode, creation, annihilation in key:
                n = occupation[mode]
                if annihilation > n or n - annihilation + creation > checked[mode]:
                    amplitude = 0.0
                    break
                amplitude *= math.sqrt(math.factorial(n) / math.factorial(n - annihilation))
                n -= annihilation
                amplitude *= math.sqrt(math.factorial(n + creation) / math.factorial(n))
                occupation[mode] = n + creation
            row = position.get(tuple(occupation)) if amplitude else None
            if row is not None:
                out[row, column] += coefficient * amplitude
    return out


def bose_hubbard_ring(sites: int, hopping: float, interaction: float) -> LadderExpr:
    """``H = −J Σ (a_i† a_{i+1} + h.c.) + (U/2) Σ n_i (n_i − 1)`` on a ring, written term
    by term from the definition (independent of ``fm.models``)."""
    from fockmill import lowering, number, raising

    h = LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        h = h - hopping * (raising(i) * lowering(j) + raising(j) * lowering(i))
        h = h + 0.5 * interaction * number(i) * (number(i) - 1)
    return h
