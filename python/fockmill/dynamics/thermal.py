"""Canonical thermal averages in a space (k_B = 1): exact by full diagonalisation, or
by the finite-temperature Lanczos method with random vectors."""

from __future__ import annotations

import numbers
import time
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import numpy.typing as npt
import scipy.linalg as sla

from fockmill.algebra.expressions import LadderExpr
from fockmill.dynamics.krylov import (
    as_float_array,
    check_common,
    check_hermitian,
    hermitian_map,
    lanczos_coefficients,
    warn_top_weights,
)
from fockmill.problem.problem import Problem, prepare_observables, problem_and_arguments
from fockmill.settings.progress import Progress, ProgressOption, make_progress
from fockmill.settings.signatures import options_were_positional
from fockmill.settings.threads import blas_threads
from fockmill.spaces.checks import check_not_empty

__all__ = ["EXACT_MAX_DIM", "Thermal", "thermal"]

#: ``method="auto"`` diagonalises fully up to this dimension, FTLM beyond.
EXACT_MAX_DIM = 2000
#: Random vectors FTLM uses when ``samples`` is not given.
DEFAULT_SAMPLES = 20
#: Lanczos steps per random vector when ``steps`` is not given.
DEFAULT_STEPS = 100


@dataclass(frozen=True)
class Thermal:
    """Canonical averages at each temperature (see :func:`thermal`).

    Attributes
    ----------
    temperatures : numpy.ndarray
        As given (k_B = 1: in energy units).
    energy : numpy.ndarray
        ``⟨H⟩_T``.
    heat_capacity : numpy.ndarray
        ``(⟨H²⟩_T − ⟨H⟩_T²) / T²`` of the whole system.
    values : dict of str to numpy.ndarray
        ``⟨O⟩_T`` per observable (real for Hermitian ``O``, else complex).
    errors : numpy.ndarray
        Statistical error (one standard deviation) of ``energy``; zeros when exact.
    heat_capacity_errors : numpy.ndarray
        The same for ``heat_capacity``.
    value_errors : dict of str to numpy.ndarray
        The same for each observable.
    top_weights : numpy.ndarray
        Shape ``(len(temperatures), modes)``: the ensemble's weight on each mode's
        highest kept level; NaN for modes whose cutoff does not truncate (the total
        caps them there) and for spaces without modes.
    method : str
        ``"exact"`` or ``"ftlm"``.
    samples : int
        Random vectors used (0 for exact).
    steps : int
        Lanczos steps per random vector (0 for exact).
    seconds : float
        Wall time.
    """

    temperatures: npt.NDArray[np.float64]
    energy: npt.NDArray[np.float64]
    heat_capacity: npt.NDArray[np.float64]
    values: dict[str, npt.NDArray[Any]]
    errors: npt.NDArray[np.float64]
    heat_capacity_errors: npt.NDArray[np.float64]
    value_errors: dict[str, npt.NDArray[np.float64]]
    top_weights: npt.NDArray[np.float64]
    method: str
    samples: int
    steps: int
    seconds: float


def _masks(space: Any) -> tuple[list[int], list[npt.NDArray[np.float64]]]:
    """Modes whose top level is a truncation, with the indicator of that level."""
    if not hasattr(space, "binding_cutoffs") or not hasattr(space, "occupations"):
        return [], []
    binding = space.binding_cutoffs()
    modes = [i for i in range(space.modes) if binding[i]]
    if not modes:
        return [], []
    occ = space.occupations()
    return modes, [(occ[:, i] == space.cutoffs[i]).astype(np.float64) for i in modes]


def _check_temperatures(temperatures: object) -> npt.NDArray[np.float64]:
    t = as_float_array(temperatures, "temperatures")  # type: ignore[arg-type]
    if np.any(t <= 0):
        raise ValueError(
            f"temperatures must be > 0 (k_B = 1, energy units); got {t[t <= 0][0]}. For the "
            "zero-temperature limit use fm.ground_state"
        )
    return t


