"""Solver settings: defined, defaulted and validated in one place.

The library's ``ground_state``/``lowest_levels`` keywords, the ``[solver]`` table of
model files, sweeps and the command line all hold their solver options in a
:class:`SolverSettings`, so the same value is accepted or refused with the same message
everywhere.

The ``method=`` words of every computation, in one table:

================  =========================================================================
computation       ``method=``
================  =========================================================================
ground_state,     ``"auto"`` (from size and memory), ``"dense"`` (numpy eigh), ``"csr"``
lowest_levels,    (scipy eigsh on the stored matrix), ``"operator"`` (eigsh, matrix-free
sweeps, solve     products), ``"lanczos"`` (Lanczos in Rust, stored or matrix-free)
evolve,           ``"auto"``, ``"csr"`` (products with the stored matrix), ``"operator"``
spectral_function (matrix-free products)
spectral_poles
thermal           ``"auto"``, ``"exact"`` (full diagonalisation), ``"ftlm"`` (finite-
                  temperature Lanczos); its products take ``product_method=`` as evolve
================  =========================================================================
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass
from typing import Any

from fockmill.settings.checks import (
    METHODS,
    check_max_iterations,
    check_memory_limit,
    check_method,
    check_seed,
    check_threads,
    check_tol,
)

__all__ = ["METHOD_WORDS", "SOLVER_DEFAULTS", "SolverSettings"]

#: The ``method=`` words of each family of computations (see the module docstring).
METHOD_WORDS: Mapping[str, tuple[str, ...]] = {
    "eigensolvers": METHODS,
    "products": ("auto", "csr", "operator"),
    "thermal": ("auto", "exact", "ftlm"),
}


@dataclass(frozen=True)
class SolverSettings:
    """Options of the eigensolvers, checked on construction.

    Attributes
    ----------
    method : str
        One of ``METHOD_WORDS["eigensolvers"]``.
    tol : float
        Relative accuracy, strictly between 0 and 1.
    max_iterations : int or None
        Most matrix-vector products (None: the solver's default).
    seed : int
        Seed of start vectors (0 <= seed < 2**63).
    threads : int or None
        Worker threads (None or 0: all cores).
    memory_limit : int or None
        Bytes a solve may plan to use (None: the memory available).
    store_matrix : bool or None
        Lanczos on a stored matrix (True), matrix-free (False) or chosen (None).
    cutoff_warning : float or None
        Weight on a truncating cutoff's top level above which a ``CutoffWarning`` is
        raised; None turns the warning off (``cutoff_warning = false`` in files).

    Raises
    ------
    ValueError, TypeError
        For a value outside its range, with the same message as every other entry point.

    Examples
    --------
    >>> SolverSettings(tol=1e-10).tol
    1e-10
    >>> SolverSettings.from_mapping({"method": "lanczos", "seed": 3}).method
    'lanczos'
    """

    method: str = "auto"
    tol: float = 1e-9
    max_iterations: int | None = None
    seed: int = 0
    threads: int | None = None
    memory_limit: int | None = None
    store_matrix: bool | None = None
    cutoff_warning: float | None = 1e-6

    def __post_init__(self) -> None:
        object.__setattr__(self, "method", check_method(self.method))
        object.__setattr__(self, "tol", check_tol(self.tol))
        object.__setattr__(self, "max_iterations", check_max_iterations(self.max_iterations))
        object.__setattr__(self, "seed", check_seed(self.seed))
        object.__setattr__(self, "threads", check_threads(self.threads))
        object.__setattr__(self, "memory_limit", check_memory_limit(self.memory_limit))
        if self.cutoff_warning is not None and (
            isinstance(self.cutoff_warning, bool)
            or not isinstance(self.cutoff_warning, int | float)
            or not 0 <= self.cutoff_warning <= 1
        ):
            raise ValueError(
                "cutoff_warning must be a weight between 0 and 1 such as 1e-6, or None to "
                f"turn the warning off; got {self.cutoff_warning!r}"
            )
        if self.store_matrix not in (None, True, False):
            raise TypeError(
                f"store_matrix must be True, False or None (chosen); got {self.store_matrix!r}"
            )

    @classmethod
    def from_mapping(cls, values: Mapping[str, Any]) -> SolverSettings:
        """Settings from ``{name: value}``; unknown names are refused, naming the known."""
        known = set(cls.__dataclass_fields__)
        unknown = sorted(set(values) - known)
        if unknown:
            raise ValueError(
                f"unknown solver setting(s) {unknown}; the settings are {sorted(known)}"
            )
        return cls(**dict(values))

    def as_dict(self) -> dict[str, Any]:
        """The settings as plain values (JSON-ready)."""
        return asdict(self)

    def solve_keywords(self) -> dict[str, Any]:
        """The keywords of ``ground_state``/``lowest_levels`` that these settings set."""
        return {
            "method": self.method,
            "tol": self.tol,
            "max_iterations": self.max_iterations,
            "seed": self.seed,
            "store_matrix": self.store_matrix,
        }


#: The defaults, for code that needs them as values.
SOLVER_DEFAULTS = SolverSettings()
