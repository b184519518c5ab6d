"""Run the ``[quench]``, ``[spectrum]`` and ``[thermal]`` sections of a model file.

Each runner takes a :class:`~fockmill.ModelFile`, computes with :func:`fockmill.evolve`,
:func:`fockmill.spectral_function` / :func:`fockmill.spectral_poles` or
:func:`fockmill.thermal`, and returns a :class:`~fockmill.store.workflows.WorkflowResult`
(arrays plus plain-JSON meta data) that :func:`write_workflow_results` stores.
The Hamiltonian is the model at its ``[parameters]`` values, changed by ``overrides``;
ground states use the ``[solver]`` settings.
"""

from __future__ import annotations

import contextlib
import os
import time
import warnings
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from fockmill.algebra.expressions import LadderExpr, number
from fockmill.files.modelfile import ModelFile, load_model_file
from fockmill.settings.progress import ProgressOption
from fockmill.store.workflows import WorkflowResult, meta_of

__all__ = ["run_quench", "run_spectrum", "run_thermal"]


def _model_file(model_file: Any) -> Any:
    """A :class:`~fockmill.ModelFile`, read from disk when given as a path."""
    if isinstance(model_file, str | os.PathLike):
        return load_model_file(model_file)
    if not isinstance(model_file, ModelFile):
        raise TypeError(
            "model_file must be a fm.ModelFile (fm.load_model_file(path)) or the path of a "
            f"TOML model file; got {type(model_file).__name__}"
        )
    return model_file


def _section(model_file: Any, name: str) -> Any:
    spec = getattr(model_file, name, None)
    if spec is None:
        source = model_file.path or "the model file"
        raise ValueError(
            f"{source} has no [{name}] section; add one (see docs/model-files.md) to run it"
        )
    if getattr(spec, "momenta", None) is not None:
        return spec  # a momentum-resolved map runs in the [symmetry] sectors
    if name != "quench" and model_file.model.is_open:
        warnings.warn(
            f"[jumps] are not used by [{name}]: it is computed for the Hamiltonian alone, "
            "as a closed system; the open system's own results are 'fockmill stationary' "
            "and [quench]",
            UserWarning,
            stacklevel=4,  # the runner's caller (via _begin)
        )
    if getattr(model_file, "symmetry", None) is not None:
        # A Fock or coherent initial state, a probe that changes the momentum and a
        # canonical ensemble all live in the whole space, not in one symmetry sector.
        warnings.warn(
            f"[symmetry] is not used by [{name}]: it runs in the model's whole space "
            f"(dim {model_file.model.space.dim:,}); sectors apply to `solve` and `sweep`",
            UserWarning,
            stacklevel=4,  # the runner's caller (via _begin)
        )
    return spec


def _values(model_file: Any, overrides: Mapping[str, float] | None) -> dict[str, float]:
    model = model_file.model
    changed = dict(overrides or {})
    unknown = sorted(set(changed) - set(model.parameters))
    if unknown:
        raise ValueError(
            f"unknown parameter(s) {unknown}; the model has {sorted(model.parameters)}"
        )
    return model.values(**changed)


def _solver(model_file: Any, threads: int | None) -> dict[str, Any]:
    # [solver] is read with every key and its default: the solver's own keywords.
    solver = dict(model_file.solver)
    if threads is not None:
        solver["threads"] = threads
    return solver


def _population_observables(modes: int) -> dict[str, LadderExpr]:
    # Internal names cannot clash with the user's (those start with a letter).
    return {f"#n{i}": number(i) for i in range(modes)}


def _split_populations(
    values: Mapping[str, Any], modes: int, count: int
) -> tuple[np.ndarray | None, dict[str, Any]]:
    keys = [f"#n{i}" for i in range(modes)]
    if keys[0] not in values:
        return None, dict(values)
    table = np.column_stack([np.asarray(values[k], dtype=np.float64) for k in keys])
    rest = {k: v for k, v in values.items() if not k.startswith("#")}
    return table.reshape(count, modes), rest


