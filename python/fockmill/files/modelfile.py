"""Model files: a TOML description of a model, a parameter sweep and what to record.

A model file names one of the ready-made models of :mod:`fockmill.models.builders`, its
lattice and Fock space, default parameter values, optional drives, an optional grid
of parameter values to sweep, the quantities to record at each point and solver
settings. :func:`load_model_file` checks everything up front and turns the file into a
:class:`ModelFile`; every mistake raises :class:`ModelFileError` naming the file, the
key and what was expected.

The user-facing description of every key, with types, defaults and examples, is
``docs/model-files.md``; this is a summary.

Schema (every table but ``[model]`` is optional; unknown keys are errors)
-----------------------------------------------------------------------
``schema = 1``
    Optional version marker of this layout.
``[model]``
    ``kind`` is ``"bose-hubbard"``, ``"jaynes-cummings-hubbard"``,
    ``"kerr-network"``, ``"lowest-landau-level"`` or ``"modes"``; the other keys
    depend on it:

    * bose-hubbard: ``lattice`` = ``"chain"`` | ``"ring"`` (with ``sites``),
      ``"rectangle"`` (with ``rows``, ``cols``, optional ``periodic``) or ``"edges"``
      (with ``edges = [[i, j], [i, j, t], ...]`` and optional ``sites``); ``cutoff``
      (integer or one per site; optional when ``total`` is given), ``total``.
    * jaynes-cummings-hubbard: ``sites``, ``cavity_cutoff``, optional ``periodic``
      and ``total`` (conserved excitations).
    * kerr-network: ``frequencies = [...]``, optional ``self_kerr`` (number or one per
      mode), ``cross_kerr = [[i, j, chi], ...]``, ``couplings = [[i, j, g], ...]``;
      ``cutoff`` (integer or one per mode), optional ``total``.
    * lowest-landau-level: ``total`` (bosons), ``angular_momentum``, optional
      ``orbitals`` (see :func:`fockmill.models.builders.lowest_landau_level`).
    * modes: ``modes``, ``cutoff`` (integer or one per mode), optional ``total`` and
      ``weights``; no terms of its own (give them in ``[terms.NAME]``).
``[terms.NAME]``
    The user's own terms, multiplied by parameter ``NAME`` (new, or an existing one
    whose family they join): ``value`` (default of a new parameter, 1.0), ``fixed``
    (add to every point instead), ``terms = ["0.5 raising(0) lowering(1)", ...]`` (syntax
    in :mod:`fockmill.algebra.terms`), ``per_mode = "number(@)"`` with ``modes``,
    ``weights`` or ``random = {distribution, seed, low/high or mean/std}``,
    ``quadratic_form`` and ``pair_interaction`` (coefficient arrays: a ``.npy`` path
    relative to the model file, nested lists, or ``{indices = ..., values = ...}``; see
    :func:`fockmill.quadratic_form`), and ``add_adjoint``.
``[jumps.NAME]``
    Dissipation channels whose rate is the parameter ``NAME`` (default ``rate``):
    ``per_mode = "lowering(@)"`` with ``modes`` and ``weights`` (one jump per mode),
    ``operators = ["...", [...]]`` (one jump each), ``description``; read by
    :mod:`fockmill.files.jumps`. With jumps a sweep records stationary states.
``[parameters]``
    Default value of any model parameter (``J``, ``U``, ``mu``; ``wc``, ``we``,
    ``g``, ``J``; ``frequency_scale``, ``kerr_scale``, ``cross_kerr_scale``,
    ``exchange_scale``; ``drive``, ``two_photon``; names made in ``[terms]``).
``[units]``
    ``energy = "J"`` and ``NAME = "unit"`` per parameter: labels for plots and tables.
``[drives]``
    ``coherent = [[mode, amplitude], ...]``, ``two_photon = [[mode, amplitude], ...]``
    (see :func:`fockmill.models.builders.with_drives`).
``[sweep.NAME]``
    One table per swept parameter, in sweep order: ``values = [...]``, or ``start``,
    ``stop``, ``num`` (>= 2) and optional ``spacing = "linear"`` (default) or
    ``"geometric"``. The grid is the Cartesian product, last table varying fastest.
``[record]``
    ``quantities = [...]`` from ``energy``, ``gap``, ``levels``, ``populations``,
    ``number_variances``, ``one_body_matrix``, ``entanglement_entropy``,
    ``top_level_weights``, ``residual``
    (default ``["energy"]``); with ``[jumps]``: ``energy`` (Tr ρH), ``populations``,
    ``g2``, ``purity``, ``number_variances``, ``residual`` (‖𝓛ρ‖), default
    ``["populations", "g2", "purity"]``; ``levels`` (how many lowest levels to compute);
    ``entropy_modes`` (the subsystem for ``entanglement_entropy``; default the first half of the
    modes).
``[symmetry]``
    The symmetry sector(s) to solve in: ``translation`` (a label or ``"all"``),
    ``reflection``, ``permutations`` with ``labels`` (see
    :mod:`fockmill.files.symmetry`).
``[solver]``
    The keywords of :func:`fockmill.ground_state`, same names, defaults and meanings:
    ``method`` (``"auto"``, ``"dense"``, ``"csr"``, ``"operator"``, ``"lanczos"``;
    default ``"auto"``), ``tol`` (default 1e-9), ``seed`` (default 0),
    ``max_iterations`` (matrix-vector products; default: the solver's own), ``threads``.
``[quench]``, ``[spectrum]``, ``[thermal]``
    Dynamics, spectra and thermal curves; read by :mod:`fockmill.files.dynamics`.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
import re
import tomllib
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt

from fockmill.algebra.arrays import pair_interaction, quadratic_form
from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import ModelFileError
from fockmill.files.dynamics import parse_dynamics_sections
from fockmill.files.reader import (
    MAX_CUTOFF,
    MAX_MODES,
    MAX_POINTS,
    MAX_TOTAL,
    Reader,
    check_charge,
    join_key,
    read_axis,
    read_modes,
    read_term,
)
from fockmill.models.builders import (
    bose_hubbard,
    chain_edges,
    jaynes_cummings_hubbard,
    kerr_network,
    lowest_landau_level,
    rectangular_edges,
    with_drives,
)
from fockmill.models.model import Model
from fockmill.settings.checks import MAX_SEED, MAX_THREADS, METHODS
from fockmill.settings.solver import SolverSettings
from fockmill.spaces.fock import FockSpace
from fockmill.sweeps.plan import (
    DEFAULT_STATIONARY_QUANTITIES,
    RECORDABLE,
    RENAMED_QUANTITIES,
    STATIONARY_METHODS,
    STATIONARY_QUANTITIES,
    SweepGrid,
)

if TYPE_CHECKING:
    from fockmill.spaces.sectors import SectorChoice

__all__ = [
    "KINDS",
    "RECORDABLE",
    "SOLVER_METHODS",
    "ModelFile",
    "ModelFileError",
    "SweepGrid",
    "load_model_file",
    "parse_model_text",
]

KINDS: tuple[str, ...] = (
    "bose-hubbard",
    "jaynes-cummings-hubbard",
    "kerr-network",
    "lowest-landau-level",
    "modes",
)
"""Values of ``model.kind``."""

SOLVER_METHODS: tuple[str, ...] = METHODS
"""Values of ``solver.method`` (the solvers' own methods)."""

SCHEMA_VERSION = 1

_LATTICES = ("chain", "ring", "rectangle", "edges")
_DEFAULT_LEVELS = {"gap": 2, "levels": 4}


@dataclass(frozen=True)
class ModelFile:
    """Everything a model file describes, checked and built.

    Attributes
    ----------
    path : str or None
        The file read, None for text given directly.
    model : Model
        The model with the file's parameter defaults (and drives, if any).
    sweep : SweepGrid or None
        The parameter grid, None for a single point at the defaults.
    quantities : tuple of str
        Quantities to record per point (``record.quantities``, see ``RECORDABLE``).
    levels : int
        How many lowest levels to compute (>= 2 when ``"gap"`` is recorded).
    solver : dict
        The keywords of ``ground_state``/``run_sweep``: ``{"method": str, "tol": float,
        "seed": int, "max_iterations": int | None, "threads": int | None}``.
    entropy_modes : tuple of int
        Subsystem modes for ``"entanglement_entropy"`` (empty when it is not recorded).
    text_hash : str
        SHA-256 (hex) of the file's text.
    units : dict of str to str
        ``[units]``: unit of ``"energy"`` and of any parameter, e.g.
        ``{"energy": "J", "U": "J"}`` (empty when the file has none).
    mode_weights : dict of str to tuple of float
        For every ``[terms.NAME]`` table with ``per_mode``, the weight used on each
        listed mode (the listed ``weights`` or the drawn disorder), in ``modes`` order.
    descriptions : dict of str to str
        ``[terms.NAME] description``: what a user's parameter is, for axis labels.
    quench, spectrum, thermal : QuenchSpec, SpectrumSpec, TemperatureSpec or None
        The ``[quench]``, ``[spectrum]`` and ``[thermal]`` sections (see
        :mod:`fockmill.files.dynamics`); None when absent. (``[thermal]`` was called
        ``[thermal]`` before; the attribute ``temperature`` still returns it.)
    symmetry : SectorChoice or None
        ``[symmetry]``: the sector(s) to solve in, None for the whole space.
    jump_texts : dict of str to tuple of str
        ``[jumps.NAME]``: per rate parameter, its jump operators as written (one text per
        channel); empty for a closed system (the channels themselves are
        ``model.jumps``).
    """

    path: str | None
    model: Model
    sweep: SweepGrid | None
    quantities: tuple[str, ...]
    levels: int
    solver: dict[str, object]
    entropy_modes: tuple[int, ...]
    text_hash: str
    units: dict[str, str] = field(default_factory=dict)
    mode_weights: dict[str, tuple[float, ...]] = field(default_factory=dict)
    descriptions: dict[str, str] = field(default_factory=dict)
    # [quench], [spectrum], [thermal] (see fockmill.files.dynamics); None if absent.
    quench: Any = None
    spectrum: Any = None
    thermal: Any = None
    symmetry: SectorChoice | None = None
    jump_texts: dict[str, tuple[str, ...]] = field(default_factory=dict)

    def __hash__(self) -> int:
        return hash(self.text_hash)

    @property
    def temperature(self) -> Any:
        """Older name of :attr:`thermal` (the ``[thermal]`` section)."""
        return self.thermal

    @property
    def record(self) -> tuple[str, ...]:
        """Deprecated name of :attr:`quantities`."""
        import warnings

        warnings.warn(
            "ModelFile.record is deprecated; use ModelFile.quantities",
            DeprecationWarning,
            stacklevel=2,
        )
        return self.quantities


# -- reading values with key paths --------------------------------------------------------


# -- the [model] table --------------------------------------------------------------------


def _cutoff(reader: Reader, value: object, path: str, modes: int) -> int | list[int]:
    """An integer cutoff, or one per mode."""
    if isinstance(value, list):
        items = reader.array(value, path, "integers (one per mode)")
        if len(items) != modes:
            reader.fail(
                path, f"expected {modes} cutoffs (one per mode) or one integer; got {len(items)}"
            )
        return [reader.integer(v, join_key(path, k), 1, MAX_CUTOFF) for k, v in enumerate(items)]
    if isinstance(value, bool) or not isinstance(value, int):
        reader.wrong(path, f"an integer from 1 to {MAX_CUTOFF}, or an array of them", value)
    return reader.integer(value, path, 1, MAX_CUTOFF)


def _total(reader: Reader, table: Mapping[str, Any], path: str) -> int | None:
    if "total" not in table:
        return None
    return reader.integer(table["total"], join_key(path, "total"), 0, MAX_TOTAL)


def _triples(
    reader: Reader, value: object, path: str, modes: int | None, what: str
) -> list[tuple[int, int, float]]:
    """``[[i, j, x], ...]`` (``x`` optional only for edges, where it defaults to 1)."""
    optional_value = what == "t"
    shape = f"[i, j] or [i, j, {what}]" if optional_value else f"[i, j, {what}]"
    rows = reader.array(value, path, f"{shape} arrays")
    out: list[tuple[int, int, float]] = []
    seen: dict[frozenset[int], int] = {}
    upper = MAX_MODES - 1 if modes is None else modes - 1
    for k, row in enumerate(rows):
        row_path = join_key(path, k)
        if not isinstance(row, list) or len(row) not in ((2, 3) if optional_value else (3,)):
            reader.wrong(row_path, shape, row)
        i = reader.integer(row[0], join_key(row_path, 0), 0, upper)
        j = reader.integer(row[1], join_key(row_path, 1), 0, upper)
        if i == j:
            reader.fail(row_path, f"expected two different modes; got [{i}, {j}, ...]")
        pair = frozenset((i, j))
        if pair in seen:
            reader.fail(row_path, f"pair ({i}, {j}) repeats {join_key(path, seen[pair])}")
        seen[pair] = k
        x = reader.number(row[2], join_key(row_path, 2)) if len(row) == 3 else 1.0
        out.append((i, j, x))
    return out


def _bose_hubbard(reader: Reader, table: Mapping[str, Any], needs_cutoff: bool) -> Model:
    path = "model"
    lattice = reader.choice(
        reader.required(table, "lattice", path, "one of " + ", ".join(_LATTICES)),
        "model.lattice",
        _LATTICES,
    )
    common = ["kind", "lattice", "cutoff", "total"]
    specific = {
        "chain": ["sites"],
        "ring": ["sites"],
        "rectangle": ["rows", "cols", "periodic"],
        "edges": ["edges", "sites"],
    }[lattice]
    reader.check_keys(table, path, common + specific, hint=f' for lattice = "{lattice}"')
    sites: int | None = None
    if lattice in ("chain", "ring"):
        minimum = 3 if lattice == "ring" else 1
        sites = reader.integer(
            reader.required(table, "sites", path, f"an integer >= {minimum}"),
            "model.sites",
            minimum,
            MAX_MODES,
        )
        edges: list[Any] = chain_edges(sites, periodic=lattice == "ring")
    elif lattice == "rectangle":
        rows = reader.integer(
            reader.required(table, "rows", path, "an integer >= 1"), "model.rows", 1, MAX_MODES
        )
        cols = reader.integer(
            reader.required(table, "cols", path, "an integer >= 1"), "model.cols", 1, MAX_MODES
        )
        if rows * cols > MAX_MODES:
            reader.fail("model", f"expected rows * cols <= {MAX_MODES}; got {rows * cols}")
        periodic = reader.boolean(table.get("periodic", False), "model.periodic")
        sites = rows * cols
        edges = rectangular_edges(rows, cols, periodic)
    else:
        if "sites" in table:
            sites = reader.integer(table["sites"], "model.sites", 1, MAX_MODES)
        edges = _triples(
            reader,
            reader.required(table, "edges", path, "[[i, j], ...]"),
            "model.edges",
            sites,
            "t",
        )
        if sites is None:
            sites = 1 + max(max(i, j) for i, j, _ in edges)
    total = _total(reader, table, path)
    cutoff: int | list[int] | None = None
    if "cutoff" in table:
        cutoff = _cutoff(reader, table["cutoff"], "model.cutoff", sites)
    elif total is None:
        reader.fail("model.cutoff", "missing; expected an integer >= 1 (or give model.total)")
    elif needs_cutoff:
        reader.fail(
            "model.cutoff",
            "missing; expected an integer >= 1, required with [drives] because drives "
            "leave the fixed-total sector and the cutoff then truncates",
        )
    return bose_hubbard(edges, sites=sites, cutoff=cutoff, total=total)


def _jaynes_cummings_hubbard(reader: Reader, table: Mapping[str, Any]) -> Model:
    path = "model"
    reader.check_keys(table, path, ["kind", "sites", "periodic", "cavity_cutoff", "total"])
    periodic = reader.boolean(table.get("periodic", False), "model.periodic")
    minimum = 3 if periodic else 1
    sites = reader.integer(
        reader.required(table, "sites", path, f"an integer >= {minimum}"),
        "model.sites",
        minimum,
        MAX_MODES // 2,
    )
    cavity_cutoff = reader.integer(
        reader.required(table, "cavity_cutoff", path, "an integer >= 1"),
        "model.cavity_cutoff",
        1,
        MAX_CUTOFF,
    )
    return jaynes_cummings_hubbard(
        sites, periodic=periodic, cavity_cutoff=cavity_cutoff, total=_total(reader, table, path)
    )


def _kerr_network(reader: Reader, table: Mapping[str, Any]) -> Model:
    path = "model"
    allowed = ["kind", "frequencies", "self_kerr", "cross_kerr", "couplings", "cutoff", "total"]
    reader.check_keys(table, path, allowed)
    raw = reader.array(
        reader.required(table, "frequencies", path, "an array of numbers (one per mode)"),
        "model.frequencies",
        "numbers (one per mode)",
    )
    if len(raw) > MAX_MODES:
        reader.fail("model.frequencies", f"expected at most {MAX_MODES} modes; got {len(raw)}")
    frequencies = [reader.number(v, join_key("model.frequencies", k)) for k, v in enumerate(raw)]
    modes = len(frequencies)
    self_kerr: float | list[float] = 0.0
    if "self_kerr" in table:
        value = table["self_kerr"]
        if isinstance(value, list):
            items = reader.array(value, "model.self_kerr", "numbers (one per mode)")
            if len(items) != modes:
                reader.fail(
                    "model.self_kerr",
                    f"expected one number or {modes} (one per mode); got {len(items)} numbers",
                )
            self_kerr = [
                reader.number(v, join_key("model.self_kerr", k)) for k, v in enumerate(items)
            ]
        else:
            self_kerr = reader.number(value, "model.self_kerr")
    pairs: dict[str, dict[tuple[int, int], float]] = {}
    for key, what in (("cross_kerr", "chi"), ("couplings", "g")):
        if key in table:
            triples = _triples(reader, table[key], join_key(path, key), modes, what)
            pairs[key] = {(i, j): x for i, j, x in triples}
    cutoff = _cutoff(
        reader,
        reader.required(table, "cutoff", path, "an integer >= 1 or one per mode"),
        "model.cutoff",
        modes,
    )
    return kerr_network(
        frequencies,
        self_kerr=self_kerr,
        cross_kerr=pairs.get("cross_kerr"),
        couplings=pairs.get("couplings"),
        cutoff=cutoff,
        total=_total(reader, table, path),
    )


def _lowest_landau_level(reader: Reader, table: Mapping[str, Any]) -> Model:
    path = "model"
    reader.check_keys(table, path, ["kind", "total", "angular_momentum", "orbitals"])
    total = reader.integer(
        reader.required(table, "total", path, "an integer >= 1 (the number of bosons)"),
        "model.total",
        1,
        MAX_TOTAL,
    )
    momentum = reader.integer(
        reader.required(table, "angular_momentum", path, "an integer >= 0"),
        "model.angular_momentum",
        0,
        MAX_TOTAL,
    )
    orbitals = None
    if "orbitals" in table:
        orbitals = reader.integer(table["orbitals"], "model.orbitals", 1, MAX_MODES)
    elif momentum + 1 > MAX_MODES:
        reader.fail(
            "model.angular_momentum", f"expected at most {MAX_MODES - 1} (one orbital each)"
        )
    return lowest_landau_level(orbitals, total=total, angular_momentum=momentum)


def _modes(reader: Reader, table: Mapping[str, Any], has_terms: bool) -> Model:
    path = "model"
    reader.check_keys(table, path, ["kind", "modes", "cutoff", "total", "weights"])
    if not has_terms:
        reader.fail(
            "model.kind",
            '"modes" has no terms of its own; give the Hamiltonian in [terms.NAME] tables',
        )
    modes = reader.integer(
        reader.required(table, "modes", path, "an integer >= 1"), "model.modes", 1, MAX_MODES
    )
    cutoff = _cutoff(
        reader,
        reader.required(table, "cutoff", path, "an integer >= 1 or one per mode"),
        "model.cutoff",
        modes,
    )
    weights = None
    if "weights" in table:
        items = reader.array(table["weights"], "model.weights", "integers (one per mode)")
        if len(items) != modes:
            reader.fail("model.weights", f"expected {modes} integers (one per mode)")
        weights = [
            reader.integer(v, join_key("model.weights", k), 0, 2**32 - 1)
            for k, v in enumerate(items)
        ]
    space = FockSpace(modes, cutoff, _total(reader, table, path), weights=weights)
    labels = tuple(f"mode {i}" for i in range(modes))
    return Model("modes", space, {}, {}, mode_labels=labels)


def _drive_table(
    reader: Reader, value: object, path: str, modes: int
) -> dict[str, dict[int, float]]:
    table = reader.table(value, path)
    reader.check_keys(table, path, ["coherent", "two_photon"])
    if not table:
        reader.fail(path, "empty; expected coherent = [[mode, amplitude], ...] or two_photon")
    drives: dict[str, dict[int, float]] = {}
    for key, entries in table.items():
        key_path = join_key(path, key)
        rows = reader.array(entries, key_path, "[mode, amplitude] pairs")
        amplitudes: dict[int, float] = {}
        for k, row in enumerate(rows):
            row_path = join_key(key_path, k)
            if not isinstance(row, list) or len(row) != 2:
                reader.wrong(row_path, "[mode, amplitude]", row)
            mode = reader.integer(row[0], join_key(row_path, 0), 0, modes - 1)
            if mode in amplitudes:
                reader.fail(join_key(row_path, 0), f"mode {mode} is driven twice; list it once")
            amplitudes[mode] = reader.number(row[1], join_key(row_path, 1))
        drives[key] = amplitudes
    return drives


def _build_model(reader: Reader, document: Mapping[str, Any]) -> Model:
    table = reader.table(
        reader.required(document, "model", "", "a [model] table with a kind"), "model"
    )
    kind = reader.choice(
        reader.required(table, "kind", "model", "one of " + ", ".join(f'"{k}"' for k in KINDS)),
        "model.kind",
        KINDS,
    )
    try:
        if kind == "bose-hubbard":
            model = _bose_hubbard(reader, table, needs_cutoff="drives" in document)
        elif kind == "jaynes-cummings-hubbard":
            model = _jaynes_cummings_hubbard(reader, table)
        elif kind == "lowest-landau-level":
            model = _lowest_landau_level(reader, table)
        elif kind == "modes":
            model = _modes(reader, table, "terms" in document)
        else:
            model = _kerr_network(reader, table)
        if "drives" in document:
            drives = _drive_table(reader, document["drives"], "drives", model.space.modes)
            model = with_drives(
                model, coherent=drives.get("coherent"), two_photon=drives.get("two_photon")
            )
    except ModelFileError:
        raise
    except (ValueError, TypeError, OverflowError, MemoryError) as error:
        # The builders and the core check what the schema cannot (empty sectors, sizes).
        reader.fail("model", f"cannot build this model: {error}")
    return model


# -- parameters, sweep, record, solver ----------------------------------------------------


def _current_names(
    reader: Reader, table: dict[str, Any], path: str, model: Model
) -> dict[str, Any]:
    """``table`` with deprecated parameter names replaced by the current ones (warning)."""
    out: dict[str, Any] = {}
    for name, entry in table.items():
        current = model.renamed.get(name)
        if current is None or current not in model.parameters:
            out[name] = entry
            continue
        if current in table:
            reader.fail(join_key(path, name), f"given together with its new name {current!r}")
        warnings.warn(
            f"{reader.source}: {join_key(path, name)}: parameter {name!r} of model "
            f"{model.name!r} is now called {current!r}; the old name will be removed in "
            "the next release",
            DeprecationWarning,
            stacklevel=2,
        )
        out[current] = entry
    return out


def _parameters(reader: Reader, value: object, model: Model) -> Model:
    table = _current_names(reader, reader.table(value, "parameters"), "parameters", model)
    known = list(model.parameters)
    hint = f" for model {model.name!r}"
    reader.check_keys(table, "parameters", known, hint=hint)
    defaults = dict(model.parameters)
    for name, raw in table.items():
        defaults[name] = reader.number(raw, join_key("parameters", name))
        if name in model.jumps and defaults[name] < 0:
            reader.fail(
                join_key("parameters", name),
                f"{name} is a rate ([jumps.{name}]): expected a number >= 0; got "
                f"{defaults[name]:g}",
            )
    return dataclasses.replace(model, parameters=defaults)


def _sweep(reader: Reader, value: object, model: Model) -> SweepGrid:
    table = _current_names(reader, reader.table(value, "sweep"), "sweep", model)
    if not table:
        reader.fail("sweep", "empty; expected one [sweep.NAME] table per swept parameter")
    reader.check_keys(table, "sweep", list(model.parameters), hint=f" for model {model.name!r}")
    axes: dict[str, npt.NDArray[np.float64]] = {}
    size = 1
    for name, spec in table.items():
        path = join_key("sweep", name)
        if name not in model.jumps and model.pieces[name].is_zero():
            reader.fail(
                path,
                f"the model has no {name!r} terms, so sweeping this parameter changes "
                "nothing; add those terms to [model] or drop the sweep",
            )
        axes[name] = read_axis(reader, spec, path)
        if name in model.jumps and np.any(axes[name] < 0):
            reader.fail(
                path,
                f"{name} is a rate ([jumps.{name}]): every value must be >= 0; got "
                f"{float(axes[name].min()):g}",
            )
        size *= len(axes[name])
        if size > MAX_POINTS:
            reader.fail("sweep", f"expected at most {MAX_POINTS} grid points; got {size} or more")
    return SweepGrid(axes)


def _record(
    reader: Reader, value: object, model: Model
) -> tuple[tuple[str, ...], int, tuple[int, ...]]:
    table = reader.table(value, "record")
    reader.check_keys(table, "record", ["quantities", "levels", "entropy_modes"])
    if model.is_open:
        return _record_stationary(reader, table), 1, ()
    quantities: tuple[str, ...] = ("energy",)
    if "quantities" in table:
        path = "record.quantities"
        items = reader.array(table["quantities"], path, "quantity names")
        chosen: list[str] = []
        for k, item in enumerate(items):
            if isinstance(item, str) and item in RENAMED_QUANTITIES:
                warnings.warn(
                    f"{join_key(path, k)}: {item!r} is now {RENAMED_QUANTITIES[item]!r} (the "
                    "name of the function that computes it); the old name works for one "
                    "release",
                    DeprecationWarning,
                    stacklevel=2,
                )
                item = RENAMED_QUANTITIES[item]
            name = reader.choice(item, join_key(path, k), RECORDABLE)
            if name in chosen:
                reader.fail(join_key(path, k), f"{name!r} is listed twice")
            chosen.append(name)
        quantities = tuple(chosen)
    dim = model.space.dim
    needed = max((_DEFAULT_LEVELS.get(q, 1) for q in quantities), default=1)
    minimum = 2 if "gap" in quantities else 1
    if dim < minimum:
        reader.fail("record.quantities", "'gap' needs 2 levels but the space has only 1 state")
    if "levels" in table:
        levels = reader.integer(table["levels"], "record.levels", minimum, dim)
    else:
        levels = min(needed, dim)
    entropy_modes: tuple[int, ...] = ()
    modes = model.space.modes
    if "entropy_modes" in table:
        path = "record.entropy_modes"
        if "entanglement_entropy" not in quantities:
            reader.fail(path, "given, but 'entropy' is not in record.quantities")
        items = reader.array(table["entropy_modes"], path, "mode indices")
        picked: list[int] = []
        for k, item in enumerate(items):
            mode = reader.integer(item, join_key(path, k), 0, modes - 1)
            if mode in picked:
                reader.fail(join_key(path, k), f"mode {mode} is listed twice")
            picked.append(mode)
        if len(picked) == modes:
            reader.fail(path, f"expected a proper subset of the {modes} modes; got all of them")
        entropy_modes = tuple(picked)
    elif "entanglement_entropy" in quantities:
        if modes < 2:
            reader.fail("record.quantities", "'entropy' needs a model with at least 2 modes")
        entropy_modes = tuple(range(modes // 2))
    return quantities, levels, entropy_modes


def _record_stationary(reader: Reader, table: Mapping[str, Any]) -> tuple[str, ...]:
    """``[record]`` of an open model: quantities of the stationary state."""
    for key in ("levels", "entropy_modes"):
        if key in table:
            reader.fail(
                join_key("record", key),
                "with [jumps] a sweep records the stationary state, which has no levels "
                "or entanglement cut; drop this key",
            )
    if "quantities" not in table:
        return DEFAULT_STATIONARY_QUANTITIES
    path = "record.quantities"
    chosen: list[str] = []
    for k, item in enumerate(reader.array(table["quantities"], path, "quantity names")):
        where = join_key(path, k)
        if isinstance(item, str) and item in RECORDABLE and item not in STATIONARY_QUANTITIES:
            reader.fail(
                where,
                f"{item!r} describes eigenstates of a closed system; with [jumps] a sweep "
                "records the stationary state: choose from "
                + ", ".join(repr(q) for q in STATIONARY_QUANTITIES),
            )
        name = reader.choice(item, where, STATIONARY_QUANTITIES)
        if name in chosen:
            reader.fail(where, f"{name!r} is listed twice")
        chosen.append(name)
    return tuple(chosen)


def _solver(reader: Reader, value: object, *, open_system: bool = False) -> dict[str, object]:
    """The ``[solver]`` table: read with key paths, checked by :class:`SolverSettings`
    (the same rules as the library's keywords), returned as the solvers' keywords.

    With ``open_system`` (a model with ``[jumps]``) ``method`` names a method of
    :func:`fockmill.stationary_state` (``STATIONARY_METHODS``) instead."""
    table = reader.table(value, "solver")
    keys = ["method", "tol", "seed", "max_iterations", "threads", "cutoff_warning"]
    reader.check_keys(table, "solver", keys)
    if open_system and "method" in table:
        method = table["method"]
        if (
            isinstance(method, str)
            and method in SOLVER_METHODS
            and method not in (STATIONARY_METHODS)
        ):
            reader.fail(
                "solver.method",
                f"{method!r} is a ground-state method; with [jumps] the stationary state is "
                "solved with " + ", ".join(f'"{m}"' for m in STATIONARY_METHODS),
            )
        chosen = reader.choice(method, "solver.method", STATIONARY_METHODS)
        settings = _solver(reader, {k: v for k, v in table.items() if k != "method"})
        settings["method"] = chosen
        return settings
    read: dict[str, Any] = {}
    if "cutoff_warning" in table:
        raw = table["cutoff_warning"]
        # false turns the warning off (TOML has no null); a number is the threshold.
        read["cutoff_warning"] = (
            None if raw is False else reader.number(raw, "solver.cutoff_warning")
        )
    if "tol" in table:
        read["tol"] = reader.number(table["tol"], "solver.tol")
    if "method" in table:
        read["method"] = reader.choice(table["method"], "solver.method", SOLVER_METHODS)
    if "threads" in table:
        read["threads"] = reader.integer(table["threads"], "solver.threads", 0, MAX_THREADS)
    if "seed" in table:
        read["seed"] = reader.integer(table["seed"], "solver.seed", 0, MAX_SEED - 1)
    if "max_iterations" in table:
        read["max_iterations"] = reader.integer(
            table["max_iterations"], "solver.max_iterations", 1, 2**62
        )
    for key, raw in read.items():
        try:
            SolverSettings(**{key: raw})
        except (TypeError, ValueError) as error:
            reader.fail(f"solver.{key}", str(error))
    settings = SolverSettings(**read)
    return {key: getattr(settings, key) for key in keys}


# -- [terms] and [units] ------------------------------------------------------------------

_PARAMETER_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_TERM_KEYS = [
    "value",
    "fixed",
    "description",
    "terms",
    "per_mode",
    "modes",
    "weights",
    "random",
    "quadratic_form",
    "pair_interaction",
    "add_adjoint",
]
_ARRAY_ORDERS = {"quadratic_form": 2, "pair_interaction": 4}
_DISTRIBUTIONS = ("uniform", "normal")
MAX_UNIT_LENGTH = 40


def _mode_weights(
    reader: Reader, table: Mapping[str, Any], path: str, count: int
) -> tuple[float, ...]:
    if "weights" in table and "random" in table:
        reader.fail(join_key(path, "random"), "give either weights = [...] or random = {...}")
    if "weights" in table:
        items = reader.array(table["weights"], join_key(path, "weights"), "numbers (one per mode)")
        if len(items) != count:
            reader.fail(
                join_key(path, "weights"),
                f"expected {count} numbers (one per mode in {path}.modes); got {len(items)}",
            )
        return tuple(
            reader.number(v, join_key(join_key(path, "weights"), k)) for k, v in enumerate(items)
        )
    if "random" not in table:
        return (1.0,) * count
    rpath = join_key(path, "random")
    spec = reader.table(table["random"], rpath)
    kind = reader.choice(
        reader.required(spec, "distribution", rpath, '"uniform" or "normal"'),
        join_key(rpath, "distribution"),
        _DISTRIBUTIONS,
    )
    allowed = ["distribution", "seed"] + (["low", "high"] if kind == "uniform" else ["mean", "std"])
    reader.check_keys(spec, rpath, allowed, hint=f' for distribution = "{kind}"')
    seed = reader.integer(
        reader.required(spec, "seed", rpath, "an integer >= 0 (the same seed, the same draw)"),
        join_key(rpath, "seed"),
        0,
        2**63 - 1,
    )
    generator = np.random.default_rng(seed)
    if kind == "uniform":
        low = reader.number(reader.required(spec, "low", rpath, "a number"), join_key(rpath, "low"))
        high = reader.number(
            reader.required(spec, "high", rpath, "a number"), join_key(rpath, "high")
        )
        if not low < high:
            reader.fail(join_key(rpath, "high"), f"expected high > low; got low={low}, high={high}")
        draws = generator.uniform(low, high, size=count)
    else:
        mean = reader.number(spec.get("mean", 0.0), join_key(rpath, "mean"))
        std = reader.number(
            reader.required(spec, "std", rpath, "a number > 0"), join_key(rpath, "std")
        )
        if not std > 0:
            reader.wrong(join_key(rpath, "std"), "a number > 0", spec["std"])
        draws = generator.normal(mean, std, size=count)
    return tuple(float(v) for v in draws)


def _array_source(reader: Reader, value: object, path: str, base: str | None) -> Any:
    """A coefficient array from a ``.npy`` path (relative to the model file) or inline
    nested lists."""
    if isinstance(value, str):
        if not value.endswith(".npy"):
            reader.fail(path, f"expected a path to a .npy file or nested lists; got {value!r}")
        name = value if os.path.isabs(value) or base is None else os.path.join(base, value)
        try:
            return np.load(name, allow_pickle=False)
        except (OSError, ValueError) as error:
            reader.fail(path, f"cannot read the array {name!r}: {error}")
    if isinstance(value, list):
        try:
            array = np.array(value, dtype=np.float64)
        except (TypeError, ValueError):
            reader.fail(path, "expected nested lists of numbers of one rectangular shape")
        return array
    reader.wrong(path, "a .npy path, nested lists, or {indices = ..., values = ...}", value)


def _array_terms(
    reader: Reader, table: Mapping[str, Any], path: str, model: Model, base: str | None
) -> LadderExpr:
    """The ``quadratic_form`` and ``pair_interaction`` keys of one ``[terms.NAME]``."""
    piece = LadderExpr()
    modes = model.space.modes
    for key, order in _ARRAY_ORDERS.items():
        if key not in table:
            continue
        kpath = join_key(path, key)
        value = table[key]
        coefficients: Any
        if isinstance(value, dict):
            reader.check_keys(value, kpath, ["indices", "values"])
            indices = _array_source(
                reader,
                reader.required(value, "indices", kpath, f"(n, {order}) mode indices"),
                join_key(kpath, "indices"),
                base,
            )
            values = _array_source(
                reader,
                reader.required(value, "values", kpath, "n numbers"),
                join_key(kpath, "values"),
                base,
            )
            if np.issubdtype(indices.dtype, np.floating):
                if not np.all(indices == np.round(indices)):
                    reader.fail(join_key(kpath, "indices"), "expected integer mode indices")
                indices = indices.astype(np.int64)
            coefficients = (indices, values)
        else:
            coefficients = _array_source(reader, value, kpath, base)
            if coefficients.shape != (modes,) * order:
                reader.fail(
                    kpath,
                    f"expected an array of shape {(modes,) * order} (one axis per index over "
                    f"the model's {modes} modes); got shape {coefficients.shape}",
                )
        build = quadratic_form if order == 2 else pair_interaction
        try:
            expr = build(coefficients)
        except (TypeError, ValueError) as error:
            reader.fail(kpath, str(error))
        if expr.max_mode() >= modes:
            reader.fail(
                kpath,
                f"an index reaches mode {expr.max_mode()}, but the model has {modes} modes",
            )
        check_charge(reader, expr, kpath, key, model)
        piece = piece + expr
    return piece


def _terms(
    reader: Reader, value: object, model: Model, base: str | None = None
) -> tuple[Model, dict[str, tuple[float, ...]], dict[str, str]]:
    """``[terms.NAME]`` tables: the user's own terms, each family scaled by parameter NAME."""
    sections = reader.table(value, "terms")
    if not sections:
        reader.fail("terms", "empty; expected one [terms.NAME] table per parameter")
    pieces = dict(model.pieces)
    parameters = dict(model.parameters)
    constant = model.constant
    weights_used: dict[str, tuple[float, ...]] = {}
    descriptions: dict[str, str] = {}
    for name, raw in sections.items():
        path = join_key("terms", name)
        table = reader.table(raw, path)
        reader.check_keys(table, path, _TERM_KEYS)
        if name in model.renamed:
            reader.fail(path, f"{name!r} is an old parameter name; use {model.renamed[name]!r}")
        fixed = reader.boolean(table.get("fixed", False), join_key(path, "fixed"))
        existing = name in model.parameters
        if existing and ("value" in table or fixed):
            reader.fail(
                path,
                f"{name!r} is already a parameter of model {model.name!r}: these terms are "
                "added to its piece; set its value in [parameters], or pick a new name",
            )
        if not existing and not _PARAMETER_NAME.match(name):
            reader.fail(
                path,
                "a new parameter name must start with a letter and hold only letters, digits and _",
            )
        scale = reader.number(table.get("value", 1.0), join_key(path, "value"))
        if "description" in table:
            text = table["description"]
            if not isinstance(text, str) or not text.strip() or len(text) > 80:
                reader.wrong(
                    join_key(path, "description"), "a short text (1 to 80 characters)", text
                )
            if fixed:
                reader.fail(
                    join_key(path, "description"), "fixed terms have no parameter to describe"
                )
            descriptions[name] = text.strip()
        if not any(k in table for k in ("terms", "per_mode", *_ARRAY_ORDERS)):
            reader.fail(
                path,
                'expected terms = ["..."], per_mode = "...", quadratic_form or pair_interaction',
            )
        for key in ("modes", "weights", "random"):
            if key in table and "per_mode" not in table:
                reader.fail(join_key(path, key), 'only meaningful with per_mode = "..."')
        adjoint = reader.boolean(table.get("add_adjoint", False), join_key(path, "add_adjoint"))
        piece = LadderExpr()
        if "terms" in table:
            tpath = join_key(path, "terms")
            for k, text in enumerate(reader.array(table["terms"], tpath, "term strings")):
                term = read_term(reader, text, join_key(tpath, k), model)
                # The term as written: its adjoint changes the charge by the opposite amount.
                check_charge(reader, term, join_key(tpath, k), str(text), model)
                if adjoint:
                    term = term + term.adjoint()
                piece = piece + term
        if "per_mode" in table:
            ppath = join_key(path, "per_mode")
            template = table["per_mode"]
            if not isinstance(template, str) or "@" not in template:
                reader.wrong(
                    ppath, 'a term string using @ for the mode, e.g. "number(@)"', template
                )
            modes = read_modes(reader, table, path, model)
            weights = _mode_weights(reader, table, path, len(modes))
            weights_used[name] = weights
            for mode, weight in zip(modes, weights, strict=True):
                term = read_term(reader, template, ppath, model, here=mode)
                check_charge(reader, term, ppath, template, model)
                if adjoint:
                    term = term + term.adjoint()
                piece = piece + weight * term
        if any(k in table for k in _ARRAY_ORDERS):
            arrays = _array_terms(reader, table, path, model, base)
            piece = piece + (arrays + arrays.adjoint() if adjoint else arrays)
        if not piece.is_hermitian():
            reader.fail(
                path,
                "these terms are not Hermitian, and a Hamiltonian must be; add "
                "add_adjoint = true or list the conjugate of every term",
            )
        if fixed:
            constant = constant + scale * piece
        elif existing:
            pieces[name] = pieces[name] + piece
        else:
            pieces[name] = piece
            parameters[name] = scale
    return (
        dataclasses.replace(model, pieces=pieces, parameters=parameters, constant=constant),
        weights_used,
        descriptions,
    )


def _units(reader: Reader, value: object, model: Model) -> dict[str, str]:
    table = reader.table(value, "units")
    reader.check_keys(table, "units", ["energy", *model.parameters])
    units: dict[str, str] = {}
    for name, unit in table.items():
        path = join_key("units", name)
        if not isinstance(unit, str) or not unit.strip() or len(unit) > MAX_UNIT_LENGTH:
            reader.wrong(
                path, f'a unit such as "MHz" or "J" (1 to {MAX_UNIT_LENGTH} characters)', unit
            )
        units[name] = unit.strip()
    return units


# -- entry points -------------------------------------------------------------------------


def _parse(text: str, source: str, path: str | None) -> ModelFile:
    reader = Reader(source)
    try:
        document = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        reader.fail(None, f"not valid TOML: {error}")
    except RecursionError:
        reader.fail(None, "not valid TOML: arrays or tables nested too deeply")
    allowed = [
        "schema",
        "model",
        "terms",
        "parameters",
        "units",
        "drives",
        "sweep",
        "record",
        "solver",
        "quench",
        "spectrum",
        "thermal",
        "temperature",
        "symmetry",
        "jumps",
    ]
    reader.check_keys(document, "", allowed)
    if "temperature" in document:
        if "thermal" in document:
            reader.fail("temperature", "give [thermal] only ([temperature] is its older name)")
        warnings.warn(
            f"{reader.source}: the section ["
            "temperature] is now [thermal], the name of the "
            "command and of fm.thermal; the old name works for one release",
            DeprecationWarning,
            stacklevel=3,
        )
        document = {**document, "thermal": document["temperature"]}
        del document["temperature"]
    if "schema" in document:
        version = document["schema"]
        if isinstance(version, bool) or version != SCHEMA_VERSION:
            reader.wrong("schema", f"{SCHEMA_VERSION} (the only layout so far)", version)
    model = _build_model(reader, document)
    mode_weights: dict[str, tuple[float, ...]] = {}
    descriptions: dict[str, str] = {}
    if "terms" in document:
        base = None if path is None else os.path.dirname(os.path.abspath(path))
        model, mode_weights, descriptions = _terms(reader, document["terms"], model, base)
    jump_texts: dict[str, tuple[str, ...]] = {}
    if "jumps" in document:
        from fockmill.files.jumps import parse_jumps

        model, rate_descriptions, jump_texts = parse_jumps(reader, document["jumps"], model)
        descriptions.update(rate_descriptions)
        if "symmetry" in document:
            reader.fail(
                "symmetry",
                "[symmetry] sectors are not supported with [jumps] yet: open systems are "
                "solved on the whole space (the number sectors are used by themselves); "
                "drop [symmetry]",
            )
    if "parameters" in document:
        model = _parameters(reader, document["parameters"], model)
    units = _units(reader, document["units"], model) if "units" in document else {}
    sweep = _sweep(reader, document["sweep"], model) if "sweep" in document else None
    quantities, levels, entropy_modes = _record(reader, document.get("record", {}), model)
    solver = _solver(reader, document.get("solver", {}), open_system=model.is_open)
    dynamics = parse_dynamics_sections(reader, document, model)
    symmetry = None
    if "symmetry" in document:
        from fockmill.files.symmetry import parse_symmetry

        symmetry = parse_symmetry(reader, document["symmetry"], document["model"], model)
    from fockmill.files.dynamics import check_momentum_map

    check_momentum_map(reader, dynamics["spectrum"], symmetry)
    return ModelFile(
        path=path,
        model=model,
        sweep=sweep,
        quantities=quantities,
        levels=levels,
        solver=solver,
        entropy_modes=entropy_modes,
        text_hash=hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest(),
        units=units,
        mode_weights=mode_weights,
        descriptions=descriptions,
        **dynamics,
        symmetry=symmetry,
        jump_texts=jump_texts,
    )


def parse_model_text(text: str, source: str = "<string>") -> ModelFile:
    """Read a model description from TOML text.

    Parameters
    ----------
    text : str
        The TOML document (see the module docstring for the schema).
    source : str, default "<string>"
        Name used in error messages.

    Returns
    -------
    ModelFile
        With ``path=None``.

    Raises
    ------
    ModelFileError
        For invalid TOML (with line and column) and every schema violation (with the
        key path, e.g. ``sweep.U.num``, and what was expected).

    Examples
    --------
    >>> spec = parse_model_text('''
    ... [model]
    ... kind = "bose-hubbard"
    ... lattice = "chain"
    ... sites = 2
    ... total = 2
    ... [sweep.U]
    ... values = [0.0, 4.0]
    ... ''')
    >>> spec.model.space.dim, spec.sweep.points()
    (3, [{'U': 0.0}, {'U': 4.0}])
    """
    if not isinstance(text, str):
        raise TypeError(f"text must be a str; got {type(text).__name__}")
    return _parse(text, source, None)


def load_model_file(path: str | os.PathLike[str]) -> ModelFile:
    """Read and check a TOML model file.

    Parameters
    ----------
    path : str or path-like
        The file (UTF-8 TOML; see the module docstring for the schema).

    Returns
    -------
    ModelFile
        The built model, sweep grid, record list and solver settings.

    Raises
    ------
    ModelFileError
        For text that is not UTF-8, invalid TOML (with line and column) and every
        schema violation (naming the file, the key path and what was expected).
    OSError
        When the file cannot be read (e.g. ``FileNotFoundError``).
    """
    name = os.fspath(path)
    with open(name, "rb") as handle:
        raw = handle.read()
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as error:
        raise ModelFileError(name, None, f"not UTF-8 text: {error}") from None
    return _parse(text, name, name)
