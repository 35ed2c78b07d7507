"""Divergence guard of the continuum runs: is a state still sound?

A run fails (exit code 3) on NaN or Inf, on a density below ``-NEGATIVE_DENSITY_TOL *
rho0`` (central and spectral derivatives overshoot a little at sharp fronts when
D_rho = 0, so a small undershoot is not a failure) or on ``|w|`` beyond a blow-up bound.
The statistics are one compiled pass over the fields without temporaries; the
finite-difference kernel gathers the same three numbers while it writes a block.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["NEGATIVE_DENSITY_TOL", "field_stats", "failure_cause", "check_state"]

NEGATIVE_DENSITY_TOL = 1e-2


@numba.njit(cache=True)
def field_stats(rho, wx, wy):
    """``(finite, min rho, max |w|^2)`` of ``(ny, nx)`` fields (all cells)."""
    rmin = np.inf
    w2max = 0.0
    finite = True
    for j in range(rho.shape[0]):
        for i in range(rho.shape[1]):
            r = rho[j, i]
            w2 = wx[j, i] * wx[j, i] + wy[j, i] * wy[j, i]
            if not (math.isfinite(r) and math.isfinite(w2)):
                finite = False
            rmin = min(rmin, r)
            w2max = max(w2max, w2)
    return finite, rmin, w2max


def failure_cause(finite, rmin, w2max, rho0, w_bound):
    """Name of the failure described by :func:`field_stats`, or None when sound."""
    if not finite:
        return "NaN or Inf in the fields"
    if rmin < -NEGATIVE_DENSITY_TOL * rho0:
        return f"negative density {rmin:.3g}"
    wmax = math.sqrt(w2max)
    if wmax > w_bound:
        return f"|w| = {wmax:.3g} beyond the blow-up bound {w_bound:.3g}"
    return None


def check_state(rho, wx, wy, rho0, w_bound):
    """Name of the failure in a state, or None when it is sound."""
    arrays = (np.ascontiguousarray(a, dtype=np.float64) for a in (rho, wx, wy))
    return failure_cause(*field_stats(*arrays), rho0, w_bound)
