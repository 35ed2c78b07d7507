"""Travelling-band detection from the density profile along the mean polarization.

Rule (documented contract, heuristic thresholds below):

1. Axis: the box axis closest to the time-averaged polarization (always x in a channel,
   where y is not periodic). The profile ``rho(s, t)`` is the fluid average of rho over
   the transverse direction.
2. Fourier modes ``F_m(t)`` of the profile; ``m*`` maximises the time-averaged power
   over ``m >= 1``. Relative amplitude ``A(t) = 2 |F_m*(t)| / F_0(t)`` (``A`` for a profile
   ``rho0 (1 + A cos(2 pi m s / L))``).
3. A band is present when the mean amplitude (the contrast) is at least
   :data:`MIN_CONTRAST` and steady: coefficient of variation of ``A(t)`` at most
   :data:`MAX_AMPLITUDE_CV` (a Gaussian fluctuation mode has a Rayleigh-distributed
   amplitude, CV ``sqrt(4/pi - 1) = 0.52``) and ``m*`` the largest mode in at least
   :data:`MIN_DOMINANCE` of the samples.
4. Wavelength ``L / m*``; speed from a linear fit of the unwrapped phase (position
   ``-phase L / (2 pi m*)``) against time, positive when moving along the mean
   polarization. Assumes the band moves less than half a wavelength between samples.
"""

from __future__ import annotations

import numpy as np

__all__ = ["MIN_CONTRAST", "MAX_AMPLITUDE_CV", "MIN_DOMINANCE", "detect_band"]

MIN_CONTRAST = 0.2
MAX_AMPLITUDE_CV = 0.25
MIN_DOMINANCE = 0.8


def detect_band(time, rho, px, py, lx: float, ly: float, fluid=None, channel=False):
    """Band present/absent, wavelength, speed and contrast.

    Parameters
    ----------
    time : (T,) ndarray
    rho, px, py : (T, ny, nx) ndarray
    lx, ly : float
    fluid : (ny, nx) bool ndarray, optional
    channel : bool

    Returns
    -------
    dict
        ``present`` (0/1), ``wavelength``, ``speed``, ``contrast`` (NaN when absent),
        ``axis`` ("x" or "y"), ``amplitude`` (mean relative amplitude, always given).
    """
    time = np.asarray(time, dtype=float)
    rho = np.asarray(rho, dtype=float)
    nt, ny, nx = rho.shape
    fluid = np.ones((ny, nx), bool) if fluid is None else np.asarray(fluid, bool)
    pol = np.array([np.sum(px), np.sum(py)], dtype=float)
    use_y = (not channel) and abs(pol[1]) > abs(pol[0])
    m = fluid.astype(float)
    if use_y:
        profile = (rho * m).sum(axis=2) / np.maximum(m.sum(axis=1), 1.0)
        length, direction = ly, pol[1]
    else:
        profile = (rho * m).sum(axis=1) / np.maximum(m.sum(axis=0), 1.0)
        length, direction = lx, pol[0]
    out = {"present": 0, "wavelength": np.nan, "speed": np.nan, "contrast": np.nan,
           "axis": "y" if use_y else "x", "amplitude": np.nan}
    f = np.fft.rfft(profile, axis=1)
    if f.shape[1] < 2 or nt < 2:
        return out
    power = (np.abs(f[:, 1:]) ** 2).mean(axis=0)
    mstar = int(np.argmax(power)) + 1
    with np.errstate(invalid="ignore", divide="ignore"):
        amp = 2.0 * np.abs(f[:, mstar]) / np.abs(f[:, 0].real)
    mean_amp = float(np.mean(amp))
    out["amplitude"] = mean_amp
    cv = float(np.std(amp) / mean_amp) if mean_amp > 0 else np.inf
    dominant = np.argmax(np.abs(f[:, 1:]), axis=1) + 1 == mstar
    if not (mean_amp >= MIN_CONTRAST and cv <= MAX_AMPLITUDE_CV
            and dominant.mean() >= MIN_DOMINANCE):
        return out
    phase = np.unwrap(np.angle(f[:, mstar]))
    position = -phase * length / (2 * np.pi * mstar)
    slope = np.polyfit(time, position, 1)[0]
    sign = 1.0 if direction >= 0 else -1.0
    out.update(present=1, wavelength=length / mstar, speed=float(sign * slope),
               contrast=mean_amp)
    return out
