"""Fuzzing: random expressions and spaces against the dense oracle, and the native layer
against hostile raw input.

Two properties:

* ``build_matrix`` either returns exactly ``P X P`` of the oracle (tests/reference.py and
  an independent product-of-matrices construction below), or raises ``ChargeError`` /
  ``ModeIndexError`` exactly when a normal-ordered term changes the conserved charge or
  acts on a missing mode.
* The compiled module ``fockmill._native`` turns any argument into a result or a Python
  ``ValueError``/``TypeError``/``OverflowError``/``MemoryError``: never an abort, a hang
  or a ``RuntimeError`` (the panic guard's message). The calls run in a worker process,
  so an abort shows up as a dead worker instead of killing pytest.
"""

from __future__ import annotations

import math
import os
import pickle
import select
import struct
import subprocess
import sys
import tempfile
import textwrap
import time
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import fockmill as fm
import numpy as np
import pytest
from fockmill.algebra.expressions import format_monomial
from fockmill.exceptions import ChargeError, ModeIndexError, SpaceError
from hypothesis import HealthCheck, currently_in_test_context, event, example, given, settings
from hypothesis import strategies as st
from reference import dense_matrix, full_basis, restrict, sector_occupations, single_mode_matrices

# -- the Python-level property ------------------------------------------------------------

GENERATORS = {"lower": fm.lowering, "raise": fm.raising, "number": fm.number}
MAX_RECIPE_MODE = 3  # expressions touch modes 0..3 at most


@dataclass(frozen=True)
class SpaceSpec:
    cutoffs: tuple[int, ...]
    total: int | None = None
    weights: tuple[int, ...] | None = None
    modulus: int | None = None

    def build(self) -> fm.FockSpace:
        return fm.FockSpace(
            cutoff=list(self.cutoffs),
            total=self.total,
            weights=None if self.weights is None else list(self.weights),
            modulus=self.modulus,
        )

    def occupations(self) -> np.ndarray:
        return sector_occupations(self.cutoffs, self.weights, self.total, self.modulus)


Product = tuple[complex, tuple[tuple[str, int], ...]]
"""A coefficient times an ordered product of ``(generator, mode)`` factors."""


def expression(recipe: Sequence[Product]) -> fm.LadderExpr:
    expr = fm.LadderExpr()
    for coefficient, factors in recipe:
        term = fm.LadderExpr.scalar(coefficient)
        for kind, mode in factors:
            term = term * GENERATORS[kind](mode)
        expr = expr + term
    return expr


def product_oracle(recipe: Sequence[Product], cutoffs: Sequence[int]) -> np.ndarray:
    """``P X P`` on the full truncated space, from matrix products in a larger space.

    Each product is multiplied out mode by mode (operators on different modes commute)
    in a space whose cutoff exceeds the kept one by the number of ladder operators in the
    product, so no intermediate state is lost; cropping back to the kept levels then
    gives the exact restriction. This never normal-orders anything, so it checks the
    symbolic normal ordering and the build together. Ladder matrices:
    ``a|n> = sqrt(n)|n-1>`` (Sakurai & Napolitano, Modern Quantum Mechanics, 2nd ed.
    2011, Sec. 2.3; from memory), built by tests/reference.single_mode_matrices.
    """
    dim = math.prod(c + 1 for c in cutoffs)
    total: np.ndarray = np.zeros((dim, dim), dtype=np.complex128)
    for coefficient, factors in recipe:
        matrix: np.ndarray = np.ones((1, 1), dtype=np.complex128)
        for mode, cutoff in enumerate(cutoffs):
            on_mode = [kind for kind, m in factors if m == mode]
            big = cutoff + 2 * len(on_mode)
            lowering, raising = single_mode_matrices(big)
            single = {"lower": lowering, "raise": raising, "number": raising @ lowering}
            block = np.eye(big + 1)
            for kind in on_mode:  # left to right, as written
                block = block @ single[kind]
            matrix = np.kron(matrix, block[: cutoff + 1, : cutoff + 1])
        total += coefficient * matrix
    return total


