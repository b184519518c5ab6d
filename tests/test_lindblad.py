"""Open systems: jumps, the Liouvillian, stationary states, density-matrix evolution
and quantum-jump trajectories, checked against published results and against dense
Liouvillians built here with numpy (row-major vectorisation, vec(A X B) = (A ⊗ Bᵀ) vec X;
common practice, no source)."""

from __future__ import annotations

import concurrent.futures as cf
import gc
import weakref

import fockmill as fm
import numpy as np
import pytest
import scipy.linalg as sla
from fockmill.exceptions import (
    ChargeError,
    ModeIndexError,
    NotHermitianError,
    NotUniqueError,
)

# -- an independent dense reference (numpy only) -----------------------------------------


def ladder(cutoffs: list[int]) -> list[np.ndarray]:
    """Truncated annihilation matrices of every mode on the kron product basis."""
    ops = []
    for i, c in enumerate(cutoffs):
        a = np.diag(np.sqrt(np.arange(1, c + 1)), 1).astype(complex)
        mats = [np.eye(cc + 1) for cc in cutoffs]
        mats[i] = a
        out = mats[0]
        for m in mats[1:]:
            out = np.kron(out, m)
        ops.append(out)
    return ops


def dense_liouvillian(h: np.ndarray, jumps: list[tuple[float, np.ndarray]]) -> np.ndarray:
    d = h.shape[0]
    eye = np.eye(d)
    out = -1j * (np.kron(h, eye) - np.kron(eye, h.T))
    for rate, op in jumps:
        ld = op.conj().T @ op  # the product of the truncated matrices
        out += rate * (np.kron(op, op.conj()) - 0.5 * np.kron(ld, eye) - 0.5 * np.kron(eye, ld.T))
    return out


def dense_stationary(h: np.ndarray, jumps: list[tuple[float, np.ndarray]]) -> np.ndarray:
    lmat = dense_liouvillian(h, jumps)
    null = sla.null_space(lmat)
    assert null.shape[1] == 1
    d = h.shape[0]
    rho = null[:, 0].reshape(d, d)
    return rho / np.trace(rho)


# -- jumps ------------------------------------------------------------------------------


def test_jump_constructors() -> None:
    # Common practice, no source: the operators the names promise.
    assert fm.loss(2, 0.1).operator == fm.lowering(2)
    assert fm.pump(1, 0.1).operator == fm.raising(1)
    assert fm.dephasing(0, 0.3).operator == fm.number(0)
    j = fm.jump(fm.lowering(0) - fm.lowering(1), 0.2)
    assert j.rate == 0.2 and j.operator == fm.lowering(0) - fm.lowering(1)


@pytest.mark.parametrize("rate", [-0.1, float("nan"), float("inf")])
def test_bad_rates(rate: float) -> None:
    with pytest.raises(ValueError, match="rate must be"):
        fm.loss(0, rate)


def test_rate_types() -> None:
    with pytest.raises(TypeError, match="rate must be a real number"):
        fm.loss(0, True)
    with pytest.raises(TypeError, match="rate must be a real number"):
        fm.jump(fm.lowering(0), 1j)


def test_bad_input_is_refused_clearly() -> None:
    space = fm.FockSpace(modes=2, cutoff=2)
    h = fm.number(0)
    with pytest.raises(ModeIndexError, match="acts on mode 3 but the space has 2 modes"):
        fm.stationary_state(h, space, [fm.loss(3, 0.1)])
    with pytest.raises(NotHermitianError, match="not Hermitian"):
        fm.stationary_state(fm.lowering(0), space, [fm.loss(0, 0.1)])
    with pytest.raises(TypeError, match="jumps must be a list"):
        fm.stationary_state(h, space, "loss")
    with pytest.raises(TypeError, match=r"jumps\[0\]"):
        fm.stationary_state(h, space, [fm.lowering(0)])
    sector = fm.FockSpace(modes=2, cutoff=2, total=1)
    with pytest.raises(ChargeError, match="without total"):
        fm.stationary_state(h, sector, [fm.loss(0, 0.1)])
    with pytest.raises(ValueError, match="method must be"):
        fm.stationary_state(h, space, [fm.loss(0, 0.1)], method="fast")


@pytest.mark.parametrize(
    ("rho", "message"),
    [
        (np.eye(3) / 3, "shape"),
        (np.array([[0.5, 0.5], [0.0, 0.5]]), "not Hermitian"),
        (np.eye(2), "trace"),
        (np.array([[1.5, 0.0], [0.0, -0.5]]), "positive semidefinite"),
        (np.array([1.0, 1.0]), "norm"),
        (np.array([[np.nan, 0], [0, 1]]), "NaN"),
    ],
)
def test_density_matrix_that_is_not_one(rho: np.ndarray, message: str) -> None:
    space = fm.FockSpace(modes=1, cutoff=1)
    with pytest.raises(ValueError, match=message):
        fm.evolve_density(fm.number(0), space, rho, [0.0, 1.0], [fm.loss(0, 1.0)])


# -- stationary states against published results ----------------------------------------


