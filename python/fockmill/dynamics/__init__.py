"""Time evolution, spectral functions and thermal averages on Krylov spaces."""

from fockmill.dynamics.drive import PiecewiseLinear, TimeDependent, piecewise_linear
from fockmill.dynamics.evolve import Evolution, evolve
from fockmill.dynamics.momentum import MomentumSpectrum, momentum_spectrum
from fockmill.dynamics.spectral import SpectralPoles, spectral_function, spectral_poles
from fockmill.dynamics.thermal import Thermal, thermal

__all__ = [
    "Evolution",
    "MomentumSpectrum",
    "PiecewiseLinear",
    "SpectralPoles",
    "Thermal",
    "TimeDependent",
    "evolve",
    "momentum_spectrum",
    "piecewise_linear",
    "spectral_function",
    "spectral_poles",
    "thermal",
]
