"""Thread safety and thread-count independence.

* Builds, products, observables and solves called from several Python threads at once
  give bit-identical results to the same calls made one after another.
* The ``threads=`` argument changes only the speed: CSR arrays, products, Lanczos ground
  states (fixed seed) and observables are bit-identical for 1, 2 and 3 worker threads.
* Solving from several threads leaves process-wide settings (the BLAS thread count)
  as they were.

Bit-identity is the contract the native core states (each row is summed by one thread
in a fixed order); the serial calls are the reference, anchored once to a dense numpy
diagonalisation of the oracle matrix (tests/reference.py).
"""

from __future__ import annotations

import ast
import concurrent.futures as cf
import itertools
import random
import subprocess
import sys
import threading
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import fockmill as fm
import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg
from reference import dense_matrix, full_basis, restrict, sector_occupations

WORKERS = 4


def ring(
    sites: int, interaction: float, total: int, cutoff: int
) -> tuple[fm.LadderExpr, fm.FockSpace]:
    """Invented example: Bose-Hubbard ring with J = 1 and a static site potential.

    The potential ``0.13 * i`` lifts the momentum degeneracies, so every solver has one
    well-defined ground vector (up to sign, which the seeded solvers fix).
    """
    expr = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        expr = expr - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
        expr = expr + interaction / 2 * fm.number(i) * (fm.number(i) - 1)
        expr = expr + 0.13 * i * fm.number(i)
    return expr, fm.FockSpace(modes=sites, cutoff=cutoff, total=total)


SMALL = ring(4, 2.0, 4, 4)  # dim 35
MEDIUM = ring(6, 3.0, 6, 6)  # dim 462: dense
LARGE = ring(8, 2.5, 8, 4)  # dim 5,475: csr, operator, lanczos
DRIVEN = (  # complex coefficients, full space (invented): a driven pair with a phase
    fm.raising(0) * fm.lowering(1) * (0.3 + 0.4j)
    + fm.raising(1) * fm.lowering(0) * (0.3 - 0.4j)
    + 0.8 * (fm.raising(0) + fm.lowering(0))
    + 1.5 * fm.number(1) * fm.number(1),
    fm.FockSpace(modes=2, cutoff=[9, 7]),
)


def ground(expr: fm.LadderExpr, space: fm.FockSpace, **options: Any) -> fm.GroundState:
    """fm.ground_state without the cutoff warning: LARGE truncates on purpose."""
    return fm.ground_state(expr, space, cutoff_warning=None, **options)


def flatten(value: Any) -> Iterator[Any]:
    """Arrays and numbers inside a result, in a fixed order."""
    if isinstance(value, sp.sparray | sp.spmatrix):
        yield from (value.indptr, value.indices, value.data, value.dtype)
    elif isinstance(value, tuple | list):
        for item in value:
            yield from flatten(item)
    elif hasattr(value, "__dataclass_fields__"):
        for name in value.__dataclass_fields__:
            if name != "seconds":
                yield from flatten(getattr(value, name))
    else:
        yield value


def identical(first: Any, second: Any) -> bool:
    left, right = list(flatten(first)), list(flatten(second))
    if len(left) != len(right):
        return False
    for a, b in zip(left, right, strict=True):
        if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
            if not (np.asarray(a).dtype == np.asarray(b).dtype and np.array_equal(a, b)):
                return False
        elif a != b:
            return False
    return True


def probe(seed: int, dim: int) -> np.ndarray:
    return np.random.default_rng(seed).standard_normal(dim)


def build_tasks() -> dict[str, Callable[[], Any]]:
    """Independent calls; several share expressions and spaces."""
    tasks: dict[str, Callable[[], Any]] = {}
    for name, (expr, space) in {"small": SMALL, "medium": MEDIUM, "large": LARGE}.items():
        tasks[f"build {name}"] = lambda e=expr, s=space: fm.build_matrix(e, s)
        tasks[f"product {name}"] = lambda e=expr, s=space: fm.build_operator(e, s) @ probe(1, s.dim)
        tasks[f"block product {name}"] = lambda e=expr, s=space: (
            fm.build_operator(e, s) @ probe(2, 3 * s.dim).reshape(s.dim, 3)
        )
    tasks["build driven"] = lambda: fm.build_matrix(*DRIVEN)
    tasks["product driven"] = lambda: fm.build_operator(*DRIVEN) @ probe(3, DRIVEN[1].dim)
    tasks["dense ground small"] = lambda: ground(*SMALL, method="dense")
    tasks["dense ground driven"] = lambda: ground(*DRIVEN, method="dense")
    tasks["lanczos large"] = lambda: ground(*LARGE, method="lanczos", seed=5)
    tasks["estimate large"] = lambda: fm.estimate_memory(*LARGE).nnz
    state = probe(4, MEDIUM[1].dim)
    tasks["expectation"] = lambda: fm.expectation(MEDIUM[0], MEDIUM[1], state)
    tasks["populations"] = lambda: fm.populations(MEDIUM[1], state)
    tasks["variances"] = lambda: fm.number_variances(MEDIUM[1], state)
    tasks["one-body"] = lambda: fm.one_body_matrix(MEDIUM[1], state)
    tasks["distribution"] = lambda: fm.occupation_distribution(MEDIUM[1], state)
    tasks["entanglement_entropy"] = lambda: fm.entanglement_entropy(MEDIUM[1], state, [0, 1, 2])
    tasks["occupations"] = lambda: LARGE[1].occupations()
    tasks["index"] = lambda: LARGE[1].index(LARGE[1].occupations()[::7])
    return tasks


