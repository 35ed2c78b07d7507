"""Space derivatives, equation filters and the term library of the coefficient fit.

Derivatives (the comparison layer keeps its own, it never imports an engine):

* :class:`SpectralOperators` -- fully periodic box without obstacles: derivatives by
  Fourier multipliers (``i k``, ``-k^2``; the Nyquist mode of odd derivatives is zeroed,
  as usual for real data), exact for band-limited fields.
* :class:`FiniteDifferenceOperators` -- channels and obstacles: second-order central
  differences (3-point, and the 4-corner stencil for ``d_xy``), periodic in x (and in y
  when the domain is), evaluated only "away from the mask": a point is used when it and
  its 8 neighbours are fluid and, in a channel, it is not in the first or last row.

Equation filter. Target and library terms are passed through the same linear filter ``G``
before the fit. Because ``G`` is linear, ``G[d_t w] = sum_i c_i G[f_i(u)]`` holds exactly
whenever the equation ``d_t w = sum_i c_i f_i(u)`` holds pointwise, so filtering the
*equation* (not the fields) changes only the weighting, never the coefficients. The
spectral filter is the 2/3 projection (Orszag 1971; the continuum engine's fields live in
that band, so its own de-aliasing is reproduced) times an optional Gaussian
``exp(-k^2 l^2 / 2)``; the finite-difference filter is an optional normalised Gaussian
convolution ``G(f v) / G(v)`` over the valid points ``v``.

Term library (GUIDE section 3), every term as it appears on the right-hand side of
``d_t w`` with unit coefficient; ``D_2`` is read as ``w_a w_b d_a d_b w`` (second
derivative along w, the continuum engine's documented reading)::

    alpha        w                       alpha_rho   (rho - rho0) w
    beta         -|w|^2 w                pressure[k] -(k+1) (rho - rho0)^k grad rho
    D_T          lap w                   D_B         grad div w
    D_2          w_a w_b d_a d_b w       lambda1     -(w.grad) w
    lambda2      -(div w) w              lambda3     -grad |w|^2

and for ``d_t rho``: ``-div w`` (coefficient v0) and ``lap rho`` (coefficient D_rho).

References
----------
.. [1] S. A. Orszag, J. Atmos. Sci. 28, 1074 (1971) -- the 2/3 de-aliasing rule.
"""

from __future__ import annotations

import re

import numpy as np
from scipy import fft as _fft
from scipy import ndimage

from crossflock._errors import InputError

__all__ = [
    "SpectralOperators",
    "FiniteDifferenceOperators",
    "W_TERMS",
    "RHO_TERMS",
    "parse_terms",
    "library",
    "continuity_columns",
    "natural_scale",
]

W_TERMS = ("alpha", "alpha_rho", "beta", "pressure[0]", "pressure[1]", "D_T", "D_B",
           "D_2", "lambda1", "lambda2", "lambda3")
RHO_TERMS = ("D_rho",)
_PRESSURE = re.compile(r"^pressure\[(\d+)\]$")


