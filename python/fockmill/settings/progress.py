"""Progress of long runs: the ``progress=`` option of the solvers, evolutions, spectra,
thermal averages and open-system solvers.

``progress`` is one of

- ``None`` (default): a bar on stderr only when stderr is an interactive terminal, tqdm
  is installed (the optional extra ``progress``) and the run lasts longer than
  ``BAR_DELAY`` seconds (the bar appears then; shorter runs print nothing);
- ``True``: a tqdm bar on stderr from the start (``ImportError`` naming the extra when
  tqdm is missing);
- ``False``: nothing;
- a callable, called with a :class:`ProgressRecord` after every step of the run (the
  native Lanczos solvers call it after every Lanczos step or product) and once more at
  the end.

Reporting costs one Python call per report; the native solvers take the interpreter
back only when a report is due (``benchmarks/bench_checkpoint.py`` measures the cost).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

__all__ = ["BAR_DELAY", "Progress", "ProgressOption", "ProgressRecord", "make_progress"]

#: Seconds a run lasts before the default bar (``progress=None``) appears.
BAR_DELAY = 3.0
#: Seconds between two updates of a bar (callables get every step).
BAR_EVERY = 0.2


@dataclass(frozen=True)
class ProgressRecord:
    """One report of a long run.

    Attributes
    ----------
    task : str
        The computation (``"ground_state"``, ``"evolve"``, ...).
    step : int
        Steps so far (Lanczos steps, Krylov time steps, samples, trajectories ...).
    products : int
        Products with the Hamiltonian (or Liouvillian) so far; 0 where none are counted.
    residual : float or None
        The current residual estimate of an eigensolver or linear solver.
    time : float or None
        The time reached by an evolution.
    elapsed : float
        Seconds since the call started.
    """

    task: str
    step: int
    products: int
    residual: float | None
    time: float | None
    elapsed: float


ProgressOption = bool | Callable[[ProgressRecord], Any] | None


def check_progress(progress: object) -> None:
    """Refuse anything but None, True, False or a callable."""
    if progress is None or isinstance(progress, bool) or callable(progress):
        return
    raise TypeError(
        "progress must be None (a bar in an interactive terminal for long runs), True (a "
        "bar), False (nothing) or a callable receiving a fockmill.ProgressRecord; got "
        f"{progress!r}"
    )


class Progress:
    """Reports of one run to a callable and/or a tqdm bar.

    Parameters
    ----------
    task : str
        Name of the computation, shown on the bar and put in every record.
    callback : callable or None
        Receives every record.
    bar : bool
        Show a tqdm bar on stderr.
    delay : float
        Seconds before the bar appears.
    total : float or None
        The bar's end (an evolution's last time, the number of samples); None when
        unknown (eigensolvers: the bar counts products).
    unit : str
        The bar's unit.
    """

    def __init__(
        self,
        task: str,
        *,
        callback: Callable[[ProgressRecord], Any] | None,
        bar: bool,
        delay: float = 0.0,
        total: float | None = None,
        unit: str = "product",
    ) -> None:
        self.task = task
        self.callback = callback
        self.total = total
        self.started = time.perf_counter()
        self.bar: Any = None
        self.last: ProgressRecord | None = None
        self._bar_at = 0.0
        if bar:
            from tqdm import tqdm

            self.bar = tqdm(
                total=total,
                desc=task,
                unit=unit,
                file=sys.stderr,
                delay=delay,
                dynamic_ncols=True,
                leave=False,
            )

    @property
    def native_every(self) -> float:
        """Seconds between two reports from the native solvers."""
        return 0.0 if self.callback is not None else BAR_EVERY

    def elapsed(self) -> float:
        """Seconds since the run started."""
        return time.perf_counter() - self.started

    def update(
        self,
        *,
        step: int,
        products: int = 0,
        residual: float | None = None,
        time_reached: float | None = None,
    ) -> None:
        """Report the state after a step."""
        record = ProgressRecord(
            task=self.task,
            step=int(step),
            products=int(products),
            residual=None if residual is None or residual != residual else float(residual),
            time=None if time_reached is None else float(time_reached),
            elapsed=self.elapsed(),
        )
        self.last = record
        if self.callback is not None:
            self.callback(record)
        if self.bar is not None and (record.elapsed - self._bar_at >= BAR_EVERY):
            self._bar_at = record.elapsed
            self._draw(record)

    def _draw(self, record: ProgressRecord) -> None:
        if self.total is not None and record.time is not None:
            self.bar.n = float(f"{min(record.time, self.total):.4g}")
        elif self.total is not None:
            self.bar.n = min(record.step, self.total)
        else:
            self.bar.n = record.products or record.step
        if record.residual is not None:
            self.bar.set_postfix_str(f"residual {record.residual:.2e}", refresh=False)
        self.bar.refresh()

    def native(self) -> Callable[[dict[str, Any]], None]:
        """The callable the native solvers report to (``{"step", "products",
        "residual"}``)."""

        def report(values: dict[str, Any]) -> None:
            self.update(
                step=int(values["step"]),
                products=int(values["products"]),
                residual=float(values["residual"]),
            )

        return report

    def close(self) -> None:
        """Draw the last record and close the bar."""
        if self.bar is not None:
            if self.last is not None:
                self._draw(self.last)
            self.bar.close()
            self.bar = None

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _interactive() -> bool:
    try:
        return bool(sys.stderr is not None and sys.stderr.isatty())
    except (AttributeError, ValueError):
        return False


def _tqdm_installed() -> bool:
    try:
        import tqdm  # noqa: F401
    except ImportError:
        return False
    return True


def make_progress(
    progress: ProgressOption,
    task: str,
    *,
    total: float | None = None,
    unit: str = "product",
) -> Progress | None:
    """The reporter of ``progress=`` (see the module docstring), or None for no reports.

    Raises
    ------
    TypeError
        For a value that is not None, a bool or a callable.
    ImportError
        For ``progress=True`` without tqdm.
    """
    check_progress(progress)
    if progress is False:
        return None
    if progress is True:
        if not _tqdm_installed():
            raise ImportError(
                "progress=True draws a tqdm bar, and tqdm is not installed: pip install "
                "'fockmill[progress]' (or pass a callable to receive the records)"
            )
        return Progress(task, callback=None, bar=True, total=total, unit=unit)
    if progress is None:
        if _interactive() and _tqdm_installed():
            return Progress(task, callback=None, bar=True, delay=BAR_DELAY, total=total, unit=unit)
        return None
    return Progress(task, callback=progress, bar=False, total=total, unit=unit)