def charge(key: Sequence[tuple[int, int, int]], weights: Sequence[int]) -> int:
    return sum(weights[m] * (p - q) for m, p, q in key)


def outcome(name: str) -> None:
    """Count outcomes in hypothesis' statistics (``--hypothesis-show-statistics``)."""
    if currently_in_test_context():
        event(name)


def check_build(recipe: Sequence[Product], spec: SpaceSpec) -> None:
    """The whole property for one expression and one space."""
    sector = spec.occupations()
    try:
        space = spec.build()
    except SpaceError:
        assert sector.shape[0] == 0, f"{spec} holds {sector.shape[0]} states"
        outcome("empty sector")
        return
    assert space.dim == sector.shape[0]
    np.testing.assert_array_equal(space.occupations(), sector)

    expr = expression(recipe)
    modes = len(spec.cutoffs)
    weights = spec.weights or (1,) * modes
    keys = [key for _, key in expr.terms()]
    missing = [key for key in keys if any(m >= modes for m, _, _ in key)]
    charged = []
    if spec.total is not None:
        for key in keys:
            if key in missing:
                continue
            q = charge(key, weights)
            residue = q if spec.modulus is None else q % spec.modulus
            if residue != 0:
                charged.append(key)

    if missing or charged:
        allowed: tuple[type[Exception], ...] = (ModeIndexError if missing else ChargeError,)
        if missing and charged:
            allowed = (ModeIndexError, ChargeError)
        with pytest.raises(allowed) as caught:
            fm.build_matrix(expr, space)
        message = str(caught.value)
        if isinstance(caught.value, ModeIndexError):
            assert any(f"mode {m}" in message for key in missing for m, _, _ in key if m >= modes)
        else:
            assert any(format_monomial(key) in message for key in charged), message
        outcome(type(caught.value).__name__)
        return

    built = fm.build_matrix(expr, space)
    full = full_basis(spec.cutoffs)
    expected = restrict(product_oracle(recipe, spec.cutoffs), full, sector)
    via_terms = restrict(dense_matrix(expr, spec.cutoffs), full, sector)
    scale = max(1.0, float(np.abs(expected).max(initial=0.0)))
    np.testing.assert_allclose(built.toarray(), expected, rtol=0, atol=1e-11 * scale)
    np.testing.assert_allclose(built.toarray(), via_terms, rtol=0, atol=1e-11 * scale)
    real = all(c.imag == 0 for c, _ in expr.terms())
    assert built.dtype == (np.float64 if real else np.complex128)
    assert built.indices.dtype == np.int32 and built.has_canonical_format

    outcome("built and compared")
    # The matrix-free product agrees with the oracle too.
    vector = np.linspace(-1.0, 1.0, space.dim) + 0.25
    np.testing.assert_allclose(
        fm.build_operator(expr, space) @ vector, expected @ vector, rtol=0, atol=1e-10 * scale
    )


MAGNITUDE = st.floats(0.05, 2.0)
REAL = st.tuples(MAGNITUDE, st.booleans()).map(lambda x: -x[0] if x[1] else x[0])
COEFFICIENT = REAL | st.builds(complex, REAL, REAL)


def recipes(modes: int) -> st.SearchStrategy[list[Product]]:
    """Sums of up to three products; modes mostly within ``0..modes-1``, sometimes one
    beyond; products either random or conserving (hopping, number operators)."""
    inside = st.integers(0, modes - 1)
    mode = st.one_of(*[inside] * 6, st.integers(0, min(modes, MAX_RECIPE_MODE)))
    factor = st.tuples(st.sampled_from(sorted(GENERATORS)), mode)
    hop = st.tuples(inside, inside).map(lambda ij: (("raise", ij[0]), ("lower", ij[1])))
    density = st.lists(st.tuples(st.just("number"), inside), min_size=1, max_size=2).map(tuple)
    factors = st.one_of(st.lists(factor, max_size=4).map(tuple), hop, density)
    return st.lists(st.tuples(COEFFICIENT, factors), min_size=1, max_size=3)


