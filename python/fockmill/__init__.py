"""fockmill: many coupled bosonic modes in truncated, number-conserving Fock bases.

Build ladder-operator expressions symbolically (normal ordered), choose a Fock space
(per-mode cutoffs, optionally a conserved weighted total or its parity), and get sparse
matrices, matrix-free operators, ground states and observables computed in Rust.

Public names
------------
FockSpace, Charge
    Truncated multi-mode Fock space or conserved-charge sector (several charges at
    once with ``charges=[Charge(...), ...]``).
prepare, Problem
    An expression compiled on a space once (validation, compiled terms, product
    kernel, thread pool, memory estimate), reused by every build, product and solve.
lowering, raising, number, identity, LadderExpr, parse_terms
    Ladder-operator expressions, and the same expressions read from text (the term
    strings of model files, or an expression's printed form).
build_matrix, build_operator, LadderOperator
    ``scipy.sparse.csr_array`` and matrix-free ``LinearOperator``.
estimate_memory, available_memory, MemoryEstimate
    Size planning before a build.
ground_state, lowest_levels, GroundState, Levels, choose_method
    Eigensolvers (dense, scipy eigsh on CSR or matrix-free, low-memory Lanczos).
ProgressRecord, CheckpointError
    Long runs: ``progress=`` (a bar, or a callable receiving records) and
    ``checkpoint=`` (restartable ground states, levels and evolutions).
expectation, populations, number_variances, one_body_matrix, occupation_distribution,
entanglement_entropy, top_level_weights
    Observables of a state, computed without building matrices.
converge_cutoffs, CutoffScan, CutoffWarning
    Truncation diagnostics.
evolve, Evolution, spectral_function, spectral_poles, SpectralPoles, thermal, Thermal
    Time evolution (also under ``TimeDependent`` Hamiltonians, with coefficients such
    as ``piecewise_linear`` ramps), spectral functions and thermal averages (``build_matrix``,
    ``build_operator`` and ``prepare`` take ``target=`` for operators between sectors,
    symmetry sectors included).
momentum_spectrum, MomentumSpectrum, plot_momentum_spectrum
    Momentum-resolved spectra S(q, ω): one symmetry sector per momentum, and their figure.
density_correlations
    ``⟨n_i n_j⟩`` for every pair of modes in one pass.
save_state, load_state, SavedState, StateFileError
    A state saved with its basis (``.npz``), refused on load when the basis differs.
SymmetricSpace, ModePermutation, ring_translation, ring_reflection, torus_translations,
momentum_levels, Dispersion
    Symmetry sectors of mode-permutation groups (momentum, reflection) and E(k) tables.
Model, models
    A Hamiltonian linear in named parameters on a fixed space; ready-made builders
    (Bose–Hubbard on any graph, Jaynes–Cummings–Hubbard arrays, Kerr networks, drives).
load_model_file, parse_model_text, ModelFile, SweepGrid, ModelFileError
    Model files in TOML.
run_sweep, SweepTable, PointResult, ResultsStore, StoreError, plot_sweep, plot_dispersion
    Parameter sweeps (process pool, any Executor, Dask), resumable SQLite results, plots.
jump, loss, pump, dephasing, Jump, stationary_state, StationaryState, evolve_density,
DensityEvolution, sample_trajectories, Trajectories
    Open systems (Lindblad master equation): jumps with explicit rates, stationary
    states, density-matrix evolution and quantum-jump trajectories.
run_quench, run_spectrum, run_thermal, WorkflowResult, read_workflow_results,
write_workflow_results, plot_workflow
    The ``[quench]``, ``[spectrum]`` and ``[thermal]`` sections of a model file:
    run them, store and read their results files, draw them.
"""

