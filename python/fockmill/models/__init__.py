"""Ready-made models: Bose–Hubbard on any graph, Jaynes–Cummings–Hubbard arrays, Kerr
networks, lowest-Landau-level bosons and drives, each a :class:`Model` (a Hamiltonian
linear in named parameters).

The builders live in :mod:`fockmill.models.builders`; their names are this package's
API (``dir(fockmill.models)`` lists them).
"""

from fockmill.models import builders
from fockmill.models.builders import *  # noqa: F403  (the builders are this package's API)
from fockmill.models.model import Model as Model

__all__ = list(builders.__all__)


def __dir__() -> list[str]:
    return sorted(__all__)