def _quench_settings(spec: Any) -> dict[str, Any]:
    """The ``[quench]`` settings every quench records (initial state, tol, populations)."""
    return {
        "initial": spec.initial.kind,
        "initial_state": spec.initial.describe(),
        "occupations": list(spec.initial.occupations),
        "amplitudes": [[a.real, a.imag] for a in spec.initial.amplitudes],
        "initial_parameters": dict(spec.initial.parameters),
        "tol": spec.tol,
        "populations": spec.populations,
        "ramps": {
            name: {"times": list(t), "values": list(v)} for name, (t, v) in spec.ramps.items()
        },
    }


def _ramped_parts(
    spec: Any, model: Any, values: Mapping[str, float]
) -> tuple[dict[str, Any], Any, dict[str, float]]:
    """The ``[quench.ramp]`` functions, the constant part ``H0`` (ramped parameters left
    out) and the parameters at t = 0 (ramped ones at their ramps' first values)."""
    from fockmill.dynamics.drive import piecewise_linear

    ramps = {name: piecewise_linear(*table) for name, table in spec.ramps.items()}
    h0 = model.hamiltonian(**{**values, **dict.fromkeys(ramps, 0.0)})
    at_start = {**values, **{name: f(0.0) for name, f in ramps.items()}}
    return ramps, h0, at_start


def _ramped_energy(
    constant: Any, recorded: Mapping[str, Any], ramps: Mapping[str, Any], times: Any
) -> np.ndarray:
    """``⟨H(t)⟩ = ⟨H0⟩ + Σ_k f_k(t) ⟨H_k⟩`` from the parts recorded separately
    (``#ramp.NAME``); times on the last axis (one row per trajectory, or one series)."""
    energy = np.real(np.asarray(constant)).astype(np.float64)
    for name, f in ramps.items():
        coefficient = np.array([f(float(t)) for t in times])
        energy = energy + coefficient * np.real(np.asarray(recorded[f"#ramp.{name}"]))
    return energy


@dataclass(frozen=True)
class _Run:
    """What every runner starts from: the file, its section and the parameter values."""

    model_file: Any
    kind: str
    spec: Any
    values: dict[str, float]
    solver: dict[str, Any]
    started: float

    @property
    def model(self) -> Any:
        return self.model_file.model

    @property
    def space(self) -> Any:
        return self.model_file.model.space

    def finish(
        self,
        arrays: dict[str, Any],
        *,
        settings: dict[str, Any],
        summary: dict[str, Any],
        messages: list[str],
        observables: dict[str, Any] | None = None,
    ) -> WorkflowResult:
        """The result with its meta data (the run's seconds added to ``summary``);
        ``observables`` defaults to the section's recorded observable texts."""
        summary["seconds"] = time.perf_counter() - self.started
        if observables is None:
            observables = {k: list(v) for k, v in getattr(self.spec, "texts", {}).items()}
        meta = meta_of(
            self.model_file,
            self.kind,
            self.values,
            settings=settings,
            observables=observables,
            summary=summary,
            warnings=messages,
        )
        return WorkflowResult(self.kind, arrays, meta)


def _begin(
    model_file: Any,
    kind: str,
    overrides: Mapping[str, float] | None,
    threads: int | None,
) -> _Run:
    """Read the file (if a path), its ``[kind]`` section, the values and the solver settings."""
    started = time.perf_counter()
    model_file = _model_file(model_file)
    spec = _section(model_file, kind)
    values = _values(model_file, overrides)
    return _Run(model_file, kind, spec, values, _solver(model_file, threads), started)


@contextlib.contextmanager
def _collected_warnings() -> Iterator[list[str]]:
    """Collect warnings (for the results' meta data), then pass them on."""
    messages: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield messages
    for item in caught:
        messages.append(str(item.message))
        warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)


