"""Density-matrix evolution under the Lindblad master equation."""

from __future__ import annotations

import time
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.dynamics.drive import TimeDependent
from fockmill.dynamics.krylov import as_float_array
from fockmill.exceptions import ConvergenceError
from fockmill.lindblad.integrator import runge_kutta_8
from fockmill.lindblad.jumps import check_jumps
from fockmill.lindblad.liouvillian import (
    Liouvillian,
    block_observable,
    build_liouvillian,
    check_density_matrix,
    join_blocks,
    sector_structure,
    split_blocks,
    trace_product,
)
from fockmill.problem.memory import available_memory
from fockmill.problem.problem import Problem
from fockmill.settings.progress import ProgressOption, make_progress
from fockmill.spaces.fock import FockSpace

__all__ = ["DensityEvolution", "check_times", "evolve_density"]


@dataclass(frozen=True)
class DensityEvolution:
    """The result of :func:`evolve_density`.

    Attributes
    ----------
    times : numpy.ndarray
        The requested times.
    values : dict of str to numpy.ndarray
        ``Tr(O ρ(t))`` at each time (real for Hermitian ``O``).
    traces : numpy.ndarray
        ``Tr ρ(t)`` at each time (1 up to the integration error: the truncated master
        equation conserves it exactly).
    final_blocks : list of numpy.ndarray
        ``ρ`` at the last time, as diagonal blocks on ``spaces``.
    spaces : list of FockSpace
        The block spaces (the whole space, or its number sectors).
    evaluations : int
        Liouvillian applications.
    steps : int
        Accepted integrator steps.
    seconds : float
        Wall time.
    """

    times: npt.NDArray[np.float64]
    values: dict[str, npt.NDArray[Any]]
    traces: npt.NDArray[np.float64]
    final_blocks: list[npt.NDArray[np.complex128]]
    spaces: list[Any]
    evaluations: int
    steps: int
    seconds: float
    _liouvillian: Liouvillian = field(repr=False, compare=False)

    @property
    def final(self) -> npt.NDArray[np.complex128]:
        """``ρ`` at the last time in the whole space's basis."""
        return join_blocks(self._liouvillian, self.final_blocks, limit=available_memory())


def check_times(times: object) -> npt.NDArray[np.float64]:
    """Non-decreasing times >= 0."""
    t = as_float_array(times, "times")  # type: ignore[arg-type]
    if np.any(t < 0):
        raise ValueError(f"times must be >= 0 (the initial state is at t = 0); got {t.min()}")
    if np.any(np.diff(t) < 0):
        raise ValueError("times must be non-decreasing; sort them first")
    return t


def _observable_blocks(liou: Liouvillian, observables: Any) -> dict[str, Any]:
    from fockmill.algebra.expressions import as_expr

    if observables is None:
        return {}
    if not isinstance(observables, Mapping):
        raise TypeError(
            "observables must be a mapping of names to expressions, e.g. {'n0': fm.number(0)}"
        )
    out = {}
    for name, op in observables.items():
        if not isinstance(name, str):
            raise TypeError(f"observable names must be strings; got {name!r}")
        e = as_expr(op)
        out[name] = (block_observable(liou, e), e.is_hermitian())
    return out


