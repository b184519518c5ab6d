"""A catalogue of bad input: every mistake gets a clear exception naming what was wrong
and what to do instead.

Each row of :data:`CATALOGUE` is one bad call: a description, the call, the exception
class it must raise, a regex the message must match (what was wrong) and a regex for
the advice (what to do). ``None`` as advice marks messages whose fix is the plain
inverse of the stated problem ("contains NaN", "not found"). The standard itself is the
project rule "bad input gets a clear exception naming what was wrong and what to do
instead" (common practice, no source).

Calls that could take the whole process down (allocation failures in native code) run
in a child process: see :data:`CHILD_CASES`. Command-line mistakes are in
:data:`CLI_CASES` and must end with exit status 2 and a one-line message.
"""

from __future__ import annotations

import re
import sqlite3
import subprocess
import sys
import textwrap
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import fockmill as fm
import fockmill.cli.commands as cli
import numpy as np
import pytest
from fockmill import ResultsStore
from fockmill.exceptions import (
    ChargeError,
    ModeIndexError,
    NotHermitianError,
    SizeLimitError,
    SpaceError,
    StoreError,
)

# -- shared small objects (invented examples) ---------------------------------------------

HOP = fm.raising(0) * fm.lowering(1) + fm.raising(1) * fm.lowering(0)
"""Hopping between two modes: Hermitian, conserves the total."""

NOT_HERMITIAN = fm.raising(0) * fm.lowering(1)


def pair() -> fm.FockSpace:
    """Two modes sharing two quanta (dim 3)."""
    return fm.FockSpace(modes=2, cutoff=2, total=2)


def hexamer() -> fm.FockSpace:
    """Six modes sharing six quanta (dim 462): big enough for the iterative methods."""
    return fm.FockSpace(modes=6, cutoff=6, total=6)


def ring_hopping(sites: int) -> fm.LadderExpr:
    expr = fm.LadderExpr()
    for i in range(sites):
        j = (i + 1) % sites
        expr = expr - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
    return expr


def anharmonic_oscillator() -> fm.LadderExpr:
    """A driven Kerr mode: its ground state needs more levels as the cutoff grows."""
    return fm.number(0) * (fm.number(0) - 1) + fm.raising(0) + fm.lowering(0)


def symmetric() -> fm.SymmetricSpace:
    """Zero-momentum sector of a 4-site ring holding two quanta."""
    return fm.SymmetricSpace(fm.FockSpace(4, 2, total=2), [(fm.ring_translation(4), 0)])


def empty_sector() -> fm.SymmetricSpace:
    """Two modes holding one quantum each, odd under exchange: no state (dim 0)."""
    return fm.SymmetricSpace(fm.FockSpace(2, 1, total=2), [(fm.ring_reflection(2), 1)])


EMPTY_WRONG = r"needs a space with states, but .* is empty \(dim 0"
EMPTY_ADVICE = r"choose another sector label, total or cutoffs"


def second_writer(tmp: Path) -> object:
    from fockmill.store.claims import claim

    with claim(tmp / "same.sqlite"):
        # Another writer of the same name, as a second process would be (the claim
        # is a lock on an open file, so a second open in this process conflicts too).
        return ResultsStore.create(tmp / "same.sqlite", {})


def model_text(extra: str = "", model: str | None = None) -> str:
    base = model or '[model]\nkind = "bose-hubbard"\nlattice = "chain"\nsites = 2\ntotal = 2\n'
    return base + extra


# -- files for the results store and the CLI ----------------------------------------------


def text_file(tmp: Path) -> Path:
    path = tmp / "notes.sqlite"
    path.write_text("invented lab notes, not a database\n" * 20)
    return path


def foreign_database(tmp: Path) -> Path:
    path = tmp / "inventory.sqlite"
    with sqlite3.connect(path) as connection:
        connection.execute("CREATE TABLE parts (name TEXT, count INTEGER)")
        connection.execute("INSERT INTO parts VALUES ('resonator', 6)")
    connection.close()
    return path


def our_store(tmp: Path, name: str = "ours.sqlite") -> Path:
    path = tmp / name
    ResultsStore.create(path, {"model_name": "invented"}).close()
    return path


def corrupt_store(tmp: Path) -> Path:
    path = our_store(tmp, "corrupt.sqlite")
    raw = bytearray(path.read_bytes())
    raw[100:] = bytes(len(raw) - 100)  # keep the header, wipe every page
    path.write_bytes(bytes(raw))
    return path


def truncated_store(tmp: Path) -> Path:
    path = our_store(tmp, "truncated.sqlite")
    path.write_bytes(path.read_bytes()[:50])
    return path


def newer_store(tmp: Path) -> Path:
    path = our_store(tmp, "newer.sqlite")
    with sqlite3.connect(path) as connection:
        connection.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    connection.close()
    return path


def non_utf8_model(tmp: Path) -> Path:
    path = tmp / "latin1.toml"
    path.write_bytes(b'[model]\nkind = "bose-hubbard"\n# r\xe9sonateur\n')
    return path


# -- the catalogue ------------------------------------------------------------------------


@dataclass(frozen=True)
class BadInput:
    """One bad call and what it must raise."""

    description: str
    call: Callable[[Path], object]
    error: type[BaseException]
    what_wrong: str
    what_to_do: str | None


