"""Pseudo-spectral method for fully periodic boxes.

The state is kept as real-to-complex Fourier coefficients (scipy.fft ``rfft2``) of
rho, w_x, w_y, truncated by the 2/3 rule (Orszag 1971): modes with ``|m| > (n - 1) // 3``
along either axis are zero, and every nonlinear product is truncated again after its
transform, so quadratic aliasing never reaches the kept modes.

Time stepping: SBDF2 (see ``_solver``) with the constant-coefficient diffusion implicit,
``L = -D_T k^2 - D_B k k^T`` for w (solved per wavevector with the Sherman-Morrison form
of the 2 x 2 inverse) and ``-D_rho k^2`` for rho. The continuity flux ``-v0 div w`` is
linear and evaluated in Fourier space. In "kinetic" mode D_T depends on rho; the implicit
part uses D_T(rho0) and the remainder ``(D_T(rho) - D_T(rho0)) lap w`` is explicit.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange
from scipy import fft as _fft

from . import _terms
from ._solver import ContinuumSolver

__all__ = ["SpectralSolver", "spectral_rhs_kernel", "spectral_derivatives_kernel",
           "sbdf2_spectral_kernel"]


def _rfft2(a, workers):
    return _fft.rfft2(a, axes=(-2, -1), workers=workers)


def _irfft2(a, shape, workers):
    return _fft.irfft2(a, s=shape, axes=(-2, -1), workers=workers)


@numba.njit(cache=True, parallel=True)
def spectral_rhs_kernel(rho, wx, wy, gw, grho, lapw, hess, use_gw, use_grho, use_lap,
                        use_hess, cs, local, use_local, d_t0, pressure, out):
    """Explicit momentum terms from real-space fields and derivative arrays.

    Parameters
    ----------
    rho, wx, wy : (ny, nx) float64 ndarray
    gw : (4, ny, nx) ndarray
        d_x w_x, d_y w_x, d_x w_y, d_y w_y (read when ``use_gw``).
    grho : (2, ny, nx) ndarray
        d_x rho, d_y rho (read when ``use_grho``).
    lapw : (2, ny, nx) ndarray
        lap w_x, lap w_y (read when ``use_lap``: kinetic D_T correction).
    hess : (6, ny, nx) ndarray
        d_xx, d_xy, d_yy of w_x then of w_y (read when ``use_hess``: D_2 term).
    cs : (12,) ndarray
        Scalars (``_coefficients.SCALARS``).
    local : (6, ny, nx) or (6, 1, 1) ndarray
        Kinetic per-cell coefficients when ``use_local``.
    d_t0 : float
        D_T treated implicitly (subtracted from the local D_T).
    pressure : (K,) ndarray
    out : (2, ny, nx) ndarray
        Written: explicit part of d_t w.
    """
    ny, nx = rho.shape
    rho0 = cs[11]
    d_2 = cs[8]
    for j in prange(ny):
        for i in range(nx):
            r = rho[j, i]
            ux = wx[j, i]
            uy = wy[j, i]
            gxx = gyx = gxy = gyy = 0.0
            if use_gw:
                gxx = gw[0, j, i]
                gyx = gw[1, j, i]
                gxy = gw[2, j, i]
                gyy = gw[3, j, i]
            dxr = dyr = 0.0
            if use_grho:
                dxr = grho[0, j, i]
                dyr = grho[1, j, i]
            lx = ly = 0.0
            if use_lap:
                lx = lapw[0, j, i]
                ly = lapw[1, j, i]
            h0 = h1 = h2 = h3 = h4 = h5 = 0.0
            if use_hess:
                h0 = hess[0, j, i]
                h1 = hess[1, j, i]
                h2 = hess[2, j, i]
                h3 = hess[3, j, i]
                h4 = hess[4, j, i]
                h5 = hess[5, j, i]
            if use_local:
                alpha = local[0, j, i]
                beta = local[1, j, i]
                d_t = local[2, j, i] - d_t0
                lam1 = local[3, j, i]
                lam2 = local[4, j, i]
                lam3 = local[5, j, i]
            else:
                alpha = cs[0] + cs[1] * (r - rho0)
                beta = cs[2]
                d_t = 0.0
                lam1 = cs[4]
                lam2 = cs[5]
                lam3 = cs[6]
            fx, fy = _terms.momentum(
                ux, uy, dxr, dyr, gxx, gxy, gyx, gyy, lx, ly,
                h0, h1, h2, h3, h4, h5,
                alpha, beta, lam1, lam2, lam3, d_t, 0.0, d_2,
                _terms.pressure_slope(r - rho0, pressure))
            out[0, j, i] = fx
            out[1, j, i] = fy


@numba.njit(cache=True, parallel=True)
def spectral_derivatives_kernel(uh, kx, ky, use_gw, use_grho, use_lap, use_hess, out):
    """Fourier coefficients of the derivatives the explicit terms need.

    Parameters
    ----------
    uh : (3, ny, nkx) complex128 ndarray
        rho, w_x, w_y (already de-aliased).
    kx : (nkx,) float64 ndarray
    ky : (ny,) float64 ndarray
    out : (m, ny, nkx) complex128 ndarray
        Written in the order gw (4), grho (2), lap w (2), hessians (6) of the used sets.
    """
    _, ny, nk = uh.shape
    for j in prange(ny):
        b = ky[j]
        for i in range(nk):
            a = kx[i]
            r = uh[0, j, i]
            x = uh[1, j, i]
            y = uh[2, j, i]
            p = 0
            if use_gw:
                out[0, j, i] = 1j * a * x
                out[1, j, i] = 1j * b * x
                out[2, j, i] = 1j * a * y
                out[3, j, i] = 1j * b * y
                p = 4
            if use_grho:
                out[p, j, i] = 1j * a * r
                out[p + 1, j, i] = 1j * b * r
                p += 2
            if use_lap:
                k2 = a * a + b * b
                out[p, j, i] = -k2 * x
                out[p + 1, j, i] = -k2 * y
                p += 2
            if use_hess:
                out[p, j, i] = -a * a * x
                out[p + 1, j, i] = -a * b * x
                out[p + 2, j, i] = -b * b * x
                out[p + 3, j, i] = -a * a * y
                out[p + 4, j, i] = -a * b * y
                out[p + 5, j, i] = -b * b * y


@numba.njit(cache=True, parallel=True)
def sbdf2_spectral_kernel(uh, uh_prev, nm, nh_prev, dwh, has_noise, keep, kx, ky, v0,
                          d_t0, d_b, d_rho, dt, first, nh, out):
    """One SBDF2 step in Fourier space with the diffusion implicit.

    ``nm`` holds the transformed explicit momentum terms; they are de-aliased into
    ``nh[1:]`` and ``nh[0] = -v0 i k.w`` (continuity) is filled in, so that ``nh`` is
    the complete explicit part N^n on return. ``out`` receives u^{n+1}::

        first: (I - dt L) u1 = u0 + dt N0 + dW
        else:  (3 I - 2 dt L) u+ = 4 u - u_prev + 2 dt (2 N - N_prev) + 2 dW

    with L = -D_rho k^2 for rho and -D_T0 k^2 I - D_B k k^T for w (2 x 2 inverse by
    Sherman-Morrison: A^-1 = (I - b k k^T / (a + b k^2)) / a).

    Parameters
    ----------
    uh, uh_prev, nh_prev, nh, out : (3, ny, nkx) complex128 ndarray
    nm : (2, ny, nkx) complex128 ndarray
    dwh : (2, ny, nkx) complex128 ndarray
        Transformed noise increments (read when ``has_noise``; de-aliased here).
    keep : (ny, nkx) float64 ndarray
        2/3 filter (1 kept, 0 cut).
    kx : (nkx,) ndarray
    ky : (ny,) ndarray
    """
    _, ny, nk = uh.shape
    if first:
        c, s, wn = 1.0, dt, 1.0
    else:
        c, s, wn = 3.0, 2.0 * dt, 2.0
    for j in prange(ny):
        b = ky[j]
        for i in range(nk):
            a = kx[i]
            m = keep[j, i]
            k2 = a * a + b * b
            nx_ = nm[0, j, i] * m
            ny_ = nm[1, j, i] * m
            nr = -v0 * 1j * (a * uh[1, j, i] + b * uh[2, j, i])
            nh[0, j, i] = nr
            nh[1, j, i] = nx_
            nh[2, j, i] = ny_
            if first:
                r0 = uh[0, j, i] + dt * nr
                r1 = uh[1, j, i] + dt * nx_
                r2 = uh[2, j, i] + dt * ny_
            else:
                r0 = 4.0 * uh[0, j, i] - uh_prev[0, j, i] + s * (2.0 * nr - nh_prev[0, j, i])
                r1 = 4.0 * uh[1, j, i] - uh_prev[1, j, i] + s * (2.0 * nx_ - nh_prev[1, j, i])
                r2 = 4.0 * uh[2, j, i] - uh_prev[2, j, i] + s * (2.0 * ny_ - nh_prev[2, j, i])
            if has_noise:
                r1 += wn * m * dwh[0, j, i]
                r2 += wn * m * dwh[1, j, i]
            out[0, j, i] = r0 / (c + s * d_rho * k2)
            aa = c + s * d_t0 * k2
            bb = s * d_b
            kr = a * r1 + b * r2
            f = bb / (aa * (aa + bb * k2))
            out[1, j, i] = r1 / aa - f * a * kr
            out[2, j, i] = r2 / aa - f * b * kr


class SpectralSolver(ContinuumSolver):
    """Pseudo-spectral SBDF2 solver for a fully periodic box without obstacles."""

    name = "spectral"

    def _setup(self):
        if not self.geometry.periodic:
            raise ValueError("the spectral method needs a periodic box without obstacles")
        nx, ny = self.nx, self.ny
        kx = 2.0 * np.pi * np.fft.rfftfreq(nx, self.dx)
        ky = 2.0 * np.pi * np.fft.fftfreq(ny, self.dy)
        mx = np.arange(kx.size)
        my = np.fft.fftfreq(ny, 1.0 / ny)
        keep = (np.abs(my)[:, None] <= (ny - 1) // 3) & (mx[None, :] <= (nx - 1) // 3)
        self.dealias = keep.astype(np.float64)
        self._kx = np.broadcast_to(kx[None, :], keep.shape).copy()
        self._ky = np.broadcast_to(ky[:, None], keep.shape).copy()
        self._k2 = self._kx**2 + self._ky**2
        self._kx1 = np.ascontiguousarray(kx)
        self._ky1 = np.ascontiguousarray(ky)
        c = self.coef
        self._d_t0 = c.get("D_T")
        self._d_b = c.get("D_B")
        self._d_rho = c.get("D_rho")
        self._v0 = c.v0
        self._use_gw = c.kinetic or any(c.get(k) != 0.0
                                        for k in ("lambda1", "lambda2", "lambda3"))
        self._use_grho = c.pressure.size > 0
        self._use_lap = c.kinetic
        self._use_hess = c.get("D_2") != 0.0
        self._n_derivs = (4 * self._use_gw + 2 * self._use_grho + 2 * self._use_lap
                          + 6 * self._use_hess)
        self._dbuf = np.empty((max(self._n_derivs, 1), ny, kx.size), dtype=np.complex128)
        self._no_noise = np.zeros((2, 1, 1), dtype=np.complex128)
        self._spare = None
        self._first = True
        self._uh = None
        self._uh_prev = None
        self._nh_prev = None
        self._real = None
        self._local = (np.empty((6, ny, nx)) if c.kinetic else c.local(None))
        self._dummy = np.zeros((6, 1, 1))
        self._nreal = np.empty((2, ny, nx))

    def retained_fraction(self) -> float:
        """Fraction of the nx * ny Fourier modes kept by the 2/3 filter."""
        kx_keep = 2 * ((self.nx - 1) // 3) + 1
        ky_keep = 2 * ((self.ny - 1) // 3) + 1
        return kx_keep * ky_keep / (self.nx * self.ny)

    def _set_fields(self, rho, wx, wy):
        uh = _rfft2(np.stack([rho, wx, wy]), self.workers)
        uh *= self.dealias
        self._uh = uh
        self._uh_prev = np.zeros_like(uh)
        self._nh_prev = np.zeros_like(uh)
        self._spare = None
        self._first = True
        self._real = _irfft2(uh, (self.ny, self.nx), self.workers)

    def fields(self):
        r = self._real
        return r[0].copy(), r[1].copy(), r[2].copy()

    def explicit_rhs(self, uh=None):
        """Explicit part N of the equations in Fourier space, ``(3, ny, nx // 2 + 1)``."""
        uh = self._uh if uh is None else uh
        nm = self._momentum_hat(uh)
        nh = np.empty_like(uh)
        # builds nh (de-aliasing, continuity); the step it also computes is discarded
        sbdf2_spectral_kernel(uh, uh, nm, uh, self._no_noise, False, self.dealias,
                              self._kx1, self._ky1, self._v0, self._d_t0, self._d_b,
                              self._d_rho, self.dt, True, nh, np.empty_like(uh))
        return nh

    def _momentum_hat(self, uh):
        """Transformed (not yet de-aliased) explicit momentum terms ``(2, ny, nkx)``."""
        w = self.workers
        shape = (self.ny, self.nx)
        real = self._real if uh is self._uh else _irfft2(uh, shape, w)
        d = self._dummy
        if self._n_derivs:
            spectral_derivatives_kernel(uh, self._kx1, self._ky1, self._use_gw,
                                        self._use_grho, self._use_lap, self._use_hess,
                                        self._dbuf)
            d = _irfft2(self._dbuf, shape, w)
        pos = 0
        gw = grho = lapw = hess = self._dummy
        if self._use_gw:
            gw, pos = d[pos:pos + 4], pos + 4
        if self._use_grho:
            grho, pos = d[pos:pos + 2], pos + 2
        if self._use_lap:
            lapw, pos = d[pos:pos + 2], pos + 2
        if self._use_hess:
            hess = d[pos:pos + 6]
        local = (self.coef.local(real[0], self._local) if self.coef.kinetic
                 else self._local)
        spectral_rhs_kernel(real[0], real[1], real[2], gw, grho, lapw, hess,
                            self._use_gw, self._use_grho, self._use_lap, self._use_hess,
                            self.coef.scalars, local, self.coef.kinetic, self._d_t0,
                            self.coef.pressure, self._nreal)
        return _rfft2(self._nreal, w)

    def _step_impl(self):
        nm = self._momentum_hat(self._uh)
        dw = self._noise()
        dwh = self._no_noise if dw is None else _rfft2(dw, self.workers)
        if self._spare is None or self._spare[0].shape != self._uh.shape:
            self._spare = (np.empty_like(self._uh), np.empty_like(self._uh))
        # reuse the buffers of two steps ago (fresh large allocations page-fault)
        new, nh = self._spare
        sbdf2_spectral_kernel(self._uh, self._uh_prev, nm, self._nh_prev, dwh,
                              dw is not None, self.dealias, self._kx1, self._ky1,
                              self._v0, self._d_t0, self._d_b, self._d_rho, self.dt,
                              self._first, nh, new)
        self._spare = (self._uh_prev, self._nh_prev)
        self._uh_prev, self._uh, self._nh_prev = self._uh, new, nh
        self._first = False
        self._real = _irfft2(new, (self.ny, self.nx), self.workers)
        if self.realizability:
            real = self._real
            if self._limit(real[0], real[1], real[2]):
                # back to the truncated Fourier state; the mean (mass) mode is exact, the
                # re-truncation can leave small overshoots of the bounds
                uh = _rfft2(real, self.workers)
                uh *= self.dealias
                self._uh = uh
                self._real = _irfft2(uh, (self.ny, self.nx), self.workers)

    def _state_arrays(self):
        return {"uh": self._uh, "uh_prev": self._uh_prev, "nh_prev": self._nh_prev,
                "first": np.array(int(self._first))}

    def _load_state_arrays(self, arrays):
        self._uh = np.array(arrays["uh"], dtype=np.complex128)
        self._uh_prev = np.array(arrays["uh_prev"], dtype=np.complex128)
        self._nh_prev = np.array(arrays["nh_prev"], dtype=np.complex128)
        self._spare = None
        self._first = bool(int(np.asarray(arrays["first"])))
        self._real = _irfft2(self._uh, (self.ny, self.nx), self.workers)
