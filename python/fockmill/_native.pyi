"""Typed stub of the compiled module ``fockmill._native`` (Rust, pyo3).

Users import from ``fockmill``; these are the building blocks its public functions use.
Every call that can run long releases the interpreter and polls for Ctrl-C; ``threads``
is a thread count (None or 0: rayon's global pool, sized by ``RAYON_NUM_THREADS`` or the
number of cores) or a :class:`NativePool` kept between calls.
"""

from typing import final

import numpy as np
import numpy.typing as npt

__all__ = [
    "NativeBetween",
    "NativeCsr",
    "NativeOperator",
    "NativePool",
    "NativeSpace",
    "NativeSymmetricOperator",
    "NativeSymmetricSpace",
    "__version__",
    "default_threads",
    "density_correlations",
    "monomial_expectations",
    "occupation_distributions",
]

__version__: str

_RealOrComplex1D = npt.NDArray[np.float64] | npt.NDArray[np.complex128]
_RealOrComplex2D = npt.NDArray[np.float64] | npt.NDArray[np.complex128]

@final
class NativePool:
    """A thread pool kept between calls (``threads=None`` or 0: rayon's global pool)."""

    def __new__(cls, threads: int | None = None) -> NativePool: ...
    @property
    def threads(self) -> int: ...

@final
class NativeSpace:
    """A Fock space with its ranking tables.

    Parameters
    ----------
    cutoffs : list of int
        Highest occupation of each mode (>= 1).
    weights : list of int, optional
        Weight of each mode in the conserved charge (default all 1).
    total : int, optional
        Conserved weighted total (None: the full truncated space).
    modulus : int, optional
        Conserve the total modulo this (>= 2); needs ``total``.
    """

    def __new__(
        cls,
        cutoffs: list[int],
        weights: list[int] | None = None,
        total: int | None = None,
        modulus: int | None = None,
    ) -> NativeSpace: ...
    @property
    def dim(self) -> int: ...
    @property
    def modes(self) -> int: ...
    @property
    def cutoffs(self) -> list[int]: ...
    @property
    def weights(self) -> list[int]: ...
    def occupations(
        self, threads: int | NativePool | None = None
    ) -> npt.NDArray[np.uint8] | npt.NDArray[np.uint16]:
        """Occupations of all basis states, shape ``(dim, modes)``."""
    def state(self, index: int) -> list[int]:
        """Occupations of basis state ``index``."""
    def index(
        self, occ: npt.NDArray[np.int64], threads: int | NativePool | None = None
    ) -> npt.NDArray[np.int64]:
        """Ranks of the rows of ``occ`` (``(n, modes)`` int64); -1 outside the space."""

@final
class NativeOperator:
    """Validated, merged terms of an operator on a space.

    Parameters
    ----------
    space : NativeSpace
        The space.
    terms : list of (re, im, [(mode, p, q), ...])
        Coefficient parts and normal-ordered factors ``(a_mode†)^p (a_mode)^q``.
    cut : int or None
        Product kernel: None chooses automatically; 0 is the row kernel; ``k`` the
        bipartite kernel with left modes ``0..k``. Built once, on first use.
    """

    def __new__(
        cls,
        space: NativeSpace,
        terms: list[tuple[float, float, list[tuple[int, int, int]]]],
        cut: int | None = None,
    ) -> NativeOperator: ...
    @property
    def cut(self) -> int:
        """The cut of the product kernel in use (0: the row kernel)."""
    @property
    def is_real(self) -> bool: ...
    @property
    def terms(self) -> int: ...
    @property
    def dim(self) -> int: ...
    def build_csr(
        self, threads: int | NativePool | None = None, force_wide: bool = False
    ) -> tuple[
        npt.NDArray[np.int32] | npt.NDArray[np.int64],
        npt.NDArray[np.int32] | npt.NDArray[np.int64],
        _RealOrComplex1D,
    ]:
        """CSR arrays ``(indptr, indices, data)``, moved to NumPy without a copy."""
    def matvec(
        self, x: _RealOrComplex1D, threads: int | NativePool | None = None
    ) -> _RealOrComplex1D:
        """``H x`` (complex128 when ``x`` or ``H`` is complex)."""
    def matmat(
        self, x: _RealOrComplex2D, threads: int | NativePool | None = None
    ) -> _RealOrComplex2D:
        """``H X`` for a ``(dim, k)`` block."""
    def estimate_nnz(
        self, samples: int = 2048, threads: int | NativePool | None = None
    ) -> tuple[float, float, bool, int]:
        """``(nnz, standard error, exact, largest row)`` without building."""
    def lanczos_ground(
        self,
        tol: float = 1e-9,
        max_steps: int = 400,
        max_restarts: int = 8,
        seed: int = 0x5EED,
        start: _RealOrComplex1D | None = None,
        threads: int | NativePool | None = None,
        stored: bool = False,
    ) -> tuple[float, _RealOrComplex1D, float, int, int, int, bool]:
        """Four-vector Lanczos ground state:
        ``(energy, vector, residual, steps, products, restarts, converged)``.

        A ``start`` is normalised and mixed with seeded noise of relative weight 1e-4
        (seed ``seed``), so that a start with no weight on the ground state's symmetry
        sector still converges to the true ground state."""
    def lanczos_levels(
        self,
        k: int,
        tol: float = 1e-9,
        max_products: int = 10_000,
        seed: int = 0x5EED,
        start: _RealOrComplex1D | _RealOrComplex2D | None = None,
        threads: int | NativePool | None = None,
        stored: bool = False,
        basis: int = 0,
    ) -> tuple[npt.NDArray[np.float64], _RealOrComplex2D, npt.NDArray[np.float64], int, int, bool]:
        """Lowest ``k`` levels by thick-restart Lanczos (Wu & Simon 2000) in Rust:
        ``(energies, vectors, residuals, products, restarts, converged)``.

        ``energies`` ascending; ``vectors`` shape ``(dim, k)`` (Fortran order, no copy),
        orthonormal; ``residuals`` the measured ``‖Hv − Ev‖``; ``converged`` when every
        residual is ``<= tol · max(1, |E|)`` and the iteration ended within
        ``max_products`` (the final residual checks add up to ``k`` products). Every
        copy of a degenerate level that fits in ``k`` is returned: converged levels are
        locked, then fresh seeded runs on their orthogonal complement re-check that no
        lower level remains. Memory: ``basis + 1`` vectors (``basis`` 0 means
        ``min(dim, 2k + 8)``; at least ``k + 4``), plus the CSR matrix when ``stored``.
        ``start``: one vector ``(dim,)`` or a block ``(dim, b)`` (summed, each column
        normalised), mixed with seeded noise of relative weight 1e-4."""