def _ground_checkpoint(checkpoint: str | os.PathLike[str] | None) -> Path | None:
    """The initial ground state's checkpoint next to a quench's: ``STEM.ground.SUFFIX``."""
    if checkpoint is None:
        return None
    path = Path(checkpoint)
    return path.with_name(f"{path.stem}.ground{path.suffix}")


def run_quench(
    model_file: Any,
    *,
    overrides: Mapping[str, float] | None = None,
    threads: int | None = None,
    memory_limit: int | None = None,
    progress: ProgressOption = None,
    checkpoint: str | os.PathLike[str] | None = None,
) -> WorkflowResult:
    """Evolve the ``[quench]`` initial state under the model and record observables.

    Parameters
    ----------
    model_file : ModelFile or path
        With a ``[quench]`` section (a path is read with :func:`fockmill.load_model_file`).
    overrides : mapping of str to float, optional
        Parameter values changed for this run (the evolving Hamiltonian; a ground-state
        initial state starts from these values with its own changes applied on top).
    threads : int, optional
        Threads (default: ``[solver] threads``, else all cores).
    memory_limit : int, optional
        Bytes the computation may plan to use.
    progress : bool, callable or None
        Progress of the ground state and the evolution (see :func:`fockmill.evolve`).
    checkpoint : str or path, optional
        The evolution's checkpoint file (:func:`fockmill.evolve`); a ground-state initial
        state keeps its own next to it, named ``STEM.ground.SUFFIX``.

    Returns
    -------
    WorkflowResult
        ``kind="quench"``; arrays ``times``, ``energy`` (⟨H⟩, constant up to the
        propagation error; ⟨H(t)⟩ under ``[quench.ramp]``), ``populations``
        ``(len(times), modes)`` when recorded, ``values.NAME`` per named observable and
        ``top_weights`` (per mode, the largest weight on its top kept level over the
        times).

    Notes
    -----
    With ``[quench.ramp.NAME]`` tables the Hamiltonian is time-dependent: the model's
    pieces (``H = constant + Σ_k p_k · pieces[k]``) give ``H0`` (every parameter that is
    not ramped, at its value) and one part per ramped parameter with its
    piecewise-linear table as coefficient (:class:`fockmill.TimeDependent`); each piece
    is compiled once. A ground-state initial state is then the ground state of ``H(0)``
    with ``[quench.initial] parameters`` changed.

    With ``[jumps]`` the state evolves under the master equation: the density matrix by
    :func:`fockmill.evolve_density` (to ``tol``), or, with ``trajectories = N``, ``N``
    quantum-jump trajectories by :func:`fockmill.sample_trajectories` (``seed``). The
    arrays are the same (``energy`` is ``Tr(ρH)``, ``top_weights`` the largest
    ``P(n_i = cutoff_i)`` over the times); trajectories add their standard errors
    ``energy_error``, ``populations_error`` and ``errors.NAME``.

    Raises
    ------
    ValueError
        No ``[quench]`` section, unknown override names, an override of a ramped
        parameter; the errors of :func:`fockmill.evolve` and
        :func:`fockmill.ground_state`.
    """
    from fockmill.dynamics.drive import TimeDependent
    from fockmill.dynamics.evolve import evolve
    from fockmill.problem.problem import Problem, prepare
    from fockmill.solvers.ground import ground_state

    run = _begin(model_file, "quench", overrides, threads)
    spec, model, space, values, solver = run.spec, run.model, run.space, run.values, run.solver
    ramped = sorted(set(spec.ramps) & set(overrides or {}))
    if ramped:
        raise ValueError(
            f"parameter(s) {ramped} follow [quench.ramp]; an override would be ignored. "
            "Change the ramp's values instead"
        )
    if model.is_open:
        return _open_quench(run, memory_limit)
    ramps, h, values_at_start = _ramped_parts(spec, model, values)
    summary: dict[str, Any] = {}
    with _collected_warnings() as messages:
        problem = prepare(h, space, threads=solver["threads"], memory_limit=memory_limit)
        parts = {
            name: Problem._from_parts(
                model.pieces[name], space, pool=problem.pool, threads=problem.threads
            )
            for name in ramps
        }
        if spec.initial.kind == "ground":
            start_values = {**values_at_start, **spec.initial.parameters}
            start = model.hamiltonian(**start_values)
            if start == h:  # the constant part itself, compiled once
                ground = ground_state(
                    problem,
                    progress=progress,
                    checkpoint=_ground_checkpoint(checkpoint),
                    **{k: v for k, v in solver.items() if k != "threads"},
                )
            else:
                ground = ground_state(
                    start,
                    space,
                    memory_limit=memory_limit,
                    progress=progress,
                    checkpoint=_ground_checkpoint(checkpoint),
                    **solver,
                )
            psi0 = ground.vector
            summary["initial_energy"] = ground.energy
            summary["initial_residual"] = ground.residual
        else:
            psi0 = spec.initial.vector(space)
        observables: dict[str, Any] = {"#energy": problem}
        observables.update({f"#ramp.{name}": part for name, part in parts.items()})
        if spec.populations:
            observables.update(_population_observables(space.modes))
        observables.update(spec.observables)
        hamiltonian: Any = problem
        if ramps:
            hamiltonian = TimeDependent(
                problem, [(parts[name], ramps[name]) for name in sorted(ramps)]
            )
        ev = evolve(
            hamiltonian,
            psi0=psi0,
            times=np.asarray(spec.times),
            observables=observables,
            tol=spec.tol,
            cutoff_warning=solver["cutoff_warning"],
            progress=progress,
            checkpoint=checkpoint,
        )
    energy = _ramped_energy(ev.values["#energy"], ev.values, ramps, ev.times)
    rest = {k: v for k, v in ev.values.items() if not k.startswith("#ramp.") and k != "#energy"}
    populations, named = _split_populations(rest, space.modes, ev.times.size)
    arrays: dict[str, Any] = {"times": ev.times, "energy": energy}
    if populations is not None:
        arrays["populations"] = populations
    for name, series in named.items():
        arrays[f"values.{name}"] = np.asarray(series)
    arrays["top_weights"] = np.asarray(ev.top_weights, dtype=np.float64)
    summary.update(
        steps=ev.steps,
        products=ev.products,
        method=ev.method,
        error_estimate=ev.error_estimate,
        energy_drift=float(np.max(np.abs(energy - energy[0]))) if energy.size else 0.0,
    )
    if ramps:
        # ⟨H(t)⟩ changes under a ramp: its change is no accuracy check.
        del summary["energy_drift"]
    settings = _quench_settings(spec)
    return run.finish(arrays, settings=settings, summary=summary, messages=messages)