@st.composite
def space_specs(draw: st.DrawFn) -> SpaceSpec:
    """Cutoffs 1..3 for 1..4 modes, optionally a (weighted, modular) conserved total."""
    modes = draw(st.integers(1, 4))
    cutoffs = tuple(draw(st.lists(st.integers(1, 3), min_size=modes, max_size=modes)))
    if not draw(st.booleans()):
        return SpaceSpec(cutoffs)
    drawn = draw(st.none() | st.lists(st.integers(0, 2), min_size=modes, max_size=modes))
    weights = None if drawn is None else tuple(drawn)
    modulus = draw(st.none() | st.integers(2, 3))
    reach = sum(c * w for c, w in zip(cutoffs, weights or (1,) * modes, strict=True))
    total = draw(st.integers(0, reach if modulus is None else modulus - 1))
    return SpaceSpec(cutoffs, total, weights, modulus)


@st.composite
def build_cases(draw: st.DrawFn) -> tuple[list[Product], SpaceSpec]:
    spec = draw(space_specs())
    return draw(recipes(len(spec.cutoffs))), spec


@given(case=build_cases())
def test_build_matches_oracle_or_refuses_exactly(case: tuple[list[Product], SpaceSpec]) -> None:
    check_build(*case)


# Boundary cases, each checked with the same property (invented expressions).
MIXED: list[Product] = [
    (0.7, (("raise", 0), ("lower", 1))),
    (0.7, (("raise", 1), ("lower", 0))),
    (1.3, (("number", 0), ("number", 0))),
    (-0.4, (("lower", 1), ("raise", 1))),
    (0.5j, (("raise", 0), ("raise", 1), ("lower", 0), ("lower", 1))),
]
SQUEEZE: list[Product] = [
    (0.3, (("raise", 0), ("raise", 0))),
    (0.3, (("lower", 0), ("lower", 0))),
    (1.0, (("number", 0),)),
]
FREE_MODE: list[Product] = [  # mode 2 carries weight 0, so its drive keeps the charge
    (1.0, (("raise", 0), ("lower", 1))),
    (1.0, (("raise", 1), ("lower", 0))),
    (0.2, (("raise", 2),)),
    (0.2, (("lower", 2),)),
    (0.9, (("number", 2), ("number", 0))),
]
BOUNDARY_CASES = {
    "cutoff 1 everywhere, full": (MIXED, SpaceSpec((1, 1, 1, 1))),
    "cutoff 1 everywhere, sector": (MIXED, SpaceSpec((1, 1, 1, 1), total=2)),
    "single mode, full": (SQUEEZE, SpaceSpec((3,))),
    "single mode, parity sector": (SQUEEZE, SpaceSpec((3,), total=1, modulus=2)),
    "single mode, fixed total (dim 1)": (SQUEEZE[2:], SpaceSpec((3,), total=2)),
    "total 0 (dim 1, the vacuum)": (MIXED, SpaceSpec((2, 2, 2), total=0)),
    "maximal total (dim 1, top corner)": (MIXED, SpaceSpec((1, 2, 3), total=6)),
    "maximal weighted total": (MIXED, SpaceSpec((2, 1, 3), total=13, weights=(2, 0, 3))),
    "weight 0 mode, free drive": (FREE_MODE, SpaceSpec((2, 2, 2), total=2, weights=(1, 1, 0))),
    "drive on a counted mode": (SQUEEZE, SpaceSpec((2, 2), total=2)),
    "mode beyond the space": (FREE_MODE, SpaceSpec((2, 2), total=2)),
}


@pytest.mark.parametrize("name", list(BOUNDARY_CASES))
def test_boundary_cases(name: str) -> None:
    recipe, spec = BOUNDARY_CASES[name]
    check_build(recipe, spec)


def test_boundary_dimensions() -> None:
    # Counting by hand: one state each for the vacuum and the top corner; a weight-0
    # mode multiplies the sector by its cutoff + 1.
    assert BOUNDARY_CASES["total 0 (dim 1, the vacuum)"][1].build().dim == 1
    top = BOUNDARY_CASES["maximal total (dim 1, top corner)"][1].build()
    assert top.dim == 1 and top.state(0) == (1, 2, 3)
    weighted = BOUNDARY_CASES["maximal weighted total"][1].build()
    assert weighted.dim == 2  # (2, n, 3) for n = 0, 1
    free = BOUNDARY_CASES["weight 0 mode, free drive"][1].build()
    assert free.dim == 3 * 3