@pytest.mark.parametrize("method", ["dense", "sparse", "iterative"])
def test_driven_damped_oscillator_is_coherent(method: str) -> None:
    # H = Δ a†a + F (a + a†), L = a at rate κ: the linear equation of motion
    # d⟨a⟩/dt = −(iΔ + κ/2)⟨a⟩ − iF gives ⟨a⟩ = −F/(Δ − iκ/2), and the stationary state
    # is the coherent state |α⟩ with g⁽²⁾(0) = 1 (Walls & Milburn, Quantum Optics, 2nd ed.
    # 2008, Sec. 7.2, driven damped cavity; from memory). Invented values; cutoff 14
    # leaves a truncation weight ~ 1e-16 for |α|² ≈ 0.33.
    delta, force, kappa = 0.8, 0.4, 1.1
    space = fm.FockSpace(modes=1, cutoff=14)
    h = delta * fm.number(0) + force * (fm.lowering(0) + fm.raising(0))
    ss = fm.stationary_state(h, space, [fm.loss(0, kappa)], method=method, tol=1e-11)
    alpha = -force / (delta - 0.5j * kappa)
    assert ss.method.startswith(method)
    assert ss.expectation(fm.lowering(0)) == pytest.approx(alpha, abs=1e-8)
    assert ss.populations[0] == pytest.approx(abs(alpha) ** 2, abs=1e-8)
    assert ss.g2(0) == pytest.approx(1.0, abs=1e-6)
    assert ss.purity == pytest.approx(1.0, abs=1e-7)  # a coherent state is pure
    assert ss.residual < 1e-7


def test_thermal_equilibrium_from_loss_and_pump() -> None:
    # Loss γ(n̄+1) and pumping γn̄ balance in the geometric (Bose–Einstein) distribution
    # P(n) = n̄ⁿ/(1+n̄)^{n+1} (Breuer & Petruccione, The Theory of Open Quantum Systems,
    # 2002, Sec. 3.4.6; from memory). Detailed balance γ n̄ (n+1) P(n) = γ(n̄+1)(n+1) P(n+1)
    # keeps the ratios exact in the truncated space (the pump does nothing on the top
    # level in the truncated convention), so the distribution is the geometric one
    # renormalised to 0..cutoff.
    nbar, gamma, cutoff = 0.7, 0.5, 25
    space = fm.FockSpace(modes=1, cutoff=cutoff)
    jumps = [fm.loss(0, gamma * (nbar + 1)), fm.pump(0, gamma * nbar)]
    ss = fm.stationary_state(fm.number(0), space, jumps)
    n = np.arange(cutoff + 1)
    geometric = nbar**n / (1 + nbar) ** (n + 1)
    np.testing.assert_allclose(ss.distribution(0), geometric / geometric.sum(), atol=1e-12)
    assert ss.populations[0] == pytest.approx(nbar, abs=1e-5)  # truncation: weight 1e-6
    assert ss.sectors is not None  # the number-sector path was taken


@pytest.mark.parametrize(("detuning", "rabi", "decay"), [(0.0, 1.0, 1.0), (0.7, 1.3, 0.9)])
def test_resonance_fluorescence_excited_population(
    detuning: float, rabi: float, decay: float
) -> None:
    # Optical Bloch equations of a driven two-level emitter, H = Δ σ†σ + (Ω/2)(σ + σ†),
    # L = σ at rate Γ: ρ_ee = (Ω²/4)/(Δ² + Ω²/2 + Γ²/4) (Mollow, Phys. Rev. 188, 1969
    # (1969); the form with this convention is checked against the dense Liouvillian
    # below too). A mode with cutoff 1 is the emitter.
    space = fm.FockSpace(modes=1, cutoff=1)
    h = detuning * fm.number(0) + 0.5 * rabi * (fm.lowering(0) + fm.raising(0))
    ss = fm.stationary_state(h, space, [fm.loss(0, decay)])
    expected = (rabi**2 / 4) / (detuning**2 + rabi**2 / 2 + decay**2 / 4)
    assert ss.populations[0] == pytest.approx(expected, abs=1e-12)
    (a,) = ladder([1])
    ref = dense_stationary(detuning * a.conj().T @ a + 0.5 * rabi * (a + a.conj().T), [(decay, a)])
    assert ref[1, 1].real == pytest.approx(expected, abs=1e-12)


def _kerr_g2(u: float, method: str = "auto") -> tuple[float, float]:
    # H = Δ a†a + U a†a†aa + F(a + a†), L = a at rate κ (invented values, weak drive).
    delta, force, kappa, cutoff = 0.0, 0.05, 1.0, 6
    space = fm.FockSpace(modes=1, cutoff=cutoff)
    a_, ad = fm.lowering(0), fm.raising(0)
    h = delta * fm.number(0) + u * ad * ad * a_ * a_ + force * (a_ + ad)
    ss = fm.stationary_state(h, space, [fm.loss(0, kappa)], method=method)
    (a,) = ladder([cutoff])
    hd = delta * a.conj().T @ a + u * a.conj().T @ a.conj().T @ a @ a + force * (a + a.conj().T)
    rho = dense_stationary(hd, [(kappa, a)])
    n = np.trace(a.conj().T @ a @ rho).real
    nn = np.trace(a.conj().T @ a.conj().T @ a @ a @ rho).real
    return ss.g2(0), nn / n**2