def _resolution(energies: npt.NDArray[np.float64], dim: int) -> float:
    """Energies closer than this to the lowest cannot be told apart numerically.

    The backward error of a symmetric eigensolver is of order ``dim · ε · ‖H‖``
    (Golub & Van Loan, Matrix Computations, 4th ed. 2013, §8.1: eigenvalue perturbation
    bounded by the perturbation's norm); Lanczos Ritz values of one level agree to the
    same order. Differences below it are rounding, and counting them as gaps would
    give a ground manifold split by noise a spurious heat capacity as T → 0.
    """
    scale = float(np.max(np.abs(energies))) if energies.size else 0.0
    return 16.0 * max(dim, 1) * float(np.finfo(np.float64).eps) * max(scale, 1e-300)


def _boltzmann(
    gaps: npt.NDArray[np.float64], t: npt.NDArray[np.float64]
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]:
    """Weights ``exp(−x)`` and reduced energies ``x = gap / T`` of shape (T, levels).

    ``gaps`` are ``E − E_min >= 0`` (the log-sum-exp shift: the largest weight is 1, so
    nothing overflows at any T). Where a weight underflows to 0 its ``x`` is set to 0
    too, so ``x·weight`` and ``x²·weight`` never form ``inf · 0`` (common practice, no
    source).
    """
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        x = gaps[np.newaxis, :] / t[:, np.newaxis]
        weights = np.exp(-x)
    x = np.where(weights > 0.0, x, 0.0)
    return weights, x


def _exact_dense_bytes(space: Any, complex_h: bool) -> int:
    """Peak bytes of full diagonalisation: the dense matrix, its eigenvectors and
    LAPACK's work arrays (about one more matrix)."""
    item = 16 if complex_h else 8
    return 3 * int(space.dim) ** 2 * item


def _check_exact_memory(e: LadderExpr, space: Any, memory_limit: int | None) -> None:
    """Refuse full diagonalisation up front when its dense matrices do not fit."""
    from fockmill.exceptions import SizeLimitError
    from fockmill.problem.memory import available_memory, size_limit_message

    need = _exact_dense_bytes(space, not e.is_real())
    limit = memory_limit if memory_limit is not None else available_memory()
    if limit is not None and need > limit:
        raise SizeLimitError(
            size_limit_message(
                f"thermal method 'exact' (full diagonalisation of a dense {space.dim:,} x "
                f"{space.dim:,} matrix)",
                need,
                limit,
                "use method='ftlm' (random-vector Lanczos, memory of a few state vectors) "
                "or a smaller sector",
                given=memory_limit is not None,
            )
        )


def _exact(
    problem: Problem,
    t: npt.NDArray[np.float64],
    obs: dict[str, Problem],
) -> tuple[npt.NDArray[Any], npt.NDArray[Any], dict[str, npt.NDArray[Any]], npt.NDArray[Any]]:
    space = problem.space
    _check_exact_memory(problem.expr, space, problem.memory_limit)
    dense = problem.matrix().toarray()
    with blas_threads(problem.threads, dense.shape[0]):
        energies, vectors = np.linalg.eigh(dense)
    del dense
    gaps = energies - energies[0]
    gaps[gaps <= _resolution(energies, energies.size)] = 0.0
    # Boltzmann weights p[T, j], shifted by the ground energy (log-sum-exp).
    boltz, x = _boltzmann(gaps, t)
    p = boltz / boltz.sum(axis=1, keepdims=True)
    mean_x = np.sum(p * x, axis=1)
    energy = energies[0] + p @ gaps
    # C = ⟨(x − ⟨x⟩)²⟩ with x = (E − E0)/T: no division by T² (which underflows).
    heat = np.sum(p * (x - mean_x[:, np.newaxis]) ** 2, axis=1)
    values: dict[str, npt.NDArray[Any]] = {}
    for name, o in obs.items():
        mat = o.matrix()
        diag = np.einsum("ij,ij->j", vectors.conj(), np.asarray(mat @ vectors))
        values[name] = (p @ diag.real) if o.expr.is_hermitian() else (p @ diag).astype(complex)
    modes, masks = _masks(space)
    top = np.full((t.size, getattr(space, "modes", 0)), np.nan)
    if modes:
        probs = np.abs(vectors) ** 2
        for i, mask in zip(modes, masks, strict=True):
            top[:, i] = p @ (mask @ probs)
    return energy, heat, values, top


