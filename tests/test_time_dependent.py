"""Time-dependent Hamiltonians ``H(t) = H0 + Σ_k f_k(t) H_k`` in ``fm.evolve``.

References: scipy's ``solve_ivp`` (DOP853, an explicit Runge-Kutta method of order 8,
Hairer, Nørsett & Wanner 1993) on dense matrices from ``tests/reference.py`` (built
independently of the Rust code), ``scipy.linalg.expm`` on segments where H is constant,
and the Landau-Zener formula (Zener 1932, Proc. R. Soc. A 137, 696).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import fockmill as fm
import numpy as np
import pytest
import scipy.linalg as sla
from fockmill.algebra.expressions import LadderExpr
from fockmill.exceptions import ChargeError, NotHermitianError, SymmetryError
from reference import sector_matrix
from scipy.integrate import solve_ivp

SPACE = fm.FockSpace(modes=3, cutoff=2, total=3)
# The small spaces truncate on purpose: they are the matrices the references use too.
pytestmark = pytest.mark.filterwarnings("ignore::fockmill.exceptions.CutoffWarning")


def _dense(expr: LadderExpr, space: fm.FockSpace) -> np.ndarray:
    return sector_matrix(expr, list(space.cutoffs), space.total)


def _random_hermitian(rng: np.random.Generator, modes: int) -> LadderExpr:
    """Hopping with complex amplitudes, on-site energies and Kerr terms (all conserve N)."""
    h = LadderExpr()
    for i in range(modes):
        for j in range(i + 1, modes):
            c = complex(rng.normal(), rng.normal())
            h = h + c * fm.raising(i) * fm.lowering(j)
        h = h + 0.5 * float(rng.normal()) * fm.number(i)
        h = h + 0.25 * float(rng.normal()) * fm.raising(i) ** 2 * fm.lowering(i) ** 2
    return h + h.adjoint()


def _reference(
    h0: np.ndarray,
    parts: Sequence[tuple[np.ndarray, Callable[[float], float]]],
    psi0: np.ndarray,
    times: Sequence[float],
    rtol: float = 1e-10,
    atol: float = 1e-12,
) -> np.ndarray:
    """``i dψ/dt = H(t) ψ`` by DOP853; states as columns at ``times``."""

    def rhs(t: float, y: np.ndarray) -> np.ndarray:
        h = h0.copy()
        for m, f in parts:
            h = h + f(t) * m
        return -1j * (h @ y)

    sol = solve_ivp(
        rhs,
        (0.0, float(times[-1])),
        psi0.astype(np.complex128),
        method="DOP853",
        t_eval=times,
        rtol=rtol,
        atol=atol,
    )
    assert sol.success
    return sol.y


def _start(space: fm.FockSpace, rng: np.random.Generator) -> np.ndarray:
    psi = rng.normal(size=space.dim) + 1j * rng.normal(size=space.dim)
    return psi / np.linalg.norm(psi)


def test_random_parts_match_solve_ivp() -> None:
    # Reference: solve_ivp DOP853 (rtol 1e-10) on dense matrices (tests/reference.py).
    rng = np.random.default_rng(7)
    exprs = [_random_hermitian(rng, 3) for _ in range(3)]
    fs = [lambda t: math.cos(1.3 * t), lambda t: 0.25 * t * t - 0.5 * t]
    H = fm.TimeDependent(exprs[0], list(zip(exprs[1:], fs, strict=True)))
    psi0 = _start(SPACE, rng)
    times = np.linspace(0.0, 3.0, 7)
    ev = fm.evolve(
        H, SPACE, psi0, times, keep_states=True, tol=1e-9, observables={"n0": fm.number(0)}
    )
    dense = [_dense(e, SPACE) for e in exprs]
    ref = _reference(dense[0], list(zip(dense[1:], fs, strict=True)), psi0, times)
    assert ev.states is not None
    assert np.max(np.linalg.norm(ev.states - ref, axis=0)) < 2e-8
    n0 = _dense(fm.number(0), SPACE)
    expected = np.einsum("it,ij,jt->t", ref.conj(), n0, ref).real
    np.testing.assert_allclose(ev.values["n0"], expected, atol=2e-8)
    assert 0 < ev.error_estimate <= 1e-9
    assert ev.steps > 0 and ev.products > ev.steps


def test_symmetric_sector_matches_the_base_space() -> None:
    # Reference: solve_ivp DOP853 on the base space's dense matrices
    # (tests/reference.py), compared through SymmetricSpace.expand.
    L = 4
    base = fm.FockSpace(modes=L, cutoff=2, total=L)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(L), 0)])
    hop = sum(fm.raising(i) * fm.lowering((i + 1) % L) for i in range(L))
    kinetic = -(hop + hop.adjoint())
    kerr = 0.5 * sum(fm.raising(i) ** 2 * fm.lowering(i) ** 2 for i in range(L))
    ramp = fm.piecewise_linear([0.0, 1.0, 2.0], [1.0, 4.0, 2.5])
    H = fm.TimeDependent(kinetic, [(kerr, ramp)])
    psi0 = fm.ground_state(kinetic + kerr, sector).vector
    times = [0.0, 0.5, 1.5, 2.5]
    ev = fm.evolve(H, sector, psi0, times, keep_states=True, tol=1e-10)
    start = sector.expand(psi0)
    ref = _reference(_dense(kinetic, base), [(_dense(kerr, base), ramp)], start, times)
    assert ev.states is not None
    got = np.column_stack([sector.expand(ev.states[:, k]) for k in range(len(times))])
    # DOP853 crosses the ramp's kinks with its own step control: 1e-8 leaves room.
    assert np.max(np.linalg.norm(got - ref, axis=0)) < 1e-7


@pytest.mark.parametrize(("v", "delta", "t0"), [(1.0, 0.3, 20.0), (2.0, 0.5, 10.0)])
def test_landau_zener_transition_probability(v: float, delta: float, t0: float) -> None:
    # Zener 1932 (Proc. R. Soc. A 137, 696): for H = (v t / 2) σz + δ σx swept from
    # t = −∞ to +∞, the probability of a transition between the adiabatic levels
    # (= of staying in the initial diabatic state) is P = exp(−2π δ² / (ħ |v|)): the
    # convention whose diabatic energies are ±v t / 2 (their difference changes at
    # rate v) and whose coupling is δ (half the smallest gap); ħ = 1. Two levels: one
    # quantum in two modes, σz = n0 − n1, σx = a0†a1 + a1†a0 (dense matrices from
    # tests/reference.py). The sweep runs over the finite window t − t0 in [−t0, t0],
    # from the lower adiabatic state of H(0) to the upper one of H(2 t0): measured in
    # the adiabatic basis the finite-window error falls fast with v t0 / δ (2e-5 at
    # v t0 / δ = 67, measured here, not from a source), so 5e-4 is the bound checked.
    space = fm.FockSpace(modes=2, cutoff=1, total=1)
    sz = fm.number(0) - fm.number(1)
    sx = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    H = fm.TimeDependent(delta * sx, [(sz, lambda t: 0.5 * v * (t - t0))])
    dz, dx = _dense(sz, space), _dense(sx, space)
    psi0 = np.linalg.eigh(-0.5 * v * t0 * dz + delta * dx)[1][:, 0]
    ev = fm.evolve(H, space, psi0, [0.0, 2 * t0], tol=1e-7)
    upper = np.linalg.eigh(0.5 * v * t0 * dz + delta * dx)[1][:, 1]
    p = abs(np.vdot(upper, ev.final)) ** 2
    expected = math.exp(-2 * math.pi * delta**2 / abs(v))
    assert abs(p - expected) < 5e-4, (p, expected)


def test_measured_order_is_four() -> None:
    # Blanes & Moan 2006 / Alvermann & Fehske 2011: the two-exponential scheme has
    # order 4, so with fixed steps the error at a fixed time falls like h^4.
    # Reference: solve_ivp DOP853 at rtol 1e-13.
    rng = np.random.default_rng(3)
    space = fm.FockSpace(modes=3, cutoff=2, total=2)
    exprs = [_random_hermitian(rng, 3) for _ in range(3)]
    fs = [lambda t: math.sin(2.0 * t), lambda t: math.cos(1.5 * t) * t]
    H = fm.TimeDependent(exprs[0], list(zip(exprs[1:], fs, strict=True)))
    psi0 = _start(space, rng)
    t_end = 2.0
    dense = [_dense(e, space) for e in exprs]
    ref = _reference(
        dense[0], list(zip(dense[1:], fs, strict=True)), psi0, [0.0, t_end], 1e-13, 1e-15
    )[:, -1]
    steps = np.array([t_end / n for n in (16, 32, 64, 128)])
    errors = []
    for h in steps:
        ev = fm.evolve(H, space, psi0, [0.0, t_end], tol=1e-12, _fixed_step=float(h))
        assert ev.steps == round(t_end / h)
        errors.append(float(np.linalg.norm(ev.final - ref)))
    local = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    slope = np.polyfit(np.log(steps), np.log(errors), 1)[0]
    assert 3.8 < slope < 4.3 and np.all(np.abs(local[1:] - 4.0) < 0.2), (local, errors)
    assert errors[-1] > 1e-11  # far above the reference's own error: the slope is real


def test_constant_segment_of_a_ramp_is_a_constant_evolution() -> None:
    # On [1, 3] the ramp is constant, so ψ(3) = exp(−2i (H0 + 2 H1)) ψ(1)
    # (scipy.linalg.expm on dense matrices); the linear stretches against solve_ivp
    # run segment by segment (DOP853 never steps across a kink there).
    rng = np.random.default_rng(11)
    h0, h1 = _random_hermitian(rng, 3), _random_hermitian(rng, 3)
    ramp = fm.piecewise_linear([0.0, 1.0, 3.0, 4.0], [0.0, 2.0, 2.0, 1.0])
    assert list(ramp.breakpoints) == [0.0, 1.0, 3.0, 4.0]
    H = fm.TimeDependent(h0, [(h1, ramp)])
    psi0 = _start(SPACE, rng)
    ev = fm.evolve(H, SPACE, psi0, [0.0, 1.0, 3.0, 4.0], keep_states=True, tol=1e-10)
    assert ev.states is not None
    d0, d1 = _dense(h0, SPACE), _dense(h1, SPACE)
    expected = sla.expm(-2j * (d0 + 2.0 * d1)) @ ev.states[:, 1]
    assert np.linalg.norm(ev.states[:, 2] - expected) < 1e-9
    first = _reference(d0, [(d1, lambda t: 2.0 * t)], psi0, [0.0, 1.0], 1e-12, 1e-14)[:, -1]
    assert np.linalg.norm(ev.states[:, 1] - first) < 1e-9
    # Only the end requested: the integrator still stops on both kinks.
    end = fm.evolve(H, SPACE, psi0, [0.0, 4.0], tol=1e-10).final
    middle = sla.expm(-2j * (d0 + 2.0 * d1)) @ first

    def last(t: float) -> float:
        return 2.0 - (t - 3.0)

    def shifted(t: float) -> float:
        return last(t + 3.0)

    third = _reference(d0, [(d1, shifted)], middle, [0.0, 1.0], 1e-12, 1e-14)[:, -1]
    assert np.linalg.norm(end - third) < 1e-8


def test_no_time_dependent_part_agrees_with_time_independent_evolve() -> None:
    # Two integrators of the same constant H: agreement to the tolerances
    # (common practice, no source).
    rng = np.random.default_rng(5)
    h0 = _random_hermitian(rng, 3)
    psi0 = _start(SPACE, rng)
    times = [0.0, 0.7, 2.0]
    a = fm.evolve(fm.TimeDependent(h0, []), SPACE, psi0, times, keep_states=True, tol=1e-10)
    b = fm.evolve(h0, SPACE, psi0, times, keep_states=True, tol=1e-10)
    assert a.states is not None and b.states is not None
    assert np.max(np.linalg.norm(a.states - b.states, axis=0)) < 1e-9


def test_prepared_parts_and_max_step() -> None:
    # Prepared parts are reused; max_step bounds the step (common practice, no source).
    rng = np.random.default_rng(2)
    h0, h1 = _random_hermitian(rng, 3), _random_hermitian(rng, 3)
    p0, p1 = fm.prepare(h0, SPACE), fm.prepare(h1, SPACE)
    psi0 = _start(SPACE, rng)
    a = fm.evolve(fm.TimeDependent(p0, [(p1, math.sin)]), psi0=psi0, times=[0, 1.0], tol=1e-9)
    b = fm.evolve(fm.TimeDependent(h0, [(h1, math.sin)]), SPACE, psi0, [0, 1.0], tol=1e-9)
    assert np.linalg.norm(a.final - b.final) < 1e-8
    c = fm.evolve(
        fm.TimeDependent(h0, [(h1, math.sin)]), SPACE, psi0, [0, 1.0], tol=1e-9, max_step=0.01
    )
    assert c.steps >= 100
    assert np.linalg.norm(c.final - b.final) < 1e-8


def test_matrix_free_products_give_the_same_evolution() -> None:
    # Stored CSR and matrix-free products of the same parts (common practice, no source).
    rng = np.random.default_rng(9)
    h0, h1 = _random_hermitian(rng, 3), _random_hermitian(rng, 3)
    H = fm.TimeDependent(h0, [(h1, lambda t: math.exp(-t))])
    psi0 = _start(SPACE, rng)
    a = fm.evolve(H, SPACE, psi0, [0.0, 1.5], tol=1e-10, method="csr")
    b = fm.evolve(H, SPACE, psi0, [0.0, 1.5], tol=1e-10, method="operator")
    assert (a.method, b.method) == ("csr", "operator")
    assert np.linalg.norm(a.final - b.final) < 1e-12


def test_automatic_products_follow_the_time_independent_rule() -> None:
    # A ring large enough for the parallel bipartite kernel (24,310 states): automatic
    # products are matrix-free, as for a time-independent H, and agree with stored ones
    # (common practice, no source).
    sites = 9
    space = fm.FockSpace(modes=sites, cutoff=sites, total=sites)
    kinetic, interaction = fm.LadderExpr(), fm.LadderExpr()
    for i in range(sites):
        hop = fm.raising(i) * fm.lowering((i + 1) % sites)
        kinetic = kinetic - (hop + hop.adjoint())
        interaction = interaction + 0.5 * fm.number(i) * (fm.number(i) - 1)
    H = fm.TimeDependent(kinetic, [(interaction, lambda t: 2.0 + t)])
    psi0 = np.zeros(space.dim, dtype=complex)
    psi0[space.index([1] * sites)] = 1.0
    auto = fm.evolve(H, space, psi0, [0.0, 0.05], tol=1e-10)
    stored = fm.evolve(H, space, psi0, [0.0, 0.05], tol=1e-10, method="csr")
    assert (auto.method, stored.method) == ("operator", "csr")
    assert np.linalg.norm(auto.final - stored.final) < 1e-12


# -- refused input (common practice, no source) --------------------------------------------


def test_bad_coefficients_are_refused() -> None:
    h = fm.number(0)
    with pytest.raises(TypeError, match="coefficient f_1 of part 1 must be a function"):
        fm.TimeDependent(h, [(h, 2.0)])
    with pytest.raises(TypeError, match="part 2 must be a pair"):
        fm.TimeDependent(h, [(h, math.sin), h])
    with pytest.raises(TypeError, match="parts must be a list"):
        fm.TimeDependent(h, h)  # type: ignore[arg-type]
    psi0 = np.zeros(SPACE.dim)
    psi0[0] = 1.0
    nan_late = fm.TimeDependent(h, [(h, math.sin), (fm.number(1), lambda t: math.nan * t)])
    with pytest.raises(ValueError, match=r"coefficient f_2 of part 2 returned nan"):
        fm.evolve(nan_late, SPACE, psi0, [0.0, 1.0])
    complex_f = fm.TimeDependent(h, [(h, lambda t: 1j * t)])
    with pytest.raises(ValueError, match=r"f_1 of part 1 returned .* real number"):
        fm.evolve(complex_f, SPACE, psi0, [0.0, 1.0])
    with pytest.raises(ValueError, match="strictly increasing"):
        fm.piecewise_linear([0.0, 1.0, 1.0], [0.0, 1.0, 2.0])
    with pytest.raises(ValueError, match="same length"):
        fm.piecewise_linear([0.0, 1.0], [0.0])
    with pytest.raises(ValueError, match="NaN or inf"):
        fm.piecewise_linear([0.0, 1.0], [0.0, math.inf])


def test_bad_parts_are_refused() -> None:
    a = fm.raising(0) * fm.lowering(1)
    with pytest.raises(NotHermitianError, match=r"part 1 \(H_1\)"):
        fm.TimeDependent(fm.number(0), [(a, math.sin)])
    with pytest.raises(NotHermitianError, match="H0"):
        fm.TimeDependent(a, [])
    with pytest.raises(TypeError, match=r"part 1 .* must be a LadderExpr"):
        fm.TimeDependent(0, [("n0", math.sin)])
    psi0 = np.zeros(SPACE.dim)
    psi0[0] = 1.0
    leaves = fm.TimeDependent(0, [(fm.raising(0) + fm.lowering(0), math.sin)])
    with pytest.raises(ChargeError, match=r"part 1 \(H_1\)"):
        fm.evolve(leaves, SPACE, psi0, [0.0, 1.0])
    L = 4
    base = fm.FockSpace(modes=L, cutoff=2, total=2)
    sector = fm.SymmetricSpace(base, [(fm.ring_translation(L), 0)])
    hop = sum(fm.raising(i) * fm.lowering((i + 1) % L) for i in range(L))
    state = fm.ground_state(-(hop + hop.adjoint()), sector).vector
    tilted = fm.TimeDependent(-(hop + hop.adjoint()), [(fm.number(0), math.sin)])
    with pytest.raises(SymmetryError, match=r"part 1 \(H_1\) .* not invariant"):
        fm.evolve(tilted, sector, state, [0.0, 1.0])
    with pytest.raises(TypeError, match="max_step applies to a time-dependent"):
        fm.evolve(fm.number(0), SPACE, psi0, [0.0, 1.0], max_step=0.1)
    with pytest.raises(TypeError, match="missing the space"):
        fm.evolve(fm.TimeDependent(fm.number(0), []), psi0=psi0, times=[0.0, 1.0])


# -- model files: [quench.ramp] ------------------------------------------------------------

RAMP_FILE = """
schema = 1
[model]
kind = "bose-hubbard"
lattice = "ring"
sites = 4
total = 4
cutoff = 4
[parameters]
J = 1.0
U = 7.0
[quench]
times = [0.0, 0.5, 1.0, 2.0]
tol = 1e-9
[quench.ramp.U]
times = [0.0, 1.0]
values = [1.0, 5.0]
[quench.initial]
state = "fock"
occupations = [2, 0, 1, 1]
"""


def test_a_ramp_in_a_model_file_is_a_time_dependent_hamiltonian() -> None:
    # Reference: solve_ivp DOP853 on the dense pieces of the model (tests/reference.py),
    # with U(t) the same piecewise-linear table, and ⟨H(t)⟩ from the dense matrices.
    spec = fm.parse_model_text(RAMP_FILE)
    assert spec.quench is not None
    assert spec.quench.ramps == {"U": ((0.0, 1.0), (1.0, 5.0))}
    result = fm.run_quench(spec)
    model = spec.model
    space = model.space
    kinetic = _dense(model.pieces["J"], space)
    kerr = _dense(model.pieces["U"], space)
    ramp = fm.piecewise_linear([0.0, 1.0], [1.0, 5.0])
    psi0 = np.zeros(space.dim)
    psi0[space.index([2, 0, 1, 1])] = 1.0
    times = [0.0, 0.5, 1.0, 2.0]
    # DOP853 split at the kink t = 1 of the ramp.
    first = _reference(kinetic, [(kerr, ramp)], psi0, [0.0, 0.5, 1.0], 1e-12, 1e-14)
    second = sla.expm(-1j * (kinetic + 5.0 * kerr)) @ first[:, -1]
    states = np.column_stack([first, second])
    populations = np.stack(
        [
            np.einsum("it,ij,jt->t", states.conj(), _dense(fm.number(i), space), states).real
            for i in range(space.modes)
        ],
        axis=1,
    )
    np.testing.assert_allclose(result.arrays["populations"], populations, atol=1e-7)
    energy = [
        np.vdot(states[:, k], (kinetic + ramp(t) * kerr) @ states[:, k]).real
        for k, t in enumerate(times)
    ]
    np.testing.assert_allclose(result.arrays["energy"], energy, atol=1e-7)
    assert result.meta["settings"]["ramps"] == {"U": {"times": [0.0, 1.0], "values": [1.0, 5.0]}}
    assert "energy_drift" not in result.summary
    with pytest.raises(ValueError, match=r"\['U'\] follow \[quench.ramp\]"):
        fm.run_quench(spec, overrides={"U": 2.0})


@pytest.mark.parametrize(
    ("ramp", "path", "words"),
    [
        ("[quench.ramp.V]\ntimes = [0, 1]\nvalues = [1, 2]\n", "quench.ramp.V", "unknown key"),
        ("[quench.ramp.U]\ntimes = [0, 1]\nvalue = [1, 2]\n", "quench.ramp.U.value", "unknown"),
        ("[quench.ramp.U]\ntimes = [0, 1]\n", "quench.ramp.U.values", "missing"),
        ("[quench.ramp.U]\ntimes = [0]\nvalues = [1]\n", "quench.ramp.U.times", "two points"),
        ("[quench.ramp.U]\ntimes = [0, 1]\nvalues = [1]\n", "quench.ramp.U.values", "one value"),
        ("[quench.ramp.U]\ntimes = [-1, 1]\nvalues = [1, 2]\n", "quench.ramp.U.times", ">= 0"),
        (
            "[quench.ramp.U]\ntimes = [0, 2, 1]\nvalues = [1, 2, 3]\n",
            "quench.ramp.U.times[2]",
            "increasing",
        ),
        (
            "[quench.ramp.U]\ntimes = [0, 1]\nvalues = [1, nan]\n",
            "quench.ramp.U.values[1]",
            "finite",
        ),
        (
            '[quench.ramp.U]\ntimes = [0, 1]\nvalues = [1, "2"]\n',
            "quench.ramp.U.values[1]",
            "number",
        ),
        ("[quench.ramp]\n", "quench.ramp", "empty"),
    ],
)
def test_bad_ramps_are_refused_with_their_key_path(ramp: str, path: str, words: str) -> None:
    # Common practice, no source: every mistake names its key path.
    text = RAMP_FILE.replace("[quench.ramp.U]\ntimes = [0.0, 1.0]\nvalues = [1.0, 5.0]\n", "")
    head, tail = text.split("[quench.initial]")
    with pytest.raises(fm.ModelFileError) as info:
        fm.parse_model_text(head + ramp + "[quench.initial]" + tail)
    message = str(info.value)
    assert path in message and words in message, message
