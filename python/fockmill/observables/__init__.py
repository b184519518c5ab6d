"""Observables of a state computed in one pass over the basis, and state files."""

from fockmill.observables.correlations import density_correlations
from fockmill.observables.observe import (
    entanglement_entropy,
    expectation,
    number_variances,
    occupation_distribution,
    one_body_matrix,
    populations,
    top_level_weights,
)
from fockmill.observables.statefile import SavedState, load_state, save_state

__all__ = [
    "SavedState",
    "density_correlations",
    "entanglement_entropy",
    "expectation",
    "load_state",
    "number_variances",
    "occupation_distribution",
    "one_body_matrix",
    "populations",
    "save_state",
    "top_level_weights",
]