def _jackknife(numerators: npt.NDArray[Any], z: npt.NDArray[Any]) -> tuple[Any, Any]:
    """Ratio estimate ``Σ_r N_r / Σ_r Z_r`` (over axis 0) and its jackknife error.

    Leave-one-out ratios whose remaining weight is zero (at temperatures where a
    single random vector carries all the weight) are left out of the spread, so the
    error is finite wherever the estimate is; one random vector alone has no spread
    (NaN error).
    """
    total_n, total_z = numerators.sum(axis=0), z.sum(axis=0)
    estimate = total_n / total_z
    r = z.shape[0]
    if r < 2:
        return estimate, np.full(np.shape(estimate), np.nan)
    loo_z = total_z - z
    defined = loo_z > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        leave_out = np.where(defined, (total_n - numerators) / np.where(defined, loo_z, 1.0), 0)
    count = np.maximum(defined.sum(axis=0), 1)
    mean = leave_out.sum(axis=0) / count
    spread = np.sum(np.where(defined, np.abs(leave_out - mean) ** 2, 0.0), axis=0)
    return estimate, np.sqrt((count - 1) / count * spread)


class _Overlaps:
    """Collects ``⟨v_j|w_k⟩`` for each Lanczos vector ``v_j`` and fixed vectors ``w_k``."""

    def __init__(self, fixed: list[npt.NDArray[Any]]) -> None:
        self.fixed = fixed
        self.rows: list[list[complex]] = []

    def __call__(self, j: int, v: npt.NDArray[Any]) -> None:
        self.rows.append([complex(np.vdot(v, w)) for w in self.fixed])

    def table(self) -> npt.NDArray[np.complex128]:
        """Shape ``(steps, len(fixed))``."""
        return np.asarray(self.rows, dtype=np.complex128).reshape(len(self.rows), len(self.fixed))


#: Relative weight below which the Ritz levels above a sample's lowest are negligible.
_NEGLIGIBLE = 1e-15


