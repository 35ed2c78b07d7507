"""Density structure factor and polarization correlation function on a grid.

Rules (documented contract):

* ``S(k) = <|dN_k|^2> / N`` with ``dN`` the cell counts minus their fluid mean (zero on
  solid cells), ``dN_k`` its 2-D DFT, ``N`` the total count of the snapshot; radially
  averaged over shells ``|k| in [(j - 1/2) dk, (j + 1/2) dk)``, ``dk = 2 pi / max(Lx,
  Ly)``, ``j >= 1``, up to the smaller Nyquist wavenumber; the bin coordinate is the mean
  ``|k|`` of its modes. For uncorrelated points counted exactly per cell this is 1 at
  every k (the reciprocal lattice of the box). In channels and around obstacles the DFT
  still treats the (masked) fluctuation field as periodic: an approximation there.
* Polarization correlation ``C(r) = <dw(x) . dw(x + r)> / <dw . dw>`` of the
  polarization density fluctuations ``dw = w - <w>_fluid``, from pair sums computed by
  FFT over fluid pairs only (zero padding in the non-periodic y of a channel),
  radially averaged in shells of the larger grid spacing (coordinate: mean distance);
  the correlation length is where C first drops to 1/e (linear interpolation between
  shells).
"""

from __future__ import annotations

import numpy as np

__all__ = ["radial_bins", "radial_average", "structure_factor_series",
           "structure_factor", "polarization_correlation", "correlation_length"]


def radial_bins(nx: int, ny: int, lx: float, ly: float):
    """Shell index of every 2-D DFT mode and the number of shells.

    Returns
    -------
    index : (ny, nx) int ndarray
        Shell of each mode (-1 for k = 0 and modes beyond the Nyquist radius).
    kmag : (ny, nx) ndarray
        ``|k|`` of each mode.
    nbins : int
    """
    kx = 2 * np.pi * np.fft.fftfreq(nx, lx / nx)
    ky = 2 * np.pi * np.fft.fftfreq(ny, ly / ny)
    kmag = np.hypot(kx[None, :], ky[:, None])
    dk = 2 * np.pi / max(lx, ly)
    kmax = min(np.pi * nx / lx, np.pi * ny / ly)
    index = np.rint(kmag / dk).astype(np.int64) - 1
    index[(kmag == 0) | (kmag > kmax)] = -1
    nbins = int(index.max()) + 1
    return index, kmag, nbins


def radial_average(values, index, nbins):
    """Average ``(..., ny, nx)`` values over shells; ``(..., nbins)`` (NaN if empty)."""
    flat = np.asarray(values).reshape(-1, index.size)
    sel = index.ravel() >= 0
    idx = index.ravel()[sel]
    counts = np.bincount(idx, minlength=nbins).astype(float)
    out = np.empty((flat.shape[0], nbins))
    for i in range(flat.shape[0]):
        out[i] = np.bincount(idx, weights=flat[i, sel], minlength=nbins)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = out / counts
    return out.reshape(np.asarray(values).shape[:-2] + (nbins,))


def structure_factor_series(counts, lx: float, ly: float, fluid=None):
    """Radially averaged ``S(k)`` of every snapshot.

    Parameters
    ----------
    counts : (T, ny, nx) ndarray
        Particle number per cell (``rho * cell area`` for fields).
    lx, ly : float
        Box size.
    fluid : (ny, nx) bool ndarray, optional

    Returns
    -------
    k : (nk,) ndarray
        Shell wavenumbers (mean ``|k|`` of the modes in each non-empty shell).
    s : (T, nk) ndarray
    """
    counts = np.asarray(counts, dtype=float)
    nt, ny, nx = counts.shape
    fluid = np.ones((ny, nx), bool) if fluid is None else np.asarray(fluid, bool)
    index, kmag, nbins = radial_bins(nx, ny, lx, ly)
    total = counts.sum(axis=(1, 2))
    mean = counts[:, fluid].mean(axis=1)
    dn = np.where(fluid, counts - mean[:, None, None], 0.0)
    power = np.abs(np.fft.fft2(dn)) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        power /= total[:, None, None]
    s = radial_average(power, index, nbins)
    k = radial_average(kmag, index, nbins)
    keep = np.isfinite(k)
    return k[keep], s[:, keep]