CATALOGUE: list[BadInput] = [
    # Fock spaces
    BadInput(
        "cutoff is a float",
        lambda t: fm.FockSpace(2, 1.5),
        TypeError,
        r"cutoff.*1\.5",
        r"must be an integer",
    ),
    BadInput(
        "cutoff is negative",
        lambda t: fm.FockSpace(2, -1),
        SpaceError,
        r"cutoff.*-1",
        r"must be >= 1",
    ),
    BadInput(
        "cutoff is zero",
        lambda t: fm.FockSpace(2, 0),
        SpaceError,
        r"cutoff.*got 0",
        r"must be >= 1",
    ),
    BadInput(
        "cutoff is a bool",
        lambda t: fm.FockSpace(2, True),
        TypeError,
        r"cutoff.*True",
        r"must be an integer",
    ),
    BadInput(
        "one cutoff entry is a bool",
        lambda t: fm.FockSpace(cutoff=[2, False]),
        TypeError,
        r"cutoff\[1\].*bool",
        r"must be an integer",
    ),
    BadInput(
        "cutoff is a string",
        lambda t: fm.FockSpace(2, "3"),
        TypeError,
        r"cutoff.*'3'",
        r"must be an integer",
    ),
    BadInput(
        "cutoff above 65535",
        lambda t: fm.FockSpace(1, 65536),
        SpaceError,
        r"65536",
        r"at most 65535",
    ),
    BadInput(
        "cutoff list longer than modes",
        lambda t: fm.FockSpace(2, [1, 2, 3]),
        SpaceError,
        r"cutoff has 3 entries but modes=2",
        r"one entry per mode",
    ),
    BadInput(
        "single cutoff without modes",
        lambda t: fm.FockSpace(cutoff=3),
        TypeError,
        r"cutoff is a single integer",
        r"give modes=",
    ),
    BadInput(
        "modes is a bool",
        lambda t: fm.FockSpace(True, 2),
        TypeError,
        r"modes.*bool",
        r"must be an integer",
    ),
    BadInput(
        "modes is zero", lambda t: fm.FockSpace(0, 2), SpaceError, r"modes.*got 0", r"must be >= 1"
    ),
    BadInput(
        "modes is a float",
        lambda t: fm.FockSpace(2.0, 2),
        TypeError,
        r"modes.*2\.0",
        r"must be an integer",
    ),
    BadInput(
        "too many modes",
        lambda t: fm.FockSpace(100_000, 1, 1),
        SpaceError,
        r"100000 modes",
        r"at most 4096",
    ),
    BadInput(
        "total is negative",
        lambda t: fm.FockSpace(2, 2, -1),
        SpaceError,
        r"total.*-1",
        r"must be >= 0",
    ),
    BadInput(
        "total is a float",
        lambda t: fm.FockSpace(2, 2, 1.0),
        TypeError,
        r"total.*1\.0",
        r"must be an integer",
    ),
    BadInput(
        "total is a bool",
        lambda t: fm.FockSpace(2, 2, True),
        TypeError,
        r"total.*bool",
        r"must be an integer",
    ),
    BadInput(
        "total beyond 64 bits",
        lambda t: fm.FockSpace(2, 2, 2**70),
        SpaceError,
        r"total",
        r"(at most|must be|lower)",
    ),
    BadInput(
        "weights one short",
        lambda t: fm.FockSpace(2, 2, 2, weights=[1]),
        SpaceError,
        r"weights has 1 entries but modes=2",
        r"one entry per mode",
    ),
    BadInput(
        "weight is negative",
        lambda t: fm.FockSpace(2, 2, 2, weights=[1, -1]),
        SpaceError,
        r"weights\[1\].*-1",
        r"must be >= 0",
    ),
    BadInput(
        "weight is a float",
        lambda t: fm.FockSpace(2, 2, 2, weights=[1.5, 1]),
        TypeError,
        r"weights\[0\].*1\.5",
        r"must be an integer",
    ),
    BadInput(
        "weight beyond 32 bits",
        lambda t: fm.FockSpace(2, 2, 2, weights=[2**40, 1]),
        SpaceError,
        r"weight",
        r"(at most|must be)",
    ),
    BadInput(
        "modulus 1",
        lambda t: fm.FockSpace(2, 2, 1, modulus=1),
        SpaceError,
        r"modulus.*1",
        r"must be >= 2",
    ),
    BadInput(
        "modulus without total",
        lambda t: fm.FockSpace(2, 2, modulus=2),
        SpaceError,
        r"modulus needs a total",
        r"pass total=0 or total=1",
    ),
    BadInput(
        "modulus beyond 64 bits",
        lambda t: fm.FockSpace(2, 2, 1, modulus=2**70),
        SpaceError,
        r"modulus",
        r"(at most|must be)",
    ),
    BadInput(
        "empty sector: total above reach",
        lambda t: fm.FockSpace(2, 1, 5),
        SpaceError,
        r"no state has total 5",
        r"lower the total or raise the cutoffs",
    ),
    BadInput(
        "empty sector: odd total, even weights",
        lambda t: fm.FockSpace(2, 3, 1, weights=[2, 2]),
        SpaceError,
        r"no state",
        r"change the total, the weights or the cutoffs",
    ),
    BadInput(
        "full space of 40 modes, cutoff 40",
        lambda t: fm.FockSpace(40, 40),
        SizeLimitError,
        r"(?s)^(?!.*18446744073709551615).*(dimension|states)",
        r"(total|sector|fewer|lower|smaller)",
    ),
    BadInput(
        "counting tables too large (cutoff and total 65535)",
        lambda t: fm.FockSpace(1, 65535, 65535),
        SizeLimitError,
        r"ranking tables",
        r"(lower|smaller|reduce|fewer)",
    ),
    BadInput(
        "basis index out of range", lambda t: pair().state(3), IndexError, r"index 3", r"dim 3"
    ),
    BadInput(
        "occupations are floats",
        lambda t: pair().index([1.0, 1.0]),
        TypeError,
        r"occupations.*float64",
        r"must be integers",
    ),
    BadInput(
        "occupations have the wrong length",
        lambda t: pair().index([1, 1, 0]),
        ValueError,
        r"got \(3,\)",
        r"must have shape \(2,\)",
    ),
    # Expressions
    BadInput(
        "NaN coefficient",
        lambda t: float("nan") * fm.number(0),
        ValueError,
        r"nan",
        r"must be finite",
    ),
    BadInput(
        "infinite coefficient",
        lambda t: fm.number(0) * float("inf"),
        ValueError,
        r"inf",
        r"must be finite",
    ),
    BadInput(
        "None coefficient",
        lambda t: fm.number(0) + None,
        TypeError,
        r"None",
        r"must be finite numbers",
    ),
    BadInput(
        "string coefficient",
        lambda t: fm.number(0) * "2",
        TypeError,
        r"'2'",
        r"must be finite numbers",
    ),
    BadInput(
        "NaN in a term mapping",
        lambda t: fm.LadderExpr({((0, 1, 1),): float("nan")}),
        ValueError,
        r"nan",
        r"must be finite",
    ),
    BadInput(
        "coefficient overflows to inf",
        lambda t: (fm.number(0) * 1e300) * 1e300,
        ValueError,
        r"(inf|overflow)",
        r"finite",
    ),
    BadInput(
        "negative mode",
        lambda t: fm.lowering(-1),
        ValueError,
        r"got -1",
        r"modes are numbered 0, 1, 2",
    ),
    BadInput(
        "float mode", lambda t: fm.raising(1.0), TypeError, r"mode.*1\.0", r"a mode index such as 0"
    ),
    BadInput(
        "bool mode", lambda t: fm.number(True), TypeError, r"bool", r"pass the mode index as an int"
    ),
    BadInput(
        "negative power", lambda t: fm.lowering(0) ** -1, ValueError, r"got -1", r"non-negative"
    ),
    BadInput(
        "float power", lambda t: fm.lowering(0) ** 0.5, TypeError, r"0\.5", r"non-negative int"
    ),
    BadInput(
        "division by zero",
        lambda t: fm.number(0) / 0,
        ZeroDivisionError,
        r"by zero",
        r"pass a nonzero number",
    ),
    BadInput(
        "division by an expression",
        lambda t: fm.number(0) / fm.number(1),
        TypeError,
        r"divide by a LadderExpr",
        r"only division by a number",
    ),
    BadInput(
        "key repeats a mode",
        lambda t: fm.LadderExpr({((0, 1, 1), (0, 1, 0)): 1.0}),
        ValueError,
        r"each mode once",
        r"multiply expressions with \*",
    ),
    BadInput(
        "key has an empty factor",
        lambda t: fm.LadderExpr({((0, 0, 0),): 1.0}),
        ValueError,
        r"p \+ q == 0",
        r"leave out modes",
    ),
    BadInput(
        "terms given as a list",
        lambda t: fm.LadderExpr([((0, 1, 1), 1.0)]),
        TypeError,
        r"got list",
        r"for example",
    ),
    # Builds
    BadInput(
        "mode out of range",
        lambda t: fm.build_matrix(fm.number(5), pair()),
        ModeIndexError,
        r"mode 5.*only 2 modes",
        r"use a space with more modes",
    ),
    BadInput(
        "mode index beyond 64 bits",
        lambda t: fm.build_matrix(fm.number(2**64), pair()),
        ModeIndexError,
        r"mode",
        r"(more modes|fix the index)",
    ),
    BadInput(
        "term changes the total",
        lambda t: fm.build_matrix(HOP + fm.raising(0), pair()),
        ChargeError,
        r"a0†",
        r"drop the term",
    ),
    BadInput(
        "term breaks the parity",
        lambda t: fm.build_matrix(fm.raising(1), fm.FockSpace(2, 2, 0, modulus=2)),
        ChargeError,
        r"a1†.*mod 2",
        r"drop the term",
    ),
    BadInput(
        "power above 65535",
        lambda t: fm.build_matrix(fm.LadderExpr({((0, 70000, 70000),): 1.0}), pair()),
        ValueError,
        r"power above 65535",
        None,
    ),
    BadInput(
        "power beyond 32 bits",
        lambda t: fm.build_matrix(fm.LadderExpr({((0, 2**40, 2**40),): 1.0}), pair()),
        ValueError,
        r"power",
        r"(65535|at most|not supported)",
    ),
    BadInput(
        "expression is a string",
        lambda t: fm.build_matrix("a0† a1", pair()),
        TypeError,
        r"got str",
        r"built from fm.lowering",
    ),
    BadInput(
        "space is an int",
        lambda t: fm.build_matrix(HOP, 3),
        TypeError,
        r"got int",
        r"expected a fm.FockSpace",
    ),
    BadInput(
        "negative thread count",
        lambda t: fm.build_matrix(HOP, pair(), threads=-1),
        ValueError,
        r"got -1",
        r"positive integer, 0 or None",
    ),
    BadInput(
        "float thread count",
        lambda t: fm.build_matrix(HOP, pair(), threads=1.5),
        TypeError,
        r"1\.5",
        r"positive integer, 0 or None",
    ),
    BadInput(
        "bool thread count",
        lambda t: fm.build_matrix(HOP, pair(), threads=True),
        TypeError,
        r"True",
        r"positive integer, 0 or None",
    ),
    BadInput(
        "absurd thread count",
        lambda t: fm.build_matrix(HOP, pair(), threads=4096),
        ValueError,
        r"4096",
        r"at most 1024",
    ),
    BadInput(
        "index dtype float64",
        lambda t: fm.build_matrix(HOP, pair(), index_dtype=np.float64),
        TypeError,
        r"index_dtype",
        r"numpy.int32, numpy.int64 or None",
    ),
    BadInput(
        "sector CSR above a tiny memory_limit",
        lambda t: fm.build_matrix(ring_hopping(8), fm.FockSpace(8, 8, 8), memory_limit=1024),
        SizeLimitError,
        r"^building the sparse matrix needs 0\.00069 GiB but the memory limit is "
        r"9\.5e-07 GiB; .*\(dim=6,435",
        r"fm.build_operator",
    ),
    BadInput(
        "negative memory_limit",
        lambda t: fm.build_matrix(HOP, pair(), memory_limit=-1),
        ValueError,
        r"memory_limit.*-1",
        r"(positive|>= ?0|None)",
    ),
    BadInput(
        "memory_limit is a string",
        lambda t: fm.build_matrix(HOP, pair(), memory_limit="1G"),
        TypeError,
        r"memory_limit",
        r"(integer|bytes)",
    ),
    BadInput(
        "estimate with zero samples",
        lambda t: fm.estimate_memory(HOP, pair(), samples=0),
        ValueError,
        r"got 0",
        r"positive integer",
    ),
    # Matrix-free operators
    BadInput(
        "product with a vector of the wrong length",
        lambda t: fm.build_operator(HOP, pair()) @ np.ones(4),
        ValueError,
        r"(4|shape)",
        r"\(3,\)",
    ),
    BadInput(
        "product with a string vector",
        lambda t: fm.build_operator(HOP, pair()) @ np.array(["a", "b", "c"]),
        TypeError,
        r"(<U1|str)",
        r"float or complex",
    ),
    BadInput(
        "operator with a negative thread count",
        lambda t: fm.build_operator(HOP, pair(), threads=-2),
        ValueError,
        r"got -2",
        r"positive integer, 0 or None",
    ),
    # Solvers
    BadInput(
        "ground state of a non-Hermitian expression",
        lambda t: fm.ground_state(NOT_HERMITIAN, pair()),
        NotHermitianError,
        r"not Hermitian.*a0† a1",
        r"add the Hermitian conjugate",
    ),
    BadInput(
        "levels of a non-Hermitian expression",
        lambda t: fm.lowest_levels(NOT_HERMITIAN, pair(), k=2),
        NotHermitianError,
        r"not Hermitian",
        r"h \+ h.adjoint\(\)",
    ),
    BadInput(
        "imaginary on-site energy",
        lambda t: fm.ground_state(1j * fm.number(0), pair()),
        NotHermitianError,
        r"1j·a0† a0",
        r"hermitian_part",
    ),
    BadInput(
        "unknown method",
        lambda t: fm.ground_state(HOP, pair(), method="arpack"),
        ValueError,
        r"'arpack'",
        r"one of \('auto', 'dense'",
    ),
    BadInput(
        "method in capitals",
        lambda t: fm.lowest_levels(HOP, pair(), method="DENSE"),
        ValueError,
        r"'DENSE'",
        r"one of",
    ),
    BadInput(
        "negative tol",
        lambda t: fm.ground_state(HOP, pair(), tol=-1e-9),
        ValueError,
        r"-1e-09",
        r"between 0 and 1",
    ),
    BadInput(
        "NaN tol",
        lambda t: fm.ground_state(HOP, pair(), tol=float("nan")),
        ValueError,
        r"nan",
        r"between 0 and 1",
    ),
    BadInput(
        "bool tol",
        lambda t: fm.ground_state(HOP, pair(), tol=True),
        ValueError,
        r"tol.*True",
        r"between 0 and 1",
    ),
    BadInput(
        "k larger than the space",
        lambda t: fm.lowest_levels(HOP, pair(), k=4),
        ValueError,
        r"got 4",
        r"between 1 and the space's dimension 3",
    ),
    BadInput(
        "k = 0",
        lambda t: fm.lowest_levels(HOP, pair(), k=0),
        ValueError,
        r"got 0",
        r"between 1 and",
    ),
    BadInput(
        "k is a float",
        lambda t: fm.lowest_levels(HOP, pair(), k=2.0),
        TypeError,
        r"2\.0",
        r"must be an integer",
    ),
    BadInput(
        "k is a bool",
        lambda t: fm.lowest_levels(HOP, pair(), k=True),
        TypeError,
        r"True",
        r"must be an integer",
    ),
    BadInput(
        "k = dim for an iterative method",
        lambda t: fm.lowest_levels(ring_hopping(6), hexamer(), k=462, method="csr"),
        ValueError,
        r"k=462",
        r"use method='dense'",
    ),
    BadInput(
        "solver with a negative thread count",
        lambda t: fm.ground_state(HOP, pair(), threads=-2),
        ValueError,
        r"got -2",
        r"positive integer, 0 or None",
    ),
    BadInput(
        "solver with a float thread count",
        lambda t: fm.lowest_levels(HOP, pair(), threads=2.0),
        TypeError,
        r"2\.0",
        r"positive integer, 0 or None",
    ),
    BadInput(
        "v0 of the wrong length (dense)",
        lambda t: fm.ground_state(HOP, pair(), v0=np.ones(5)),
        ValueError,
        r"v0.*\(5,\)",
        r"must have shape \(3,\)",
    ),
    BadInput(
        "v0 of the wrong length (levels, dense)",
        lambda t: fm.lowest_levels(HOP, pair(), k=2, v0=np.ones(5)),
        ValueError,
        r"v0.*\(5,\)",
        r"must have shape \(3,\)",
    ),
    BadInput(
        "v0 of the wrong length (csr)",
        lambda t: fm.ground_state(ring_hopping(6), hexamer(), method="csr", v0=np.ones(5)),
        ValueError,
        r"v0.*\(5,\)",
        r"must have shape \(462,\)",
    ),
    BadInput(
        "v0 holds NaN",
        lambda t: fm.ground_state(
            ring_hopping(6), hexamer(), method="lanczos", v0=np.full(462, np.nan)
        ),
        ValueError,
        r"v0 contains NaN",
        None,
    ),
    BadInput(
        "v0 is zero",
        lambda t: fm.ground_state(ring_hopping(6), hexamer(), method="lanczos", v0=np.zeros(462)),
        ValueError,
        r"v0 is zero",
        r"pass a nonzero state",
    ),
    BadInput(
        "v0 of bools",
        lambda t: fm.ground_state(
            ring_hopping(6), hexamer(), method="lanczos", v0=np.ones(462, bool)
        ),
        TypeError,
        r"dtype bool",
        r"must be a float or complex array",
    ),
    BadInput(
        "negative seed",
        lambda t: fm.ground_state(ring_hopping(6), hexamer(), method="lanczos", seed=-1),
        ValueError,
        r"seed.*-1",
        r"non-negative",
    ),
    BadInput(
        "float seed",
        lambda t: fm.ground_state(ring_hopping(6), hexamer(), method="lanczos", seed=1.5),
        TypeError,
        r"seed.*1\.5",
        r"integer",
    ),
    BadInput(
        "negative max_iterations",
        lambda t: fm.ground_state(ring_hopping(6), hexamer(), method="lanczos", max_iterations=-1),
        ValueError,
        r"max_iterations.*-1",
        r"positive",
    ),
    BadInput(
        "no solver fits the memory limit",
        lambda t: fm.ground_state(ring_hopping(8), fm.FockSpace(8, 8, 8), memory_limit=1000),
        SizeLimitError,
        r"no solver fits",
        r"smaller sector or cutoffs",
    ),
    BadInput(
        "solver: mode out of range",
        lambda t: fm.ground_state(fm.number(7), pair()),
        ModeIndexError,
        r"mode 7",
        r"use a space with more modes",
    ),
    BadInput(
        "solver: charge-violating drive",
        lambda t: fm.ground_state(HOP + fm.raising(0) + fm.lowering(0), pair()),
        ChargeError,
        r"a0",
        r"drop the term",
    ),
    # Observables
    BadInput(
        "state of the wrong length",
        lambda t: fm.expectation(HOP, pair(), np.ones(4)),
        ValueError,
        r"got \(4,\)",
        r"must have shape \(3,\)",
    ),
    BadInput(
        "state of strings",
        lambda t: fm.expectation(HOP, pair(), ["a", "b", "c"]),
        TypeError,
        r"<U1",
        r"must be a float or complex array",
    ),
    BadInput(
        "state of bools",
        lambda t: fm.populations(pair(), np.array([True, False, True])),
        TypeError,
        r"dtype bool",
        r"must be a float or complex array",
    ),
    BadInput(
        "state holds NaN",
        lambda t: fm.expectation(HOP, pair(), np.array([1.0, np.nan, 0.0])),
        ValueError,
        r"NaN",
        None,
    ),
    BadInput(
        "state holds inf",
        lambda t: fm.one_body_matrix(pair(), np.array([np.inf, 0.0, 0.0])),
        ValueError,
        r"inf",
        None,
    ),
    BadInput(
        "zero state",
        lambda t: fm.number_variances(pair(), np.zeros(3)),
        ValueError,
        r"is zero",
        r"pass a nonzero state",
    ),
    BadInput(
        "state as a column",
        lambda t: fm.occupation_distribution(pair(), np.ones((3, 1))),
        ValueError,
        r"\(3, 1\)",
        r"must have shape \(3,\)",
    ),
    BadInput(
        "state is None",
        lambda t: fm.top_level_weights(pair(), None),
        ValueError,
        r"got \(\)",
        r"must have shape \(3,\)",
    ),
    BadInput(
        "observable on a missing mode",
        lambda t: fm.expectation(fm.number(4), pair(), np.ones(3)),
        ModeIndexError,
        r"mode 4.*only 2 modes",
        None,
    ),
    BadInput(
        "subsystem mode out of range",
        lambda t: fm.entanglement_entropy(pair(), np.ones(3), [3]),
        ValueError,
        r"got \[3\]",
        r"distinct modes in 0\.\.1",
    ),
    BadInput(
        "subsystem repeats a mode",
        lambda t: fm.entanglement_entropy(pair(), np.ones(3), [0, 0]),
        ValueError,
        r"\[0, 0\]",
        r"distinct modes",
    ),
    BadInput(
        "subsystem of floats",
        lambda t: fm.entanglement_entropy(pair(), np.ones(3), [0.5]),
        TypeError,
        r"subsystem.*0\.5",
        r"(integer|mode indices)",
    ),
    BadInput(
        "subsystem is None",
        lambda t: fm.entanglement_entropy(pair(), np.ones(3), None),
        TypeError,
        r"subsystem",
        r"(sequence|list) of",
    ),
    BadInput(
        "observable with a negative thread count",
        lambda t: fm.populations(pair(), np.ones(3), threads=-1),
        ValueError,
        r"got -1",
        r"positive integer, 0 or None",
    ),
    # Truncation scans
    BadInput(
        "cutoff scan with step 0",
        lambda t: fm.converge_cutoffs(HOP, pair(), step=0),
        ValueError,
        r"step.*0",
        r"must be >= 1",
    ),
    BadInput(
        "cutoff scan with a float step",
        lambda t: fm.converge_cutoffs(anharmonic_oscillator(), fm.FockSpace(1, 2), step=1.5),
        TypeError,
        r"step.*1\.5",
        r"integer",
    ),
    BadInput(
        "cutoff scan capped below the start",
        lambda t: fm.converge_cutoffs(anharmonic_oscillator(), fm.FockSpace(1, 4), max_cutoff=2),
        ValueError,
        r"max_cutoff.*2",
        r"(at least|>=)",
    ),
    BadInput(
        "cutoff scan of a missing mode",
        lambda t: fm.converge_cutoffs(HOP, pair(), modes=[5]),
        ValueError,
        r"mode 5",
        r"0\.\.1",
    ),
    BadInput(
        "cutoff scan with float modes",
        lambda t: fm.converge_cutoffs(anharmonic_oscillator(), fm.FockSpace(1, 2), modes=[0.0]),
        TypeError,
        r"modes.*0\.0",
        r"integer",
    ),
    BadInput(
        "cutoff scan with a negative energy_tol",
        lambda t: fm.converge_cutoffs(
            anharmonic_oscillator(), fm.FockSpace(1, 2), energy_tol=-1.0, max_cutoff=6
        ),
        ValueError,
        r"energy_tol.*-1",
        r"positive",
    ),
    # Models
    BadInput(
        "unknown model parameter",
        lambda t: fm.models.bose_hubbard(fm.models.chain_edges(2), total=2).hamiltonian(V=1.0),
        KeyError,
        r"'V'",
        r"known: \['J', 'U', 'mu'\]",
    ),
    BadInput(
        "NaN model parameter",
        lambda t: fm.models.bose_hubbard(fm.models.chain_edges(2), total=2).hamiltonian(
            U=float("nan")
        ),
        ValueError,
        r"nan",
        r"must be finite",
    ),
    BadInput(
        "self-loop edge",
        lambda t: fm.models.bose_hubbard([(0, 0)], total=1),
        ValueError,
        r"self-loop",
        r"belong in interaction or chemical_potential",
    ),
    BadInput(
        "Bose-Hubbard without cutoff or total",
        lambda t: fm.models.bose_hubbard(fm.models.chain_edges(3)),
        ValueError,
        r"cutoff",
        r"give cutoff=\.\.\. .* or total=",
    ),
    # Model files
    BadInput(
        "model file without [model]",
        lambda t: fm.parse_model_text("[solver]\ntol = 1e-9\n"),
        fm.ModelFileError,
        r"model: missing",
        r"expected a \[model\] table",
    ),
    BadInput(
        "model file without kind",
        lambda t: fm.parse_model_text("[model]\nlattice = 'chain'\nsites = 2\ntotal = 2\n"),
        fm.ModelFileError,
        r"model\.kind: missing",
        r"expected one of",
    ),
    BadInput(
        "model kind misspelt",
        lambda t: fm.parse_model_text(model_text().replace("bose-hubbard", "bose-hubard")),
        fm.ModelFileError,
        r"model\.kind: .*'bose-hubard'",
        r"did you mean \"bose-hubbard\"",
    ),
    BadInput(
        "model file without lattice",
        lambda t: fm.parse_model_text("[model]\nkind = 'bose-hubbard'\nsites = 2\ntotal = 2\n"),
        fm.ModelFileError,
        r"model\.lattice: missing",
        r"expected one of",
    ),
    BadInput(
        "sites given as a string",
        lambda t: fm.parse_model_text(model_text().replace("sites = 2", "sites = '2'")),
        fm.ModelFileError,
        r"model\.sites: .*'2' \(string\)",
        r"expected an integer",
    ),
    BadInput(
        "sites missing",
        lambda t: fm.parse_model_text(model_text().replace("sites = 2\n", "")),
        fm.ModelFileError,
        r"model\.sites: missing",
        r"expected an integer",
    ),
    BadInput(
        "total given as a float",
        lambda t: fm.parse_model_text(model_text().replace("total = 2", "total = 2.0")),
        fm.ModelFileError,
        r"model\.total: .*2\.0 \(float\)",
        r"expected an integer",
    ),
    BadInput(
        "cutoff given as a bool",
        lambda t: fm.parse_model_text(model_text().replace("total = 2", "cutoff = true")),
        fm.ModelFileError,
        r"model\.cutoff: .*\(boolean\)",
        r"expected an integer",
    ),
    BadInput(
        "misspelt key in [model]",
        lambda t: fm.parse_model_text(model_text("sitez = 3\n")),
        fm.ModelFileError,
        r"model\.sitez: unknown key",
        r"did you mean 'sites'",
    ),
    BadInput(
        "parameter given as a string",
        lambda t: fm.parse_model_text(model_text("[parameters]\nU = 'big'\n")),
        fm.ModelFileError,
        r"parameters\.U: .*'big'",
        r"expected a finite number",
    ),
    BadInput(
        "unknown parameter in the file",
        lambda t: fm.parse_model_text(model_text("[parameters]\nV = 1.0\n")),
        fm.ModelFileError,
        r"parameters\.V: unknown key",
        r"expected one of 'J', 'U', 'mu'",
    ),
    BadInput(
        "sweep with one point",
        lambda t: fm.parse_model_text(model_text("[sweep.U]\nstart = 0.0\nstop = 1.0\nnum = 1\n")),
        fm.ModelFileError,
        r"sweep\.U\.num: .*got 1",
        r"expected an integer from 2",
    ),
    BadInput(
        "empty sweep table",
        lambda t: fm.parse_model_text(model_text("[sweep.U]\n")),
        fm.ModelFileError,
        r"sweep\.U: empty",
        r"expected values = \[\.\.\.\]",
    ),
    BadInput(
        "unknown recorded quantity",
        lambda t: fm.parse_model_text(model_text("[record]\nquantities = ['energi']\n")),
        fm.ModelFileError,
        r"record\.quantities\[0\]: .*'energi'",
        r"did you mean \"energy\"",
    ),
    BadInput(
        "unknown solver method in the file",
        lambda t: fm.parse_model_text(model_text("[solver]\nmethod = 'arpack'\n")),
        fm.ModelFileError,
        r"solver\.method: .*'arpack'",
        r"expected one of",
    ),
    BadInput(
        "negative solver tol in the file",
        lambda t: fm.parse_model_text(model_text("[solver]\ntol = -1.0\n")),
        fm.ModelFileError,
        r"solver\.tol: .*-1\.0",
        r"a number between 0 and 1",
    ),
    BadInput(
        "float thread count in the file",
        lambda t: fm.parse_model_text(model_text("[solver]\nthreads = 1.5\n")),
        fm.ModelFileError,
        r"solver\.threads: .*1\.5",
        r"expected an integer",
    ),
    BadInput(
        "invalid TOML",
        lambda t: fm.parse_model_text("[model\nkind ="),
        fm.ModelFileError,
        r"not valid TOML",
        r"line 1, column",
    ),
    BadInput(
        "unknown schema version",
        lambda t: fm.parse_model_text("schema = 2\n" + model_text()),
        fm.ModelFileError,
        r"schema: .*got 2",
        r"expected 1",
    ),
    BadInput(
        "missing cavity cutoff",
        lambda t: fm.parse_model_text("[model]\nkind = 'jaynes-cummings-hubbard'\nsites = 2\n"),
        fm.ModelFileError,
        r"model\.cavity_cutoff: missing",
        r"expected an integer",
    ),
    BadInput(
        "edge from a site to itself",
        lambda t: fm.parse_model_text(
            "[model]\nkind = 'bose-hubbard'\nlattice = 'edges'\nedges = [[0, 0]]\ntotal = 1\n"
        ),
        fm.ModelFileError,
        r"model\.edges\[0\]: ",
        r"expected two different modes",
    ),
    BadInput(
        "model file with an empty sector",
        lambda t: fm.parse_model_text(model_text().replace("total = 2", "cutoff = 1\ntotal = 5")),
        fm.ModelFileError,
        r"model: cannot build this model: no state has total 5",
        r"lower the total or raise the cutoffs",
    ),
    BadInput(
        "model file that is not UTF-8",
        lambda t: fm.load_model_file(non_utf8_model(t)),
        fm.ModelFileError,
        r"latin1\.toml: not UTF-8",
        None,
    ),
    # Results stores
    BadInput(
        "results file that is plain text",
        lambda t: ResultsStore.open(text_file(t)),
        StoreError,
        r"notes\.sqlite.* not a fockmill results file",
        r"give the path of a file written by a fockmill sweep",
    ),
    BadInput(
        "results file that is another SQLite database",
        lambda t: ResultsStore.open(foreign_database(t)),
        StoreError,
        r"SQLite database of another program, not a fockmill results file",
        r"give the path of a file written by a fockmill sweep",
    ),
    BadInput(
        "sweep output that is another SQLite database",
        lambda t: ResultsStore.open(foreign_database(t), purpose="resume"),
        StoreError,
        r"not a fockmill results file",
        r"choose another output path",
    ),
    BadInput(
        "results file with wiped pages",
        lambda t: ResultsStore.open(corrupt_store(t)),
        StoreError,
        r"malformed|damaged",
        r"(new path|new file|from a copy)",
    ),
    BadInput(
        "results file cut short",
        lambda t: ResultsStore.open(truncated_store(t)),
        StoreError,
        r"malformed|damaged",
        r"(new path|new file|from a copy)",
    ),
    BadInput(
        "results file from a newer fockmill",
        lambda t: ResultsStore.open(newer_store(t)),
        StoreError,
        r"schema version 99",
        r"use the fockmill version that wrote it",
    ),
    BadInput(
        "results file missing",
        lambda t: ResultsStore.open(t / "absent.sqlite"),
        StoreError,
        r"absent\.sqlite.* does not exist",
        r"run a sweep",
    ),
    BadInput(
        "results path is a directory",
        lambda t: ResultsStore.open(t),
        StoreError,
        r"is a directory",
        r"give the path of a file inside it",
    ),
    # Issue 17: the third round of faults
    BadInput(
        "sector vector with NaN expanded",
        lambda t: symmetric().expand(np.full(symmetric().dim, np.nan)),
        ValueError,
        r"sector vector contains NaN or inf",
        r"give finite amplitudes",
    ),
    BadInput(
        "base-space vector with inf projected",
        lambda t: symmetric().project(np.full(symmetric().base.dim, np.inf)),
        ValueError,
        r"base-space vector contains NaN or inf",
        r"give finite amplitudes",
    ),
    *[
        BadInput(
            f"{name} on an empty sector",
            call,
            SpaceError,
            EMPTY_WRONG,
            EMPTY_ADVICE,
        )
        for name, call in [
            ("thermal", lambda t: fm.thermal(HOP, empty_sector(), [1.0])),
            ("thermal ftlm", lambda t: fm.thermal(HOP, empty_sector(), [1.0], method="ftlm")),
            ("ground_state", lambda t: fm.ground_state(HOP, empty_sector())),
            ("lowest_levels", lambda t: fm.lowest_levels(HOP, empty_sector(), k=1)),
            ("evolve", lambda t: fm.evolve(HOP, empty_sector(), np.zeros(0), [0.0, 1.0])),
            (
                "spectral_function",
                lambda t: fm.spectral_function(
                    HOP, empty_sector(), np.zeros(0), fm.lowering(0), [0.0]
                ),
            ),
        ]
    ],
    BadInput(
        "spectral_function with omegas of strings",
        lambda t: fm.spectral_function(HOP, pair(), np.eye(3)[0], fm.lowering(0), ["a", "b"]),
        TypeError,
        r"omegas must be real numbers.*'a'",
        r"array of floats",
    ),
    BadInput(
        "exact thermal larger than the memory limit",
        lambda t: fm.thermal(HOP, hexamer(), [1.0], method="exact", memory_limit=2**20),
        SizeLimitError,
        r"method 'exact' .* needs \d+\.\d+ GiB but the memory limit is 0\.00098 GiB",
        r"use method='ftlm'",
    ),
    BadInput(
        "a second writer of a results file",
        lambda t: second_writer(t),
        StoreError,
        r"being written by another fockmill process \d+ on .*claim file is .*\.same\.sqlite\.claim",
        r"wait for that run to finish, stop it, or choose another path",
    ),
    BadInput(
        "new results file over an existing one",
        lambda t: ResultsStore.create(our_store(t), {}),
        StoreError,
        r"exists already",
        r"choose another path",
    ),
]