def _lowest_level(
    hmap: Any,
    r: npt.NDArray[Any],
    eps: npt.NDArray[np.float64],
    u: npt.NDArray[np.float64],
    t: npt.NDArray[np.float64],
    operators: dict[str, Any],
    masks: list[npt.NDArray[np.float64]],
    dim: int,
) -> tuple[npt.NDArray[np.bool_], dict[str, complex], list[float]]:
    """Where one random vector's lowest Ritz level alone counts, its averages there.

    At such temperatures the FTLM sum ``Σ_j e^{−βε_j}⟨r|ψ_j⟩⟨ψ_j|O|r⟩`` keeps only the
    lowest level's term, whose ``⟨ψ_0|O|r⟩`` still carries every other eigenstate's
    component of ``r``: a noisy ratio (and a wild one when ``⟨r|ψ_0⟩`` is small). The
    symmetric form ``Σ_{ij} e^{−β(ε_i+ε_j)/2}⟨r|ψ_i⟩⟨ψ_i|O|ψ_j⟩⟨ψ_j|r⟩`` of the
    low-temperature Lanczos method (Aichhorn, Daghofer, Evertz & von der Linden 2003,
    Phys. Rev. B 67, 161103) keeps ``⟨g|O|g⟩`` with ``g = P_0 r`` the projection of ``r``
    on the lowest level, which tends to the ground-state value as T → 0. ``g`` is
    ``V f(T) e_1`` with ``f`` the indicator of the lowest cluster of Ritz values
    (copies within rounding included), built by a second, identical Lanczos pass.

    Returns the temperatures in that regime (other levels' weight below
    ``_NEGLIGIBLE`` of the lowest level's), and ``⟨g|O|g⟩/⟨g|g⟩`` per observable and
    per mask (empty when no temperature is in the regime).
    """
    first = u[0, :]
    weight = first * first
    gaps = eps - eps.min()
    cluster = gaps <= _resolution(eps, dim)
    boltz, _ = _boltzmann(np.where(cluster, 0.0, gaps), t)
    inside = boltz[:, cluster] @ weight[cluster]
    outside = boltz[:, ~cluster] @ weight[~cluster]
    regime = outside <= _NEGLIGIBLE * inside
    if not np.any(regime) or (not operators and not masks):
        return regime, {}, []
    coefficients = u[:, cluster] @ first[cluster]  # g = Σ_j c_j v_j
    g = np.zeros(dim, dtype=r.dtype)

    def accumulate(j: int, v: npt.NDArray[Any]) -> None:
        nonlocal g
        if g.dtype != v.dtype:
            g = g.astype(np.result_type(g.dtype, v.dtype))
        g += coefficients[j] * v

    lanczos_coefficients(hmap, r, eps.size, on_vector=accumulate)
    norm2 = float(np.vdot(g, g).real)
    if norm2 == 0.0:
        return np.zeros(t.size, dtype=bool), {}, []
    values = {name: complex(np.vdot(g, op @ g)) / norm2 for name, op in operators.items()}
    mask_values = [float(np.vdot(g, mask * g).real) / norm2 for mask in masks]
    return regime, values, mask_values