def _driven_liouvillians(
    drive: TimeDependent,
    space: Any,
    jumps: Any,
    split: bool | None,
    threads: int | None,
    memory_limit: int | None,
) -> tuple[Liouvillian, list[tuple[Liouvillian, Any]]]:
    """The Liouvillian of ``H0`` with the jumps and, per time-dependent part ``H_k``, the
    commutator ``−i[H_k, ρ]`` on the same blocks (``𝓛(t) = 𝓛_0 + Σ_k f_k(t) 𝓛_k``).
    Number-sector blocks are used only when ``H0``, every ``H_k`` and the jumps all
    allow them."""
    parts = [h.expr if isinstance(h, Problem) else h for h, _f in drive.parts]
    if split is not False:
        h0 = drive.H0
        full = h0.space if isinstance(h0, Problem) else space
        total = sum(parts, h0.expr if isinstance(h0, Problem) else h0)
        if isinstance(full, FockSpace):
            applies = sector_structure(total, check_jumps(jumps, full.modes), full) is not None
            if split and not applies:
                raise ValueError(
                    "split_sectors=True needs a space without total, a Hamiltonian whose "
                    "every part conserves the number of quanta and jumps that each change "
                    "it by one fixed amount"
                )
            split = applies
    liou = build_liouvillian(
        drive.H0, space, jumps, split_sectors=split, threads=threads, memory_limit=memory_limit
    )
    pieces = []
    for (_h, f), part in zip(drive.parts, parts, strict=True):
        piece = build_liouvillian(
            part, liou.full, [], split_sectors=split, threads=threads, memory_limit=memory_limit
        )
        pieces.append((piece, f))
    return liou, pieces