def _top_observables(space: Any) -> dict[str, LadderExpr]:
    """``P(n_i = c_i)`` per mode as ``a_i†^c a_i^c / c!``: on the truncated space it is 1 on
    the top level ``c_i`` and 0 below (``n(n−1)…(n−c+1)/c!``)."""
    from math import factorial

    from fockmill.algebra.expressions import lowering, raising

    out: dict[str, LadderExpr] = {}
    for i, c in enumerate(space.cutoffs):
        out[f"#top{i}"] = (raising(i) ** c * lowering(i) ** c) * (1.0 / factorial(c))
    return out


def _open_quench(run: _Run, memory_limit: int | None) -> WorkflowResult:
    """``[quench]`` of a model with ``[jumps]`` (see :func:`run_quench`)."""
    from fockmill.dynamics.drive import TimeDependent
    from fockmill.files.jumps import describe_jumps
    from fockmill.lindblad.evolution import evolve_density
    from fockmill.lindblad.jumps import Jump
    from fockmill.lindblad.trajectories import mean_and_stderr, sample_trajectories
    from fockmill.problem.problem import prepare
    from fockmill.settings.checks import METHODS
    from fockmill.solvers.ground import ground_state

    model_file, spec, values, solver = run.model_file, run.spec, run.values, run.solver
    model, space = run.model, run.space
    # [solver] method names a stationary-state method here; a ground state picks its own.
    ground_options = {k: v for k, v in solver.items() if k != "threads"}
    if ground_options.get("method") not in METHODS:
        ground_options["method"] = "auto"
    ramps, h, at_start = _ramped_parts(spec, model, values)
    jumps = [Jump(op, rate, label) for label, op, rate in model.channels(**values)]
    for name in ramps:
        moved = [rate for _l, _o, rate in model.channels(**{**values, name: values[name] + 1.0})]
        if name not in model.pieces or moved != [j.rate for j in jumps]:
            raise ValueError(
                f"[quench.ramp.{name}]: {name} sets a jump rate; only parameters of the "
                "Hamiltonian can follow a ramp (time-dependent rates are not supported)"
            )
    times = np.asarray(spec.times)
    summary: dict[str, Any] = {}
    with _collected_warnings() as messages:
        problem = prepare(h, space, threads=solver["threads"], memory_limit=memory_limit)
        hamiltonian: Any = problem
        if ramps:
            hamiltonian = TimeDependent(
                problem, [(model.pieces[name], ramps[name]) for name in sorted(ramps)]
            )
        if spec.initial.kind == "ground":
            start = model.hamiltonian(**{**at_start, **spec.initial.parameters})
            if start == h:
                ground = ground_state(problem, **ground_options)
            else:
                ground = ground_state(
                    start,
                    space,
                    memory_limit=memory_limit,
                    threads=solver["threads"],
                    **ground_options,
                )
            psi0 = ground.vector
            summary["initial_energy"] = ground.energy
            summary["initial_residual"] = ground.residual
        else:
            psi0 = spec.initial.vector(space)
        observables: dict[str, Any] = {"#energy": h}
        observables.update({f"#ramp.{name}": model.pieces[name] for name in ramps})
        if spec.populations:
            observables.update(_population_observables(space.modes))
        observables.update(_top_observables(space))
        observables.update(spec.observables)
        errors: dict[str, Any] = {}
        if spec.trajectories is None:
            ev = evolve_density(
                hamiltonian,
                None,
                psi0,
                times,
                jumps,
                observables=observables,
                tol=spec.tol,
                memory_limit=memory_limit,
            )
            series = dict(ev.values)
            if ramps:
                series["#energy"] = _ramped_energy(series["#energy"], series, ramps, times)
            summary.update(
                method="DOP853",
                steps=ev.steps,
                evaluations=ev.evaluations,
                trace_error=float(np.max(np.abs(ev.traces - 1.0))) if ev.traces.size else 0.0,
                blocks=len(ev.spaces),
            )
        else:
            tr = sample_trajectories(
                hamiltonian,
                None,
                psi0,
                times,
                jumps,
                observables=observables,
                count=spec.trajectories,
                seed=spec.seed,
                tol=spec.tol,
            )
            series, errors = dict(tr.mean), dict(tr.stderr)
            if ramps:  # ⟨H(t)⟩ per trajectory, then its mean and standard error
                per_trajectory = _ramped_energy(tr.samples["#energy"], tr.samples, ramps, times)
                series["#energy"], errors["#energy"] = mean_and_stderr(per_trajectory)
            summary.update(
                method="quantum-jump trajectories",
                trajectories=tr.count,
                seed=tr.seed,
                mean_jumps=float(np.mean(tr.jumps)) if tr.jumps.size else 0.0,
            )
    count = times.size
    top = np.column_stack(
        [np.asarray(series[f"#top{i}"], dtype=np.float64) for i in range(space.modes)]
    ).reshape(count, space.modes)
    rest = {k: v for k, v in series.items() if not k.startswith("#") or k.startswith("#n")}
    populations, named = _split_populations(rest, space.modes, count)
    arrays: dict[str, Any] = {
        "times": np.asarray(times, dtype=np.float64),
        "energy": np.asarray(series["#energy"], dtype=np.float64),
    }
    if populations is not None:
        arrays["populations"] = populations
    for name, values_of in named.items():
        arrays[f"values.{name}"] = np.asarray(values_of)
    arrays["top_weights"] = top.max(axis=0) if count else np.zeros(space.modes)
    if errors:
        arrays["energy_error"] = np.asarray(errors["#energy"], dtype=np.float64)
        population_errors, named_errors = _split_populations(
            {k: v for k, v in errors.items() if not k.startswith("#") or k.startswith("#n")},
            space.modes,
            count,
        )
        if population_errors is not None:
            arrays["populations_error"] = population_errors
        for name, values_of in named_errors.items():
            arrays[f"errors.{name}"] = np.asarray(values_of)
    settings = {
        **_quench_settings(spec),
        "jumps": describe_jumps(model, values, model_file.jump_texts),
        "trajectories": spec.trajectories,
        "seed": spec.seed if spec.trajectories is not None else None,
    }
    return run.finish(arrays, settings=settings, summary=summary, messages=messages)