# -- the native layer: no aborts, hangs or panics -----------------------------------------

ALLOWED = ("ValueError", "TypeError", "OverflowError", "MemoryError")
SMALL_DIM = 20_000  # heavy calls run on spaces up to this size ...
HUGE_DIM = 10**10  # ... and from this size on, where they must refuse without allocating
CALL_TIMEOUT = 60.0

WORKER = textwrap.dedent(
    """
    import os, pickle, resource, struct, sys, traceback
    # Allocations beyond this fail at once instead of swapping the shared machine.
    resource.setrlimit(resource.RLIMIT_AS, (4 * 2**30, 4 * 2**30))
    import numpy as np
    from fockmill import _native as N

    SMALL_DIM, HUGE_DIM = LIMITS
    HEAVY = {"occupations", "build_csr", "matvec", "matmat", "lanczos", "expectations",
             "distributions"}

    def vector(length, dtype, fill):
        v = np.full(max(length, 0), fill, dtype=np.float64)
        v[::3] = 0.5
        return v.astype(dtype)

    def run(call):
        spec, terms, action, args, threads = call
        space = N.NativeSpace(*spec)
        dim = space.dim
        if action in HEAVY and SMALL_DIM < dim < HUGE_DIM:
            return ("skipped", dim)
        length = min(dim, 1000) if dim >= HUGE_DIM else dim
        if action == "space":
            return ("space", dim, space.modes, list(space.cutoffs)[:3], list(space.weights)[:3])
        if action == "occupations":
            occ = space.occupations(threads)
            assert occ.shape == (dim, space.modes), occ.shape
            return ("occupations", occ.shape)
        if action == "index":
            rows, columns, value = args
            ranks = space.index(np.full((rows, columns), value, dtype=np.int64), threads)
            return ("index", ranks.shape)
        if action == "distributions":
            offset, dtype, fill = args
            return ("distributions", N.occupation_distributions(
                space, vector(length + offset, dtype, fill), threads).shape)
        if action == "expectations":
            monomials, offset, dtype, fill = args
            values = N.monomial_expectations(
                space, monomials, vector(length + offset, dtype, fill), threads)
            return ("expectations", values.shape)
        op = N.NativeOperator.on_space(space, terms)
        if action == "operator":
            return ("operator", op.terms, op.is_real, op.dim)
        if action == "build_csr":
            parts = op.build_csr(threads=threads, force_wide=args[0])
            indptr, indices, data = parts.indptr, parts.indices, parts.data
            assert indptr.shape == (dim + 1,) and indices.shape == data.shape
            assert int(indptr[-1]) == data.size and np.all(np.diff(indptr) >= 0)
            assert data.size == 0 or (0 <= indices.min() and indices.max() < dim)
            return ("build_csr", data.size)
        if action == "matvec":
            offset, dtype, fill = args
            y = op.matvec(vector(length + offset, dtype, fill), threads=threads)
            assert y.shape == (dim,), y.shape
            return ("matvec", y.shape)
        if action == "matmat":
            offset, columns, dtype = args
            block = np.ones((max(length + offset, 0), columns), dtype=dtype)
            y = op.matmat(block, threads=threads)
            assert y.shape == (dim, columns), y.shape
            return ("matmat", y.shape)
        if action == "estimate_nnz":
            e = op.estimate_nnz(samples=args[0], threads=threads)
            return ("estimate_nnz", (e.nnz, e.std_error, e.exact, e.max_row))
        if action == "lanczos":
            tol, steps, restarts, seed, start, stored = args
            v0 = None if start is None else vector(length + start, np.float64, 1.0)
            out = op.lanczos_ground(tol=tol, max_steps=steps, max_restarts=restarts, seed=seed,
                                    start=v0, threads=threads, store=stored)
            return ("lanczos", out.energy, out.residual, out.converged)
        raise AssertionError(f"unknown action {action}")

    read, write = sys.stdin.buffer, sys.stdout.buffer
    while True:
        header = read.read(4)
        if len(header) < 4:
            break
        call = pickle.loads(read.read(struct.unpack("<I", header)[0]))
        try:
            reply = ("ok", run(call))
        except BaseException as exc:
            names = [c.__name__ for c in type(exc).__mro__]
            reply = ("raised", names, str(exc)[:400], traceback.format_exc()[-1500:])
        data = pickle.dumps(reply)
        write.write(struct.pack("<I", len(data)) + data)
        write.flush()
    """
).replace("LIMITS", f"{SMALL_DIM}, {HUGE_DIM}")