@pytest.mark.parametrize("case", CATALOGUE, ids=[c.description for c in CATALOGUE])
def test_bad_input_is_refused_clearly(case: BadInput, tmp_path: Path) -> None:
    with pytest.raises(case.error) as caught:
        case.call(tmp_path)
    message = str(caught.value)
    assert re.search(case.what_wrong, message), f"message does not say what was wrong: {message}"
    if case.what_to_do is not None:
        assert re.search(case.what_to_do, message), f"message does not say what to do: {message}"


def test_catalogue_is_large_and_unique() -> None:
    descriptions = [c.description for c in CATALOGUE]
    assert len(descriptions) == len(set(descriptions))
    assert len(CATALOGUE) + len(CHILD_CASES) + len(CLI_CASES) >= 40


def test_mode_errors_are_also_index_errors() -> None:
    # A caller that only knows the builtin IndexError still catches them.
    with pytest.raises(IndexError):
        fm.build_matrix(fm.number(2), pair())
    with pytest.raises(IndexError):
        fm.expectation(fm.number(2), pair(), np.ones(3))
    with pytest.raises(ValueError):
        fm.build_operator(fm.lowering(9), pair())


def test_model_file_error_names_the_key() -> None:
    with pytest.raises(fm.ModelFileError) as caught:
        fm.parse_model_text(model_text("[sweep.U]\nstart = 0.0\nstop = 'x'\nnum = 3\n"))
    assert caught.value.key == "sweep.U.stop"
    assert caught.value.source == "<string>"


