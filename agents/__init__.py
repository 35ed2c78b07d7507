"""crossflock.agents: the particle engine (metric Vicsek-family alignment model).

``simulate(cfg)`` runs a config and returns the particle Dataset of GUIDE section 4;
``AgentSolver`` is the stepper it drives; the ``neighbour_*`` functions expose the
cell-list alignment kernels on plain arrays.
"""

from ._driver import SNAPSHOT_WARN_MB, simulate, snapshot_megabytes
from ._initial import wedge_half_width
from ._kernels import (
    NOISE_CODES,
    neighbour_counts,
    neighbour_mean_heading,
    neighbour_sums,
    polar_order,
    wrap_angle,
)
from ._solver import AgentSolver, particle_count

__all__ = [
    "simulate",
    "AgentSolver",
    "particle_count",
    "neighbour_sums",
    "neighbour_mean_heading",
    "neighbour_counts",
    "polar_order",
    "wrap_angle",
    "wedge_half_width",
    "snapshot_megabytes",
    "SNAPSHOT_WARN_MB",
    "NOISE_CODES",
]