class WorkerDied(Exception):
    """The worker process ended or stopped answering during a call."""


class NativeWorker:
    """A child process that runs native calls one at a time and reports the outcome."""

    def __init__(self) -> None:
        self._log = tempfile.TemporaryFile()
        self._start()

    def _start(self) -> None:
        environment = dict(os.environ, RAYON_NUM_THREADS="2", OPENBLAS_NUM_THREADS="1")
        self._log.seek(0)
        self._log.truncate()
        self.process = subprocess.Popen(
            [sys.executable, "-c", WORKER],
            stdin=subprocess.PIPE,
            stdout=subprocess.PIPE,
            stderr=self._log,
            env=environment,
        )

    def _read(self, size: int, deadline: float) -> bytes:
        assert self.process.stdout is not None
        chunks, needed = [], size
        descriptor = self.process.stdout.fileno()
        while needed:
            ready, _, _ = select.select([descriptor], [], [], max(0.0, deadline - time.monotonic()))
            if not ready:
                raise WorkerDied(f"no answer within {CALL_TIMEOUT:.0f} s (hang)")
            chunk = os.read(descriptor, needed)
            if not chunk:
                raise WorkerDied("the worker closed its output")
            chunks.append(chunk)
            needed -= len(chunk)
        return b"".join(chunks)

    def call(self, call: tuple[Any, ...]) -> tuple[Any, ...]:
        """Run one call; raise WorkerDied (and restart) when the process does not survive."""
        assert self.process.stdin is not None
        data = pickle.dumps(call)
        try:
            self.process.stdin.write(struct.pack("<I", len(data)) + data)
            self.process.stdin.flush()
            deadline = time.monotonic() + CALL_TIMEOUT
            size = struct.unpack("<I", self._read(4, deadline))[0]
            return pickle.loads(self._read(size, deadline))
        except (WorkerDied, BrokenPipeError) as exc:
            self.process.kill()
            code = self.process.wait()
            self._close_pipes()
            self._log.seek(0)
            stderr = self._log.read().decode(errors="replace")
            lines = [ln for ln in stderr.splitlines() if not ln.startswith("  ")][-6:]
            self._start()
            raise WorkerDied(f"{exc}; exit status {code}; stderr: {' | '.join(lines)}") from None

    def _close_pipes(self) -> None:
        for pipe in (self.process.stdin, self.process.stdout):
            if pipe is not None:
                try:
                    pipe.close()
                except BrokenPipeError:
                    pass

    def close(self) -> None:
        self._close_pipes()
        try:
            self.process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()
        self._log.close()


EDGE = st.sampled_from(
    [-1, 0, 1, 2, 255, 256, 65534, 65535, 65536, 2**31 - 1, 2**31, 2**32, 2**63, 2**64]
)
SMALL = st.integers(1, 4)


def mixed(small: st.SearchStrategy[int]) -> st.SearchStrategy[int]:
    return st.one_of(small, small, small, EDGE)


HOSTILE_CUTOFFS = st.one_of(
    st.lists(mixed(SMALL), max_size=6),
    st.integers(4090, 4100).map(lambda modes: [1] * modes),
)
TOTALS = st.none() | mixed(st.integers(0, 8)) | st.sampled_from([65535, 131070, 2**32 - 1])
MODULI = st.none() | st.sampled_from([0, 1, 2, 3, 7]) | EDGE