def run_spectrum(
    model_file: Any,
    *,
    overrides: Mapping[str, float] | None = None,
    threads: int | None = None,
    memory_limit: int | None = None,
    progress: ProgressOption = None,
    checkpoint: str | os.PathLike[str] | None = None,
) -> WorkflowResult:
    """``S(ω)`` of the ``[spectrum]`` operator in the model's ground state.

    Parameters
    ----------
    model_file : ModelFile
        With a ``[spectrum]`` section.
    overrides, threads, memory_limit, progress
        As for :func:`run_quench`.
    checkpoint : str or path, optional
        The ground state's checkpoint file (:func:`fockmill.ground_state`).

    Returns
    -------
    WorkflowResult
        ``kind="spectrum"``; arrays ``omegas``, ``S`` and, with ``poles = true``,
        ``pole_frequencies`` and ``pole_weights``; ``summary`` holds the ground energy,
        the reference energy, ``norm`` = ‖Aψ‖² (⟨ψ|A†A|ψ⟩ within the cutoffs, the
        integral of S over all ω) and Lanczos step counts. With ``momenta``
        (a momentum-resolved map, :func:`fockmill.momentum_spectrum` from the ground
        state of the ``[symmetry]`` sector): ``S`` has shape ``(rows, omegas)``, with
        arrays ``labels`` ``(rows, generators)``, ``momenta`` (``2π·label/order`` folded
        into (−π, π], per generator), ``norms`` and ``dims`` per row, and the poles of
        every row in ``pole_frequencies``, ``pole_weights`` with their row in
        ``pole_rows``.

    Raises
    ------
    ValueError, ConvergenceError
        No ``[spectrum]`` section; the errors of :func:`fockmill.spectral_function`.
    """
    from fockmill.dynamics.spectral import function_from_start, poles_from_start, spectral_start
    from fockmill.problem.problem import prepare
    from fockmill.solvers.ground import ground_state

    run = _begin(model_file, "spectrum", overrides, threads)
    if run.spec.momenta is not None:
        return _momentum_map(run, memory_limit)
    spec, space, solver = run.spec, run.space, run.solver
    h = run.model.hamiltonian(**run.values)
    with _collected_warnings() as messages:
        # H on the space, H on the target and A are each compiled once for the whole run.
        problem = prepare(h, space, threads=solver["threads"], memory_limit=memory_limit)
        ground = ground_state(
            problem,
            progress=progress,
            checkpoint=checkpoint,
            **{k: v for k, v in solver.items() if k != "threads"},
        )
        reference = ground.energy if spec.reference_energy is None else spec.reference_energy
        omegas = np.asarray(spec.omegas)
        start = spectral_start(problem, ground.vector, spec.operator, spec.target, reference)
        s = function_from_start(
            start,
            omegas,
            eta=spec.eta,
            tol=spec.tol,
            max_steps=spec.max_steps,
            method="auto",
            progress=progress,
        )
        arrays: dict[str, Any] = {"omegas": omegas, "S": s}
        # ‖Aψ‖² in the target space: ⟨ψ|A†A|ψ⟩ within the cutoffs (the sum rule of S).
        norm = start.norm
        summary: dict[str, Any] = {
            "ground_energy": ground.energy,
            "ground_residual": ground.residual,
            "reference_energy": reference,
            "norm": norm,
        }
        if spec.poles:
            poles = poles_from_start(start, max_steps=spec.max_steps, method="auto")
            arrays["pole_frequencies"] = poles.frequencies
            arrays["pole_weights"] = poles.weights
            summary.update(pole_steps=poles.steps, poles_exact=poles.exhausted)
    target = spec.target
    settings = {
        "operator": list(spec.texts),
        "charge": spec.charge,
        "eta": spec.eta,
        "reference_energy": spec.reference_energy,
        "poles": spec.poles,
        "tol": spec.tol,
        "max_steps": spec.max_steps,
        "target_total": target.total,
        "target_dim": target.dim,
    }
    # [spectrum]'s texts are its operator (in settings), not recorded observables.
    return run.finish(arrays, settings=settings, summary=summary, messages=messages, observables={})