def test_kerr_photon_blockade_against_dense_reference() -> None:
    # Photon blockade: a Kerr resonator driven weakly on resonance antibunches,
    # g⁽²⁾(0) < 1, the more so as U/κ grows (Imamoḡlu, Schmidt, Woods & Deutsch, Phys.
    # Rev. Lett. 79, 1467 (1997)); values against the dense numpy Liouvillian.
    values = []
    for u in (0.5, 2.0, 8.0):
        got, ref = _kerr_g2(u)
        assert got == pytest.approx(ref, rel=1e-5)  # g2 = nn/n² amplifies round-off
        values.append(got)
    assert values[0] < 1.0
    assert values[0] > values[1] > values[2]
    assert values[2] < 0.05


# -- dense references for everything else ------------------------------------------------


def _chain(
    sites: int, cutoff: int, drive: float
) -> tuple[fm.LadderExpr, np.ndarray, list[np.ndarray]]:
    """A Bose–Hubbard chain (invented values) as an expression and as a dense matrix."""
    j, u, mu = 0.7, 1.3, 0.4
    ops = ladder([cutoff] * sites)
    h = fm.LadderExpr()
    hd = np.zeros_like(ops[0])
    for i in range(sites - 1):
        h -= j * (fm.raising(i) * fm.lowering(i + 1) + fm.raising(i + 1) * fm.lowering(i))
        hop = ops[i].conj().T @ ops[i + 1]
        hd -= j * (hop + hop.conj().T)
    for i in range(sites):
        h += 0.5 * u * fm.raising(i) * fm.raising(i) * fm.lowering(i) * fm.lowering(i)
        h -= mu * fm.number(i)
        a = ops[i]
        hd += 0.5 * u * a.conj().T @ a.conj().T @ a @ a - mu * a.conj().T @ a
    if drive:
        h += drive * (fm.lowering(0) + fm.raising(0))
        hd += drive * (ops[0] + ops[0].conj().T)
    return h, hd, ops


def _lossy_pumped_dephased_chain():
    """The 3-site chain (cutoff 2) with loss on sites 0 and 2, pumping of site 1 and
    dephasing of site 2: the library's jumps and the dense reference's ``(rate, L)``."""
    h, hd, ops = _chain(3, 2, 0.0)
    jumps = [fm.loss(0, 0.3), fm.loss(2, 0.2), fm.pump(1, 0.25), fm.dephasing(2, 0.15)]
    ref_jumps = [
        (0.3, ops[0]),
        (0.2, ops[2]),
        (0.25, ops[1].conj().T),
        (0.15, ops[2].conj().T @ ops[2]),
    ]
    return h, hd, jumps, ref_jumps


@pytest.mark.parametrize("method", ["dense", "sparse", "iterative"])
@pytest.mark.parametrize("split", [None, False])
def test_lossy_pumped_dephased_chain_against_dense(method: str, split: bool | None) -> None:
    # Number-conserving chain with loss, pumping at a truncating top level and dephasing:
    # the number-sector blocks and the whole space give the dense reference's ρ.
    h, hd, jumps, ref_jumps = _lossy_pumped_dephased_chain()
    ref = dense_stationary(hd, ref_jumps)
    ss = fm.stationary_state(
        h,
        fm.FockSpace(modes=3, cutoff=2),
        jumps,
        method=method,
        split_sectors=split,
        tol=1e-12,
        max_iterations=20000,
    )
    assert (ss.sectors is not None) == (split is None)
    np.testing.assert_allclose(ss.rho, ref, atol=1e-8)
    assert ss.purity == pytest.approx(np.trace(ref @ ref).real, abs=1e-8)


def test_sector_blocks_save_what_the_docs_say() -> None:
    # Σ_N d_N² against (Σ_N d_N)² for 6 modes of cutoff 3 (counting; common practice).
    from fockmill.lindblad.liouvillian import build_liouvillian

    liou = build_liouvillian(fm.number(0), fm.FockSpace(modes=6, cutoff=3), [fm.loss(0, 1.0)])
    assert liou.size == 1_703_636 and liou.full_size == 4096**2
    assert max(liou.dims) == 580


@pytest.mark.parametrize(
    ("method", "preconditioner"),
    [
        ("dense", "auto"),
        ("sparse", "auto"),
        ("iterative", "sylvester"),
        ("iterative", "sectors"),
        ("iterative", "diagonal"),
    ],
)
def test_driven_chain_with_general_jump_against_dense(method: str, preconditioner: str) -> None:
    # A drive breaks number conservation (one block: the whole space); a collective jump
    # L = a0 − a1 and a pump with mixed charges.
    h, hd, ops = _chain(2, 2, 0.35)
    jumps = [fm.jump(fm.lowering(0) - fm.lowering(1), 0.4), fm.loss(1, 0.3), fm.pump(0, 0.1)]
    ref = dense_stationary(hd, [(0.4, ops[0] - ops[1]), (0.3, ops[1]), (0.1, ops[0].conj().T)])
    ss = fm.stationary_state(
        h,
        fm.FockSpace(modes=2, cutoff=2),
        jumps,
        method=method,
        tol=1e-12,
        preconditioner=preconditioner,
        max_iterations=20000,
    )
    assert ss.sectors is None
    if method == "iterative":
        assert ss.method == f"iterative ({preconditioner})"
    np.testing.assert_allclose(ss.rho, ref, atol=1e-8)
    got = ss.expectation(fm.raising(0) * fm.lowering(1))
    assert got == pytest.approx(np.trace(ops[0].conj().T @ ops[1] @ ref), abs=1e-8)


