"""crossflock.continuum: the Toner-Tu continuum engine (GUIDE section 3).

``simulate(cfg)`` runs a config and returns a field Dataset (GUIDE section 4). Two
methods share the term functions of :mod:`._terms`: a pseudo-spectral SBDF2 solver for
periodic boxes and a masked finite-difference solver for channels and obstacles.
"""

from . import _terms as terms
from ._coefficients import CoefficientModel
from ._driver import METHODS, check_state, make_solver, resolve_method, simulate
from ._fd import FiniteDifferenceSolver
from ._limiter import apply_realizability
from ._linear import homogeneous_order, linear_sound_speeds, sound_speed_parameters
from ._solver import ContinuumSolver, initial_fields
from ._spectral import SpectralSolver

__all__ = [
    "simulate",
    "METHODS",
    "resolve_method",
    "make_solver",
    "check_state",
    "ContinuumSolver",
    "SpectralSolver",
    "FiniteDifferenceSolver",
    "CoefficientModel",
    "initial_fields",
    "linear_sound_speeds",
    "sound_speed_parameters",
    "homogeneous_order",
    "apply_realizability",
    "terms",
]
