"""Model-file sections for dynamics, spectra and temperature: ``[quench]``,
``[spectrum]`` and ``[thermal]``.

Each section is read and checked completely before anything is computed; every mistake
raises :class:`~fockmill.exceptions.ModelFileError` with the key path. The user-facing
description of every key is in ``docs/model-files.md``; in short:

``[quench]``
    ``times`` (array, or ``{start, stop, num, spacing}``; >= 0, non-decreasing),
    ``tol`` (Krylov accuracy, default 1e-8), ``populations`` (record ⟨n_i⟩ of every
    mode, default true); ``[quench.initial]`` with ``state = "fock"``
    (``occupations``, one integer per mode), ``"coherent"`` (``amplitudes``, one number
    or ``[re, im]`` per mode; only without a conserved total) or ``"ground"``
    (``parameters = {NAME = value}``: the ground state with these values changed);
    ``[quench.observables]`` ``NAME = "term"`` or ``["term", ...]`` (summed), in the
    term syntax of ``[terms]``; ``[quench.ramp.NAME]`` with ``times`` (>= 0, strictly
    increasing, at least two) and ``values``: the parameter NAME follows that
    piecewise-linear table during the evolution (constant before the first and after
    the last time). The state evolves under the model at ``[parameters]``, with ramped
    parameters replaced by their ramps. With ``[jumps]`` the density matrix evolves
    under the master equation (``fm.evolve_density``), or ``trajectories = N``
    quantum-jump trajectories are averaged (``fm.sample_trajectories``, ``seed``);
    ramps then change the Hamiltonian only (a ramped jump rate is refused).
``[spectrum]``
    ``operator`` (term string or array of them, summed; it may change the number of
    quanta by one fixed amount, then H acts on the sector it lands in), ``omegas``
    (array or ``{start, stop, num}``), ``eta`` (> 0, default 0.05),
    ``reference_energy`` (default: the ground energy), ``poles`` (also keep poles and
    weights, default true), ``tol`` (default 1e-6), ``max_steps``. The state is the
    ground state of the model at ``[parameters]``. ``momenta`` (``"all"`` or a list of
    label shifts: integers, or ``[a, b]`` for two translations) makes it a
    momentum-resolved map ``S(q, ω)``: the ground state is solved in the ``[symmetry]``
    sector (which must fix every label) and ``operator`` is resolved into its momentum
    components, one sector per momentum (:func:`fockmill.momentum_spectrum`).
``[thermal]``
    ``temperatures`` (array or ``{start, stop, num, spacing}``, all > 0), ``method``
    (``"auto"``, ``"exact"``, ``"ftlm"``), ``samples``, ``seed``, ``steps`` (FTLM),
    ``populations`` (default true); ``[thermal.observables]`` as for a quench.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import SizeLimitError, SpaceError
from fockmill.files.reader import MAX_CUTOFF, Reader, check_charge, join_key, read_axis, read_term
from fockmill.settings.checks import MAX_SEED
from fockmill.spaces.fock import FockSpace

if TYPE_CHECKING:
    from fockmill.models.model import Model

__all__ = [
    "INITIAL_STATES",
    "SECTIONS",
    "THERMAL_METHODS",
    "InitialState",
    "QuenchSpec",
    "SpectrumSpec",
    "TemperatureSpec",
    "check_momentum_map",
    "parse_dynamics_sections",
]

SECTIONS: tuple[str, ...] = ("quench", "spectrum", "thermal")
"""Top-level tables this module reads."""

INITIAL_STATES: tuple[str, ...] = ("fock", "coherent", "ground")
"""Values of ``quench.initial.state``."""

THERMAL_METHODS: tuple[str, ...] = ("auto", "exact", "ftlm")
"""Values of ``temperature.method``."""

#: A coherent state is refused when the cutoffs drop more than this weight of it.
COHERENT_TRUNCATION = 1e-6
#: Largest coherent amplitude accepted (|α|² photons would need a cutoff far above it).
MAX_AMPLITUDE = 1e3
#: Most named observables per section (each costs one product per recorded point).
MAX_OBSERVABLES = 64
#: Names the result files use themselves.
RESERVED_NAMES = ("populations", "energy", "heat_capacity", "times", "temperatures")

_OBSERVABLE_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class InitialState:
    """The state a quench starts from.

    Attributes
    ----------
    kind : {"fock", "coherent", "ground"}
    occupations : tuple of int
        Quanta per mode (``"fock"``).
    amplitudes : tuple of complex
        ``α_i`` per mode (``"coherent"``).
    parameters : dict of str to float
        Parameter values changed for the initial ground state (``"ground"``).
    """

    kind: str
    occupations: tuple[int, ...] = ()
    amplitudes: tuple[complex, ...] = ()
    parameters: dict[str, float] = field(default_factory=dict)

    def describe(self) -> str:
        """Short text for tables and titles (``|1,0,0⟩``, ``coherent α=(1,0)``, ...)."""
        if self.kind == "fock":
            return "|" + ",".join(str(n) for n in self.occupations) + "⟩"
        if self.kind == "coherent":
            return "coherent α=(" + ", ".join(_complex_text(a) for a in self.amplitudes) + ")"
        changed = ", ".join(f"{k}={v:g}" for k, v in self.parameters.items())
        return f"ground state at {changed}" if changed else "ground state"

    def vector(self, space: FockSpace) -> npt.NDArray[np.complex128]:
        """The normalised state for ``"fock"`` and ``"coherent"`` (see the module)."""
        psi: npt.NDArray[np.complex128]
        if self.kind == "fock":
            psi = np.zeros(space.dim, dtype=np.complex128)
            psi[space.index(np.asarray(self.occupations, dtype=np.int64))] = 1.0
            return psi
        if self.kind == "coherent":
            # The full truncated space is the kron product basis (mode 0 most significant).
            psi = np.ones(1, dtype=np.complex128)
            for alpha, cutoff in zip(self.amplitudes, space.cutoffs, strict=True):
                psi = np.asarray(np.kron(psi, _coherent_amplitudes(alpha, cutoff)), np.complex128)
            return psi / np.linalg.norm(psi)  # type: ignore[no-any-return]
        raise ValueError("a ground-state initial state is computed from the model")


def _complex_text(value: complex) -> str:
    if value.imag == 0:
        return f"{value.real:g}"
    return f"{value.real:g}{value.imag:+g}i"


def _coherent_amplitudes(alpha: complex, cutoff: int) -> npt.NDArray[np.complex128]:
    """``e^{−|α|²/2} α^n / √n!`` for ``n = 0 .. cutoff`` (by recurrence, no overflow)."""
    out = np.empty(cutoff + 1, dtype=np.complex128)
    out[0] = math.exp(-0.5 * abs(alpha) ** 2)
    for n in range(1, cutoff + 1):
        out[n] = out[n - 1] * alpha / math.sqrt(n)
    return out


@dataclass(frozen=True)
class QuenchSpec:
    """``[quench]``: evolve a state under the model at ``[parameters]``.

    Attributes
    ----------
    initial : InitialState
    times : tuple of float
        Non-decreasing times >= 0 (ħ = 1: inverse energy units).
    observables : dict of str to LadderExpr
        Named observables (sector-conserving).
    texts : dict of str to tuple of str
        The term strings of each observable, as written.
    populations : bool
        Record ``⟨n_i⟩`` of every mode.
    tol : float
        Accuracy of the propagated state in norm over the whole interval.
    ramps : dict of str to (tuple of float, tuple of float)
        Parameter name -> ``(times, values)`` of its piecewise-linear ramp
        (``[quench.ramp.NAME]``); empty for a sudden quench.
    trajectories : int or None
        With ``[jumps]``: average this many quantum-jump trajectories instead of
        evolving the density matrix (None).
    seed : int
        Seed of the trajectories (trajectory ``i`` draws from
        ``SeedSequence(seed, spawn_key=(i,))``).
    """

    initial: InitialState
    times: tuple[float, ...]
    observables: dict[str, LadderExpr] = field(default_factory=dict)
    texts: dict[str, tuple[str, ...]] = field(default_factory=dict)
    populations: bool = True
    tol: float = 1e-8
    ramps: dict[str, tuple[tuple[float, ...], tuple[float, ...]]] = field(default_factory=dict)
    trajectories: int | None = None
    seed: int = 0


#: Most trajectories a [quench] may ask for.
MAX_TRAJECTORIES = 10**7


@dataclass(frozen=True)
class SpectrumSpec:
    """``[spectrum]``: ``S(ω)`` of an operator in the model's ground state.

    Attributes
    ----------
    operator : LadderExpr
        The probe ``A``.
    texts : tuple of str
        Its term strings, as written.
    target : FockSpace
        Where ``A`` lands (the model's space when it conserves the sector).
    charge : int
        Change of the conserved (weighted) number of quanta by ``A``.
    omegas : tuple of float
    eta : float
    reference_energy : float or None
        None: the ground energy.
    poles : bool
        Also compute and keep the poles and weights.
    tol : float
    max_steps : int or None
    momenta : "all", tuple of tuple of int, or None
        A momentum-resolved map over these label shifts (one tuple per row, one label
        per generator of ``[symmetry]``), or every one; None for one spectrum.
    """

    operator: LadderExpr
    texts: tuple[str, ...]
    target: FockSpace
    charge: int
    omegas: tuple[float, ...]
    eta: float = 0.05
    reference_energy: float | None = None
    poles: bool = True
    tol: float = 1e-6
    max_steps: int | None = None
    momenta: str | tuple[tuple[int, ...], ...] | None = None


@dataclass(frozen=True)
class TemperatureSpec:
    """``[thermal]``: canonical averages on a grid of temperatures (k_B = 1).

    Attributes
    ----------
    temperatures : tuple of float
    method : {"auto", "exact", "ftlm"}
    samples : int or None
    seed : int
    steps : int or None
    observables, texts, populations
        As for :class:`QuenchSpec`.
    """

    temperatures: tuple[float, ...]
    method: str = "auto"
    samples: int | None = None
    seed: int = 0
    steps: int | None = None
    observables: dict[str, LadderExpr] = field(default_factory=dict)
    texts: dict[str, tuple[str, ...]] = field(default_factory=dict)
    populations: bool = True


# -- shared pieces ------------------------------------------------------------------------


def _grid(reader: Reader, value: object, path: str) -> npt.NDArray[np.float64]:
    """An array of numbers, or ``{values}`` / ``{start, stop, num, spacing}``."""

    if isinstance(value, list):
        value = {"values": value}
    if not isinstance(value, dict):
        reader.wrong(path, "an array of numbers or a table {start, stop, num}", value)
    grid = read_axis(reader, value, path)
    if grid.size == 0:
        reader.fail(path, "expected at least one value")
    return grid


def _operator(
    reader: Reader, value: object, path: str, model: Model
) -> tuple[LadderExpr, tuple[str, ...]]:
    """A term string, or an array of them (summed)."""

    if isinstance(value, str):
        return read_term(reader, value, path, model), (value,)
    items = reader.array(value, path, "term strings (summed)")
    total = LadderExpr()
    for k, text in enumerate(items):
        total = total + read_term(reader, text, join_key(path, k), model)
    return total, tuple(str(t) for t in items)


def _observables(
    reader: Reader, value: object, path: str, model: Model
) -> tuple[dict[str, LadderExpr], dict[str, tuple[str, ...]]]:

    table = reader.table(value, path)
    if len(table) > MAX_OBSERVABLES:
        reader.fail(path, f"expected at most {MAX_OBSERVABLES} observables; got {len(table)}")
    exprs: dict[str, LadderExpr] = {}
    texts: dict[str, tuple[str, ...]] = {}
    for name, raw in table.items():
        where = join_key(path, name)
        if not _OBSERVABLE_NAME.match(name):
            reader.fail(
                where,
                "an observable name must start with a letter and hold only letters, digits and _",
            )
        if name in RESERVED_NAMES:
            reader.fail(where, f"{name!r} is a name the results use themselves; pick another")
        expr, written = _operator(reader, raw, where, model)
        check_charge(reader, expr, where, " + ".join(written), model)
        exprs[name] = expr
        texts[name] = written
    return exprs, texts


def _hamiltonian_parameters(model: Model) -> list[str]:
    """The parameters of ``H`` (not the jump rates)."""
    return [name for name in model.parameters if name not in model.jumps]


def _positive(
    reader: Reader,
    table: Mapping[str, Any],
    key: str,
    path: str,
    default: float,
    upper: float | None = None,
) -> float:

    if key not in table:
        return default
    where = join_key(path, key)
    value = reader.number(table[key], where)
    if not value > 0 or (upper is not None and not value < upper):
        bound = f"a number between 0 and {upper:g} (exclusive)" if upper else "a number > 0"
        reader.wrong(where, bound, table[key])
    return value


# -- [quench] -----------------------------------------------------------------------------


def _initial(reader: Reader, value: object, model: Model) -> InitialState:

    path = "quench.initial"
    table = reader.table(value, path)
    kind = reader.choice(
        reader.required(table, "state", path, '"fock", "coherent" or "ground"'),
        join_key(path, "state"),
        INITIAL_STATES,
    )
    space = model.space
    modes = space.modes
    keys = {"fock": "occupations", "coherent": "amplitudes", "ground": "parameters"}
    reader.check_keys(table, path, ["state", keys[kind]], hint=f' for state = "{kind}"')
    if kind == "fock":
        where = join_key(path, "occupations")
        items = reader.array(
            reader.required(table, "occupations", path, "one integer per mode"),
            where,
            "integers (one per mode)",
        )
        if len(items) != modes:
            reader.fail(where, f"expected {modes} occupations (one per mode); got {len(items)}")
        occupations = tuple(
            reader.integer(v, join_key(where, k), 0, MAX_CUTOFF) for k, v in enumerate(items)
        )
        for k, (n, cutoff) in enumerate(zip(occupations, space.cutoffs, strict=True)):
            if n > cutoff:
                reader.fail(
                    join_key(where, k), f"{n} quanta exceed the cutoff {cutoff} of mode {k}"
                )
        if space.index(np.asarray(occupations, dtype=np.int64), strict=False) < 0:
            charge = sum(w * n for w, n in zip(space.weights, occupations, strict=True))
            sector = (
                f"≡ {space.total} (mod {space.modulus})" if space.modulus else f"= {space.total}"
            )
            reader.fail(
                where,
                f"this state has Σ w_i n_i = {charge}, outside the model's sector "
                f"(Σ w_i n_i {sector}, model.total); change the occupations or model.total",
            )
        return InitialState(kind, occupations=occupations)
    if kind == "coherent":
        if space.total is not None:
            reader.fail(
                join_key(path, "state"),
                "a coherent state has no fixed number of quanta, but this model keeps "
                "model.total (a sector); drop model.total, or start from a Fock or ground state",
            )
        where = join_key(path, "amplitudes")
        items = reader.array(
            reader.required(table, "amplitudes", path, "one amplitude per mode"),
            where,
            "amplitudes (a number or [re, im] per mode)",
        )
        if len(items) != modes:
            reader.fail(where, f"expected {modes} amplitudes (one per mode); got {len(items)}")
        amplitudes: list[complex] = []
        for k, item in enumerate(items):
            spot = join_key(where, k)
            if isinstance(item, list):
                if len(item) != 2:
                    reader.wrong(spot, "a number or [re, im]", item)
                alpha = complex(
                    reader.number(item[0], join_key(spot, 0)),
                    reader.number(item[1], join_key(spot, 1)),
                )
            else:
                alpha = complex(reader.number(item, spot))
            if abs(alpha) > MAX_AMPLITUDE:
                reader.wrong(spot, f"an amplitude with |α| <= {MAX_AMPLITUDE:g}", item)
            kept = float(np.sum(np.abs(_coherent_amplitudes(alpha, space.cutoffs[k])) ** 2))
            if 1.0 - kept > COHERENT_TRUNCATION:
                reader.fail(
                    spot,
                    f"|α|² = {abs(alpha) ** 2:.4g} puts weight {1.0 - kept:.2e} above the "
                    f"cutoff {space.cutoffs[k]} of mode {k} (more than {COHERENT_TRUNCATION:g}); "
                    "raise model.cutoff or lower the amplitude",
                )
            amplitudes.append(alpha)
        return InitialState(kind, amplitudes=tuple(amplitudes))
    where = join_key(path, "parameters")
    changed = reader.table(reader.required(table, "parameters", path, "a table"), where)
    if not changed:
        reader.fail(where, "empty; name the parameters whose values differ before the quench")
    reader.check_keys(
        changed, where, _hamiltonian_parameters(model), hint=f" for model {model.name!r}"
    )
    values = {name: reader.number(v, join_key(where, name)) for name, v in changed.items()}
    return InitialState(kind, parameters=values)


#: Most points in one ramp table.
MAX_RAMP_POINTS = 100_000


def _ramps(
    reader: Reader, value: object, model: Model
) -> dict[str, tuple[tuple[float, ...], tuple[float, ...]]]:
    """``[quench.ramp]``: one piecewise-linear table per ramped parameter."""
    path = "quench.ramp"
    table = reader.table(value, path)
    if not table:
        reader.fail(path, "empty; add [quench.ramp.NAME] with times and values, or drop it")
    reader.check_keys(table, path, list(model.parameters), hint=f" for model {model.name!r}")
    out: dict[str, tuple[tuple[float, ...], tuple[float, ...]]] = {}
    for name, raw in table.items():
        where = join_key(path, name)
        ramp = reader.table(raw, where)
        reader.check_keys(ramp, where, ["times", "values"])
        columns: dict[str, tuple[float, ...]] = {}
        for key in ("times", "values"):
            spot = join_key(where, key)
            items = reader.array(
                reader.required(ramp, key, where, "an array of numbers"), spot, "numbers"
            )
            if len(items) > MAX_RAMP_POINTS:
                reader.fail(spot, f"expected at most {MAX_RAMP_POINTS:,} points; got {len(items)}")
            columns[key] = tuple(reader.number(v, join_key(spot, k)) for k, v in enumerate(items))
        times, values = columns["times"], columns["values"]
        if len(times) < 2:
            reader.fail(join_key(where, "times"), "a ramp needs at least two points")
        if len(values) != len(times):
            reader.fail(
                join_key(where, "values"),
                f"expected one value per time ({len(times)}); got {len(values)}",
            )
        if times[0] < 0:
            reader.fail(
                join_key(where, "times"),
                f"times must be >= 0 (the initial state is at t = 0); got {times[0]:g}",
            )
        for k in range(1, len(times)):
            if times[k] <= times[k - 1]:
                reader.fail(
                    join_key(join_key(where, "times"), k),
                    f"times must be strictly increasing; {times[k]:g} follows {times[k - 1]:g}",
                )
        out[name] = (times, values)
    return out


def _quench(reader: Reader, value: object, model: Model) -> QuenchSpec:

    path = "quench"
    table = reader.table(value, path)
    reader.check_keys(
        table,
        path,
        ["initial", "times", "observables", "populations", "tol", "ramp", "trajectories", "seed"],
    )
    trajectories = None
    if "trajectories" in table:
        if not model.jumps:
            reader.fail(
                join_key(path, "trajectories"),
                "quantum-jump trajectories need [jumps]; a closed system evolves one state "
                "exactly: drop this key, or add [jumps]",
            )
        trajectories = reader.integer(
            table["trajectories"], join_key(path, "trajectories"), 1, MAX_TRAJECTORIES
        )
    if "seed" in table and trajectories is None:
        reader.fail(join_key(path, "seed"), "only meaningful with trajectories = N")
    seed = reader.integer(table.get("seed", 0), join_key(path, "seed"), 0, MAX_SEED - 1)
    initial = _initial(reader, reader.required(table, "initial", path, "a table"), model)
    where = join_key(path, "times")
    times = _grid(reader, reader.required(table, "times", path, "an array of times"), where)
    if np.any(times < 0):
        reader.fail(where, f"times must be >= 0 (the initial state is at t = 0); got {times.min()}")
    if np.any(np.diff(times) < 0):
        reader.fail(where, "times must be non-decreasing; sort them")
    observables: dict[str, LadderExpr] = {}
    texts: dict[str, tuple[str, ...]] = {}
    if "observables" in table:
        observables, texts = _observables(
            reader, table["observables"], join_key(path, "observables"), model
        )
    populations = reader.boolean(table.get("populations", True), join_key(path, "populations"))
    if not populations and not observables:
        reader.fail(
            join_key(path, "populations"),
            "nothing to record: keep populations = true or add [quench.observables]",
        )
    return QuenchSpec(
        initial=initial,
        times=tuple(float(t) for t in times),
        observables=observables,
        texts=texts,
        populations=populations,
        tol=_positive(reader, table, "tol", path, 1e-8, upper=1.0),
        ramps=_ramps(reader, table["ramp"], model) if "ramp" in table else {},
        trajectories=trajectories,
        seed=seed,
    )


# -- [spectrum] ---------------------------------------------------------------------------


def _target(
    reader: Reader, expr: LadderExpr, path: str, text: str, model: Model
) -> tuple[FockSpace, int]:
    """The sector the probe lands in, and the change of the conserved number."""
    space = model.space
    if expr.is_zero():
        reader.fail(path, f"{text!r} is zero")
    if space.total is None:
        return space, 0
    modulus = space.modulus
    charges = {int(c) % modulus if modulus else int(c) for c in expr.charge(space.weights)}
    if len(charges) != 1:
        reader.fail(
            path,
            f"{text!r} changes the number of quanta by different amounts "
            f"({sorted(charges)}); a probe must change it by one fixed amount",
        )
    charge = charges.pop()
    if charge == 0:
        return space, 0
    new_total = space.total + charge
    if modulus:
        new_total %= modulus
    elif new_total < 0:
        reader.fail(
            path,
            f"{text!r} removes {-charge} quanta from a sector holding {space.total}; "
            "nothing is left to remove",
        )
    try:
        target = FockSpace(
            space.modes,
            list(space.cutoffs),
            new_total,
            weights=list(space.weights),
            modulus=modulus,
        )
    except (SpaceError, SizeLimitError) as error:
        reader.fail(path, f"{text!r} leads to a sector that cannot be used: {error}")
    return target, charge


def _spectrum(reader: Reader, value: object, model: Model) -> SpectrumSpec:

    path = "spectrum"
    table = reader.table(value, path)
    reader.check_keys(
        table,
        path,
        ["operator", "omegas", "eta", "reference_energy", "poles", "tol", "max_steps", "momenta"],
    )
    where = join_key(path, "operator")
    operator, texts = _operator(
        reader,
        reader.required(table, "operator", path, 'a term string such as "lowering(0)"'),
        where,
        model,
    )
    target, charge = _target(reader, operator, where, " + ".join(texts), model)
    omegas = _grid(
        reader,
        reader.required(table, "omegas", path, "an array of frequencies"),
        join_key(path, "omegas"),
    )
    reference = None
    if "reference_energy" in table:
        reference = reader.number(table["reference_energy"], join_key(path, "reference_energy"))
    max_steps = None
    if "max_steps" in table:
        max_steps = reader.integer(table["max_steps"], join_key(path, "max_steps"), 1, 10**7)
    return SpectrumSpec(
        operator=operator,
        texts=texts,
        target=target,
        charge=charge,
        omegas=tuple(float(w) for w in omegas),
        eta=_positive(reader, table, "eta", path, 0.05),
        reference_energy=reference,
        poles=reader.boolean(table.get("poles", True), join_key(path, "poles")),
        tol=_positive(reader, table, "tol", path, 1e-6, upper=1.0),
        max_steps=max_steps,
        momenta=_momenta(reader, table["momenta"], join_key(path, "momenta"))
        if "momenta" in table
        else None,
    )


def _momenta(reader: Reader, value: object, path: str) -> str | tuple[tuple[int, ...], ...]:
    """``"all"`` or a non-empty list of label shifts (an integer or a list of integers
    each); ranges are checked against ``[symmetry]`` once both are read."""
    if value == "all":
        return "all"
    if not isinstance(value, list) or not value:
        reader.wrong(path, '"all" or a non-empty list of label shifts such as [0, 1, 2]', value)
    rows: list[tuple[int, ...]] = []
    for n, item in enumerate(value):
        where = f"{path}[{n}]"
        items = item if isinstance(item, list) else [item]
        if not items or any(isinstance(v, bool) or not isinstance(v, int) for v in items):
            reader.wrong(
                where, "an integer label shift, or a list of them (one per generator)", item
            )
        rows.append(tuple(int(v) for v in items))
    if len({len(r) for r in rows}) != 1:
        reader.fail(path, "every entry must give the same number of labels (one per generator)")
    return tuple(rows)


def check_momentum_map(reader: Reader, spectrum: SpectrumSpec | None, symmetry: Any) -> None:
    """Refuse ``[spectrum] momenta`` without a ``[symmetry]`` that fixes every label, or
    with label shifts that do not fit its generators."""
    if spectrum is None or spectrum.momenta is None:
        return
    path = join_key("spectrum", "momenta")
    if symmetry is None:
        reader.fail(
            path,
            "a momentum-resolved map needs the sector of the ground state: add [symmetry] "
            "(for example translation = 0)",
        )
    if any(label is None for label in symmetry.labels):
        reader.fail(
            path,
            'a momentum-resolved map starts from one sector, but [symmetry] has a label "all"; '
            "fix it (for example translation = 0) and list the momenta here instead",
        )
    if spectrum.momenta == "all":
        return
    count = len(symmetry.generators)
    for n, row in enumerate(spectrum.momenta):
        if len(row) != count:
            reader.fail(
                f"{path}[{n}]",
                f"gives {len(row)} label(s) but [symmetry] has {count} generator(s); give one "
                "label shift per generator",
            )
        for label, g in zip(row, symmetry.generators, strict=True):
            if not 0 <= label < g.order:
                reader.fail(
                    f"{path}[{n}]",
                    f"label shift {label} is out of range: labels run over 0..{g.order - 1}",
                )


# -- [thermal] ------------------------------------------------------------------------


def _temperature(reader: Reader, value: object, model: Model) -> TemperatureSpec:

    path = "thermal"
    table = reader.table(value, path)
    reader.check_keys(
        table,
        path,
        ["temperatures", "method", "samples", "seed", "steps", "observables", "populations"],
    )
    where = join_key(path, "temperatures")
    temperatures = _grid(
        reader,
        reader.required(table, "temperatures", path, "an array of temperatures > 0"),
        where,
    )
    if np.any(temperatures <= 0):
        reader.fail(
            where,
            f"temperatures must be > 0 (k_B = 1, energy units); got {temperatures.min():g}. "
            "For T = 0 use 'fockmill solve'",
        )
    method = reader.choice(table.get("method", "auto"), join_key(path, "method"), THERMAL_METHODS)
    if method == "exact":
        for key in ("samples", "seed", "steps"):
            if key in table:
                reader.fail(join_key(path, key), 'only meaningful with method = "ftlm" or "auto"')
    samples = steps = None
    if "samples" in table:
        samples = reader.integer(table["samples"], join_key(path, "samples"), 1, 10**6)
    if "steps" in table:
        steps = reader.integer(table["steps"], join_key(path, "steps"), 1, 10**6)
    seed = reader.integer(table.get("seed", 0), join_key(path, "seed"), 0, MAX_SEED - 1)
    observables: dict[str, LadderExpr] = {}
    texts: dict[str, tuple[str, ...]] = {}
    if "observables" in table:
        observables, texts = _observables(
            reader, table["observables"], join_key(path, "observables"), model
        )
    return TemperatureSpec(
        temperatures=tuple(float(t) for t in temperatures),
        method=method,
        samples=samples,
        seed=seed,
        steps=steps,
        observables=observables,
        texts=texts,
        populations=reader.boolean(table.get("populations", True), join_key(path, "populations")),
    )


def parse_dynamics_sections(
    reader: Reader, document: Mapping[str, Any], model: Model
) -> dict[str, Any]:
    """The ``quench``, ``spectrum`` and ``thermal`` specs present in ``document``.

    Returns
    -------
    dict
        ``{"quench": QuenchSpec | None, "spectrum": SpectrumSpec | None,
        "thermal": TemperatureSpec | None}``.
    """
    readers = {"quench": _quench, "spectrum": _spectrum, "thermal": _temperature}
    return {
        name: (read(reader, document[name], model) if name in document else None)
        for name, read in readers.items()
    }
