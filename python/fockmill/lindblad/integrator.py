"""scipy's explicit Runge–Kutta integrator of order 8 (``DOP853``; Hairer, Nørsett &
Wanner, Solving Ordinary Differential Equations I, 1993, Sec. II.10) with its memory
given back as soon as the caller is done with it.

scipy's solver object refers to itself through the wrapper it makes around the
right-hand side, a reference cycle: a solver that is dropped keeps its thirteen stage
vectors (and everything else it holds) until Python's cyclic garbage collector happens
to run, which for long-lived objects can take many more solvers. With a state vector of
10⁶ amplitudes that is ~0.2 GB per dropped solver; a trajectory starts a new solver at
every quantum jump, and a process-pool worker ran out of memory after a few dozen.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import numpy as np
import numpy.typing as npt

__all__ = ["runge_kutta_8"]


@contextmanager
def runge_kutta_8(
    rhs: Callable[[float, Any], Any],
    t0: float,
    y0: npt.NDArray[Any],
    t_bound: float,
    tol: float,
) -> Iterator[Any]:
    """A ``scipy.integrate.DOP853`` stepping ``y' = rhs(t, y)`` from ``t0`` towards
    ``t_bound`` with relative and absolute tolerance ``tol``, for use in a ``with``
    block.

    On leaving the block the solver's attributes are cleared, which breaks its
    reference cycle so that its arrays are freed at once; take ``solver.y`` (or a dense
    output, which does not refer to the solver) before leaving.
    """
    from scipy.integrate import DOP853

    solver = DOP853(rhs, t0, np.asarray(y0), t_bound, rtol=tol, atol=tol)
    try:
        yield solver
    finally:
        # Every path of the cycle leaves the solver through its instance dictionary.
        vars(solver).clear()
