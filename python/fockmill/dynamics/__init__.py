"""Time evolution, spectral functions and thermal averages on Krylov spaces."""

from fockmill.dynamics.evolve import Evolution, evolve
from fockmill.dynamics.spectral import SpectralPoles, spectral_function, spectral_poles
from fockmill.dynamics.thermal import Thermal, thermal

__all__ = [
    "Evolution",
    "SpectralPoles",
    "Thermal",
    "evolve",
    "spectral_function",
    "spectral_poles",
    "thermal",
]
