"""Band detection on synthetic travelling bands and on uniform states."""

import numpy as np
import pytest

from crossflock.compare import detect_band


def _band(axis, m, speed, sign, nt=30, dt=2.0, amp=0.6, noise=0.0, seed=0):
    """rho = 1 + amp cos(2 pi m (s - sign * speed * t) / L), w = 0.8 rho along sign."""
    nx, ny, lx, ly = 64, 48, 64.0, 48.0
    rng = np.random.default_rng(seed)
    t = np.arange(nt) * dt
    x = (np.arange(nx) + 0.5) * lx / nx
    y = (np.arange(ny) + 0.5) * ly / ny
    s, length = (x[None, None, :], lx) if axis == "x" else (y[None, :, None], ly)
    phase = 2 * np.pi * m * (s - sign * speed * t[:, None, None]) / length
    rho = (1 + amp * np.cos(phase)) * np.ones((nt, ny, nx))
    rho = rho + noise * rng.standard_normal(rho.shape)
    p = 0.8 * sign * rho
    px, py = (p, 0 * p) if axis == "x" else (0 * p, p)
    return t, rho, px, py, lx, ly, length


@pytest.mark.parametrize(("axis", "m", "speed", "sign"),
                         [("x", 2, 0.5, 1), ("x", 3, 1.2, -1), ("y", 1, 0.7, -1)])
def test_travelling_band_found(axis, m, speed, sign):
    t, rho, px, py, lx, ly, length = _band(axis, m, speed, sign)
    out = detect_band(t, rho, px, py, lx, ly)
    assert out["present"] == 1
    assert out["axis"] == axis
    # noise-free synthetic data: exact up to round-off
    assert out["wavelength"] == pytest.approx(length / m, rel=1e-12)
    assert out["speed"] == pytest.approx(speed, rel=1e-9)
    assert out["contrast"] == pytest.approx(0.6, rel=1e-9)


def test_noisy_band_in_channel():
    t, rho, px, py, lx, ly, length = _band("x", 2, 0.5, 1, noise=0.2, seed=3)
    out = detect_band(t, rho, px, py, lx, ly, channel=True)
    assert out["present"] == 1 and out["wavelength"] == pytest.approx(32.0)
    # phase noise per sample: profile mode amplitude noise 0.2 / sqrt(nx ny / 2) relative
    # to the band amplitude 0.6 -> position error ~ L / (2 pi m) * 0.2 / (0.6 * 39);
    # the fitted speed over 30 samples is then good to well under 1 %
    assert out["speed"] == pytest.approx(0.5, rel=0.01)


@pytest.mark.parametrize("pol", [0.0, 0.8])
def test_uniform_state_has_no_band(pol):
    rng = np.random.default_rng(4)
    rho = 2.0 + 0.3 * rng.standard_normal((30, 48, 64))
    out = detect_band(np.arange(30.0), rho, pol * rho, 0 * rho, 64.0, 48.0)
    assert out["present"] == 0
    assert np.isnan(out["wavelength"]) and np.isnan(out["speed"])
    assert np.isnan(out["contrast"]) and out["amplitude"] < 0.05


def test_fluctuating_mode_is_not_a_band():
    # A strong but Gaussian-fluctuating long-wavelength mode (Rayleigh amplitude) fails
    # the steadiness criterion even when its mean amplitude exceeds the contrast limit.
    rng = np.random.default_rng(5)
    nt = 200
    coef = 0.3 * (rng.standard_normal(nt) + 1j * rng.standard_normal(nt))
    x = (np.arange(64) + 0.5)
    rho = 1 + np.real(coef[:, None] * np.exp(2j * np.pi * x / 64.0))[:, None, :]
    rho = rho * np.ones((nt, 48, 64))
    out = detect_band(np.arange(nt, dtype=float), rho, 0.5 * rho, 0 * rho, 64.0, 48.0)
    assert out["amplitude"] > 0.2
    assert out["present"] == 0