def test_foreign_files_are_left_untouched(tmp_path: Path) -> None:
    """Refusing a file must not write to it (or create journal files beside it)."""
    for make in (text_file, foreign_database, corrupt_store):
        path = make(tmp_path)
        before = path.read_bytes()
        neighbours = set(tmp_path.iterdir())
        with pytest.raises(StoreError):
            ResultsStore.open(path)
        assert path.read_bytes() == before
        assert set(tmp_path.iterdir()) == neighbours


# -- calls that could abort the interpreter: run in a child process -----------------------

# Big requests must be refused with SizeLimitError (a MemoryError) before any allocation;
# a native allocation failure aborts the whole process instead.
CHILD_CASES: list[tuple[str, str, str | None, str, str | None]] = [
    # (description, code, exception class name or None for success, what wrong / result, what to do)
    (
        "occupations of a 2.8e14-state space",
        "fm.FockSpace(3, 65535).occupations()",
        "SizeLimitError",
        r"occupations|states|dim",
        r"(smaller|lower|sector|total)",
    ),
    (
        "Lanczos on a 2.8e14-state space",
        "fm.ground_state(fm.number(0), fm.FockSpace(3, 65535), method='lanczos', "
        "cutoff_warning=None)",
        "SizeLimitError",
        r"Lanczos|vector|dim",
        r"(smaller|lower|sector|total)",
    ),
    (
        "operator eigsh on a 2.8e14-state space",
        "fm.lowest_levels(fm.number(0), fm.FockSpace(3, 65535), k=2, method='operator')",
        "SizeLimitError",
        r"vector|dim|Krylov",
        r"(smaller|lower|sector|total)",
    ),
    (
        "one basis state of a 2.8e14-state space",
        "print(fm.FockSpace(3, 65535).state(5))",
        None,
        r"\(0, 0, 5\)",
        None,
    ),
]