from fockmill import exceptions, models
from fockmill._native import __version__
from fockmill.algebra import (
    LadderExpr,
    format_monomial,
    identity,
    lowering,
    number,
    pair_interaction,
    parse_terms,
    quadratic_form,
    raising,
)
from fockmill.dynamics import (
    Evolution,
    MomentumSpectrum,
    PiecewiseLinear,
    SpectralPoles,
    Thermal,
    TimeDependent,
    evolve,
    momentum_spectrum,
    piecewise_linear,
    spectral_function,
    spectral_poles,
    thermal,
)
from fockmill.exceptions import AccuracyWarning, CheckpointError, CutoffWarning, StateFileError
from fockmill.files import ModelFile, ModelFileError, load_model_file, parse_model_text
from fockmill.lindblad import (
    DensityEvolution,
    Jump,
    StationaryState,
    Trajectories,
    dephasing,
    evolve_density,
    jump,
    loss,
    pump,
    sample_trajectories,
    stationary_state,
)
from fockmill.models import Model
from fockmill.observables import (
    SavedState,
    density_correlations,
    entanglement_entropy,
    expectation,
    load_state,
    number_variances,
    occupation_distribution,
    one_body_matrix,
    populations,
    save_state,
    top_level_weights,
)
from fockmill.plots import plot_dispersion, plot_momentum_spectrum, plot_sweep, plot_workflow
from fockmill.problem import (
    GroundState,
    LadderOperator,
    Levels,
    MemoryEstimate,
    Problem,
    available_memory,
    build_matrix,
    build_operator,
    choose_method,
    estimate_memory,
    prepare,
)
from fockmill.settings.progress import ProgressRecord
from fockmill.solvers import (
    CutoffScan,
    Dispersion,
    converge_cutoffs,
    ground_state,
    lowest_levels,
    momentum_levels,
)
from fockmill.spaces import (
    Charge,
    FockSpace,
    ModePermutation,
    SymmetricSpace,
    ring_reflection,
    ring_translation,
    torus_translations,
)
from fockmill.store import (
    PointResult,
    ResultsStore,
    StoreError,
    SweepTable,
    WorkflowResult,
    read_workflow_results,
    write_workflow_results,
)
from fockmill.sweeps import SweepGrid, run_sweep
from fockmill.workflows import run_quench, run_spectrum, run_thermal

__all__ = [
    "AccuracyWarning",
    "Charge",
    "CheckpointError",
    "CutoffScan",
    "CutoffWarning",
    "DensityEvolution",
    "Dispersion",
    "Evolution",
    "FockSpace",
    "GroundState",
    "Jump",
    "LadderExpr",
    "LadderOperator",
    "Levels",
    "MemoryEstimate",
    "ModePermutation",
    "Model",
    "ModelFile",
    "ModelFileError",
    "MomentumSpectrum",
    "PiecewiseLinear",
    "PointResult",
    "Problem",
    "ProgressRecord",
    "ResultsStore",
    "SavedState",
    "SpectralPoles",
    "StateFileError",
    "StationaryState",
    "StoreError",
    "SweepGrid",
    "SweepTable",
    "SymmetricSpace",
    "Thermal",
    "TimeDependent",
    "Trajectories",
    "WorkflowResult",
    "__version__",
    "available_memory",
    "build_matrix",
    "build_operator",
    "choose_method",
    "converge_cutoffs",
    "density_correlations",
    "dephasing",
    "entanglement_entropy",
    "estimate_memory",
    "evolve",
    "evolve_density",
    "exceptions",
    "expectation",
    "format_monomial",
    "ground_state",
    "identity",
    "jump",
    "load_model_file",
    "load_state",
    "loss",
    "lowering",
    "lowest_levels",
    "models",
    "momentum_levels",
    "momentum_spectrum",
    "number",
    "number_variances",
    "occupation_distribution",
    "one_body_matrix",
    "pair_interaction",
    "parse_model_text",
    "parse_terms",
    "piecewise_linear",
    "plot_dispersion",
    "plot_momentum_spectrum",
    "plot_sweep",
    "plot_workflow",
    "populations",
    "prepare",
    "pump",
    "quadratic_form",
    "raising",
    "read_workflow_results",
    "ring_reflection",
    "ring_translation",
    "run_quench",
    "run_spectrum",
    "run_sweep",
    "run_thermal",
    "sample_trajectories",
    "save_state",
    "spectral_function",
    "spectral_poles",
    "stationary_state",
    "thermal",
    "top_level_weights",
    "torus_translations",
    "write_workflow_results",
]