@final
class NativeCsr:
    """A square Hermitian CSR matrix copied in from Python, for the Rust solvers.

    Parameters
    ----------
    indptr, indices : numpy.ndarray
        int32 or int64 CSR row pointers and column indices (int64 kept when either is).
    data : numpy.ndarray
        float64 or complex128 values. Hermiticity is assumed, not checked.
    """

    def __new__(
        cls,
        indptr: npt.NDArray[np.int32] | npt.NDArray[np.int64],
        indices: npt.NDArray[np.int32] | npt.NDArray[np.int64],
        data: _RealOrComplex1D,
    ) -> NativeCsr: ...
    @property
    def dim(self) -> int: ...
    @property
    def nnz(self) -> int: ...
    @property
    def is_real(self) -> bool: ...
    def lanczos_ground(
        self,
        tol: float = 1e-9,
        max_steps: int = 400,
        max_restarts: int = 8,
        seed: int = 0x5EED,
        start: _RealOrComplex1D | _RealOrComplex2D | None = None,
        threads: int | NativePool | None = None,
    ) -> tuple[float, _RealOrComplex1D, float, int, int, int, bool]:
        """As :meth:`NativeOperator.lanczos_ground`, on this matrix."""
    def lanczos_levels(
        self,
        k: int,
        tol: float = 1e-9,
        max_products: int = 10_000,
        seed: int = 0x5EED,
        start: _RealOrComplex1D | _RealOrComplex2D | None = None,
        threads: int | NativePool | None = None,
        basis: int = 0,
    ) -> tuple[npt.NDArray[np.float64], _RealOrComplex2D, npt.NDArray[np.float64], int, int, bool]:
        """As :meth:`NativeOperator.lanczos_levels`, on this matrix."""

@final
class NativeSymmetricSpace:
    """A symmetry sector: orbit representatives of a group of mode permutations whose
    stabilisers carry the trivial character.

    Parameters
    ----------
    space : NativeSpace
        The base space.
    generators : list of (images, label)
        ``images[i]``: the mode the occupation of mode ``i`` moves to; ``label`` in
        ``range(order)`` selects the character ``exp(2πi label / order)``.
    """

    def __new__(
        cls,
        space: NativeSpace,
        generators: list[tuple[list[int], int]],
        threads: int | NativePool | None = None,
    ) -> NativeSymmetricSpace: ...
    @property
    def dim(self) -> int: ...
    @property
    def order(self) -> int: ...
    @property
    def is_real(self) -> bool: ...
    def representatives(self) -> npt.NDArray[np.uint64]:
        """Base ranks of the orbit representatives, ascending (the sector basis)."""
    def expand(
        self, v: _RealOrComplex1D, threads: int | NativePool | None = None
    ) -> _RealOrComplex1D:
        """The base-space vector of a sector vector (norm-preserving)."""
    def project(
        self, w: _RealOrComplex1D, threads: int | NativePool | None = None
    ) -> _RealOrComplex1D:
        """The adjoint of ``expand``."""

