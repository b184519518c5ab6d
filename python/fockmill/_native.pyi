"""Typed stub of the compiled module ``fockmill._native`` (Rust, pyo3).

Users import from ``fockmill``; these are the building blocks its public functions use.
Every call that can run long releases the interpreter and polls for Ctrl-C; ``threads``
is a thread count (None or 0: rayon's global pool, sized by ``RAYON_NUM_THREADS`` or the
number of cores) or a :class:`NativePool` kept between calls.
"""

from collections.abc import Callable
from typing import Any, Protocol, final

import numpy as np
import numpy.typing as npt

__all__ = [
    "CsrParts",
    "LanczosResult",
    "LevelsResult",
    "NativeLiouvillian",
    "NativeOperator",
    "NativePool",
    "NativeSpace",
    "NativeSymmetricSpace",
    "NnzEstimate",
    "__version__",
    "default_threads",
    "density_correlations",
    "monomial_expectations",
    "occupation_distributions",
]

__version__: str

_RealOrComplex1D = npt.NDArray[np.float64] | npt.NDArray[np.complex128]
_RealOrComplex2D = npt.NDArray[np.float64] | npt.NDArray[np.complex128]
#: ``(rows, cols, indptr, indices, data)`` of a complex CSR matrix.
_CsrArrays = tuple[
    int, int, npt.NDArray[np.int64], npt.NDArray[np.int64], npt.NDArray[np.complex128]
]

class _Sink(Protocol):
    """Receives a solver's snapshot: ``begin``, ``write`` per piece of a vector,
    ``commit`` (``fockmill.store.checkpoint.Checkpoint``)."""

    def begin(
        self,
        solver: str,
        integers: dict[str, int],
        numbers: dict[str, list[float]],
        vectors: list[tuple[str, int, int]],
        dtype: str,
        report: dict[str, Any],
    ) -> None: ...
    def write(self, name: str, data: bytes) -> None: ...
    def commit(self) -> None: ...

class _Loader(Protocol):
    """A saved snapshot (``fockmill.store.checkpoint.CheckpointState``)."""

    integers: dict[str, int]
    numbers: dict[str, list[float]]
    vectors: list[str]
    def load(self, name: str) -> _RealOrComplex1D: ...