@st.composite
def hostile_spaces(draw: st.DrawFn) -> tuple[Any, ...]:
    """Anything: empty, negative, oversized or mismatched arguments."""
    cutoffs = draw(HOSTILE_CUTOFFS)
    weights = draw(
        st.none()
        | st.lists(mixed(st.integers(0, 3)), min_size=len(cutoffs), max_size=len(cutoffs))
        | st.lists(st.integers(0, 3), max_size=7)
    )
    return (cutoffs, weights, draw(TOTALS), draw(MODULI))


@st.composite
def valid_spaces(draw: st.DrawFn) -> tuple[Any, ...]:
    """Small spaces and sectors that exist, so the operator calls get exercised."""
    spec = draw(space_specs())
    weights = None if spec.weights is None else list(spec.weights)
    return (list(spec.cutoffs), weights, spec.total, spec.modulus)


@st.composite
def huge_spaces(draw: st.DrawFn) -> tuple[Any, ...]:
    """Valid specifications of enormous spaces (near the cutoff, total and size limits)."""
    modes = draw(st.sampled_from([2, 3, 3, 4, 5]))
    top = {2: 65535, 3: 65535, 4: 8000, 5: 1300}[modes]  # full spaces stay below 4.5e15
    cutoffs = draw(st.lists(st.integers(top - 3, top), min_size=modes, max_size=modes))
    total = draw(st.none() | st.none() | st.sampled_from([0, 1, 7000, sum(cutoffs)]))
    modulus = None if total is None else draw(st.none() | st.just(2))
    return (cutoffs, None, total, modulus)


NATIVE_SPACES = st.one_of(valid_spaces(), valid_spaces(), huge_spaces(), hostile_spaces())

FLOATS = st.one_of(
    st.floats(-3, 3),
    st.floats(-3, 3),
    st.sampled_from([0.0, -0.0, 1e-320, 1e308, -1e308]),
    st.floats(allow_nan=True, allow_infinity=True),
)
MODE = mixed(st.integers(0, 6))
POWER = st.one_of(st.integers(0, 3), st.integers(0, 3), EDGE)
FACTORS = st.lists(st.tuples(MODE, POWER, POWER), max_size=4)
CONSERVING = st.one_of(  # hopping a_i† a_j and powers of number-like factors
    st.tuples(st.integers(0, 3), st.integers(0, 3)).map(
        lambda ij: (
            [(ij[0], 1, 0), (ij[1], 0, 1)] if ij[0] < ij[1] else [(ij[1], 0, 1), (ij[0], 1, 0)]
        )
    ),
    st.tuples(st.integers(0, 3), st.integers(0, 3)).map(lambda mp: [(mp[0], mp[1], mp[1])]),
)
TERMS = st.one_of(
    st.lists(st.tuples(FLOATS, FLOATS, CONSERVING), max_size=6),
    st.lists(st.tuples(FLOATS, FLOATS, CONSERVING | FACTORS), max_size=6),
    st.lists(st.tuples(FLOATS, FLOATS, st.lists(st.tuples(MODE, POWER))), max_size=2),
    st.lists(st.tuples(FLOATS, FACTORS), max_size=2),
)
THREADS = st.sampled_from([None, 0, 1, 2])
VECTOR = st.tuples(
    st.sampled_from([0, 0, 0, -1, 1]),
    st.sampled_from(["float64", "float64", "complex128", "float32", "int64"]),
    st.sampled_from([1.0, 0.0, float("nan"), 1e308]),
)
ACTIONS = st.one_of(
    st.tuples(st.just("space"), st.just(())),
    st.tuples(st.just("operator"), st.just(())),
    st.tuples(st.just("occupations"), st.just(())),
    st.tuples(st.just("index"), st.tuples(st.integers(0, 3), st.integers(0, 5), mixed(SMALL))),
    st.tuples(st.just("build_csr"), st.tuples(st.booleans())),
    st.tuples(st.just("matvec"), VECTOR),
    st.tuples(
        st.just("matmat"),
        st.tuples(
            st.sampled_from([0, 0, -1]),
            st.integers(0, 3),
            st.sampled_from(["float64", "complex128"]),
        ),
    ),
    st.tuples(st.just("estimate_nnz"), st.tuples(st.sampled_from([0, 1, 7, 2048, 5000]))),
    st.tuples(
        st.just("lanczos"),
        st.tuples(
            st.sampled_from([1e-9, 1e-3, 0.0, -1.0, float("nan")]),
            st.sampled_from([0, 1, 2, 3, 30]),
            st.integers(0, 2),
            st.sampled_from([0, 1, 2**64 - 1, 2**64, -1]),
            st.sampled_from([None, None, 0, 1]),
            st.booleans(),
        ),
    ),
    st.tuples(st.just("distributions"), VECTOR),
    st.tuples(
        st.just("expectations"),
        st.tuples(FACTORS.map(lambda f: [f]), st.just(0), st.just("float64"), st.just(1.0)),
    ),
)