def test_sector_preconditioner_in_real_arithmetic_against_dense() -> None:
    # Equal loss on every site: Σ κ L†L = κN, so the number-conserving part of K is a real
    # symmetric matrix plus a multiple of i per sector and the sector Sylvester
    # preconditioner runs on the real form; the drive on site 0 couples the sectors.
    h, hd, ops = _chain(3, 2, 0.3)
    jumps = [fm.loss(i, 0.6) for i in range(3)]
    ref = dense_stationary(hd, [(0.6, a) for a in ops])
    ss = fm.stationary_state(
        h,
        fm.FockSpace(modes=3, cutoff=2),
        jumps,
        method="iterative",
        preconditioner="sectors",
        tol=1e-12,
        max_iterations=4000,
    )
    assert ss.method == "iterative (sectors)"
    np.testing.assert_allclose(ss.rho, ref, atol=1e-8)


# A jump a_0 + a_0† a_1² lowers the number by one; its piece into the vacuum has one
# entry per row (a gather), its piece into one quantum two: mixed pieces of one channel.
_MIXED = fm.lowering(0) + fm.raising(0) * fm.lowering(1) * fm.lowering(1)


@pytest.mark.parametrize(
    ("rates", "extra"),
    [((0.6, 0.6, 0.6), None), ((0.3, 0.8, 0.5), None), ((0.3, 0.8, 0.5), _MIXED)],
    ids=["equal-loss", "unequal-loss", "mixed-pieces"],
)
def test_sector_preconditioner_inverts_the_lossy_number_conserving_part(
    rates: tuple[float, float, float], extra: object, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Without a drive, 𝓛 = 𝓚₀ + 𝓙 with every jump lowering the number: the sector
    # preconditioner, which solves the sector pairs from the top down, is its exact
    # inverse (common practice, no source: a block-triangular solve), except on the
    # vacuum's own entry, whose zero denominator is floored. Equal rates take the real
    # arithmetic, unequal ones the complex eigendecompositions. The product it inverts
    # is the native one, checked against the dense Lindblad form below.
    from fockmill.lindblad import preconditioners
    from fockmill.lindblad.liouvillian import build_liouvillian
    from fockmill.lindblad.preconditioners import sector_sylvester

    h, _hd, _ops = _chain(3, 2, 0.0)
    space = fm.FockSpace(modes=3, cutoff=2)
    jumps = [fm.loss(i, g) for i, g in enumerate(rates)]
    if extra is not None:
        jumps.append(fm.jump(extra, 0.4))
    liou = build_liouvillian(h, space, jumps, split_sectors=False)
    assert liou.sectors is None and liou.dims == [27]
    mixed: list[int] = []  # the mixed case must reach the path that turns a gather into CSR
    as_csr = preconditioners._as_csr
    monkeypatch.setattr(
        preconditioners, "_as_csr", lambda m, cols: mixed.append(cols) or as_csr(m, cols)
    )
    solve, _scale, orders, _single = sector_sylvester(liou)
    product = liou.native_in_order(orders)
    rng = np.random.default_rng(7)
    a = rng.standard_normal((27, 27)) + 1j * rng.standard_normal((27, 27))
    x = liou.to_real([a + a.conj().T])
    got = solve(product.apply_real(x)).copy()
    vacuum = 0  # the vacuum is the first state of sector order (charge 0)
    mask = np.ones((27, 27), dtype=bool)
    mask[vacuum, vacuum] = False
    assert bool(mixed) == (extra is not None)
    np.testing.assert_allclose(got.reshape(27, 27)[mask], x.reshape(27, 27)[mask], atol=1e-10)


def test_native_product_writes_into_a_given_array() -> None:
    from fockmill.lindblad.liouvillian import build_liouvillian

    h, _hd, _ops = _chain(2, 2, 0.3)
    liou = build_liouvillian(h, fm.FockSpace(modes=2, cutoff=2), [fm.loss(0, 0.5)])
    native = liou.native()
    x = np.random.default_rng(3).standard_normal(liou.size)
    expect = native.apply_real(x)
    out = np.empty_like(x)
    assert native.apply_real(x, out=out) is out
    np.testing.assert_array_equal(out, expect)
    same = x.copy()
    native.apply_real(same, out=same)  # x may be its own output: it is copied first
    np.testing.assert_array_equal(same, expect)
    with pytest.raises(ValueError, match="entries"):
        native.apply_real(x, out=np.empty(x.size + 1))
    with pytest.raises(ValueError, match="contiguous"):
        native.apply_real(x, out=np.empty(2 * x.size)[::2])


def test_gmres_against_a_dense_solve_with_restarts() -> None:
    # A nonsymmetric, well-conditioned system solved with a basis of 5 vectors (so the
    # method restarts), checked against numpy's dense solve (LAPACK gesv).
    from fockmill.lindblad.gmres import gmres

    rng = np.random.default_rng(11)
    n = 60
    a = np.eye(n) * 4 + rng.standard_normal((n, n)) / np.sqrt(n)
    b = rng.standard_normal(n)
    seen: list[float] = []
    x, iterations, rel = gmres(
        lambda v, out: np.matmul(a, v, out=out),
        b,
        np.zeros(n),
        precondition=lambda v: v / 4,
        rtol=1e-12,
        restart=5,
        max_iterations=500,
        callback=seen.append,
    )
    assert iterations > 5 and len(seen) == iterations and rel <= 1e-12
    np.testing.assert_allclose(x, np.linalg.solve(a, b), rtol=1e-10)
    # Too few iterations: the residual it reports is the true one, above the tolerance.
    _x, its, rel = gmres(
        lambda v, out: np.matmul(a, v, out=out),
        b,
        np.zeros(n),
        precondition=lambda v: v,
        rtol=1e-12,
        restart=5,
        max_iterations=3,
    )
    assert (
        its == 3
        and rel == pytest.approx(np.linalg.norm(b - a @ _x) / np.linalg.norm(b), rel=1e-12)
        and rel > 1e-12
    )


def test_flexible_gmres_with_a_preconditioner_that_changes_between_calls() -> None:
    # Flexible GMRES (Saad 1993) keeps z_j = M_j⁻¹ v_j, so it stays exact when each call
    # of the preconditioner is a different map (here a random scale, as rounding in
    # single precision is in small); checked against numpy's dense solve.
    from fockmill.lindblad.gmres import gmres

    rng = np.random.default_rng(5)
    n = 40
    a = np.eye(n) * 3 + rng.standard_normal((n, n)) / np.sqrt(n)
    b = rng.standard_normal(n)
    x, _its, rel = gmres(
        lambda v, out: np.matmul(a, v, out=out),
        b,
        np.zeros(n),
        precondition=lambda v: v * (0.2 + 0.2 * rng.random()),
        rtol=1e-12,
        restart=50,
        max_iterations=n + 5,  # one cycle: a non-flexible update would miss
        flexible=True,
    )
    assert rel <= 1e-12
    np.testing.assert_allclose(x, np.linalg.solve(a, b), rtol=1e-9)


# -- the native Liouvillian product against the Lindblad form ---------------------------
# The Lindblad form of the generator (Lindblad, Commun. Math. Phys. 48, 119 (1976);
# Gorini, Kossakowski & Sudarshan, J. Math. Phys. 17, 821 (1976)), built densely here.


def test_native_product_matches_the_dense_lindblad_form() -> None:
    from fockmill.lindblad.liouvillian import build_liouvillian

    h, hd, ops = _chain(2, 2, 0.35)
    jumps = [fm.jump(fm.lowering(0) - fm.lowering(1), 0.4), fm.loss(1, 0.3), fm.pump(0, 0.1)]
    ref_jumps = [(0.4, ops[0] - ops[1]), (0.3, ops[1]), (0.1, ops[0].conj().T)]
    lmat = dense_liouvillian(hd, ref_jumps)
    liou = build_liouvillian(h, fm.FockSpace(modes=2, cutoff=2), jumps)
    assert liou.sectors is None
    d = hd.shape[0]
    rng = np.random.default_rng(3)
    rho = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))  # not Hermitian
    np.testing.assert_allclose(liou.apply([rho])[0], (lmat @ rho.ravel()).reshape(d, d), atol=1e-12)
    herm = rho + rho.conj().T
    want = (lmat @ herm.ravel()).reshape(d, d)
    got = liou.from_real(liou.apply_real(liou.to_real([herm])))[0]
    np.testing.assert_allclose(got, want, atol=1e-12)
    np.testing.assert_allclose(liou.apply_blockwise([herm])[0], want, atol=1e-12)