def structure_factor(counts, lx: float, ly: float, fluid=None):
    """Time-averaged ``S(k)`` with its standard error.

    Returns
    -------
    k, s_mean, s_err : (nk,) ndarray
        ``s_err`` from :func:`crossflock.compare.mean_sem` (autocorrelation aware).
    """
    from ._stats import mean_sem

    k, s = structure_factor_series(counts, lx, ly, fluid)
    mean, sem, _ = mean_sem(s)
    return k, np.asarray(mean), np.asarray(sem)


def polarization_correlation(px, py, lx: float, ly: float, fluid=None, channel=False):
    """Radially averaged connected correlation of the polarization density.

    Parameters
    ----------
    px, py : (T, ny, nx) ndarray
    lx, ly : float
    fluid : (ny, nx) bool ndarray, optional
    channel : bool
        Non-periodic y (zero padding).

    Returns
    -------
    r : (nr,) ndarray
        Mean distance of the lattice vectors in each shell ``|r| in [(j - 1/2) h,
        (j + 1/2) h)``, ``h`` the larger grid spacing, up to half the smaller box side.
    c : (nr,) ndarray
        Time-averaged correlation normalised to ``c[0] = 1`` (NaN when there are no
        fluctuations).
    """
    px = np.asarray(px, dtype=float)
    py = np.asarray(py, dtype=float)
    nt, ny, nx = px.shape
    fluid = np.ones((ny, nx), bool) if fluid is None else np.asarray(fluid, bool)
    m = fluid.astype(float)
    pad = ny if channel else 0
    shape = (ny + pad, nx)

    def corr(a, b):
        return np.fft.irfft2(np.fft.rfft2(a, shape) * np.conj(np.fft.rfft2(b, shape)),
                             shape)

    pairs = corr(m, m)
    num = np.zeros(shape)
    for t in range(nt):
        for comp in (px[t], py[t]):
            d = np.where(fluid, comp - comp[fluid].mean(), 0.0)
            num += corr(d, d)
    with np.errstate(invalid="ignore", divide="ignore"):
        cfield = np.where(pairs > 0.5, num / np.where(pairs > 0.5, pairs, 1.0), 0.0)
    dx, dy = lx / nx, ly / ny
    ix = np.fft.fftfreq(nx, 1.0 / nx)
    iy = np.fft.fftfreq(shape[0], 1.0 / shape[0])
    rr = np.hypot(ix[None, :] * dx, iy[:, None] * dy)
    h = max(dx, dy)
    rmax = 0.5 * min(lx, ly)
    shell = np.rint(rr / h).astype(np.int64)
    valid = (pairs > 0.5) & (rr <= rmax)
    nr = int(shell[valid].max()) + 1
    w = np.bincount(shell[valid], minlength=nr).astype(float)
    c = np.bincount(shell[valid], weights=cfield[valid], minlength=nr)
    with np.errstate(invalid="ignore", divide="ignore"):
        c = c / w
        c = c / c[0] if c[0] > 0 else np.full(nr, np.nan)
    keep = w > 0
    # Shell coordinate: mean distance of its lattice vectors (as for k in S(k)).
    rsum = np.bincount(shell[valid], weights=rr[valid], minlength=nr)
    r = rsum[keep] / w[keep]
    return r, c[keep]


def correlation_length(r, c) -> float:
    """First distance where ``c`` drops to ``1/e`` (linear interpolation); NaN if never."""
    r = np.asarray(r, dtype=float)
    c = np.asarray(c, dtype=float)
    if c.size == 0 or not np.isfinite(c[0]):
        return float("nan")
    level = np.exp(-1.0)
    below = np.flatnonzero(c <= level)
    if below.size == 0:
        return float("nan")
    i = below[0]
    if i == 0:
        return 0.0
    r0, r1, c0, c1 = r[i - 1], r[i], c[i - 1], c[i]
    return float(r0 + (c0 - level) * (r1 - r0) / (c0 - c1))