def evolve_density(
    H: Any,
    space: Any = None,
    rho0: Any = None,
    times: Any = None,
    jumps: Any = None,
    *,
    observables: Mapping[str, Any] | None = None,
    tol: float = 1e-8,
    split_sectors: bool | None = None,
    threads: int | None = None,
    memory_limit: int | None = None,
    progress: ProgressOption = None,
) -> DensityEvolution:
    """Integrate ``dρ/dt = −i[H, ρ] + Σ_k γ_k (L_k ρ L_k† − ½{L_k†L_k, ρ})`` (ħ = 1).

    Parameters
    ----------
    H : LadderExpr, Problem or TimeDependent
        Hermitian Hamiltonian (a prepared problem carries its space: pass
        ``space=None``), or a :class:`fockmill.TimeDependent` ``H(t) = H0 + Σ_k f_k(t)
        H_k``: each part is compiled into its own Liouvillian once, and the integrator
        ends a step on every breakpoint of the coefficients.
    space : FockSpace
        The truncated space.
    rho0 : array_like
        ``ρ(0)``: a density matrix ``(dim, dim)`` or a normalised state vector ``(dim,)``.
    times : array_like
        Non-decreasing times >= 0 to record.
    jumps : sequence of Jump
        The dissipation channels.
    observables : dict of str to LadderExpr, optional
        Recorded as ``Tr(O ρ(t))``.
    tol : float
        Relative and absolute tolerance of the integrator's local error per step.
    split_sectors : bool or None
        Evolve number-sector blocks only (None: when the structure applies and ``ρ(0)``
        has no coherence between sectors, which the evolution then never creates).
    progress : bool, callable or None
        Progress reports (see :func:`fockmill.lowest_levels`): a record after each
        integrator step with the time reached (``products``: Liouvillian applications).

    Returns
    -------
    DensityEvolution

    Notes
    -----
    A first version: the Hermitian ``ρ`` is flattened into a real vector (``Re ρ + Im ρ``)
    and integrated by the explicit Runge–Kutta method of order 8 with embedded error
    estimate of scipy (``DOP853``; Hairer, Nørsett & Wanner, Solving ODEs I, 1993,
    Sec. II.10), every right-hand side being one application of the native matrix-free
    Liouvillian product to the real form. Explicit steps are limited by the largest frequency of the
    Liouvillian; a Krylov exponential would take longer steps.

    Examples
    --------
    >>> import numpy as np, fockmill as fm
    >>> space = fm.FockSpace(modes=1, cutoff=3)
    >>> psi0 = np.array([0, 0, 0, 1.0])                # three quanta
    >>> ev = fm.evolve_density(fm.number(0), space, psi0, [0.0, 1.0], [fm.loss(0, 0.5)],
    ...                        observables={"n": fm.number(0)})
    >>> np.round(ev.values["n"], 6).tolist()           # 3 e^{−γt}
    [3.0, 1.819592]
    """
    t_start = time.perf_counter()
    if rho0 is None or times is None or jumps is None:
        raise TypeError("evolve_density needs rho0=, times= and jumps=")
    if not (isinstance(tol, float | int) and np.isfinite(tol) and 0 < tol < 1):
        raise ValueError(f"tol must be a number in (0, 1), e.g. 1e-8; got {tol!r}")
    t = check_times(times)
    drive = H if isinstance(H, TimeDependent) else None

    def build(split: bool | None) -> tuple[Liouvillian, list[tuple[Liouvillian, Any]]]:
        if drive is not None:
            return _driven_liouvillians(drive, space, jumps, split, threads, memory_limit)
        liou = build_liouvillian(
            H, space, jumps, split_sectors=split, threads=threads, memory_limit=memory_limit
        )
        return liou, []

    liou, driven = build(split_sectors)
    rho = check_density_matrix(liou.full, rho0, "rho0")
    blocks = split_blocks(liou, rho)
    if liou.sectors is not None:
        inside = sum(np.vdot(b, b).real for b in blocks)
        if abs(float(np.vdot(rho, rho).real) - inside) > 1e-24 + 1e-14 * inside:
            if split_sectors:
                raise ValueError(
                    "rho0 has coherences between number sectors; split_sectors=True would "
                    "drop them. Use split_sectors=None or False"
                )
            liou, driven = build(False)
            blocks = [rho]
    obs = _observable_blocks(liou, observables)
    raw: dict[str, list[complex]] = {name: [] for name in obs}
    traces: list[float] = []

    def record(x: npt.NDArray[np.float64]) -> None:
        bl = liou.from_real(x)
        traces.append(liou.trace(bl).real)
        for name, (problems, _herm) in obs.items():
            if problems is None:
                raw[name].append(0.0)
            else:
                raw[name].append(
                    sum(trace_product(p, b) for p, b in zip(problems, bl, strict=True))
                )

    def rhs(now: float, x: npt.NDArray[np.float64]) -> npt.NDArray[np.float64]:
        out = liou.apply_real(x)
        if driven:
            for (piece, _f), c in zip(driven, drive.coefficients(now), strict=True):  # type: ignore[union-attr]
                if c != 0.0:
                    out += c * piece.apply_real(x)
        return out

    x = liou.to_real(blocks)
    k = 0
    while k < t.size and t[k] <= 0.0:
        record(x)
        k += 1
    evaluations = 0
    steps = 0
    reporter = make_progress(progress, "evolve_density", total=float(t[-1]), unit="time")
    try:
        # One integrator per stretch between the coefficients' breakpoints (kinks).
        ends = [b for b in (drive.breakpoints() if drive else []) if 0.0 < b < t[-1]]
        start = 0.0
        for end in [*ends, float(t[-1])]:
            if k >= t.size:
                break
            with runge_kutta_8(rhs, start, x, end, tol) as solver:
                while solver.status == "running":
                    message = solver.step()
                    if solver.status == "failed":
                        raise ConvergenceError(
                            f"the integrator failed at t = {solver.t:.6g}: {message}"
                        )
                    steps += 1
                    if k < t.size and t[k] <= solver.t:
                        dense = solver.dense_output()
                        while k < t.size and t[k] <= solver.t:
                            record(solver.y if t[k] == solver.t else dense(float(t[k])))
                            k += 1
                    if reporter is not None:
                        reporter.update(
                            step=steps, products=evaluations + solver.nfev, time_reached=solver.t
                        )
                evaluations += solver.nfev
                x = solver.y
            start = end
    finally:
        if reporter is not None:
            reporter.close()
    values: dict[str, npt.NDArray[Any]] = {}
    for name, (_p, herm) in obs.items():
        arr = np.asarray(raw[name], dtype=np.complex128)
        values[name] = arr.real.copy() if herm else arr
    return DensityEvolution(
        times=t,
        values=values,
        traces=np.asarray(traces),
        final_blocks=liou.from_real(x),
        spaces=liou.spaces,
        evaluations=evaluations,
        steps=steps,
        seconds=time.perf_counter() - t_start,
        _liouvillian=liou,
    )
