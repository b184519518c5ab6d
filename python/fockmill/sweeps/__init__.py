"""Parameter sweeps: settings and points, one point's record, where points run,
and the resumable run itself.
"""

from fockmill.sweeps.plan import SweepGrid
from fockmill.sweeps.run import run_sweep

__all__ = ["SweepGrid", "run_sweep"]
