"""Ready-made models: Bose–Hubbard on any graph, Jaynes–Cummings–Hubbard arrays, Kerr
networks and drives, each a :class:`Model` (a Hamiltonian linear in named parameters).
"""

from fockmill.models.builders import (
    KERR_NETWORK_RENAMED,
    Edge,
    bose_hubbard,
    chain_edges,
    jaynes_cummings_hubbard,
    kerr_network,
    rectangular_edges,
    ring_edges,
    with_drives,
)
from fockmill.models.model import Model as Model

__all__ = [
    "KERR_NETWORK_RENAMED",
    "Edge",
    "bose_hubbard",
    "chain_edges",
    "jaynes_cummings_hubbard",
    "kerr_network",
    "rectangular_edges",
    "ring_edges",
    "with_drives",
]


def __dir__() -> list[str]:
    return sorted(__all__)