DENSE_TASKS: dict[str, Callable[[], Any]] = {  # big enough for BLAS to use its threads
    "dense levels medium": lambda: fm.lowest_levels(*MEDIUM, k=3, method="dense"),
}

EIGSH_TASKS: dict[str, Callable[[], Any]] = {
    "csr ground large": lambda: ground(*LARGE, method="csr", seed=3),
    "operator ground large": lambda: ground(*LARGE, method="operator", seed=3),
    "operator levels large": lambda: fm.lowest_levels(*LARGE, k=3, method="operator", seed=3),
}


@pytest.fixture
def blas_threads_restored() -> Iterator[None]:
    """Undo any change of the BLAS thread count, so later tests are not affected."""
    threadpoolctl = pytest.importorskip("threadpoolctl")
    controller = threadpoolctl.ThreadpoolController()
    saved = [(lib, lib.num_threads) for lib in controller.lib_controllers]
    yield
    for lib, count in saved:
        # Only when changed: an explicit set stops later limits from other threads
        # taking effect in some OpenBLAS builds.
        if lib.num_threads != count:
            lib.set_num_threads(count)


def run_concurrently(tasks: dict[str, Callable[[], Any]], repeats: int = 2) -> dict[str, list[Any]]:
    """Every task ``repeats`` times, shuffled, on a pool of Python threads."""
    order = [name for name in tasks for _ in range(repeats)]
    random.Random(20240517).shuffle(order)
    results: dict[str, list[Any]] = {name: [] for name in tasks}
    with cf.ThreadPoolExecutor(WORKERS) as pool:
        futures = [(name, pool.submit(tasks[name])) for name in order]
        for name, future in futures:
            results[name].append(future.result())
    return results


def test_serial_reference_is_right() -> None:
    # Anchor: the lowest eigenvalue of the oracle matrix (numpy eigvalsh of the dense
    # restriction of P H P, tests/reference.py).
    expr, space = SMALL
    cutoffs = space.cutoffs
    sector = sector_occupations(cutoffs, None, space.total)
    dense = restrict(dense_matrix(expr, cutoffs), full_basis(cutoffs), sector)
    assert ground(expr, space, method="dense").energy == pytest.approx(
        np.linalg.eigvalsh(dense)[0], abs=1e-12
    )
    lanczos = ground(*LARGE, method="lanczos", seed=5)
    assert lanczos.energy == pytest.approx(ground(*LARGE, method="csr").energy, abs=1e-9)


def test_calls_from_python_threads_match_serial(blas_threads_restored: None) -> None:
    tasks = build_tasks()
    serial = {name: task() for name, task in tasks.items()}
    concurrent = run_concurrently(tasks)
    differing = [
        name
        for name, outcomes in concurrent.items()
        if not all(identical(serial[name], o) for o in outcomes)
    ]
    assert differing == []


def mixed_solves_differing() -> list[str]:
    """Names of eigsh and dense solves whose concurrent results differ from serial ones."""
    tasks = {**EIGSH_TASKS, **DENSE_TASKS}
    serial = {name: task() for name, task in tasks.items()}
    concurrent = run_concurrently(tasks)
    return [
        name
        for name, outcomes in concurrent.items()
        if not all(identical(serial[name], o) for o in outcomes)
    ]


