"""One sparsity pattern shared by every piece of a model.

A model is ``H(p) = constant + Σ_k p_k · piece_k``. Each piece is built once as a
canonical CSR matrix (sorted, unique columns per row); the union of their patterns is
the pattern of every ``H(p)``, so a point's matrix is a new ``data`` vector on fixed
``(indptr, indices)``: ``data[pos_k] += p_k · values_k`` for each piece.

The union and each piece's positions in it come from row-wise sorted merges (scipy's
canonical CSR addition and element-wise product, linear in the entries), never from a
hash-based unique over combined ``row · dim + col`` keys: that was slow (53 s for 37 M
keys at 1.35 M states) and the keys overflow int64 above ~3·10⁹ states.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.sparse as sp

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import NotHermitianError
from fockmill.models.model import Model
from fockmill.spaces.fock import FockSpace
from fockmill.spaces.symmetry import SymmetricSpace

__all__ = ["SharedPattern", "check_hermitian_pieces"]

#: Positions are kept in float64 by the merge; exact below 2**53 entries.
_EXACT_FLOAT_INTEGERS = 2**53


def check_hermitian_pieces(
    pieces: Mapping[str, LadderExpr], constant: LadderExpr, name: str
) -> None:
    """Refuse a model with a non-Hermitian piece (parameters are real)."""
    for label, expr in {**pieces, "": constant}.items():
        if not expr.is_hermitian():
            what = f"piece {label!r}" if label else "constant part"
            raise NotHermitianError(
                f"the {what} of {name!r} is not Hermitian; sweeps multiply pieces by real "
                "parameters, so write each piece with its Hermitian conjugate included"
            )


def _pattern_of(matrix: sp.csr_array) -> sp.csr_array:
    """The pattern of a canonical CSR matrix as ones (explicit zeros kept as entries)."""
    ones = sp.csr_array(
        (np.ones(matrix.nnz), matrix.indices, matrix.indptr), shape=matrix.shape, copy=False
    )
    ones.has_canonical_format = True
    return ones


def _canonical(matrix: sp.csr_array) -> sp.csr_array:
    if not matrix.has_canonical_format:
        matrix.sum_duplicates()
    return matrix


@dataclass(frozen=True, eq=False)
class SharedPattern:
    """Every piece of a model as values at known positions of one shared CSR pattern.

    Attributes
    ----------
    dim : int
        Matrix dimension.
    indptr, indices : numpy.ndarray
        The union of the pieces' sparsity patterns, canonical CSR (sorted columns).
    positions : dict of str to numpy.ndarray or None
        Parameter name (``""`` for the constant part) -> where that piece's entries sit
        in ``indices``; None when the piece fills the whole pattern in order.
    values : dict of str to numpy.ndarray
        Parameter name (``""`` for the constant part) -> that piece's matrix entries.
    dtype : numpy.dtype
        float64, or complex128 when any piece is complex.

    Examples
    --------
    >>> import fockmill as fm
    >>> from fockmill.models.model import Model
    >>> space = fm.FockSpace(modes=2, cutoff=2, total=2)
    >>> hop = -(fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0))
    >>> kerr = 0.5 * (fm.raising(0) ** 2 * fm.lowering(0) ** 2
    ...               + fm.raising(1) ** 2 * fm.lowering(1) ** 2)
    >>> model = Model("pair", space, {"J": hop, "U": kerr}, {"J": 1.0, "U": 1.0})
    >>> shared = SharedPattern.from_model(model)
    >>> shared.assemble({"J": 1.0, "U": 2.0}).toarray().round(3).tolist()
    [[2.0, -1.414, 0.0], [-1.414, 0.0, -1.414], [0.0, -1.414, 2.0]]
    """

    dim: int
    indptr: npt.NDArray[Any]
    indices: npt.NDArray[Any]
    positions: dict[str, npt.NDArray[Any] | None]
    values: dict[str, npt.NDArray[Any]]
    dtype: np.dtype[Any]

    @classmethod
    def from_model(cls, model: Model, *, threads: int | None = None) -> SharedPattern:
        """Build each piece once and place all of them on the union pattern.

        Parameters
        ----------
        model : Model
            The parametrised Hamiltonian.
        threads : int, optional
            Threads for the matrix builds (default: all cores).

        Returns
        -------
        SharedPattern

        Raises
        ------
        NotHermitianError
            A piece or the constant is not Hermitian (parameters are real, so each
            piece must be Hermitian for ``H(p)`` to be).
        """
        return cls.from_pieces(
            model.space, dict(model.pieces), model.constant, name=model.name, threads=threads
        )

    @classmethod
    def from_pieces(
        cls,
        space: FockSpace | SymmetricSpace,
        pieces: Mapping[str, LadderExpr],
        constant: LadderExpr,
        *,
        name: str = "model",
        threads: int | None = None,
        pool: Any = None,
    ) -> SharedPattern:
        """Like :meth:`from_model`, from the parts of a model (``pool``: a NativePool
        of ``threads`` threads to build on)."""
        from fockmill.problem.problem import Problem

        check_hermitian_pieces(pieces, constant, name)
        parts = {label: expr for label, expr in pieces.items() if not expr.is_zero()}
        if not constant.is_zero():
            parts[""] = constant
        matrices = {
            label: _canonical(Problem._from_parts(expr, space, pool=pool, threads=threads).matrix())
            for label, expr in parts.items()
        }
        return cls.from_matrices(space.dim, matrices)

    @classmethod
    def from_matrices(cls, dim: int, matrices: Mapping[str, sp.csr_array]) -> SharedPattern:
        """Place canonical CSR matrices (label -> matrix) on their union pattern."""
        union: sp.csr_array | None = None
        for matrix in matrices.values():
            pattern = _pattern_of(matrix)
            # Adding positive ones never cancels, so the sum's pattern is the union;
            # scipy merges canonical rows in one sorted pass.
            union = pattern if union is None else _canonical(union + pattern)
        if union is None:
            union = sp.csr_array((dim, dim), dtype=np.float64)
        nnz = int(union.nnz)
        if nnz >= _EXACT_FLOAT_INTEGERS:
            raise ValueError(f"the shared pattern has {nnz} entries, more than 2**53")
        wide = dim > np.iinfo(np.int32).max or nnz > np.iinfo(np.int32).max
        index_type = np.int64 if wide else np.int32
        indptr = union.indptr.astype(index_type, copy=False)
        indices = union.indices.astype(index_type, copy=False)
        # Number the union's entries 1..nnz; the element-wise product with a piece's
        # pattern keeps exactly that piece's entries (in its canonical order) and
        # carries their numbers, i.e. their positions in the union.
        numbered = sp.csr_array(
            (np.arange(1, nnz + 1, dtype=np.float64), union.indices, union.indptr),
            shape=(dim, dim),
            copy=False,
        )
        numbered.has_canonical_format = True
        complex_values = any(np.iscomplexobj(m.data) for m in matrices.values())
        dtype = np.dtype(np.complex128 if complex_values else np.float64)
        positions: dict[str, npt.NDArray[Any] | None] = {}
        values: dict[str, npt.NDArray[Any]] = {}
        for label, matrix in matrices.items():
            if matrix.nnz == nnz:
                positions[label] = None  # covers the whole union, in the same order
            else:
                hit = _canonical(numbered.multiply(_pattern_of(matrix)).tocsr())
                positions[label] = (hit.data - 1).astype(index_type)
            values[label] = matrix.data.astype(dtype, copy=False)
        return cls(dim, indptr, indices, positions, values, dtype)

    @property
    def nnz(self) -> int:
        """Entries of the shared pattern."""
        return int(self.indices.size)

    def assemble(self, parameters: Mapping[str, float]) -> sp.csr_array:
        """The matrix ``constant + Σ_k parameters[k] · piece_k`` on the shared pattern.

        Parameters
        ----------
        parameters : Mapping[str, float]
            A value for every piece (missing names raise KeyError).

        Returns
        -------
        scipy.sparse.csr_array
            Shares ``indptr``/``indices`` with this object; its ``data`` is new. Entries
            that cancel at this point stay stored as explicit zeros.
        """
        data = np.zeros(self.nnz, dtype=self.dtype)
        for label, entries in self.values.items():
            coefficient = 1.0 if label == "" else float(parameters[label])
            if coefficient == 0.0:
                continue
            where = self.positions[label]
            if where is None:
                data += coefficient * entries
            else:
                # Positions within one piece are unique, so fancy-index += is exact.
                data[where] += coefficient * entries
        matrix = sp.csr_array(
            (data, self.indices, self.indptr), shape=(self.dim, self.dim), copy=False
        )
        matrix.has_canonical_format = True
        return matrix