class SpectralOperators:
    """Fourier derivatives and the spectral equation filter on a periodic grid.

    Parameters
    ----------
    nx, ny : int
    dx, dy : float
        Grid spacings (the box is ``nx dx`` by ``ny dy``).
    dealias : bool
        Include the 2/3 projection in the filter.
    smoothing : float
        Gaussian filter length (0 = none).
    """

    method = "spectral"

    def __init__(self, nx, ny, dx, dy, *, dealias=True, smoothing=0.0):
        self.shape = (int(ny), int(nx))
        kx = 2.0 * np.pi * np.fft.rfftfreq(nx, dx)
        ky = 2.0 * np.pi * np.fft.fftfreq(ny, dy)
        self.kx = kx[None, :]
        self.ky = ky[:, None]
        # first derivatives: the Nyquist mode has no sign, so it is dropped (real output)
        nyq_x = np.zeros(kx.size, dtype=bool)
        if nx % 2 == 0:
            nyq_x[nx // 2] = True
        nyq_y = np.zeros(ny, dtype=bool)
        if ny % 2 == 0:
            nyq_y[ny // 2] = True
        self._ikx = 1j * np.where(nyq_x, 0.0, kx)[None, :]
        self._iky = 1j * np.where(nyq_y, 0.0, ky)[:, None]
        self.valid = np.ones(self.shape, dtype=bool)
        self.multiplier = self._multiplier(nx, ny, kx, ky, dealias, smoothing)
        self.identity_filter = bool(np.all(self.multiplier == 1.0))
        self._noise_factor = self._variance_factor(nx, ny, dx, dy, dealias, smoothing)

    @staticmethod
    def _multiplier(nx, ny, kx, ky, dealias, smoothing, full=False):
        mx = np.abs(np.fft.fftfreq(nx, 1.0 / nx)) if full else np.arange(kx.size)
        my = np.abs(np.fft.fftfreq(ny, 1.0 / ny))
        g = np.ones((ny, mx.size))
        if dealias:
            g *= (my[:, None] <= (ny - 1) // 3) & (mx[None, :] <= (nx - 1) // 3)
        if smoothing > 0:
            k2 = kx[None, :] ** 2 + ky[:, None] ** 2
            g *= np.exp(-0.5 * smoothing**2 * k2)
        return g

    def _variance_factor(self, nx, ny, dx, dy, dealias, smoothing):
        kx_full = 2.0 * np.pi * np.fft.fftfreq(nx, dx)
        ky = 2.0 * np.pi * np.fft.fftfreq(ny, dy)
        g = self._multiplier(nx, ny, kx_full, ky, dealias, smoothing, full=True)
        return float(np.mean(g**2))

    def noise_variance_factor(self) -> float:
        """Variance of filtered unit white noise per grid point (mean of ``|g(k)|^2``)."""
        return self._noise_factor

    def _fft(self, f):
        return _fft.rfft2(f, axes=(-2, -1))

    def _ifft(self, fh):
        return _fft.irfft2(fh, s=self.shape, axes=(-2, -1))

    def derivatives(self, f) -> dict:
        """First and second derivatives of ``f : (..., ny, nx)``.

        Returns
        -------
        dict
            ``"x"``, ``"y"``, ``"xx"``, ``"xy"``, ``"yy"``: arrays shaped like ``f``.
        """
        fh = self._fft(np.asarray(f, dtype=float))
        mult = {"x": self._ikx, "y": self._iky, "xx": -self.kx**2,
                "xy": self._ikx * self._iky, "yy": -self.ky**2}
        return {name: self._ifft(m * fh) for name, m in mult.items()}

    def filter(self, f):
        """The equation filter applied over the last two axes."""
        if self.identity_filter:
            return np.asarray(f, dtype=float)
        return self._ifft(self.multiplier * self._fft(f))


class FiniteDifferenceOperators:
    """Second-order central differences, used away from walls and obstacles.

    Parameters
    ----------
    fluid : (ny, nx) bool ndarray
        Fluid mask.
    dx, dy : float
    periodic_y : bool
        Periodic in y (False for a channel).
    smoothing : float
        Gaussian filter length (0 = none).
    """

    method = "finite_difference"

    def __init__(self, fluid, dx, dy, *, periodic_y, smoothing=0.0):
        fluid = np.asarray(fluid, dtype=bool)
        self.shape = fluid.shape
        self.dx, self.dy = float(dx), float(dy)
        self.periodic_y = bool(periodic_y)
        ok = fluid.copy()
        for sy in (-1, 0, 1):
            for sx in (-1, 0, 1):
                ok &= np.roll(np.roll(fluid, sy, axis=0), sx, axis=1)
        if not self.periodic_y:
            ok[0, :] = False
            ok[-1, :] = False
        self.valid = ok
        self.smoothing = float(smoothing)
        self._sigma = (self.smoothing / self.dy, self.smoothing / self.dx)
        self._norm = self._gauss(ok.astype(float)) if self.smoothing > 0 else None

    def derivatives(self, f) -> dict:
        """Central differences of ``f : (..., ny, nx)`` (meaningful on :attr:`valid`)."""
        f = np.asarray(f, dtype=float)
        xp, xm = np.roll(f, -1, axis=-1), np.roll(f, 1, axis=-1)
        yp, ym = np.roll(f, -1, axis=-2), np.roll(f, 1, axis=-2)
        dx, dy = self.dx, self.dy
        pp = np.roll(xp, -1, axis=-2)
        pm = np.roll(xp, 1, axis=-2)
        mp = np.roll(xm, -1, axis=-2)
        mm = np.roll(xm, 1, axis=-2)
        return {
            "x": (xp - xm) / (2.0 * dx),
            "y": (yp - ym) / (2.0 * dy),
            "xx": (xp - 2.0 * f + xm) / dx**2,
            "yy": (yp - 2.0 * f + ym) / dy**2,
            "xy": (pp - pm - mp + mm) / (4.0 * dx * dy),
        }

    def _gauss(self, f):
        f = np.asarray(f, dtype=float)
        sigma = (0.0,) * (f.ndim - 2) + self._sigma
        mode = ("wrap",) * (f.ndim - 2) + ("wrap" if self.periodic_y else "constant", "wrap")
        return ndimage.gaussian_filter(f, sigma=sigma, mode=mode, truncate=4.0)

    def filter(self, f):
        """Normalised Gaussian convolution over the valid points (identity without
        smoothing)."""
        if self._norm is None:
            return np.asarray(f, dtype=float)
        v = self.valid
        out = self._gauss(np.where(v, f, 0.0))
        return np.where(v, out / np.where(self._norm > 0, self._norm, 1.0), 0.0)

    def noise_variance_factor(self) -> float:
        """Variance of filtered unit white noise per point (interior kernel)."""
        if self._norm is None:
            return 1.0
        n = 2 * int(np.ceil(4.0 * max(self._sigma))) + 3
        delta = np.zeros((n, n))
        delta[n // 2, n // 2] = 1.0
        kern = ndimage.gaussian_filter(delta, sigma=self._sigma, mode="constant",
                                       truncate=4.0)
        return float(np.sum(kern**2))


def parse_terms(terms) -> tuple[tuple[str, ...], bool]:
    """Validate a term list; returns the ``d_t w`` terms and whether D_rho is fitted.

    Raises
    ------
    InputError
        An unknown term, a duplicate, or a pressure order with a gap.
    """
    if isinstance(terms, str):
        terms = (terms,)
    names = list(terms)
    if len(set(names)) != len(names):
        raise InputError(f"`terms` must not repeat a term (got {names})")
    w_terms = []
    fit_d_rho = False
    orders = []
    for name in names:
        if name == "D_rho":
            fit_d_rho = True
            continue
        m = _PRESSURE.match(str(name))
        if m:
            orders.append(int(m.group(1)))
        elif name not in W_TERMS:
            raise InputError(
                f"`terms` entry {name!r} is not a term of the equations; known: "
                + ", ".join(W_TERMS + RHO_TERMS) + ", pressure[k]"
            )
        w_terms.append(str(name))
    if orders and sorted(orders) != list(range(max(orders) + 1)):
        raise InputError(
            f"`terms` pressure orders must be consecutive from pressure[0] (got "
            f"{sorted(orders)})"
        )
    return tuple(w_terms), fit_d_rho


def natural_scale(term: str, rho0: float, length: float) -> float:
    """Size of a term's column in a state with |w| ~ rho0 varying on ``length``.

    Used only to tell an identically vanishing column (uniform state) from a small one.
    """
    m = _PRESSURE.match(term)
    if m:
        return rho0 ** (int(m.group(1)) + 1) / length
    scale = {"alpha": rho0, "alpha_rho": rho0**2, "beta": rho0**3,
             "D_T": rho0 / length**2, "D_B": rho0 / length**2,
             "D_2": rho0**3 / length**2, "lambda1": rho0**2 / length,
             "lambda2": rho0**2 / length, "lambda3": rho0**2 / length,
             "D_rho": rho0 / length**2, "v0": rho0 / length}
    return scale[term]


def library(fields, d, rho0: float, terms) -> np.ndarray:
    """The ``d_t w`` library columns.

    Parameters
    ----------
    fields : (..., 3, ny, nx) ndarray
        ``rho, w_x, w_y``.
    d : dict
        :meth:`derivatives` of ``fields`` (same shapes).
    rho0 : float
    terms : sequence of str
        Names from :data:`W_TERMS` (or ``pressure[k]``).

    Returns
    -------
    (..., p, 2, ny, nx) ndarray
        Column ``i`` holds the (x, y) components of term ``terms[i]``.
    """
    rho, wx, wy = fields[..., 0, :, :], fields[..., 1, :, :], fields[..., 2, :, :]
    drho = rho - rho0
    rx, ry = d["x"][..., 0, :, :], d["y"][..., 0, :, :]
    gxx, gyx = d["x"][..., 1, :, :], d["y"][..., 1, :, :]  # d_x w_x, d_y w_x
    gxy, gyy = d["x"][..., 2, :, :], d["y"][..., 2, :, :]  # d_x w_y, d_y w_y
    hxx, hxy, hyy = d["xx"][..., 1:, :, :], d["xy"][..., 1:, :, :], d["yy"][..., 1:, :, :]
    w = fields[..., 1:, :, :]
    w2 = wx * wx + wy * wy
    div = gxx + gyy
    cols = []
    for name in terms:
        m = _PRESSURE.match(name)
        if m:
            k = int(m.group(1))
            f = -(k + 1) * drho**k
            cols.append(np.stack([f * rx, f * ry], axis=-3))
        elif name == "alpha":
            cols.append(w)
        elif name == "alpha_rho":
            cols.append(drho[..., None, :, :] * w)
        elif name == "beta":
            cols.append(-w2[..., None, :, :] * w)
        elif name == "D_T":
            cols.append(hxx + hyy)
        elif name == "D_B":
            cols.append(np.stack([hxx[..., 0, :, :] + hxy[..., 1, :, :],
                                  hxy[..., 0, :, :] + hyy[..., 1, :, :]], axis=-3))
        elif name == "D_2":
            cols.append((wx * wx)[..., None, :, :] * hxx
                        + (2.0 * wx * wy)[..., None, :, :] * hxy
                        + (wy * wy)[..., None, :, :] * hyy)
        elif name == "lambda1":
            cols.append(-np.stack([wx * gxx + wy * gyx, wx * gxy + wy * gyy], axis=-3))
        elif name == "lambda2":
            cols.append(-div[..., None, :, :] * w)
        elif name == "lambda3":
            cols.append(-2.0 * np.stack([wx * gxx + wy * gxy, wx * gyx + wy * gyy],
                                        axis=-3))
        else:  # parse_terms has validated the names
            raise InputError(f"unknown term {name!r}")
    return np.stack(cols, axis=-4)


def continuity_columns(d) -> np.ndarray:
    """``d_t rho`` columns ``(-div w, lap rho)`` as ``(..., 2, ny, nx)``."""
    div = d["x"][..., 1, :, :] + d["y"][..., 2, :, :]
    lap = d["xx"][..., 0, :, :] + d["yy"][..., 0, :, :]
    return np.stack([-div, lap], axis=-3)
