"""Finite-difference / finite-volume method on the cell-centred grid with solid masks.

Derivatives are second-order central differences. A neighbour that is solid (a cell
inside a disc, or beyond a channel wall at y = 0 or Ly, which sit on cell faces) is
replaced by a ghost value mirrored through the shared face:

* w: ghost = -w (no-slip, w = 0 on the face);
* rho: ghost = +rho (zero normal gradient, so no diffusive flux through the face).

With these ghosts the central divergence ``(w_E - w_W) / 2dx`` equals the finite-volume
flux difference with face values ``(w_i + w_{i+1}) / 2``, and the face flux is exactly 0
on solid faces, so the total density changes only by round-off. Solid cells hold
rho = w = 0 and are never updated.

Time stepping is the fully explicit member of the SBDF2 family (see ``_solver``); its
limits (waves, reaction, explicit diffusion) are checked by
:func:`crossflock._stability.check_continuum_dt`.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange

from . import _terms
from ._solver import ContinuumSolver

__all__ = ["FiniteDifferenceSolver", "fd_rhs", "fd_rhs_kernel", "fd_rhs_kernel_serial",
           "interior_mask", "SERIAL_BELOW"]

# Grids with fewer points than this run the serial kernel (see fd_rhs_kernel_serial).
SERIAL_BELOW = 128 * 256


@numba.njit(cache=True, inline="always")
def _nb(f, fluid, jj, ii, centre, parity):
    """Neighbour value with the ghost rule (``jj`` out of range = beyond a wall)."""
    if jj < 0 or jj >= f.shape[0] or fluid[jj, ii] == 0:
        return parity * centre
    return f[jj, ii]


@numba.njit(cache=True, inline="always")
def _fd_row(j, rho, wx, wy, fluid, interior, channel, dx, dy, cs, local, use_local,
            pressure, cross, out, update, u_prev, n_prev, dt, first, u_new):
    """Row ``j`` of :func:`fd_rhs_kernel` (shared by the parallel and serial kernels)."""
    ny, nx = rho.shape
    rho0 = cs[11]
    v0 = cs[10]
    d_b = cs[7]
    d_2 = cs[8]
    d_rho = cs[9]
    idx2 = 1.0 / (dx * dx)
    idy2 = 1.0 / (dy * dy)
    i2dx = 0.5 / dx
    i2dy = 0.5 / dy
    i4dxdy = 0.25 / (dx * dy)
    third = 1.0 / 3.0
    c2 = 2.0 * dt
    jp = j + 1
    jm = j - 1
    if not channel:
        if jp == ny:
            jp = 0
        if jm < 0:
            jm = ny - 1
    for i in range(nx):
        if fluid[j, i] == 0:
            for c in range(3):
                out[c, j, i] = 0.0
                if update:
                    u_new[c, j, i] = 0.0
            continue
        ip = i + 1 if i + 1 < nx else 0
        im = i - 1 if i > 0 else nx - 1
        r = rho[j, i]
        ux = wx[j, i]
        uy = wy[j, i]
        if interior[j, i]:  # all 8 neighbours fluid: plain loads, no ghost tests
            rE, rW, rN, rS = rho[j, ip], rho[j, im], rho[jp, i], rho[jm, i]
            xE, xW, xN, xS = wx[j, ip], wx[j, im], wx[jp, i], wx[jm, i]
            yE, yW, yN, yS = wy[j, ip], wy[j, im], wy[jp, i], wy[jm, i]
        else:
            rE = _nb(rho, fluid, j, ip, r, 1.0)
            rW = _nb(rho, fluid, j, im, r, 1.0)
            rN = _nb(rho, fluid, jp, i, r, 1.0)
            rS = _nb(rho, fluid, jm, i, r, 1.0)
            xE = _nb(wx, fluid, j, ip, ux, -1.0)
            xW = _nb(wx, fluid, j, im, ux, -1.0)
            xN = _nb(wx, fluid, jp, i, ux, -1.0)
            xS = _nb(wx, fluid, jm, i, ux, -1.0)
            yE = _nb(wy, fluid, j, ip, uy, -1.0)
            yW = _nb(wy, fluid, j, im, uy, -1.0)
            yN = _nb(wy, fluid, jp, i, uy, -1.0)
            yS = _nb(wy, fluid, jm, i, uy, -1.0)
        gxx = (xE - xW) * i2dx
        gyx = (xN - xS) * i2dy
        gxy = (yE - yW) * i2dx
        gyy = (yN - yS) * i2dy
        hxx_x = (xE + xW - 2.0 * ux) * idx2
        hyy_x = (xN + xS - 2.0 * ux) * idy2
        hxx_y = (yE + yW - 2.0 * uy) * idx2
        hyy_y = (yN + yS - 2.0 * uy) * idy2
        hxy_x = 0.0
        hxy_y = 0.0
        if cross:
            hxy_x = (_nb(wx, fluid, jp, ip, ux, -1.0) - _nb(wx, fluid, jp, im, ux, -1.0)
                     - _nb(wx, fluid, jm, ip, ux, -1.0)
                     + _nb(wx, fluid, jm, im, ux, -1.0)) * i4dxdy
            hxy_y = (_nb(wy, fluid, jp, ip, uy, -1.0) - _nb(wy, fluid, jp, im, uy, -1.0)
                     - _nb(wy, fluid, jm, ip, uy, -1.0)
                     + _nb(wy, fluid, jm, im, uy, -1.0)) * i4dxdy
        if use_local:
            alpha = local[0, j, i]
            beta = local[1, j, i]
            d_t = local[2, j, i]
            lam1 = local[3, j, i]
            lam2 = local[4, j, i]
            lam3 = local[5, j, i]
        else:
            alpha = cs[0] + cs[1] * (r - rho0)
            beta = cs[2]
            d_t = cs[3]
            lam1 = cs[4]
            lam2 = cs[5]
            lam3 = cs[6]
        fx, fy = _terms.momentum(
            ux, uy, (rE - rW) * i2dx, (rN - rS) * i2dy,
            gxx, gxy, gyx, gyy, hxx_x + hyy_x, hxx_y + hyy_y,
            hxx_x, hxy_x, hyy_x, hxx_y, hxy_y, hyy_y,
            alpha, beta, lam1, lam2, lam3, d_t, d_b, d_2,
            _terms.pressure_slope(r - rho0, pressure))
        lap_r = (rE + rW - 2.0 * r) * idx2 + (rN + rS - 2.0 * r) * idy2
        n0 = _terms.continuity(gxx + gyy, lap_r, v0, d_rho)
        out[0, j, i] = n0
        out[1, j, i] = fx
        out[2, j, i] = fy
        if update:
            if first:
                u_new[0, j, i] = r + dt * n0
                u_new[1, j, i] = ux + dt * fx
                u_new[2, j, i] = uy + dt * fy
            else:
                u_new[0, j, i] = (4.0 * r - u_prev[0, j, i]
                                  + c2 * (2.0 * n0 - n_prev[0, j, i])) * third
                u_new[1, j, i] = (4.0 * ux - u_prev[1, j, i]
                                  + c2 * (2.0 * fx - n_prev[1, j, i])) * third
                u_new[2, j, i] = (4.0 * uy - u_prev[2, j, i]
                                  + c2 * (2.0 * fy - n_prev[2, j, i])) * third


@numba.njit(cache=True, parallel=True)
def fd_rhs_kernel(rho, wx, wy, fluid, interior, channel, dx, dy, cs, local, use_local,
                  pressure, cross, out, update, u_prev, n_prev, dt, first, u_new):
    """Right-hand side of the full equations on the masked grid.

    Parameters
    ----------
    rho, wx, wy : (ny, nx) float64 ndarray
    fluid : (ny, nx) uint8 ndarray
        1 = fluid, 0 = solid.
    interior : (ny, nx) uint8 ndarray
        1 where the cell and its 8 neighbours are fluid (see :func:`interior_mask`).
    channel : bool
        Walls beyond rows 0 and ny - 1 (else periodic in y); always periodic in x.
    dx, dy : float
    cs : (12,) float64 ndarray
        Scalars in the order of ``_coefficients.SCALARS``.
    local : (6, ny, nx) or (6, 1, 1) float64 ndarray
        Per-cell alpha, beta, D_T, lambda1-3 when ``use_local``.
    pressure : (K,) float64 ndarray
    cross : bool
        Compute the mixed second derivatives (needed by D_B and D_2 only).
    out : (3, ny, nx) float64 ndarray
        Written: d_t rho, d_t w_x, d_t w_y (0 in solids).
    update : bool
        Also write the explicit SBDF2 step (without noise) into ``u_new`` from the state
        ``(rho, wx, wy)``, ``u_prev``, ``n_prev`` (all ``(3, ny, nx)``), ``dt`` and
        ``first``, fused here to save one pass over memory:
        ``u_new = (4u - u_prev + 2dt(2n - n_prev)) / 3``, or ``u + dt n`` when ``first``.
    """
    for j in prange(rho.shape[0]):
        _fd_row(j, rho, wx, wy, fluid, interior, channel, dx, dy, cs, local, use_local,
                pressure, cross, out, update, u_prev, n_prev, dt, first, u_new)


@numba.njit(cache=True)
def fd_rhs_kernel_serial(rho, wx, wy, fluid, interior, channel, dx, dy, cs, local,
                         use_local, pressure, cross, out, update, u_prev, n_prev, dt,
                         first, u_new):
    """:func:`fd_rhs_kernel` on one thread (same arguments, bit-identical result).

    Small grids use it: a parallel region per step costs more than it saves there, and
    on shared cores a descheduled worker thread stalls every step (measured 13x slower
    on a 64 x 64 grid with 2 threads on a loaded 2-core machine).
    """
    for j in range(rho.shape[0]):
        _fd_row(j, rho, wx, wy, fluid, interior, channel, dx, dy, cs, local, use_local,
                pressure, cross, out, update, u_prev, n_prev, dt, first, u_new)


def interior_mask(fluid, channel):
    """1 where a cell and its 8 neighbours are fluid (uint8 ``(ny, nx)``)."""
    f = np.asarray(fluid, dtype=bool)
    out = f.copy()
    for dj in (-1, 0, 1):
        for di in (-1, 0, 1):
            out &= np.roll(np.roll(f, dj, 0), di, 1)
    if channel:
        out[0] = False
        out[-1] = False
    return out.astype(np.uint8)


def fd_rhs(rho, wx, wy, fluid, channel, dx, dy, cs, local, use_local, pressure,
           cross=True, out=None):
    """Validated wrapper of :func:`fd_rhs_kernel`; returns ``out`` ``(3, ny, nx)``."""
    rho = np.ascontiguousarray(rho, dtype=np.float64)
    wx = np.ascontiguousarray(wx, dtype=np.float64)
    wy = np.ascontiguousarray(wy, dtype=np.float64)
    if rho.ndim != 2 or wx.shape != rho.shape or wy.shape != rho.shape:
        raise ValueError("rho, wx, wy must be equally shaped 2-D arrays")
    fluid = np.ascontiguousarray(fluid, dtype=np.uint8)
    if fluid.shape != rho.shape:
        raise ValueError("fluid mask must match the field shape")
    if out is None:
        out = np.empty((3,) + rho.shape)
    fd_rhs_kernel(rho, wx, wy, fluid, interior_mask(fluid, channel), bool(channel),
                  float(dx), float(dy),
                  np.asarray(cs, dtype=np.float64), np.asarray(local, dtype=np.float64),
                  bool(use_local), np.asarray(pressure, dtype=np.float64).reshape(-1),
                  bool(cross), out, False, _NONE3, _NONE3, 0.0, True, _NONE3)
    return out


_NONE3 = np.zeros((3, 1, 1))


class FiniteDifferenceSolver(ContinuumSolver):
    """Finite differences on the masked cell-centred grid (periodic, channel, discs)."""

    name = "finite_difference"

    def _setup(self):
        shape = (3, self.ny, self.nx)
        self._fluid = np.ascontiguousarray(self.mask, dtype=np.uint8)
        self._interior = interior_mask(self.mask, self.geometry.channel)
        self._u = np.zeros(shape)
        self._u_prev = np.zeros(shape)
        self._n = np.zeros(shape)
        self._n_prev = np.zeros(shape)
        self._out = np.zeros(shape)
        self._first = True
        self._cross = self.coef.get("D_B") != 0.0 or self.coef.get("D_2") != 0.0
        self._local = (np.empty((6, self.ny, self.nx)) if self.coef.kinetic
                       else self.coef.local(None))

    def _set_fields(self, rho, wx, wy):
        fluid = self.mask
        self._u[0] = np.where(fluid, rho, 0.0)
        self._u[1] = np.where(fluid, wx, 0.0)
        self._u[2] = np.where(fluid, wy, 0.0)
        self._first = True

    def fields(self):
        return self._u[0].copy(), self._u[1].copy(), self._u[2].copy()

    def rhs(self, u=None, out=None):
        """Explicit right-hand side ``(3, ny, nx)`` of state ``u`` (default current)."""
        u = self._u if u is None else u
        out = np.empty_like(u) if out is None else out
        self._kernel(u, out, False, _NONE3)
        return out

    def _kernel(self, u, out, update, u_new):
        local = self.coef.local(u[0], self._local) if self.coef.kinetic else self._local
        kernel = fd_rhs_kernel_serial if self.nx * self.ny < SERIAL_BELOW else fd_rhs_kernel
        kernel(u[0], u[1], u[2], self._fluid, self._interior, self.geometry.channel,
               self.dx, self.dy, self.coef.scalars, local, self.coef.kinetic,
               self.coef.pressure, self._cross, out, update, self._u_prev,
               self._n_prev, self.dt, self._first, u_new)

    def _step_impl(self):
        # right-hand side and the explicit SBDF2 update in one pass; noise added after
        self._kernel(self._u, self._n, True, self._out)
        dw = self._noise()
        if dw is not None:
            self._out[1:] += dw if self._first else (2.0 / 3.0) * dw
        # rotate buffers instead of copying
        self._u_prev, self._u, self._out = self._u, self._out, self._u_prev
        self._n_prev, self._n = self._n, self._n_prev
        self._first = False
        self._limit(self._u[0], self._u[1], self._u[2])

    def _state_arrays(self):
        return {"u": self._u, "u_prev": self._u_prev, "n_prev": self._n_prev,
                "first": np.array(int(self._first))}

    def _load_state_arrays(self, arrays):
        self._u[...] = arrays["u"]
        self._u_prev[...] = arrays["u_prev"]
        self._n_prev[...] = arrays["n_prev"]
        self._first = bool(int(np.asarray(arrays["first"])))