def test_native_product_on_number_sector_blocks() -> None:
    # Block-diagonal ρ (one block per number sector): each block of 𝓛ρ from the dense
    # Liouvillian of the whole space.
    from fockmill.lindblad.liouvillian import build_liouvillian

    h, hd, jumps, ref_jumps = _lossy_pumped_dephased_chain()
    lmat = dense_liouvillian(hd, ref_jumps)
    liou = build_liouvillian(h, fm.FockSpace(modes=3, cutoff=2), jumps)
    assert liou.sectors is not None and len(liou.dims) > 2
    rng = np.random.default_rng(5)
    blocks = [rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n)) for n in liou.dims]
    d = hd.shape[0]
    full = np.zeros((d, d), dtype=complex)
    for idx, b in zip(liou.full_indices(), blocks, strict=True):
        full[np.ix_(idx, idx)] = b
    want = (lmat @ full.ravel()).reshape(d, d)
    for idx, got in zip(liou.full_indices(), liou.apply(blocks), strict=True):
        np.testing.assert_allclose(got, want[np.ix_(idx, idx)], atol=1e-12)


@pytest.mark.parametrize("method", ["dense", "sparse"])
def test_not_unique_is_refused(method: str) -> None:
    # An undamped, uncoupled mode keeps its populations: every mixture of its number
    # states is stationary (common practice, no source).
    h = fm.number(0) + 0.3 * fm.number(1)
    space = fm.FockSpace(modes=2, cutoff=2)
    with pytest.raises(NotUniqueError, match="not unique"):
        fm.stationary_state(h, space, [fm.loss(0, 1.0)], method=method)


