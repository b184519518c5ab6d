"""Checked settings: the small arguments every solver, sweep, model file and the
command line share (threads, memory limits, methods, tolerances, seeds).
"""

__all__: list[str] = []
