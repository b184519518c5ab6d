"""The truncation warning: weight on the highest kept level of a truncating cutoff."""

from __future__ import annotations

import warnings
from typing import Any

import numpy as np
import numpy.typing as npt

from fockmill.exceptions import CutoffWarning

__all__ = ["SHOWN_MODES", "warn_cutoff_weights"]

#: Modes named in the warning; the rest are counted.
SHOWN_MODES = 6


def warn_cutoff_weights(
    space: Any,
    weights: npt.NDArray[Any],
    threshold: float | None,
    what: str,
    *,
    stacklevel: int = 3,
) -> None:
    """A :class:`~fockmill.exceptions.CutoffWarning` when a truncating cutoff (>= 2)
    carries more than ``threshold`` of ``what`` (modes with cutoff 1 are two-level
    emitters and never flagged; a cutoff the conserved total caps is not a truncation).
    """
    if threshold is None or not hasattr(space, "binding_cutoffs"):
        return
    binding = space.binding_cutoffs()
    flagged = [
        (i, float(w))
        for i, w in enumerate(weights)
        if binding[i] and space.cutoffs[i] >= 2 and np.isfinite(w) and w > threshold
    ]
    if not flagged:
        return
    detail = ", ".join(f"mode {i}: {w:.2e}" for i, w in flagged[:SHOWN_MODES])
    if len(flagged) > SHOWN_MODES:
        detail += f", … and {len(flagged) - SHOWN_MODES} more modes"
    warnings.warn(
        f"{what} has weight on the highest kept level ({detail}); the cutoff may be too "
        "low. Raise it (see fm.converge_cutoffs). If the truncation is intended, turn this "
        "warning off with cutoff_warning=None in Python or cutoff_warning = false in the "
        "model file's [solver] table",
        CutoffWarning,
        stacklevel=stacklevel + 1,
    )