def blas_threads_around_overlapping_solves() -> tuple[list[int], list[int]] | None:
    """BLAS thread counts before and after two solves whose eigsh calls overlap.

    The interleaving is forced (a wrapper around scipy's eigsh holds the first call until
    the second has started, and the second until the first has returned), so the outcome
    does not depend on timing. None when BLAS runs one thread anyway.
    """
    threadpoolctl = pytest.importorskip("threadpoolctl")

    def counts() -> list[int]:
        return [info["num_threads"] for info in threadpoolctl.threadpool_info()]

    before = counts()
    if max(before, default=1) < 2:
        return None
    real_eigsh = scipy.sparse.linalg.eigsh
    calls = itertools.count()
    first_inside, second_inside, first_done = (threading.Event() for _ in range(3))

    def choreographed_eigsh(*args: Any, **kwargs: Any) -> Any:
        turn = next(calls)
        if turn == 0:
            first_inside.set()
            second_inside.wait(timeout=60)
            try:
                return real_eigsh(*args, **kwargs)
            finally:
                first_done.set()
        if turn == 1:
            second_inside.set()
            first_done.wait(timeout=60)
        return real_eigsh(*args, **kwargs)

    scipy.sparse.linalg.eigsh = choreographed_eigsh
    try:
        with cf.ThreadPoolExecutor(2) as pool:
            first = pool.submit(ground, *LARGE, method="csr", seed=3)
            assert first_inside.wait(timeout=60)
            second = pool.submit(ground, *LARGE, method="operator", seed=3)
            assert first.result().energy == pytest.approx(second.result().energy, abs=1e-9)
    finally:
        scipy.sparse.linalg.eigsh = real_eigsh
    return before, counts()


def in_fresh_process(function: str) -> Any:
    """Run a function of this module in a new interpreter and return its result.

    For checks of process-wide settings: a fresh process has no history of BLAS calls,
    and whatever the check leaves behind cannot affect other tests.
    """
    code = (
        f"import sys; sys.path.insert(0, {str(Path(__file__).parent)!r}); "
        f"import test_concurrency as t; print(repr(t.{function}()))"
    )
    child = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=300
    )
    assert child.returncode == 0, child.stderr[-2000:]
    return ast.literal_eval(child.stdout.strip().splitlines()[-1])


@pytest.mark.slow
def test_solves_from_python_threads_match_serial() -> None:
    """eigsh-based solves mixed with dense ones, all at once, match serial calls."""
    assert in_fresh_process("mixed_solves_differing") == []


@pytest.mark.slow
def test_overlapping_solves_leave_blas_threads_alone() -> None:
    outcome = in_fresh_process("blas_threads_around_overlapping_solves")
    if outcome is None:
        pytest.skip("BLAS already runs one thread: a leaked limit of one would not show")
    before, after = outcome
    assert after == before


def test_shared_operator_from_threads() -> None:
    expr, space = LARGE
    op = fm.build_operator(expr, space)
    vectors = [probe(seed, space.dim) for seed in range(16)]
    serial = [op @ v for v in vectors]
    op.products = 0
    with cf.ThreadPoolExecutor(WORKERS) as pool:
        concurrent = list(pool.map(lambda v: op @ v, vectors))
    assert all(np.array_equal(a, b) for a, b in zip(serial, concurrent, strict=True))
    assert op.products == len(vectors)


@pytest.fixture(scope="module")
def per_thread_count() -> dict[int, dict[str, Any]]:
    expr, space = LARGE  # 5,475 rows: more than one block of rows per thread
    complex_expr, complex_space = DRIVEN
    x = probe(6, space.dim)
    block = probe(7, 4 * space.dim).reshape(space.dim, 4)
    out: dict[int, dict[str, Any]] = {}
    for threads in (1, 2, 3):
        lanczos = ground(expr, space, method="lanczos", seed=11, threads=threads)
        out[threads] = {
            "csr": fm.build_matrix(expr, space, threads=threads),
            "csr complex": fm.build_matrix(complex_expr, complex_space, threads=threads),
            "matvec": fm.build_operator(expr, space, threads=threads) @ x,
            "matmat": fm.build_operator(expr, space, threads=threads) @ block,
            "complex matvec": fm.build_operator(complex_expr, complex_space, threads=threads)
            @ (probe(8, complex_space.dim) + 1j * probe(9, complex_space.dim)),
            "lanczos": lanczos,
            "operator eigsh": ground(expr, space, method="operator", seed=11, threads=threads),
            "populations": fm.populations(space, lanczos.vector, threads=threads),
            "one-body": fm.one_body_matrix(space, lanczos.vector, threads=threads),
            "expectation": fm.expectation(expr, space, lanczos.vector, threads=threads),
            "occupations": space.occupations(threads=threads),
        }
    return out


@pytest.mark.parametrize(
    "quantity",
    [
        "csr",
        "csr complex",
        "matvec",
        "matmat",
        "complex matvec",
        "lanczos",
        "operator eigsh",
        "populations",
        "one-body",
        "expectation",
        "occupations",
    ],
)
@pytest.mark.parametrize("threads", [2, 3])
def test_thread_count_does_not_change_results(
    per_thread_count: dict[int, dict[str, Any]], quantity: str, threads: int
) -> None:
    assert identical(per_thread_count[1][quantity], per_thread_count[threads][quantity])


def test_lanczos_is_reproducible_for_a_seed() -> None:
    first = ground(*LARGE, method="lanczos", seed=42, threads=2)
    second = ground(*LARGE, method="lanczos", seed=42, threads=2)
    assert identical(first, second)
    assert first.converged and first.products > 0