CHILD = textwrap.dedent(
    """
    import resource, sys
    # Cap the address space: a runaway allocation fails here instead of swapping the
    # shared machine (an uncaught native allocation failure then aborts the child).
    resource.setrlimit(resource.RLIMIT_AS, (6 * 2**30, 6 * 2**30))
    import fockmill as fm
    try:
        exec(sys.argv[1])
    except BaseException as exc:
        print("RAISED", type(exc).__name__, str(exc).replace("\\n", " "))
    else:
        print("RETURNED")
    """
)


@pytest.mark.slow
@pytest.mark.parametrize("case", CHILD_CASES, ids=[c[0] for c in CHILD_CASES])
def test_huge_requests_are_refused_without_crashing(
    case: tuple[str, str, str | None, str, str | None],
) -> None:
    _, code, error, what_wrong, what_to_do = case
    child = subprocess.run(
        [sys.executable, "-c", CHILD, code], capture_output=True, text=True, timeout=120
    )
    assert child.returncode == 0, (
        f"the interpreter died ({child.returncode}): {child.stderr[-600:]}"
    )
    output = child.stdout
    if error is None:
        assert "RETURNED" in output, output
    else:
        assert output.startswith(f"RAISED {error} "), output
        if what_to_do is not None:
            assert re.search(what_to_do, output), f"message does not say what to do: {output}"
    assert re.search(what_wrong, output), output


