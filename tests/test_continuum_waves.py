"""Linear sound waves of the homogeneous ordered state vs Tu, Toner & Ulm 1998."""

import numpy as np
import pytest

import crossflock as cf
from crossflock.continuum import SpectralSolver, linear_sound_speeds

COEFFS = {"alpha": 2.0, "alpha_rho": 1.0, "beta": 2.0, "pressure": [1.0], "D_T": 0.05,
          "lambda1": 0.5, "lambda2": 0.3, "lambda3": 0.1}
L = 64.0
TAU = 0.5  # sampling interval of the mode amplitudes


def _cfg(rho0=1.0, realizability="auto", dt=0.05):
    return cf.load_config({
        "domain": {"size": [L, L]},
        "model": {"density": rho0, "speed": 1.0, "radius": 2.0},
        "run": {"duration": 40.0, "sample_every": 1.0},
        "continuum": {"grid": [32, 32], "dt": dt, "coefficients": COEFFS,
                      "realizability": realizability},
    })


def _measured_speeds(m, n, rho0=1.0, realizability="auto", dt=0.05):
    """Phase speeds of the two slow modes at wavevector 2 pi (m, n) / L.

    The complex amplitudes X(t) = (rho_k, wy_k) obey X(t + tau) = G X(t) once the fast
    longitudinal mode has relaxed; G is fitted by least squares (no theory input) and
    its eigenvalues exp(-i omega tau) give the frequencies.
    """
    cfg = _cfg(rho0, realizability, dt)
    s = SpectralSolver(cfg)
    k = 2 * np.pi * np.array([m, n]) / L
    phase = k[0] * s.x[None, :] + k[1] * s.y[:, None]
    eps = 1e-4
    w0 = np.sqrt(COEFFS["alpha"] / COEFFS["beta"])
    rho = rho0 + eps * np.cos(phase)
    wx = np.full_like(rho, w0)
    wy = eps * np.cos(phase + 0.7)
    s = SpectralSolver(cfg, initial=(rho, wx, wy))
    basis = np.exp(-1j * phase) / phase.size
    per = round(TAU / s.dt)
    amps = []
    for i in range(int(40 / TAU) + 1):
        if i:
            for _ in range(per):
                s.step()
        r, _, y = s.fields()
        amps.append([np.sum(r * basis), np.sum(y * basis)])
    x = np.array(amps)[4:]  # skip 2 time units: fast mode decays as exp(-2 alpha t)
    g, *_ = np.linalg.lstsq(x[:-1], x[1:], rcond=None)
    omega = -np.angle(np.linalg.eigvals(g.T)) / TAU
    return np.sort(omega / np.linalg.norm(k))[::-1], np.linalg.norm(k)


@pytest.mark.parametrize("m, n", [(1, 0), (1, 1), (0, 1), (1, 2)])
def test_sound_speeds_tu_toner_ulm(m, n):
    _check_speeds(m, n)


def _check_speeds(m, n, rho0=1.0, realizability="auto", dt=0.05):
    # Tu, Toner & Ulm 1998, PRL 80, 4819: c(theta) = (gamma+v2)/2 cos(theta)
    #   +- sqrt(((gamma-v2)/2)^2 cos^2(theta) + c0^2 sin^2(theta)), with gamma, v2, c0
    # expressed through the GUIDE section-3 coefficients (derivation in _linear.py).
    measured, k = _measured_speeds(m, n, rho0, realizability, dt)
    theta = np.arctan2(n, m)
    w0 = np.sqrt(COEFFS["alpha"] / COEFFS["beta"])
    c_plus, c_minus = linear_sound_speeds(COEFFS, rho0, w0, theta, v0=1.0)
    # The formula is the k -> 0 limit; the slaved fast mode (rate 2 alpha) shifts the
    # real frequencies by O((k c / 2 alpha)^2) relative, and the unequal damping D_T k^2
    # of the two slow modes by O((D_T k^2 / (c k))^2). Allow 5x the larger of the two.
    c_max = max(abs(c_plus), abs(c_minus))
    rel = max((k * c_max / (2 * COEFFS["alpha"])) ** 2,
              (COEFFS["D_T"] * k**2 / (c_max * k)) ** 2)
    tol = 5 * rel * c_max + 1e-4
    np.testing.assert_allclose(measured, [c_plus, c_minus], atol=tol)
    return measured


def test_sound_speeds_with_realizability_limiter_on():
    # Same check with the limiter forced on, about rho0 = 2 (|w0| / rho0 = 1/2, inside
    # |w| <= rho; dt halved for the reaction limit 2 beta rho0^2): a smooth linear wave
    # must come out as without the limiter.
    on = _check_speeds(1, 1, rho0=2.0, realizability=True, dt=0.025)
    off = _check_speeds(1, 1, rho0=2.0, realizability=False, dt=0.025)
    np.testing.assert_array_equal(on, off)
