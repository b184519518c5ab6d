"""Long runs of a prepared problem: the checkpoint that identifies them, and the hooks the
native solvers report to."""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.settings.progress import Progress
from fockmill.store.checkpoint import DEFAULT_CHECKPOINT_EVERY, Checkpoint, terms_hash

__all__ = ["array_hash", "hamiltonian_hash", "native_hooks", "open_checkpoint"]


def array_hash(v: npt.ArrayLike | None) -> str | None:
    """A short hash of a vector's values (None for None), read without a copy."""
    if v is None:
        return None
    a = np.ascontiguousarray(np.asarray(v))
    digest = hashlib.sha256(str(a.dtype).encode())
    digest.update(a.reshape(-1).view(np.uint8).data)
    return digest.hexdigest()[:16]


def hamiltonian_hash(expr: Any) -> str:
    """The hash of an expression's normal-ordered terms (see :func:`terms_hash`)."""
    return terms_hash(expr.to_native())


def open_checkpoint(
    checkpoint: object,
    every: object,
    *,
    task: str,
    space: Any,
    hamiltonian: str,
    settings: Mapping[str, Any],
) -> Checkpoint | None:
    """The checkpoint of a run (None when ``checkpoint`` is None), refused when the file
    belongs to another run.

    Raises
    ------
    CheckpointError
        The file is not a checkpoint of this run (the difference and path are named).
    TypeError, ValueError
        A path that is not a path, or ``checkpoint_every`` not a positive number.
    """
    if checkpoint is None:
        return None
    identity = {
        "task": task,
        "space": repr(space),
        "hamiltonian": hamiltonian,
        "settings": dict(settings),
    }
    return Checkpoint(
        checkpoint,
        identity,
        every=DEFAULT_CHECKPOINT_EVERY if every is None else every,  # type: ignore[arg-type]
    )


def native_hooks(
    reporter: Progress | None, checkpoint: Checkpoint | None, solver: str
) -> dict[str, Any]:
    """The keywords of ``NativeOperator.lanczos_ground`` / ``lanczos_levels`` for
    progress reports, snapshots and a resumed state."""
    hooks: dict[str, Any] = {}
    if reporter is not None:
        hooks["progress"] = reporter.native()
        hooks["report_every"] = reporter.native_every
    if checkpoint is not None:
        hooks["checkpoint"] = checkpoint
        hooks["checkpoint_every"] = checkpoint.every
        hooks["resume"] = checkpoint.running(solver)
    return hooks