@st.composite
def native_calls(draw: st.DrawFn) -> tuple[Any, ...]:
    action, args = draw(ACTIONS)
    return (draw(NATIVE_SPACES), draw(TERMS), action, args, draw(THREADS))


NUMBER_0 = [(1.0, 0.0, [(0, 1, 1)])]
LANCZOS_ARGS = (1e-9, 30, 1, 0, None, False)


def test_native_layer_raises_only_python_errors() -> None:
    worker = NativeWorker()
    seen: dict[str, int] = {}
    tried: list[tuple[Any, ...]] = []  # the last calls, newest last, for failure reports

    @settings(
        max_examples=5 * settings().max_examples,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
        database=None,
        print_blob=True,  # a failure prints the @reproduce_failure line that replays it
    )
    @given(call=native_calls())
    # Always tried: the largest full spaces the core accepts (2.8e14 states).
    @example(call=(([65535] * 3, None, None, None), [], "occupations", (), None))
    @example(call=(([65535] * 3, None, None, None), NUMBER_0, "build_csr", (False,), 2))
    @example(call=(([65535] * 3, None, None, None), NUMBER_0, "lanczos", LANCZOS_ARGS, 2))
    def check(call: tuple[Any, ...]) -> None:
        tried.append(call)
        del tried[:-8]
        try:
            reply = worker.call(call)
        except WorkerDied as died:
            pytest.fail(f"native call {call!r} killed the process: {died}")
        if reply[0] == "raised":
            names, message, trace = reply[1], reply[2], reply[3]
            seen[names[0]] = seen.get(names[0], 0) + 1
            assert "RuntimeError" not in names, f"panic on {call!r}: {message}\n{trace}"
            assert any(n in names for n in ALLOWED), f"{names[0]} on {call!r}: {message}\n{trace}"
        else:
            seen["ok"] = seen.get("ok", 0) + 1

    try:
        check()
    except BaseException as failure:
        # Whatever escapes (a failure hypothesis could not replay, a harness error)
        # names the calls that led to it.
        failure.add_note("last native calls, newest last:\n" + "\n".join(map(repr, tried)))
        raise
    finally:
        worker.close()
    assert seen.get("ok", 0) > 0, f"no call succeeded: {seen}"  # working calls are reached


def test_native_refuses_absurd_thread_counts() -> None:
    """More threads than the core allows is an error, not an attempt to spawn them."""
    worker = NativeWorker()
    try:
        reply = worker.call(
            (([2, 2], None, 2, None), [(1.0, 0.0, [(0, 1, 1)])], "build_csr", (False,), 1025)
        )
    finally:
        worker.close()
    assert reply[0] == "raised" and "ValueError" in reply[1], reply
    assert "1025" in reply[2]


def test_worker_reports_a_dead_process() -> None:
    """The harness itself: a worker that dies is reported, then replaced."""
    worker = NativeWorker()
    try:
        worker.process.kill()
        with pytest.raises(WorkerDied):
            worker.call((([2], None, None, None), [], "space", (), None))
        assert worker.call((([2], None, None, None), [], "space", (), None))[0] == "ok"
    finally:
        worker.close()