def test_problem_in_place_of_hamiltonian_and_space() -> None:
    space = fm.FockSpace(modes=1, cutoff=1)
    problem = fm.prepare(0.5 * (fm.lowering(0) + fm.raising(0)), space)
    ss = fm.stationary_state(problem, [fm.loss(0, 1.0)])
    # Mollow's ρ_ee with Δ = 0, Ω = Γ = 1: (1/4)/(1/2 + 1/4) = 1/3.
    assert ss.populations[0] == pytest.approx(1 / 3, abs=1e-12)


# -- evolution ---------------------------------------------------------------------------


def test_evolution_against_dense_exponential() -> None:
    # ρ(t) = exp(𝓛t) ρ(0) with the dense numpy Liouvillian (common practice, no source).
    h, hd, ops = _chain(2, 2, 0.3)
    jumps = [fm.loss(0, 0.5), fm.dephasing(1, 0.2)]
    lmat = dense_liouvillian(hd, [(0.5, ops[0]), (0.2, ops[1].conj().T @ ops[1])])
    space = fm.FockSpace(modes=2, cutoff=2)
    psi0 = np.zeros(space.dim)
    psi0[space.index([1, 1])] = 1.0
    times = [0.0, 0.5, 2.0]
    n0 = ops[0].conj().T @ ops[0]
    ev = fm.evolve_density(
        h, space, psi0, times, jumps, observables={"n0": fm.number(0)}, tol=1e-11
    )
    rho0 = np.outer(psi0, psi0).astype(complex)
    for k, t in enumerate(times):
        rho = (sla.expm(lmat * t) @ rho0.ravel()).reshape(rho0.shape)
        assert ev.values["n0"][k] == pytest.approx(np.trace(n0 @ rho).real, abs=1e-8)
    np.testing.assert_allclose(ev.final, rho, atol=1e-8)


def test_trace_is_preserved_with_a_pump_at_the_top_level() -> None:
    # The truncated convention (L†L as the product of truncated matrices) keeps
    # Tr ρ = 1 exactly; the normal-ordered a a† = n + 1 would leak trace from the top
    # level at rate γ (common practice, no source: Tr(L ρ L†) = Tr(L† L ρ)).
    space = fm.FockSpace(modes=1, cutoff=2)
    psi0 = np.array([0.0, 0.0, 1.0])  # start on the top level
    ev = fm.evolve_density(
        fm.number(0),
        space,
        psi0,
        np.linspace(0, 5, 6),
        [fm.pump(0, 2.0), fm.loss(0, 0.1)],
        tol=1e-11,
    )
    np.testing.assert_allclose(ev.traces, 1.0, atol=1e-10)
    # The stationary state of pure pumping sits on the top level.
    ss = fm.stationary_state(fm.number(0), space, [fm.pump(0, 1.0), fm.loss(0, 1e-3)])
    assert ss.distribution(0)[-1] > 0.99


def _live_integrators() -> int:
    from scipy.integrate import DOP853

    return sum(isinstance(o, DOP853) for o in gc.get_objects())


def test_integrators_are_freed_without_the_garbage_collector() -> None:
    # scipy's solver is in a reference cycle with its right-hand-side wrapper; a
    # trajectory starts one per jump, and before the fix each dropped solver (13 stage
    # vectors) lived until the cyclic collector ran: a pool worker ran out of memory.
    # With the collector off, nothing may be left behind.
    space = fm.FockSpace(modes=2, cutoff=2)
    psi0 = np.zeros(space.dim)
    psi0[space.index([2, 2])] = 1.0
    h, _hd, _ops = _chain(2, 2, 0.3)
    jumps = [fm.loss(0, 1.0), fm.loss(1, 1.0)]
    gc.collect()
    gc.disable()
    try:
        before = _live_integrators()
        tr = fm.sample_trajectories(h, space, psi0, [0.0, 3.0], jumps, count=4, seed=3)
        assert tr.jumps.sum() >= 4  # several solvers per trajectory were started
        fm.evolve_density(h, space, psi0, [0.0, 1.0], jumps)
        assert _live_integrators() == before
    finally:
        gc.enable()


def test_integrator_solves_exponential_decay_and_frees_its_arrays() -> None:
    # y' = −y, y(0) = 1 → y(1) = e^{−1} (textbook).
    from fockmill.lindblad.integrator import runge_kutta_8

    gc.disable()
    try:
        with runge_kutta_8(lambda _t, y: -y, 0.0, np.ones(3), 1.0, 1e-12) as solver:
            while solver.status == "running":
                solver.step()
            y = solver.y
            ref = weakref.ref(solver)
        del solver
        assert ref() is None
    finally:
        gc.enable()
    np.testing.assert_allclose(y, np.exp(-1.0), rtol=1e-10)


def test_evolution_keeps_sector_coherences_when_present() -> None:
    # A superposition of 0 and 1 quanta has a coherence ⟨a⟩ that decays as e^{−κt/2}
    # (Walls & Milburn 2008, damped oscillator; from memory) — the block path must not
    # drop it.
    space = fm.FockSpace(modes=1, cutoff=2)
    psi0 = np.array([1.0, 1.0, 0.0]) / np.sqrt(2)
    ev = fm.evolve_density(
        0.0 * fm.number(0),
        space,
        psi0,
        [0.0, 1.0],
        [fm.loss(0, 0.8)],
        observables={"a": fm.lowering(0)},
        tol=1e-11,
    )
    assert ev.values["a"][1] == pytest.approx(0.5 * np.exp(-0.4), abs=1e-8)