MEMORY_PROBE = textwrap.dedent(
    """
    import resource
    import fockmill as fm
    from fockmill.exceptions import SizeLimitError

    def peak_mib():
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024

    ring = fm.LadderExpr()
    for i in range(12):
        j = (i + 1) % 12
        ring = ring - (fm.raising(i) * fm.lowering(j) + fm.raising(j) * fm.lowering(i))
    sector = fm.FockSpace(12, 12, 12)  # dim 1,352,078: its CSR takes about 215 MiB
    before = peak_mib()
    for attempt in (
        lambda: fm.FockSpace(40, 40),
        lambda: fm.build_matrix(ring, sector, memory_limit=2**20),
    ):
        try:
            attempt()
        except SizeLimitError:
            pass
        else:
            raise SystemExit("not refused")
    print(peak_mib() - before)
    """
)


@pytest.mark.slow
def test_size_limits_refuse_before_allocating() -> None:
    child = subprocess.run(
        [sys.executable, "-c", MEMORY_PROBE], capture_output=True, text=True, timeout=120
    )
    assert child.returncode == 0, child.stdout + child.stderr
    # The refused build's CSR alone would take ~215 MiB; the ranking tables of the
    # sector are a few MiB (common practice, no source: a refusal allocates nothing big).
    assert float(child.stdout) < 64


