"""Realizability limiter: rho >= 0 and |w| <= rho after every step.

Particles have |P| <= 1, so the polarization density of any coarse-graining obeys
|w| <= rho, and rho >= 0. The truncated continuum equations do not preserve either bound:
steep fronts and low-density holes form during coarsening, w does not vanish with rho
there, and the flux ``v0 w`` then drains cells below zero. This module projects the state
back onto the realizable set after each step. It is a numerical safeguard, not physics:
when the bounds are never touched (smooth, linear problems) it changes nothing.

What is done, in this order, over the fluid cells:

1. Positivity, conserving mass exactly: negative densities are set to 0 and the removed
   (negative) mass ``M_-`` is taken back from the positive cells in proportion to their
   density, ``rho <- max(rho, 0) * (M_+ - M_-) / M_+``. The total is unchanged up to
   round-off. The redistribution is global (a multiplicative factor 1 - M_-/M_+ close to
   1 when undershoots are small), so it does not move mass locally.
2. Realizability: where ``|w| > rho`` the polarization density is rescaled to
   ``|w| = rho`` (direction kept). This does not touch rho, so mass is untouched.

The kernel is serial: it is one cheap pass over memory, and a parallel region per step
costs more than it saves on small grids when the cores are shared (and a serial sum is
thread-count independent by construction).
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["realizability_kernel", "apply_realizability"]


@numba.njit(cache=True)
def realizability_kernel(rho, wx, wy, fluid, row_pos, row_neg):
    """Project ``(rho, wx, wy)`` onto rho >= 0, |w| <= rho in place.

    Parameters
    ----------
    rho, wx, wy : (ny, nx) float64 ndarray
        Modified in place.
    fluid : (ny, nx) uint8 ndarray
        1 = fluid (solid cells are left alone).
    row_pos, row_neg : (ny,) float64 ndarray
        Scratch for the per-row positive and negative mass (summed row by row, then
        over rows).

    Returns
    -------
    int
        Number of cells changed (0 when the state was already realizable).
    """
    ny, nx = rho.shape
    for j in range(ny):
        p = 0.0
        q = 0.0
        for i in range(nx):
            if fluid[j, i]:
                r = rho[j, i]
                if r < 0.0:
                    q -= r
                else:
                    p += r
        row_pos[j] = p
        row_neg[j] = q
    pos = 0.0
    neg = 0.0
    for j in range(ny):
        pos += row_pos[j]
        neg += row_neg[j]
    # when the negative mass is not smaller than the positive one nothing can be
    # fixed conservatively: leave rho alone (the driver's guard reports the failure)
    fix = neg > 0.0 and pos > neg
    scale = (pos - neg) / pos if fix else 1.0
    c = 0
    for j in range(ny):
        for i in range(nx):
            if fluid[j, i] == 0:
                continue
            r = rho[j, i]
            if fix:
                if r < 0.0:
                    r = 0.0
                    c += 1
                else:
                    r = r * scale
                rho[j, i] = r
            ux = wx[j, i]
            uy = wy[j, i]
            w2 = ux * ux + uy * uy
            if w2 > r * r:
                f = r / np.sqrt(w2)
                wx[j, i] = ux * f
                wy[j, i] = uy * f
                c += 1
    return c


def apply_realizability(rho, wx, wy, fluid):
    """Validated wrapper of :func:`realizability_kernel`; returns the changed-cell count.

    Parameters
    ----------
    rho, wx, wy : (ny, nx) C-contiguous float64 ndarray
        Modified in place (views into a solver's state are fine).
    fluid : (ny, nx) uint8 ndarray
    """
    for a in (rho, wx, wy):
        if a.dtype != np.float64 or a.ndim != 2 or a.shape != rho.shape:
            raise ValueError("rho, wx, wy must be equally shaped 2-D float64 arrays")
        if not a.flags.c_contiguous:
            raise ValueError("rho, wx, wy must be C-contiguous (modified in place)")
    fluid = np.ascontiguousarray(fluid, dtype=np.uint8)
    if fluid.shape != rho.shape:
        raise ValueError("fluid mask must match the field shape")
    ny = rho.shape[0]
    return realizability_kernel(rho, wx, wy, fluid, np.empty(ny), np.empty(ny))