def _momentum_map(run: _Run, memory_limit: int | None) -> WorkflowResult:
    """The ``[spectrum]`` with ``momenta``: S(q, ω) from the ground state of the
    ``[symmetry]`` sector, one sector per momentum."""
    from fockmill.dynamics.momentum import momentum_spectrum
    from fockmill.problem.problem import prepare
    from fockmill.solvers.ground import ground_state

    spec, model, solver = run.spec, run.model, run.solver
    choice = run.model_file.symmetry
    h = model.hamiltonian(**run.values)
    with _collected_warnings() as messages:
        sector = choice.sector(model.space, threads=solver["threads"])
        problem = prepare(h, sector, threads=solver["threads"], memory_limit=memory_limit)
        ground = ground_state(problem, **{k: v for k, v in solver.items() if k != "threads"})
        reference = ground.energy if spec.reference_energy is None else spec.reference_energy
        omegas = np.asarray(spec.omegas)
        found = momentum_spectrum(
            problem,
            psi=ground.vector,
            A=spec.operator,
            omegas=omegas,
            labels=None if spec.momenta == "all" else [tuple(r) for r in spec.momenta],
            base=spec.target,
            eta=spec.eta,
            poles=spec.poles,
            reference_energy=reference,
            tol=spec.tol,
            max_steps=spec.max_steps,
        )
        arrays: dict[str, Any] = {
            "omegas": omegas,
            "S": found.intensity,
            "labels": found.labels.astype(np.float64),
            "momenta": found.momenta.reshape(len(found.labels), -1),
            "norms": found.norms,
            "dims": found.dims.astype(np.float64),
        }
        summary: dict[str, Any] = {
            "ground_energy": ground.energy,
            "ground_residual": ground.residual,
            "reference_energy": reference,
            "norm": float(np.sum(found.norms)),
            "sector_dim": sector.dim,
        }
        if found.poles is not None:
            arrays["pole_frequencies"] = np.concatenate([p.frequencies for p in found.poles])
            arrays["pole_weights"] = np.concatenate([p.weights for p in found.poles])
            arrays["pole_rows"] = np.concatenate(
                [
                    np.full(p.frequencies.size, k, dtype=np.float64)
                    for k, p in enumerate(found.poles)
                ]
            )
            summary.update(poles_exact=all(p.exhausted for p in found.poles))
    settings = {
        "operator": list(spec.texts),
        "charge": spec.charge,
        "eta": spec.eta,
        "reference_energy": spec.reference_energy,
        "poles": spec.poles,
        "tol": spec.tol,
        "max_steps": spec.max_steps,
        "target_total": spec.target.total,
        "momenta": spec.momenta if spec.momenta == "all" else [list(r) for r in spec.momenta],
        "orders": list(found.orders),
        "sector": choice.describe(),
    }
    # [spectrum]'s texts are its operator (in settings), not recorded observables.
    return run.finish(arrays, settings=settings, summary=summary, messages=messages, observables={})


