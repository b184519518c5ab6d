"""Open systems: jumps with explicit rates, the Lindblad Liouvillian applied through
the compiled products, stationary states, density-matrix evolution and quantum-jump
trajectories."""

from fockmill.lindblad.evolution import DensityEvolution, evolve_density
from fockmill.lindblad.jumps import Jump, dephasing, jump, loss, pump
from fockmill.lindblad.stationary import StationaryState, stationary_state
from fockmill.lindblad.trajectories import Trajectories, sample_trajectories

__all__ = [
    "DensityEvolution",
    "Jump",
    "StationaryState",
    "Trajectories",
    "dephasing",
    "evolve_density",
    "jump",
    "loss",
    "pump",
    "sample_trajectories",
    "stationary_state",
]
