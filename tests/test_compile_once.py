"""Every public path compiles each expression once per call.

A prepared problem (``fm.prepare``) carries the compiled operator; a function given one
must not compile its Hamiltonian again, and every other expression of the call (an
observable, the operator ``A`` of a spectrum) is compiled once. Counted at the one place
where an expression meets a space, ``Problem.__init__`` -> ``compile_operator``.
Common practice, no source.
"""

from __future__ import annotations

import collections
from collections.abc import Iterator
from pathlib import Path

import fockmill as fm
import fockmill.problem.problem as problem_module
import numpy as np
import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "examples" / "models"

L = 4
SPACE = fm.FockSpace(modes=L, cutoff=2, total=2)
HOP = sum(fm.raising(i) * fm.lowering((i + 1) % L) for i in range(L))
H = -(HOP + HOP.adjoint()) + 0.5 * sum(fm.number(i) * (fm.number(i) - 1) for i in range(L))
OBS = {"n0": fm.number(0), "n1": fm.number(1)}


@pytest.fixture
def compiled(monkeypatch: pytest.MonkeyPatch) -> Iterator[collections.Counter[str]]:
    counts: collections.Counter[str] = collections.Counter()
    original = problem_module.compile_operator

    def counting(expr: object, space: object, target: object = None) -> object:
        counts[f"{expr!s} @ {getattr(space, 'dim', '?')}->{getattr(target, 'dim', '')}"] += 1
        return original(expr, space, target)

    monkeypatch.setattr(problem_module, "compile_operator", counting)
    yield counts


def _ground() -> np.ndarray:
    return fm.ground_state(H, SPACE).vector


def test_counting_sees_a_compilation(compiled: collections.Counter[str]) -> None:
    fm.prepare(H, SPACE)
    assert sum(compiled.values()) == 1


@pytest.mark.parametrize(
    "call",
    [
        lambda p, psi: p.matrix(),
        lambda p, psi: fm.build_matrix(p),
        lambda p, psi: fm.build_operator(p) @ np.ones(SPACE.dim),
        lambda p, psi: fm.estimate_memory(p),
        lambda p, psi: fm.ground_state(p),
        lambda p, psi: fm.lowest_levels(p, 3),
        lambda p, psi: fm.expectation(p, np.ones(SPACE.dim)),
        lambda p, psi: fm.evolve(p, psi0=psi, times=[0.0, 0.5]),
        lambda p, psi: fm.thermal(p, temperatures=[0.5, 1.0], method="exact"),
        lambda p, psi: fm.thermal(p, temperatures=[0.5, 1.0], method="ftlm", samples=2, steps=5),
        lambda p, psi: fm.spectral_poles(p, psi=psi, A=fm.number(0)),
        lambda p, psi: fm.spectral_function(p, psi=psi, A=fm.number(0), omegas=[0.0, 1.0]),
        lambda p, psi: fm.converge_cutoffs(p, max_cutoff=2),
    ],
)
def test_a_prepared_hamiltonian_is_not_compiled_again(
    call: object, compiled: collections.Counter[str]
) -> None:
    problem = fm.prepare(H, SPACE)
    psi = _ground()  # the reference state's own compilation happens before counting
    compiled.clear()
    call(problem, psi)  # type: ignore[operator]
    assert compiled[f"{H!s} @ {SPACE.dim}->"] == 0, compiled