# -- the command line ---------------------------------------------------------------------

PAIR_TOML = model_text("[parameters]\nJ = 1.0\nU = 2.0\n")


def write(tmp: Path, name: str, text: str) -> str:
    path = tmp / name
    path.write_text(text)
    return str(path)


CLI_CASES: list[tuple[str, Callable[[Path], list[str]], str, str | None]] = [
    ("no subcommand", lambda t: [], r"choose a subcommand", r"see 'fockmill --help'"),
    (
        "unknown subcommand",
        lambda t: ["frobnicate"],
        r"invalid choice: 'frobnicate'",
        r"choose from",
    ),
    (
        "solve without a model",
        lambda t: ["solve"],
        r"required: MODEL\.toml",
        r"see 'fockmill solve --help'",
    ),
    (
        "solve a missing model file",
        lambda t: ["solve", str(t / "absent.toml")],
        r"absent\.toml' not found",
        None,
    ),
    (
        "solve a file with a misspelt key",
        lambda t: ["solve", write(t, "m.toml", model_text("sitez = 3\n"))],
        r"model\.sitez: unknown key",
        r"did you mean 'sites'",
    ),
    (
        "solve with --set lacking '='",
        lambda t: ["solve", write(t, "m.toml", PAIR_TOML), "--set", "U"],
        r"--set expects NAME=VALUE",
        r"NAME=VALUE",
    ),
    (
        "solve with a non-numeric --set",
        lambda t: ["solve", write(t, "m.toml", PAIR_TOML), "--set", "U=abc"],
        r"'abc' is not a number",
        None,
    ),
    (
        "solve with an unknown parameter",
        lambda t: ["solve", write(t, "m.toml", PAIR_TOML), "--set", "V=1"],
        r"unknown parameter\(s\) \['V'\]",
        r"the model has \['J', 'U', 'mu'\]",
    ),
    (
        "solve with an unknown format",
        lambda t: ["solve", write(t, "m.toml", PAIR_TOML), "--format", "yaml"],
        r"invalid choice: 'yaml'",
        r"choose from",
    ),
    (
        "sweep without --out",
        lambda t: ["sweep", write(t, "m.toml", PAIR_TOML)],
        r"required: --out",
        r"see 'fockmill sweep --help'",
    ),
    (
        "sweep with zero workers",
        lambda t: [
            "sweep",
            write(t, "m.toml", PAIR_TOML),
            "--out",
            str(t / "r.sqlite"),
            "--workers",
            "0",
        ],
        r"got '0'",
        r"expected a positive integer",
    ),
    (
        "sweep a file without a grid",
        lambda t: [
            "sweep",
            write(t, "m.toml", PAIR_TOML),
            "--out",
            str(t / "r.sqlite"),
            "--workers",
            "1",
        ],
        r"defines no sweep grid",
        r"use 'fockmill solve'",
    ),
    (
        "show a missing results file",
        lambda t: ["show", str(t / "absent.sqlite")],
        r"absent\.sqlite' not found",
        None,
    ),
    (
        "show a text file",
        lambda t: ["show", str(text_file(t))],
        r"not a fockmill results file",
        r"give the path of a file written by a fockmill sweep",
    ),
    (
        "show another SQLite database",
        lambda t: ["show", str(foreign_database(t))],
        r"not a fockmill results file",
        r"give the path of a file written by a fockmill sweep",
    ),
    (
        "show a temporary left by a killed writer",
        lambda t: ["show", write(t, ".r.sqlite.4242.0123456789ab.creating", "SQLite format 3")],
        r"temporary file left by process 4242, a fockmill run that stopped while creating "
        r".*r\.sqlite'; it holds no results",
        r"Delete it, or run the command again",
    ),
    (
        "show a damaged results file",
        lambda t: ["show", str(corrupt_store(t))],
        r"malformed|damaged",
        r"(new path|new file|from a copy)",
    ),
]


