"""The quench, spectrum and thermal sections of a model file, run end to end."""

from fockmill.workflows.run import run_quench, run_spectrum, run_thermal

__all__ = ["run_quench", "run_spectrum", "run_thermal"]