# -- trajectories ------------------------------------------------------------------------


def _trajectory_case() -> tuple[fm.LadderExpr, fm.FockSpace, np.ndarray, list[fm.Jump]]:
    h, _hd, _ops = _chain(2, 2, 0.4)
    space = fm.FockSpace(modes=2, cutoff=2)
    psi0 = np.zeros(space.dim)
    psi0[space.index([2, 0])] = 1.0
    return h, space, psi0, [fm.loss(0, 0.6), fm.loss(1, 0.4), fm.dephasing(1, 0.3)]


@pytest.mark.parametrize("collective", [False, True], ids=["single-mode", "collective"])
def test_trajectories_agree_with_density_evolution(collective: bool) -> None:
    # Averages of quantum-jump trajectories converge to Tr(O ρ(t)) (Dalibard, Castin &
    # Mølmer, Phys. Rev. Lett. 68, 580 (1992)); within 4 standard errors at every time.
    # A collective loss a_0 + a_1 makes Σ γ L†L non-diagonal: each L† is then applied.
    h, space, psi0, jumps = _trajectory_case()
    if collective:
        jumps = [fm.jump(fm.lowering(0) + fm.lowering(1), 0.5), fm.loss(1, 0.2)]
    times = np.linspace(0.0, 3.0, 7)
    obs = {"n0": fm.number(0), "n1": fm.number(1)}
    ev = fm.evolve_density(h, space, psi0, times, jumps, observables=obs, tol=1e-10)
    tr = fm.sample_trajectories(h, space, psi0, times, jumps, observables=obs, count=300, seed=7)
    for name in obs:
        err = tr.stderr[name][1:]
        assert np.all(err > 0)
        assert np.all(np.abs(tr.mean[name][1:] - ev.values[name][1:]) < 4 * err + 1e-9)
    assert tr.jumps.sum() > 0


def test_trajectories_reproducible_whatever_the_workers() -> None:
    # Each trajectory draws from SeedSequence(seed, spawn_key=(i,)): the same samples
    # serially and on a process pool with any chunking (common practice, no source).
    h, space, psi0, jumps = _trajectory_case()
    times = [0.0, 1.0, 2.0]
    obs = {"n0": fm.number(0)}
    serial = fm.sample_trajectories(h, space, psi0, times, jumps, observables=obs, count=12, seed=3)
    with cf.ProcessPoolExecutor(2) as pool:
        parallel = fm.sample_trajectories(
            h, space, psi0, times, jumps, observables=obs, count=12, seed=3, executor=pool, chunk=5
        )
    np.testing.assert_array_equal(serial.samples["n0"], parallel.samples["n0"])
    np.testing.assert_array_equal(serial.jumps, parallel.jumps)
    other = fm.sample_trajectories(h, space, psi0, times, jumps, observables=obs, count=12, seed=4)
    assert not np.array_equal(other.samples["n0"], serial.samples["n0"])


# -- time-dependent Hamiltonians ---------------------------------------------------------


def _driven_pair(conserving: bool) -> tuple[fm.TimeDependent, list[np.ndarray], list[tuple]]:
    """Two modes of cutoff 2 with hopping, a ramped detuning of mode 0 (piecewise
    linear, kinks at 1 and 2) and, unless ``conserving``, a drive sin(t)(a_0 + a_0†);
    the dense matrices of H0 and of each part with its coefficient."""
    ops = ladder([2, 2])
    hop = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
    ramp = fm.piecewise_linear([0.0, 1.0, 2.0], [0.0, 1.0, -0.5])
    parts: list[tuple] = [(fm.number(0), ramp)]
    dense = [(ops[0].conj().T @ ops[0], ramp)]
    if not conserving:
        parts.append((fm.lowering(0) + fm.raising(0), np.sin))
        dense.append((ops[0] + ops[0].conj().T, np.sin))
    h0 = -(ops[0].conj().T @ ops[1] + ops[1].conj().T @ ops[0])
    return fm.TimeDependent(-hop, parts), [h0], dense