def _ftlm(
    problem: Problem,
    t: npt.NDArray[np.float64],
    obs: dict[str, Problem],
    samples: int,
    steps: int,
    seed: int,
    method: str,
    reporter: Progress | None = None,
) -> tuple[Any, ...]:
    space = problem.space
    modes, masks = _masks(space)
    complex_h = not problem.expr.is_real()
    hmap = hermitian_map(
        problem,
        vectors=4 + len(obs) + len(masks) + 3,
        method=method,
        complex_vectors=complex_h,
    )
    operators = {name: o.operator() for name, o in obs.items()}
    rng = np.random.default_rng(seed)
    dim = hmap.dim
    per_sample: list[tuple[Any, Any, dict[str, Any], list[Any]]] = []
    # Per sample: the temperatures where only its lowest Ritz level counts, and there
    # the averages in that level (the symmetric form, see _lowest_level).
    low: list[tuple[npt.NDArray[np.bool_], dict[str, complex], list[float]]] = []
    for sample in range(samples):
        if reporter is not None:
            reporter.update(step=sample, products=hmap.products)
        r = rng.standard_normal(dim)
        if complex_h:
            r = r + 1j * rng.standard_normal(dim)
        r /= np.linalg.norm(r)
        applied = {name: np.asarray(op @ r) for name, op in operators.items()}
        overlaps = _Overlaps(list(applied.values()) + [mask * r for mask in masks])
        alpha, beta, _ = lanczos_coefficients(hmap, r, steps, on_vector=overlaps)
        table = overlaps.table()
        dots = {name: table[:, k] for k, name in enumerate(applied)}
        mask_dots = [table[:, len(applied) + k] for k in range(len(masks))]
        n = alpha.size
        if n > 1:
            eps, u = sla.eigh_tridiagonal(alpha, beta)
        else:
            eps, u = alpha.copy(), np.ones((1, 1))
        first = u[0, :]
        # ⟨r|ψ_j⟩⟨ψ_j|O|r⟩ with ψ_j = Σ_i U[i, j] v_i and v_0 = r.
        obs_terms = {name: first * (u.T @ np.asarray(d[:n])) for name, d in dots.items()}
        mask_terms = [first * (u.T @ np.asarray(d[:n])) for d in mask_dots]
        per_sample.append((eps, first * first, obs_terms, mask_terms))
        low.append(_lowest_level(hmap, r, eps, u, t, operators, masks, dim))
    if reporter is not None:
        reporter.update(step=samples, products=hmap.products)
    e_min = min(float(np.min(s[0])) for s in per_sample)
    resolution = _resolution(np.concatenate([s[0] for s in per_sample]), dim)
    z = np.zeros((samples, t.size))
    n_x = np.zeros((samples, t.size))
    n_x2 = np.zeros((samples, t.size))
    n_obs = {name: np.zeros((samples, t.size), dtype=np.complex128) for name in obs}
    n_mask = np.zeros((len(masks), samples, t.size))
    for k, (eps, weight, obs_terms, mask_terms) in enumerate(per_sample):
        gaps = eps - e_min
        gaps[gaps <= resolution] = 0.0  # copies of the lowest level (see _resolution)
        boltz, x = _boltzmann(gaps, t)  # (T, j), log-sum-exp shifted
        z[k] = boltz @ weight
        n_x[k] = (boltz * x) @ weight
        n_x2[k] = (boltz * x * x) @ weight
        regime, ground_obs, ground_masks = low[k]
        for name, terms in obs_terms.items():
            n_obs[name][k] = np.where(regime, z[k] * ground_obs.get(name, 0.0), boltz @ terms)
        for m, terms in enumerate(mask_terms):
            value = ground_masks[m] if ground_masks else 0.0
            n_mask[m, k] = np.where(regime, z[k] * value, (boltz @ terms).real)
    # Reduced energies x = (ε − ε_min)/T: ⟨H⟩ = ε_min + T⟨x⟩ and C = ⟨x²⟩ − ⟨x⟩², which
    # neither divide by T² (underflow at small T) nor subtract nearly equal ⟨H²⟩, ⟨H⟩².
    mean_x, mean_x_err = _jackknife(n_x, z)
    energy = e_min + t * mean_x
    energy_err = t * mean_x_err
    total_z, total_x, total_x2 = z.sum(0), n_x.sum(0), n_x2.sum(0)
    heat = np.maximum(total_x2 / total_z - (total_x / total_z) ** 2, 0.0)
    loo_z, loo_x, loo_x2 = total_z - z, total_x - n_x, total_x2 - n_x2
    if samples >= 2:
        defined = loo_z > 0
        safe = np.where(defined, loo_z, 1.0)
        loo_heat = np.where(defined, loo_x2 / safe - (loo_x / safe) ** 2, 0.0)
        count = np.maximum(defined.sum(0), 1)
        mean = loo_heat.sum(0) / count
        spread = np.sum(np.where(defined, (loo_heat - mean) ** 2, 0.0), axis=0)
        heat_err = np.sqrt((count - 1) / count * spread)
    else:
        heat_err = np.full(t.size, np.nan)
    values: dict[str, Any] = {}
    value_errors: dict[str, Any] = {}
    for name, o in obs.items():
        est, err = _jackknife(n_obs[name], z)
        values[name] = est.real.copy() if o.expr.is_hermitian() else est
        value_errors[name] = np.asarray(err, dtype=np.float64)
    top = np.full((t.size, getattr(space, "modes", 0)), np.nan)
    for m, i in enumerate(modes):
        top[:, i] = np.sum(n_mask[m], axis=0) / total_z
    return energy, energy_err, heat, heat_err, values, value_errors, top