@pytest.mark.parametrize("case", CLI_CASES, ids=[c[0] for c in CLI_CASES])
def test_cli_bad_input_exits_2_with_one_line(
    case: tuple[str, Callable[[Path], list[str]], str, str | None],
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:
    _, argv, what_wrong, what_to_do = case
    code = cli.main(argv(tmp_path))
    captured = capsys.readouterr()
    assert code == 2
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith("fockmill: error: ")
    assert re.search(what_wrong, lines[0]), lines[0]
    if what_to_do is not None:
        assert re.search(what_to_do, lines[0]), f"message does not say what to do: {lines[0]}"
    assert not (tmp_path / "r.sqlite").exists()


@pytest.mark.slow
def test_cli_process_exit_status_2(tmp_path: Path) -> None:
    """The real command, not just ``main``: status 2 and one line, no traceback."""
    broken = write(tmp_path, "broken.toml", "[model]\nkind = = 'bose-hubbard'\n")
    for argv in (["frobnicate"], ["solve", broken]):
        child = subprocess.run(
            [sys.executable, "-m", "fockmill", *argv],
            capture_output=True,
            text=True,
            timeout=120,
        )
        assert child.returncode == 2
        assert child.stdout == ""
        lines = child.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("fockmill: error: "), child.stderr