@pytest.mark.parametrize("conserving", [False, True], ids=["drive", "number-conserving"])
def test_time_dependent_evolution_against_dense_reference(conserving: bool) -> None:
    # dρ/dt = 𝓛(t)ρ with 𝓛(t) = 𝓛_0 + Σ_k f_k(t)(−i[H_k, ·]), integrated densely by
    # scipy's solve_ivp on the numpy Liouvillian (common practice, no source).
    from scipy.integrate import solve_ivp

    drive, (h0,), dense = _driven_pair(conserving)
    ops = ladder([2, 2])
    l0 = dense_liouvillian(h0, [(0.5, ops[0]), (0.3, ops[1])])
    pieces = [(dense_liouvillian(hk, []), f) for hk, f in dense]
    space = fm.FockSpace(modes=2, cutoff=2)
    psi0 = np.zeros(space.dim)
    psi0[space.index([2, 1])] = 1.0
    times = [0.0, 0.7, 1.0, 1.6, 2.5]
    jumps = [fm.loss(0, 0.5), fm.loss(1, 0.3)]
    n0 = ops[0].conj().T @ ops[0]
    ev = fm.evolve_density(
        drive, space, psi0, times, jumps, observables={"n0": fm.number(0)}, tol=1e-11
    )
    assert (len(ev.spaces) > 1) == conserving  # number-sector blocks when they apply

    def rhs(t: float, r: np.ndarray) -> np.ndarray:
        total = l0 + sum(f(t) * lk for lk, f in pieces)
        return total @ r

    rho0 = np.outer(psi0, psi0).astype(complex).ravel()
    ref = solve_ivp(rhs, (0.0, 2.5), rho0, method="DOP853", t_eval=times, rtol=1e-12, atol=1e-13)
    for k in range(len(times)):
        rho = ref.y[:, k].reshape(9, 9)
        assert ev.values["n0"][k] == pytest.approx(np.trace(n0 @ rho).real, abs=1e-7)
    np.testing.assert_allclose(ev.final, rho, atol=1e-7)
    np.testing.assert_allclose(ev.traces, 1.0, atol=1e-9)


def test_time_dependent_trajectories_agree_with_density_evolution() -> None:
    # Trajectory averages converge to Tr(O ρ(t)) (Dalibard, Castin & Mølmer 1992) also
    # for H(t); within 4 standard errors; the same samples on a process pool.
    drive, _h0, _dense = _driven_pair(False)
    space = fm.FockSpace(modes=2, cutoff=2)
    psi0 = np.zeros(space.dim)
    psi0[space.index([1, 1])] = 1.0
    times = [0.0, 0.5, 1.5, 2.0]
    jumps = [fm.loss(0, 0.5), fm.loss(1, 0.3)]
    obs = {"n0": fm.number(0)}
    ev = fm.evolve_density(drive, space, psi0, times, jumps, observables=obs, tol=1e-10)
    tr = fm.sample_trajectories(
        drive, space, psi0, times, jumps, observables=obs, count=300, seed=5
    )
    err = tr.stderr["n0"][1:]
    assert np.all(err > 0)
    assert np.all(np.abs(tr.mean["n0"][1:] - ev.values["n0"][1:]) < 4 * err + 1e-9)
    serial = fm.sample_trajectories(
        drive, space, psi0, times, jumps, observables=obs, count=6, seed=5
    )
    with cf.ProcessPoolExecutor(2) as pool:
        parallel = fm.sample_trajectories(
            drive,
            space,
            psi0,
            times,
            jumps,
            observables=obs,
            count=6,
            seed=5,
            executor=pool,
            chunk=4,
        )
    np.testing.assert_array_equal(serial.samples["n0"], parallel.samples["n0"])
    np.testing.assert_array_equal(serial.samples["n0"], tr.samples["n0"][:6])


def _ramp_up(t: float) -> float:
    return t


def test_time_dependent_refusals_name_what_to_do() -> None:
    drive = fm.TimeDependent(fm.number(0), [(fm.lowering(0) + fm.raising(0), _ramp_up)])
    space = fm.FockSpace(modes=1, cutoff=2)
    with pytest.raises(TypeError, match="time-independent Hamiltonian"):
        fm.stationary_state(drive, space, [fm.loss(0, 1.0)])
    local = fm.TimeDependent(fm.number(0), [(fm.lowering(0) + fm.raising(0), lambda t: t)])
    with cf.ProcessPoolExecutor(1) as pool, pytest.raises(TypeError, match="f_1 of part 1"):
        fm.sample_trajectories(
            local, space, [1.0, 0, 0], [0.0, 1.0], [fm.loss(0, 1.0)], count=2, executor=pool
        )
    # A module-level function goes to the pool.
    with cf.ProcessPoolExecutor(1) as pool:
        tr = fm.sample_trajectories(
            drive, space, [1.0, 0, 0], [0.0, 1.0], [fm.loss(0, 1.0)], count=2, executor=pool
        )
    assert tr.count == 2


def test_time_dependent_part_that_leaves_the_sector_is_refused() -> None:
    space = fm.FockSpace(modes=2, cutoff=2, total=1)
    drive = fm.TimeDependent(fm.number(0), [(fm.lowering(0) + fm.raising(0), np.sin)])
    with pytest.raises(ChargeError, match="part 1"):
        fm.sample_trajectories(drive, space, [1.0, 0.0], [0.0, 1.0], [fm.dephasing(0, 0.1)])
    with pytest.raises(ValueError, match="every part conserves"):
        fm.evolve_density(
            drive,
            fm.FockSpace(modes=2, cutoff=2),
            np.eye(9)[0],
            [0.0, 1.0],
            [fm.loss(0, 0.1)],
            split_sectors=True,
        )


def test_trajectories_refuse_a_jump_leaving_the_sector() -> None:
    space = fm.FockSpace(modes=2, cutoff=2, total=1)
    psi0 = np.array([1.0, 0.0])
    with pytest.raises(ChargeError, match="without total"):
        fm.sample_trajectories(fm.number(0), space, psi0, [0.0, 1.0], [fm.loss(0, 1.0)])