@options_were_positional(3, ("observables", "method", "samples", "seed"))
def thermal(
    H: LadderExpr | Problem,
    space: Any = None,
    temperatures: npt.ArrayLike | None = None,
    *,
    observables: Mapping[str, LadderExpr] | None = None,
    method: str = "auto",
    samples: int | None = None,
    seed: int = 0,
    steps: int | None = None,
    product_method: str = "auto",
    threads: int | None = None,
    memory_limit: int | None = None,
    cutoff_warning: float | None = 1e-6,
    progress: ProgressOption = None,
) -> Thermal:
    """Canonical averages ``Tr(O e^{−H/T}) / Tr(e^{−H/T})`` in a space (k_B = 1).

    Parameters
    ----------
    H : LadderExpr or Problem
        A Hermitian Hamiltonian conserving the space's sector, or a prepared problem
        (then ``space`` is omitted: ``thermal(problem, temperatures=ts)``).
    space : FockSpace or SymmetricSpace
        The ensemble's states: a sector (canonical in the conserved number) or the full
        truncated space.
    temperatures : array_like
        Temperatures > 0, in energy units.
    observables : dict of str to LadderExpr, optional
        Averaged at each temperature.
    method : {"auto", "exact", "ftlm"}
        ``"exact"``: full diagonalisation (dense, O(dim³)); ``"ftlm"``: the
        finite-temperature Lanczos method; ``"auto"``: exact up to
        ``EXACT_MAX_DIM`` = 2000 states, FTLM beyond.
    samples : int, optional
        FTLM random vectors (default 20).
    seed : int
        Seed of the random vectors (results are reproducible).
    steps : int, optional
        FTLM Lanczos steps per vector (default 100; more resolve lower temperatures).
    product_method : {"auto", "csr", "operator"}
        FTLM products on the stored matrix or matrix-free (``"auto"``: from memory).
    threads, memory_limit
        As for :func:`fockmill.ground_state`.
    cutoff_warning : float or None
        Warn (:class:`~fockmill.exceptions.CutoffWarning`) when the ensemble puts more
        than this weight on a truncating cutoff at any temperature; None disables it.
    progress : bool, callable or None
        Progress reports (see :func:`fockmill.lowest_levels`): FTLM reports before each
        random vector and at the end (the bar counts vectors); exact diagonalisation
        reports once, at the end.

    Returns
    -------
    Thermal

    Raises
    ------
    ValueError
        Temperatures <= 0, an unknown method, bad samples or steps.
    NotHermitianError
        ``H`` is not Hermitian.
    SpaceError
        The space is empty (a sector without states).
    SizeLimitError
        ``method="exact"`` and the dense matrices (three of ``dim²`` numbers) exceed
        ``memory_limit`` or the memory available; refused before anything is built.

    Notes
    -----
    FTLM (Jaklič & Prelovšek 1994, Phys. Rev. B 49, 5065): for each normalised random
    vector ``r``, ``M`` Lanczos steps give Ritz pairs ``(ε_j, ψ_j)``, and
    ``Tr(O e^{−βH}) ≈ (dim / R) Σ_r Σ_j e^{−βε_j} ⟨r|ψ_j⟩⟨ψ_j|O|r⟩``; the ``⟨ψ_j|O|r⟩``
    come from the overlaps of ``O r`` with each Lanczos vector, so only three Lanczos
    vectors and one vector per observable are kept. Averages are ratios of such
    sums; their errors are jackknife estimates over the random vectors (leave one out),
    i.e. from the sample spread. At temperatures below the level spacing reached by
    ``M`` steps the averages tend to those of the lowest Ritz states.

    Both methods are valid on the whole temperature axis: weights are shifted by the
    lowest energy (log-sum-exp), the heat capacity is the variance of the reduced energy
    ``(E − E_0)/T`` (no ``1/T²`` that underflows), and energies within rounding of the
    lowest (``16 · dim · ε · max|E|``) count as the ground level. As ``T → 0`` the results
    tend to the ground-manifold averages with ``C → 0``; as ``T → ∞`` to the plain trace
    averages over the space. FTLM error bars are finite wherever the values are.

    Examples
    --------
    >>> import fockmill as fm
    >>> space = fm.FockSpace(modes=1, cutoff=40)       # one oscillator, ω = 1
    >>> th = fm.thermal(fm.number(0), space, [0.5, 2.0], observables={"n": fm.number(0)})
    >>> th.values["n"].round(4).tolist()               # Bose–Einstein 1/(e^{ω/T} − 1)
    [0.1565, 1.5415]
    """
    t_start = time.perf_counter()
    threads, memory_limit = check_common(threads, memory_limit)
    problem, (temperatures,) = problem_and_arguments(
        H, space, (temperatures,), threads=threads, memory_limit=memory_limit
    )
    space = problem.space
    if temperatures is None:
        raise TypeError("thermal needs temperatures= (k_B = 1, energy units)")
    t = _check_temperatures(temperatures)
    if method not in ("auto", "exact", "ftlm"):
        raise ValueError(f"method must be 'auto', 'exact' or 'ftlm'; got {method!r}")
    for name, value in (("samples", samples), ("steps", steps)):
        if value is not None and (
            isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1
        ):
            raise ValueError(f"{name} must be a positive integer or None; got {value!r}")
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer; got {seed!r}")
    check_hermitian(problem.expr)
    check_not_empty(space, "a thermal average")
    obs = prepare_observables(observables, problem)
    chosen = method
    if method == "auto":
        chosen = "exact" if space.dim <= EXACT_MAX_DIM else "ftlm"
    if method == "exact":
        ignored = [
            f"{name}={value!r}"
            for name, value in (("samples", samples), ("steps", steps))
            if value is not None
        ]
        if product_method != "auto":
            ignored.append(f"product_method={product_method!r}")
        if ignored:
            raise ValueError(
                f"method='exact' diagonalises fully and has no use for {', '.join(ignored)}; "
                "drop them, or pass method='ftlm' to sample"
            )
    n_samples = DEFAULT_SAMPLES if samples is None else int(samples)
    reporter = make_progress(
        progress, "thermal", total=n_samples if chosen == "ftlm" else None, unit="vector"
    )
    try:
        result = _thermal(problem, t, obs, chosen, n_samples, steps, seed, product_method, reporter)
    finally:
        if reporter is not None:
            reporter.close()
    result = replace(result, seconds=time.perf_counter() - t_start)
    top = result.top_weights
    if top.size:
        warn_top_weights(
            space,
            np.nanmax(np.where(np.isnan(top), -np.inf, top), axis=0),
            cutoff_warning,
            "the thermal ensemble",
        )
    return result


