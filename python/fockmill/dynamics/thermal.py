"""Canonical thermal averages in a space (k_B = 1): exact by full diagonalisation, or
by the finite-temperature Lanczos method with random vectors."""

from __future__ import annotations

import numbers
import time
from collections.abc import Mapping
from dataclasses import dataclass
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
from fockmill.settings.signatures import options_were_positional
from fockmill.settings.threads import blas_threads

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


def _exact(
    problem: Problem,
    t: npt.NDArray[np.float64],
    obs: dict[str, Problem],
) -> tuple[npt.NDArray[Any], npt.NDArray[Any], dict[str, npt.NDArray[Any]], npt.NDArray[Any]]:
    space = problem.space
    dense = problem.matrix().toarray()
    with blas_threads(problem.threads, dense.shape[0]):
        energies, vectors = np.linalg.eigh(dense)
    del dense
    shifted = energies - energies[0]
    # Boltzmann weights p[T, j], shifted by the ground energy to avoid overflow.
    boltz = np.exp(-shifted[np.newaxis, :] / t[:, np.newaxis])
    p = boltz / boltz.sum(axis=1, keepdims=True)
    energy = p @ energies
    energy2 = p @ (energies * energies)
    heat = np.maximum(energy2 - energy * energy, 0.0) / (t * t)
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
    """Ratio estimate ``Σ_r N_r / Σ_r Z_r`` (over axis 0) and its jackknife error."""
    total_n, total_z = numerators.sum(axis=0), z.sum(axis=0)
    estimate = total_n / total_z
    r = z.shape[0]
    if r < 2:
        return estimate, np.full(np.shape(estimate), np.nan)
    leave_out = (total_n - numerators) / (total_z - z)
    spread = np.sum(np.abs(leave_out - leave_out.mean(axis=0)) ** 2, axis=0)
    return estimate, np.sqrt((r - 1) / r * spread)


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


def _ftlm(
    problem: Problem,
    t: npt.NDArray[np.float64],
    obs: dict[str, Problem],
    samples: int,
    steps: int,
    seed: int,
    method: str,
) -> tuple[Any, ...]:
    space = problem.space
    modes, masks = _masks(space)
    complex_h = not problem.expr.is_real()
    hmap = hermitian_map(
        problem,
        vectors=4 + len(obs) + len(masks) + 1,
        method=method,
        complex_vectors=complex_h,
    )
    operators = {name: o.operator() for name, o in obs.items()}
    rng = np.random.default_rng(seed)
    dim = hmap.dim
    per_sample: list[tuple[Any, Any, dict[str, Any], list[Any]]] = []
    for _ in range(samples):
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
    e_min = min(float(np.min(s[0])) for s in per_sample)
    beta_t = 1.0 / t
    z = np.zeros((samples, t.size))
    n_e = np.zeros((samples, t.size))
    n_e2 = np.zeros((samples, t.size))
    n_obs = {name: np.zeros((samples, t.size), dtype=np.complex128) for name in obs}
    n_mask = np.zeros((len(masks), samples, t.size))
    for k, (eps, weight, obs_terms, mask_terms) in enumerate(per_sample):
        boltz = np.exp(-np.outer(beta_t, eps - e_min))  # (T, j)
        z[k] = boltz @ weight
        n_e[k] = boltz @ (weight * eps)
        n_e2[k] = boltz @ (weight * eps * eps)
        for name, terms in obs_terms.items():
            n_obs[name][k] = boltz @ terms
        for m, terms in enumerate(mask_terms):
            n_mask[m, k] = (boltz @ terms).real
    energy, energy_err = _jackknife(n_e, z)
    # Heat capacity from the fluctuation; its jackknife uses the same leave-one-out sums.
    total_z, total_e, total_e2 = z.sum(0), n_e.sum(0), n_e2.sum(0)
    heat = (total_e2 / total_z - (total_e / total_z) ** 2) / (t * t)
    loo_z, loo_e, loo_e2 = total_z - z, total_e - n_e, total_e2 - n_e2
    loo_heat = (loo_e2 / loo_z - (loo_e / loo_z) ** 2) / (t * t)
    if samples >= 2:
        heat_err = np.sqrt(
            (samples - 1) / samples * np.sum((loo_heat - loo_heat.mean(0)) ** 2, axis=0)
        )
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

    Returns
    -------
    Thermal

    Raises
    ------
    ValueError
        Temperatures <= 0, an unknown method, bad samples or steps.
    NotHermitianError
        ``H`` is not Hermitian.

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
    if chosen == "exact":
        energy, heat, values, top = _exact(problem, t, obs)
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
            seconds=time.perf_counter() - t_start,
        )
    else:
        n_samples = DEFAULT_SAMPLES if samples is None else int(samples)
        n_steps = DEFAULT_STEPS if steps is None else int(steps)
        energy, energy_err, heat, heat_err, values, value_errors, top = _ftlm(
            problem, t, obs, n_samples, n_steps, int(seed), product_method
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
            seconds=time.perf_counter() - t_start,
        )
    if top.size:
        warn_top_weights(
            space,
            np.nanmax(np.where(np.isnan(top), -np.inf, top), axis=0),
            cutoff_warning,
            "the thermal ensemble",
        )
    return result