@final
class NativeLiouvillian:
    """The Liouvillian ``𝓛ρ = −i(Kρ − ρK†) + Σ_k γ_k J_k ρ J_k†`` on the diagonal blocks
    of ``ρ`` (concatenated row-major), applied matrix-free and row-parallel.

    Parameters
    ----------
    effective : list of (rows, cols, indptr, indices, data)
        ``K_b`` of each block as CSR arrays (int64 indices, complex128 values).
    channels : list of (rate, source, target, (rows, cols, indptr, indices, data))
        Each jump from block ``source`` into block ``target`` (``d_target × d_source``).
    """

    def __new__(
        cls,
        effective: list[_CsrArrays],
        channels: list[tuple[float, int, int, _CsrArrays]],
    ) -> NativeLiouvillian: ...
    @property
    def dims(self) -> list[int]: ...
    @property
    def size(self) -> int: ...
    def apply(
        self, rho: npt.NDArray[np.complex128], threads: int | NativePool | None = None
    ) -> npt.NDArray[np.complex128]:
        """``𝓛ρ`` for any complex blocks (flat, length ``size``)."""
    def apply_real(
        self,
        x: npt.NDArray[np.float64],
        threads: int | NativePool | None = None,
        out: npt.NDArray[np.float64] | None = None,
    ) -> npt.NDArray[np.float64]:
        """``Re 𝓛ρ + Im 𝓛ρ`` for Hermitian blocks given as ``Re ρ + Im ρ`` (flat), into
        ``out`` when given (writable, C-contiguous, may be ``x``) and returned."""

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
    charges : list of (list of int, int, int or None), optional
        Several conserved charges ``(weights, total, modulus)`` at once, instead of
        ``weights``/``total``/``modulus``.
    """

    def __new__(
        cls,
        cutoffs: list[int],
        weights: list[int] | None = None,
        total: int | None = None,
        modulus: int | None = None,
        charges: list[tuple[list[int], int, int | None]] | None = None,
    ) -> NativeSpace: ...
    @property
    def dim(self) -> int: ...
    @property
    def modes(self) -> int: ...
    @property
    def cutoffs(self) -> list[int]: ...
    @property
    def weights(self) -> list[int]: ...
    @property
    def charges(self) -> list[tuple[list[int], int, int | None]]: ...
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

_Threads = int | NativePool | None
_Terms = list[tuple[float, float, list[tuple[int, int, int]]]]
_TermBlocks = list[
    tuple[int, npt.NDArray[np.int64], npt.NDArray[np.float64], npt.NDArray[np.float64]]
]
_Index1D = npt.NDArray[np.int32] | npt.NDArray[np.int64]

@final
class NativeOperator:
    """A compiled operator with one protocol, whatever its kind.

    Made by one of the static constructors: :meth:`on_space`, :meth:`on_sector`,
    :meth:`between`, :meth:`between_sectors` or :meth:`from_csr`. Every kind answers the
    same methods; a method a kind cannot serve raises ``ValueError`` saying why
    (eigenvalues of an operator between two spaces; rebuilding a matrix handed in as CSR).
    """

    @staticmethod
    def on_space(
        space: NativeSpace,
        terms: _Terms,
        *,
        blocks: _TermBlocks = ...,
        cut: int | None = None,
    ) -> NativeOperator:
        """An operator on a space.

        ``terms``: ``(re, im, [(mode, p, q), ...])``, coefficient parts and normal-ordered
        factors ``(a_mode†)^p (a_mode)^q``. ``blocks``: more terms as arrays,
        ``(creators, modes, re, im)`` with row ``r`` of ``modes`` (int64) listing the
        creation then the annihilation modes of term ``r``. ``cut``: the product kernel;
        None chooses automatically, 0 is the row kernel, ``k`` the bipartite kernel with
        left modes ``0..k``. Built once, on first use."""
    @staticmethod
    def on_sector(
        sector: NativeSymmetricSpace, terms: _Terms, *, blocks: _TermBlocks = ...
    ) -> NativeOperator:
        """An operator commuting with the sector's group, on the sector (``blocks`` as
        in :meth:`on_space`)."""
    @staticmethod
    def between(
        source: NativeSpace,
        target: NativeSpace,
        terms: _Terms,
        *,
        blocks: _TermBlocks = ...,
        project: bool = False,
    ) -> NativeOperator:
        """An operator carrying the states of ``source`` into ``target`` (same modes and
        cutoffs): a matrix of shape ``(target.dim, source.dim)``. ``project``: keep terms
        whose image leaves ``target`` and drop that part (adjoints); by default such
        terms are refused."""
    @staticmethod
    def between_sectors(
        source: NativeSymmetricSpace,
        target: NativeSymmetricSpace,
        terms: _Terms,
        *,
        project: bool = False,
    ) -> NativeOperator:
        """An operator with a definite character under every generator, carrying the
        states of the sector ``source`` into the sector ``target`` (same generators, the
        target's labels the source's shifted by the operator's): kind ``"between"``,
        shape ``(target.dim, source.dim)``. ``project`` as for :meth:`between`."""
    @staticmethod
    def from_csr(indptr: _Index1D, indices: _Index1D, data: _RealOrComplex1D) -> NativeOperator:
        """A square Hermitian CSR matrix copied in (int32 or int64 indices, int64 kept
        when either is; float64 or complex128 values). Hermiticity is assumed, not
        checked."""
    @property
    def kind(self) -> str:
        """``"space"``, ``"sector"``, ``"between"`` or ``"csr"``."""
    @property
    def is_real(self) -> bool:
        """Whether the matrix is float64 (real coefficients and characters)."""
    @property
    def dim(self) -> int:
        """Columns: the dimension of the space it acts on."""
    @property
    def rows(self) -> int:
        """Rows: the dimension of the space products land in."""
    @property
    def shape(self) -> tuple[int, int]:
        """``(rows, dim)``."""
    @property
    def terms(self) -> int | None:
        """Distinct nonzero monomials after merging (None for a CSR matrix)."""
    @property
    def fast_products(self) -> bool:
        """Whether matrix-free products are as fast as a stored matrix's (the bipartite
        kernel, or a quadratic form read from its gathered hop table); False for the
        other kinds. Prepares the kernel on first use."""
    @property
    def cut(self) -> int:
        """The cut of the product kernel on a space (0: the row kernel; 0 for the other
        kinds)."""
    def matvec(self, x: _RealOrComplex1D, *, threads: _Threads = None) -> _RealOrComplex1D:
        """``A x`` (complex128 when ``x`` or ``A`` is complex), length ``rows``."""
    def matmat(self, x: _RealOrComplex2D, *, threads: _Threads = None) -> _RealOrComplex2D:
        """``A X`` for a ``(dim, k)`` block; the result is ``(rows, k)``."""
    def build_csr(self, *, threads: _Threads = None, force_wide: bool = False) -> CsrParts:
        """The canonical CSR arrays, moved to NumPy without a copy."""
    def estimate_nnz(self, *, samples: int = 2048, threads: _Threads = None) -> NnzEstimate:
        """Stored entries and CSR sizes without building (exact for small spaces)."""
    def stores_matrix(
        self,
        *,
        levels: int = 1,
        store: bool | None = None,
        memory_limit: int | None = None,
        threads: _Threads = None,
    ) -> bool:
        """Whether a Lanczos solve of ``levels`` levels runs on a stored CSR matrix.

        ``store``: True or False obey; None decides: matrix-free on the bipartite kernel
        (``cut > 0``), otherwise stored when the peak of ``memory_plan`` fits
        in 0.8 of ``memory_limit`` (None: the memory available now). True beyond
        ``memory_limit`` raises ``SizeLimitError``. Always True for a CSR matrix."""
    def memory_plan(
        self,
        *,
        levels: int = 1,
        store: bool | None = None,
        memory_limit: int | None = None,
        held: int = 0,
        threads: _Threads = None,
    ) -> tuple[bool, int, int, int]:
        """``(stored, matrix_bytes, build_bytes, vector_bytes)``: the memory a Lanczos
        solve of ``levels`` levels plans to add, as its stored-or-matrix-free choice
        counts it (peak ``matrix_bytes + max(build_bytes, vector_bytes)``); ``held``:
        vectors handed in and held while the matrix is built."""
    def lanczos_ground(
        self,
        *,
        tol: float = 1e-9,
        max_steps: int = 400,
        max_restarts: int = 8,
        seed: int = 0,
        start: _RealOrComplex1D | None = None,
        threads: _Threads = None,
        store: bool | None = None,
        memory_limit: int | None = None,
        progress: Callable[[dict[str, Any]], object] | None = None,
        report_every: float = 0.5,
        checkpoint: _Sink | None = None,
        checkpoint_every: float = 300.0,
        resume: _Loader | None = None,
    ) -> LanczosResult:
        """Four-vector Lanczos ground state, matrix-free or on a stored matrix as
        :meth:`stores_matrix` decides.

        A ``start`` is normalised and mixed with seeded noise of relative weight 1e-4
        (seed ``seed``), so that a start with no weight on the ground state's symmetry
        sector still converges to the true ground state.

        ``progress`` is called with ``{"step", "products", "residual"}`` at most every
        ``report_every`` seconds; ``checkpoint`` receives the resumable state (phase,
        counters, coefficients and three vectors, streamed in pieces) at the end of a
        Lanczos step at most every ``checkpoint_every`` seconds; ``resume`` gives such
        a state back (``start`` is then ignored) and the run continues bit for bit. An
        exception raised by a callback stops the solver and propagates."""
    def lanczos_levels(
        self,
        k: int,
        *,
        tol: float = 1e-9,
        max_products: int = 20_000,
        seed: int = 0,
        start: _RealOrComplex1D | _RealOrComplex2D | None = None,
        threads: _Threads = None,
        store: bool | None = None,
        memory_limit: int | None = None,
        basis: int = 0,
        progress: Callable[[dict[str, Any]], object] | None = None,
        report_every: float = 0.5,
        checkpoint: _Sink | None = None,
        checkpoint_every: float = 300.0,
        resume: _Loader | None = None,
    ) -> LevelsResult:
        """Lowest ``k`` levels by thick-restart Lanczos (Wu & Simon 2000) in Rust.

        ``energies`` ascending; ``vectors`` shape ``(dim, k)`` (Fortran order, no copy),
        orthonormal; ``residuals`` the measured ``‖Hv − Ev‖``; ``converged`` when every
        residual is ``<= tol · max(1, |E|)`` and the iteration ended within
        ``max_products`` (the final residual checks add up to ``k`` products). Every
        copy of a degenerate level that fits in ``k`` is returned: converged levels are
        locked, then fresh seeded runs on their orthogonal complement re-check that no
        lower level remains. Memory: ``basis + 1`` vectors (``basis`` 0 means
        ``min(dim, 2k + 8)``; at least ``k + 4``), plus the CSR matrix when stored.
        ``start``: one vector ``(dim,)`` or a block ``(dim, b)`` (summed, each column
        normalised), mixed with seeded noise of relative weight 1e-4. ``progress``,
        ``checkpoint``, ``resume`` as for :meth:`lanczos_ground`; a snapshot is taken at
        a thick restart of the first run (the locked and kept basis vectors)."""

@final
class LanczosResult:
    """A Lanczos ground state."""

    @property
    def energy(self) -> float: ...
    @property
    def vector(self) -> _RealOrComplex1D: ...
    @property
    def residual(self) -> float:
        """``‖Hψ − Eψ‖``, measured with a final product."""
    @property
    def steps(self) -> int: ...
    @property
    def products(self) -> int: ...
    @property
    def restarts(self) -> int: ...
    @property
    def converged(self) -> bool: ...
    @property
    def stored(self) -> bool:
        """Whether a stored CSR matrix served the products."""

@final
class LevelsResult:
    """The lowest levels of a thick-restart Lanczos run."""

    @property
    def energies(self) -> npt.NDArray[np.float64]: ...
    @property
    def vectors(self) -> _RealOrComplex2D: ...
    @property
    def residuals(self) -> npt.NDArray[np.float64]: ...
    @property
    def products(self) -> int: ...
    @property
    def restarts(self) -> int: ...
    @property
    def converged(self) -> bool: ...
    @property
    def stored(self) -> bool:
        """Whether a stored CSR matrix served the products."""

@final
class NnzEstimate:
    """Estimated stored entries of a matrix and the sizes of its CSR arrays."""

    @property
    def nnz(self) -> float: ...
    @property
    def std_error(self) -> float: ...
    @property
    def exact(self) -> bool: ...
    @property
    def max_row(self) -> int: ...
    @property
    def wide(self) -> bool:
        """Whether the indices need int64."""
    @property
    def csr_bytes(self) -> int: ...
    @property
    def build_peak_bytes(self) -> int:
        """Peak bytes while building (the matrix plus one row-count array)."""

@final
class CsrParts:
    """The arrays of a canonical CSR matrix (sorted columns, no duplicates, no zeros)."""

    @property
    def data(self) -> _RealOrComplex1D: ...
    @property
    def indices(self) -> _Index1D: ...
    @property
    def indptr(self) -> _Index1D: ...

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
        orbit_table: bool | None = None,
    ) -> NativeSymmetricSpace: ...
    @property
    def dim(self) -> int: ...
    @property
    def orbit_table_bytes(self) -> int:
        """Bytes of the orbit table (one entry per base state), 0 without one."""
    @property
    def order(self) -> int: ...
    @property
    def is_real(self) -> bool: ...
    def operator_labels(self, terms: _Terms) -> list[int | None]:
        """The label of each generator under which an operator has a definite character
        (``g A g⁻¹ = exp(2πi·label/order) A``; None for the zero operator); raises
        ``SymmetryError`` when it has none."""
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
    def occupation_distributions(
        self, psi: _RealOrComplex1D, threads: int | NativePool | None = None
    ) -> npt.NDArray[np.float64]:
        """``Σ |ψ|²`` per mode and occupation of a sector state's expansion, concatenated
        over modes, from the representatives alone (no base-space vector)."""

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