def run_thermal(
    model_file: Any,
    *,
    overrides: Mapping[str, float] | None = None,
    threads: int | None = None,
    memory_limit: int | None = None,
    progress: ProgressOption = None,
) -> WorkflowResult:
    """Canonical averages on the ``[thermal]`` grid (k_B = 1).

    Parameters
    ----------
    model_file : ModelFile
        With a ``[thermal]`` section.
    overrides, threads, memory_limit, progress
        As for :func:`run_quench`.

    Returns
    -------
    WorkflowResult
        ``kind="thermal"``; arrays ``temperatures``, ``energy``, ``energy_error``,
        ``heat_capacity``, ``heat_capacity_error``, ``populations`` and
        ``populations_error`` ``(len(temperatures), modes)`` when recorded,
        ``values.NAME`` and ``errors.NAME`` per named observable, ``top_weights``
        ``(len(temperatures), modes)``. Errors are zero for the exact method.

    Raises
    ------
    ValueError
        No ``[thermal]`` section; the errors of :func:`fockmill.thermal`.
    """
    from fockmill.dynamics.thermal import thermal

    run = _begin(model_file, "thermal", overrides, threads)
    spec, space, solver = run.spec, run.space, run.solver
    h = run.model.hamiltonian(**run.values)
    observables: dict[str, LadderExpr] = {}
    if spec.populations:
        observables.update(_population_observables(space.modes))
    observables.update(spec.observables)
    temperatures = np.asarray(spec.temperatures)
    with _collected_warnings() as messages:
        th = thermal(
            h,
            space,
            temperatures,
            observables=observables,
            method=spec.method,
            cutoff_warning=solver["cutoff_warning"],
            # The exact method samples nothing: the file's sampling keys are for FTLM.
            **(
                {}
                if spec.method == "exact"
                else {"samples": spec.samples, "seed": spec.seed, "steps": spec.steps}
            ),
            threads=solver["threads"],
            memory_limit=memory_limit,
            progress=progress,
        )
    count = temperatures.size
    populations, named = _split_populations(th.values, space.modes, count)
    population_errors, named_errors = _split_populations(th.value_errors, space.modes, count)
    arrays: dict[str, Any] = {
        "temperatures": th.temperatures,
        "energy": th.energy,
        "energy_error": th.errors,
        "heat_capacity": th.heat_capacity,
        "heat_capacity_error": th.heat_capacity_errors,
    }
    if populations is not None and population_errors is not None:
        arrays["populations"] = populations
        arrays["populations_error"] = population_errors
    for name in named:
        arrays[f"values.{name}"] = np.asarray(named[name])
        arrays[f"errors.{name}"] = np.asarray(named_errors[name], dtype=np.float64)
    arrays["top_weights"] = np.asarray(th.top_weights, dtype=np.float64)
    settings = {
        "method": spec.method,
        "samples": spec.samples,
        "seed": spec.seed,
        "steps": spec.steps,
        "populations": spec.populations,
    }
    summary = {"method": th.method, "samples": th.samples, "steps": th.steps}
    return run.finish(arrays, settings=settings, summary=summary, messages=messages)
