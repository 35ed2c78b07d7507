"""Compiled deposit kernels of coarse-graining.

Pure numba functions on arrays and scalars: they add into caller-allocated ``(ny, nx)``
buffers and never touch xarray, config objects or files. Grids are cell-centred
(``x_i = (i + 1/2) dx``), so channel walls sit on cell faces. The loops are serial on
purpose: a scatter-add in parallel would need per-thread buffers whose summation order
depends on the thread count, and serial is already far below a second for 10^6 particles.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["cic_deposit_kernel", "ngp_count_kernel"]


@numba.njit(cache=True)
def _row(j, ny, channel):
    # Channel: a weight that would leave through a wall face is clamped onto the wall
    # cell, so nothing leaves the domain. Periodic: wrap.
    if channel:
        if j < 0:
            return 0
        if j > ny - 1:
            return ny - 1
        return j
    return j % ny


@numba.njit(cache=True)
def cic_deposit_kernel(x, y, theta, lx, ly, channel, has_solid, fluid, fallback,
                       counts, px, py):
    """Cloud-in-cell deposit of particles and their headings.

    Parameters
    ----------
    x, y, theta : (N,) float64 ndarray
        Positions (inside the fluid) and headings.
    lx, ly : float
        Box size.
    channel : bool
        Walls at y = 0 and y = Ly (clamp rows), else periodic in y.
    has_solid : bool
        Whether ``fluid`` has any solid cell (skips the renormalisation when not).
    fluid : (ny, nx) uint8 ndarray
        1 for fluid cells, 0 for solid (obstacle) cells.
    fallback : (ny, nx) int64 ndarray
        Flat index of the nearest fluid cell for solid cells, -1 for fluid cells (used
        when all four CIC cells of a particle are solid, a measure-zero case).
    counts, px, py : (ny, nx) float64 ndarray
        Output, added into: particle weight, sum of cos(theta), sum of sin(theta).

    Notes
    -----
    The four bilinear weights of a particle sum to one. Weights on solid cells are
    dropped and the rest rescaled to sum to one, so every particle deposits exactly one
    unit of mass onto fluid cells, next to where it is.
    """
    ny, nx = counts.shape
    dx = lx / nx
    dy = ly / ny
    wi = np.empty(4, dtype=np.int64)
    wj = np.empty(4, dtype=np.int64)
    ww = np.empty(4)
    for p in range(x.shape[0]):
        c = np.cos(theta[p])
        s = np.sin(theta[p])
        gx = x[p] / dx - 0.5
        gy = y[p] / dy - 0.5
        fi = np.floor(gx)
        fj = np.floor(gy)
        fx = gx - fi
        fy = gy - fj
        i0 = int(fi) % nx
        i1 = (i0 + 1) % nx
        j0 = _row(int(fj), ny, channel)
        j1 = _row(int(fj) + 1, ny, channel)
        wi[0], wj[0], ww[0] = i0, j0, (1.0 - fx) * (1.0 - fy)
        wi[1], wj[1], ww[1] = i1, j0, fx * (1.0 - fy)
        wi[2], wj[2], ww[2] = i0, j1, (1.0 - fx) * fy
        wi[3], wj[3], ww[3] = i1, j1, fx * fy
        if has_solid:
            total = 0.0
            for q in range(4):
                if fluid[wj[q], wi[q]] == 0:
                    ww[q] = 0.0
                total += ww[q]
            if total > 0.0:
                for q in range(4):
                    ww[q] /= total
            else:
                jn = _row(int(np.floor(y[p] / dy)), ny, channel)
                inn = int(np.floor(x[p] / dx)) % nx
                flat = fallback[jn, inn]
                if flat < 0:
                    flat = jn * nx + inn
                wj[0], wi[0], ww[0] = flat // nx, flat % nx, 1.0
                for q in range(1, 4):
                    ww[q] = 0.0
        for q in range(4):
            w = ww[q]
            if w != 0.0:
                counts[wj[q], wi[q]] += w
                px[wj[q], wi[q]] += w * c
                py[wj[q], wi[q]] += w * s


@numba.njit(cache=True)
def ngp_count_kernel(x, y, lx, ly, channel, fallback, counts):
    """Exact integer particle counts per cell (nearest grid point).

    Parameters
    ----------
    x, y : (N,) float64 ndarray
    lx, ly : float
    channel : bool
    fallback : (ny, nx) int64 ndarray
        Flat index of the nearest fluid cell for solid cells, -1 for fluid cells: a
        particle in the fluid part of a cell whose centre is solid is counted in the
        nearest fluid cell, so the total stays exactly N.
    counts : (ny, nx) float64 ndarray
        Output, added into.
    """
    ny, nx = counts.shape
    dx = lx / nx
    dy = ly / ny
    for p in range(x.shape[0]):
        i = int(np.floor(x[p] / dx)) % nx
        j = _row(int(np.floor(y[p] / dy)), ny, channel)
        flat = fallback[j, i]
        if flat >= 0:
            j = flat // nx
            i = flat % nx
        counts[j, i] += 1.0
