"""Results files: the SQLite stores of sweeps and of workflows."""

from fockmill.store.sweeps import PointResult, ResultsStore, StoreError, SweepTable
from fockmill.store.workflows import WorkflowResult, read_workflow_results, write_workflow_results

__all__ = [
    "PointResult",
    "ResultsStore",
    "StoreError",
    "SweepTable",
    "WorkflowResult",
    "read_workflow_results",
    "write_workflow_results",
]
