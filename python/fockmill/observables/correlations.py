"""Density–density correlations ``⟨n_i n_j⟩`` for every pair of modes, in one pass."""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

import fockmill._native as _native
from fockmill.observables.observe import check_vector
from fockmill.settings.checks import check_threads
from fockmill.spaces.checks import check_space
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["density_correlations"]


def density_correlations(
    space: FockSpace,
    vector: npt.ArrayLike,
    *,
    connected: bool = False,
    threads: int | None = None,
) -> npt.NDArray[np.float64]:
    """The matrix ``C[i, j] = ⟨n_i n_j⟩`` of a state, for all modes at once.

    Every basis state has definite occupations, so ``C[i, j] = Σ_s |ψ_s|² n_i n_j``
    (divided by ``‖ψ‖²``) is summed in Rust in one pass over the basis, instead of one
    :func:`expectation` call per pair.

    Parameters
    ----------
    space : FockSpace or SymmetricSpace
        The basis of ``vector`` (a sector state is expanded into its base space).
    vector : array_like
        A state of the space (real or complex, need not be normalised).
    connected : bool, default False
        Return ``⟨n_i n_j⟩ − ⟨n_i⟩⟨n_j⟩`` instead (its diagonal is
        :func:`number_variances`).
    threads : int, optional
        Worker threads (None or 0: all cores).

    Returns
    -------
    numpy.ndarray
        Symmetric float64 array of shape ``(modes, modes)``; the diagonal is
        ``⟨n_i²⟩`` (or the variance when ``connected``).

    Raises
    ------
    ValueError
        For a vector of the wrong length, a zero vector or non-finite entries.
    TypeError
        For a non-numeric vector.

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> fm.density_correlations(space, [1.0, 0.0, 0.0])   # |0, 2>
    array([[0., 0.],
           [0., 4.]])
    """
    s = check_space(space)
    v = check_vector(s, vector)
    if isinstance(s, SymmetricSpace):
        # Occupations are diagonal in the Fock basis: the same sums over the expanded state.
        return density_correlations(
            s.base, s.expand(v, threads=threads), connected=connected, threads=threads
        )
    flat = _native.density_correlations(s.native, v, check_threads(threads))
    matrix = flat.reshape(s.modes, s.modes) / float(np.vdot(v, v).real)
    if connected:
        means = _native.occupation_distributions(s.native, v, check_threads(threads))
        populations = np.empty(s.modes)
        start = 0
        for i, c in enumerate(s.cutoffs):
            populations[i] = means[start : start + c + 1] @ np.arange(c + 1)
            start += c + 1
        populations /= float(np.vdot(v, v).real)
        matrix = matrix - np.outer(populations, populations)
    return matrix