@final
class NativeSymmetricOperator:
    """An operator commuting with a sector's group, on the sector (same protocol as
    :class:`NativeOperator`)."""

    def __new__(
        cls,
        sector: NativeSymmetricSpace,
        terms: list[tuple[float, float, list[tuple[int, int, int]]]],
    ) -> NativeSymmetricOperator: ...
    @property
    def is_real(self) -> bool: ...
    @property
    def terms(self) -> int: ...
    @property
    def dim(self) -> int: ...
    def build_csr(
        self, threads: int | NativePool | None = None, force_wide: bool = False
    ) -> tuple[
        npt.NDArray[np.int32] | npt.NDArray[np.int64],
        npt.NDArray[np.int32] | npt.NDArray[np.int64],
        _RealOrComplex1D,
    ]:
        """Canonical CSR arrays of the sector matrix."""
    def matvec(
        self, x: _RealOrComplex1D, threads: int | NativePool | None = None
    ) -> _RealOrComplex1D:
        """``H x`` on the sector."""
    def matmat(
        self, x: _RealOrComplex2D, threads: int | NativePool | None = None
    ) -> _RealOrComplex2D:
        """``H X`` for a ``(dim, k)`` block."""
    def estimate_nnz(
        self, samples: int = 2048, threads: int | NativePool | None = None
    ) -> tuple[float, float, bool, int]:
        """``(nnz, standard error, exact, largest row)`` without building."""
    def lanczos_ground(
        self,
        tol: float = 1e-9,
        max_steps: int = 400,
        max_restarts: int = 8,
        seed: int = 0x5EED,
        start: _RealOrComplex1D | None = None,
        threads: int | NativePool | None = None,
        stored: bool = False,
    ) -> tuple[float, _RealOrComplex1D, float, int, int, int, bool]:
        """Four-vector Lanczos ground state on the sector."""
    def lanczos_levels(
        self,
        k: int,
        tol: float = 1e-9,
        max_products: int = 10_000,
        seed: int = 0x5EED,
        start: _RealOrComplex1D | _RealOrComplex2D | None = None,
        threads: int | NativePool | None = None,
        stored: bool = False,
        basis: int = 0,
    ) -> tuple[npt.NDArray[np.float64], _RealOrComplex2D, npt.NDArray[np.float64], int, int, bool]:
        """Lowest ``k`` levels on the sector, as ``NativeOperator.lanczos_levels``."""

@final
class NativeBetween:
    """An operator carrying the states of ``source`` into ``target`` (same modes and
    cutoffs): a matrix of shape ``(rows, dim) = (target.dim, source.dim)``.

    Parameters
    ----------
    source, target : NativeSpace
        Where the operator starts and where it lands.
    terms : list of (re, im, [(mode, p, q), ...])
        As for :class:`NativeOperator`.
    project : bool
        Keep terms whose image leaves ``target`` and drop that part (adjoints); by
        default such terms are refused.
    """

    def __new__(
        cls,
        source: NativeSpace,
        target: NativeSpace,
        terms: list[tuple[float, float, list[tuple[int, int, int]]]],
        project: bool = False,
    ) -> NativeBetween: ...
    @property
    def is_real(self) -> bool: ...
    @property
    def terms(self) -> int: ...
    @property
    def dim(self) -> int: ...
    @property
    def rows(self) -> int: ...
    def build_csr(
        self, threads: int | NativePool | None = None, force_wide: bool = False
    ) -> tuple[
        npt.NDArray[np.int32] | npt.NDArray[np.int64],
        npt.NDArray[np.int32] | npt.NDArray[np.int64],
        _RealOrComplex1D,
    ]:
        """CSR arrays ``(indptr, indices, data)`` of the ``(rows, dim)`` matrix."""
    def matvec(
        self, x: _RealOrComplex1D, threads: int | NativePool | None = None
    ) -> _RealOrComplex1D:
        """``A x`` for ``x`` of length ``dim``; the result has length ``rows``."""
    def matmat(
        self, x: _RealOrComplex2D, threads: int | NativePool | None = None
    ) -> _RealOrComplex2D:
        """``A X`` for a ``(dim, k)`` block; the result is ``(rows, k)``."""
    def estimate_nnz(
        self, samples: int = 2048, threads: int | NativePool | None = None
    ) -> tuple[float, float, bool, int]:
        """``(nnz, standard error, exact, largest row)`` without building."""

def monomial_expectations(
    space: NativeSpace,
    monomials: list[list[tuple[int, int, int]]],
    psi: _RealOrComplex1D,
    threads: int | NativePool | None = None,
) -> npt.NDArray[np.complex128]:
    """``⟨ψ|m|ψ⟩`` for each (distinct, charge-conserving) monomial ``m``."""

def occupation_distributions(
    space: NativeSpace, psi: _RealOrComplex1D, threads: int | NativePool | None = None
) -> npt.NDArray[np.float64]:
    """``Σ |ψ|²`` per mode and occupation, concatenated over modes."""

def density_correlations(
    space: NativeSpace, psi: _RealOrComplex1D, threads: int | NativePool | None = None
) -> npt.NDArray[np.float64]:
    """``Σ |ψ_s|² n_i(s) n_j(s)``, flat row-major ``(modes, modes)``, not normalised."""

def default_threads() -> int:
    """Threads of rayon's global pool."""