def _thermal(
    problem: Problem,
    t: npt.NDArray[np.float64],
    obs: dict[str, Problem],
    chosen: str,
    n_samples: int,
    steps: int | None,
    seed: int,
    product_method: str,
    reporter: Progress | None,
) -> Thermal:
    """:func:`thermal` once the method is chosen (``seconds`` is set by the caller)."""
    space = problem.space
    if chosen == "exact":
        energy, heat, values, top = _exact(problem, t, obs)
        if reporter is not None:
            reporter.update(step=1)
        zeros = np.zeros(t.size)
        result = Thermal(
            temperatures=t,
            energy=energy,
            heat_capacity=heat,
            values=values,
            errors=zeros,
            heat_capacity_errors=zeros.copy(),
            value_errors={name: zeros.copy() for name in values},
            top_weights=top,
            method="exact",
            samples=0,
            steps=0,
            seconds=0.0,
        )
    else:
        n_steps = DEFAULT_STEPS if steps is None else int(steps)
        energy, energy_err, heat, heat_err, values, value_errors, top = _ftlm(
            problem, t, obs, n_samples, n_steps, int(seed), product_method, reporter
        )
        result = Thermal(
            temperatures=t,
            energy=np.asarray(energy, dtype=np.float64).real,
            heat_capacity=np.asarray(heat, dtype=np.float64),
            values=values,
            errors=np.asarray(energy_err, dtype=np.float64),
            heat_capacity_errors=np.asarray(heat_err, dtype=np.float64),
            value_errors=value_errors,
            top_weights=top,
            method="ftlm",
            samples=n_samples,
            steps=min(n_steps, space.dim),
            seconds=0.0,
        )
    return result