@pytest.mark.parametrize("with_problem", [False, True])
def test_observables_and_probes_compile_once_each(
    with_problem: bool, compiled: collections.Counter[str]
) -> None:
    psi = _ground()
    first = fm.prepare(H, SPACE) if with_problem else H
    rest = () if with_problem else (SPACE,)
    compiled.clear()
    fm.evolve(first, *rest, psi0=psi, times=[0.0, 0.3, 0.6], observables=OBS)
    fm.thermal(first, *rest, temperatures=[1.0], observables=OBS, method="exact")
    fm.thermal(first, *rest, temperatures=[1.0], observables=OBS, method="ftlm", samples=2)
    down = fm.FockSpace(modes=L, cutoff=2, total=1)
    fm.spectral_function(first, *rest, psi=psi, A=fm.lowering(0), omegas=[0.0], target=down)
    fm.spectral_poles(first, *rest, psi=psi, A=fm.lowering(0), target=down)
    # Five calls: H five times when not prepared (never when prepared); each observable
    # once per call that records it; A once per spectrum; H on the target once per spectrum.
    assert compiled[f"{H!s} @ {SPACE.dim}->"] == (0 if with_problem else 5), compiled
    for o in OBS.values():
        assert compiled[f"{o!s} @ {SPACE.dim}->"] == 3, compiled
    assert compiled[f"{fm.lowering(0)!s} @ {SPACE.dim}->{down.dim}"] == 2, compiled
    assert compiled[f"{H!s} @ {down.dim}->"] == 2, compiled
    assert max(compiled.values()) <= 5


@pytest.mark.parametrize(
    ("runner", "example"),
    [
        (fm.run_quench, "dimer_interaction_quench.toml"),
        (fm.run_quench, "ring_interaction_ramp.toml"),
        (fm.run_spectrum, "ring_photon_removal.toml"),
        (fm.run_thermal, "kerr_trimer_thermal.toml"),
        (fm.run_quench, "kerr_pair_blockade.toml"),  # with [jumps]: the density matrix
    ],
)
def test_workflow_runners_compile_each_expression_once(
    runner: object, example: str, compiled: collections.Counter[str]
) -> None:
    runner(EXAMPLES / example)  # type: ignore[operator]
    repeated = {key: n for key, n in compiled.items() if n > 1}
    assert repeated == {}, repeated


def test_a_sweep_point_compiles_its_hamiltonian_once(
    compiled: collections.Counter[str],
) -> None:
    model = fm.models.bose_hubbard(fm.models.ring_edges(L), cutoff=2, total=2)
    fm.run_sweep(model, [{"U": 1.0}, {"U": 2.0}])
    repeated = {key: n for key, n in compiled.items() if n > 1}
    assert repeated == {}, repeated


def test_a_stationary_sweep_compiles_its_jumps_once(
    compiled: collections.Counter[str],
) -> None:
    # The rates change from point to point, the jump operators do not.
    spec = fm.load_model_file(EXAMPLES / "kerr_pair_blockade.toml")
    fm.run_sweep(spec.model, [{"Delta": 0.0}, {"Delta": 1.0, "kappa": 0.5}], workers=1)
    repeated = {key: n for key, n in compiled.items() if n > 1}
    assert repeated == {}, repeated


KERR = 0.5 * sum(fm.raising(i) ** 2 * fm.lowering(i) ** 2 for i in range(L))
KINETIC = -(HOP + HOP.adjoint())


@pytest.mark.parametrize("prepared", [False, True])
def test_time_dependent_parts_compile_once_each(
    prepared: bool, compiled: collections.Counter[str]
) -> None:
    # H(t) = H0 + U(t) Kerr + sin(t) n0: each part once per call (none when prepared),
    # however many steps and exponentials the integrator takes.
    psi = _ground()
    parts = [KINETIC, KERR, fm.number(0)]
    given = [fm.prepare(p, SPACE) for p in parts] if prepared else parts
    H = fm.TimeDependent(
        given[0], [(given[1], fm.piecewise_linear([0, 1], [1, 3])), (given[2], np.sin)]
    )
    compiled.clear()
    ev = fm.evolve(H, SPACE, psi0=psi, times=[0.0, 0.5, 1.5], observables={"n1": fm.number(1)})
    assert ev.steps > 2
    for p in parts:
        assert compiled[f"{p!s} @ {SPACE.dim}->"] == (0 if prepared else 1), compiled
    assert compiled[f"{fm.number(1)!s} @ {SPACE.dim}->"] == 1, compiled
    assert sum(compiled.values()) == (1 if prepared else 4), compiled
