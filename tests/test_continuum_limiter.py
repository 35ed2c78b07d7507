"""Realizability limiter, kinetic noise and the divergence diagnosis of the continuum."""

import math

import numpy as np
import pytest

import crossflock as cf
from crossflock._kinetic import kinetic_coefficients
from crossflock.continuum import METHODS, simulate
from crossflock.continuum._coefficients import CoefficientModel
from crossflock.continuum._driver import _linear_instability_hint
from crossflock.continuum._limiter import apply_realizability
from tests.conftest import results_per_thread_count


def _kinetic_cfg(method="finite_difference", noise=0.3, **continuum):
    return cf.load_config({
        "domain": {"size": [16.0, 16.0]},
        "model": {"density": 2.0, "noise": noise},
        "run": {"duration": 10.0, "sample_every": 1.0, "initial": "ordered"},
        "continuum": {"grid": [16, 16], "dt": 0.05, "method": method, **continuum},
    })


def _run(solver, steps):
    for _ in range(steps):
        solver.step()
    return solver.fields()


# --------------------------------------------------------------------------- kernel
def test_limiter_projects_onto_realizable_set_conserving_mass():
    rng = np.random.default_rng(5)
    rho = rng.normal(1.0, 0.8, (24, 20))
    wx = rng.normal(0.0, 1.0, rho.shape)
    wy = rng.normal(0.0, 1.0, rho.shape)
    fluid = np.ones(rho.shape, dtype=np.uint8)
    fluid[5:9, 4:7] = 0
    for a in (rho, wx, wy):
        a[fluid == 0] = 0.0
    before = rho.copy(), wx.copy(), wy.copy()
    neg = -rho[rho < 0].sum()
    pos = rho[rho > 0].sum()
    assert neg > 0 and np.any(wx**2 + wy**2 > rho**2)
    n = apply_realizability(rho, wx, wy, fluid)
    assert n > 0
    # mass to round-off (sum of ~500 numbers of order 1)
    assert abs(rho.sum() - before[0].sum()) <= 1e-13 * pos
    assert np.all(rho >= 0)
    assert np.all(np.hypot(wx, wy) <= rho * (1 + 1e-15))
    # positive cells scaled by the documented factor (M+ - M-) / M+
    p = before[0] > 0
    np.testing.assert_allclose(rho[p], before[0][p] * (pos - neg) / pos, rtol=1e-15)
    # directions of w kept
    moved = np.hypot(wx, wy) > 0
    np.testing.assert_allclose(np.arctan2(wy, wx)[moved],
                               np.arctan2(before[2], before[1])[moved], atol=1e-12)
    # solid cells untouched
    assert np.all(rho[fluid == 0] == 0) and np.all(wx[fluid == 0] == 0)


def test_limiter_leaves_realizable_state_bit_identical():
    rng = np.random.default_rng(6)
    rho = rng.uniform(0.5, 2.0, (16, 16))
    ang = rng.uniform(0, 2 * np.pi, rho.shape)
    mag = rho * rng.uniform(0, 0.99, rho.shape)
    wx, wy = mag * np.cos(ang), mag * np.sin(ang)
    before = rho.copy(), wx.copy(), wy.copy()
    assert apply_realizability(rho, wx, wy, np.ones(rho.shape, np.uint8)) == 0
    for a, b in zip((rho, wx, wy), before, strict=True):
        assert np.array_equal(a, b)


def test_limiter_rejects_non_contiguous_views():
    a = np.zeros((8, 8))
    with pytest.raises(ValueError, match="C-contiguous"):
        apply_realizability(a[:, ::2], a[:, ::2], a[:, ::2], np.ones((8, 4), np.uint8))


# --------------------------------------------------------------------------- in a run
@pytest.mark.parametrize("case", ["finite_difference", "obstacles", "spectral"])
def test_noisy_kinetic_run_with_limiter_active_conserves_mass(case):
    method = "spectral" if case == "spectral" else "finite_difference"
    cfg = _kinetic_cfg(method, kinetic_noise="auto")
    if case == "obstacles":
        cfg = cfg.replace(**{"domain.obstacles": [{"center": [8.0, 8.0], "radius": 3.0}]})
    s = METHODS[method](cfg)
    assert s.realizability  # "auto" = on with kinetic coefficients
    mass0 = s.fields()[0].sum()
    rho, wx, wy = _run(s, 200)
    assert s.limited_cells > 0  # the bounds were actually hit
    assert abs(rho.sum() - mass0) <= 1e-12 * mass0
    if method == "finite_difference":  # enforced exactly in the real-space state
        assert np.all(rho >= 0)
        assert np.all(wx**2 + wy**2 <= rho**2 * (1 + 1e-14))
    else:  # re-truncated to the 2/3 filter: small overshoots only
        assert rho.min() > -0.01 * 2.0


def test_realizability_auto_off_for_tables_and_switchable():
    table = {"alpha": 1.0, "beta": 1.0, "pressure": [0.5]}
    assert not METHODS["finite_difference"](
        _kinetic_cfg(coefficients=table)).realizability
    assert METHODS["finite_difference"](
        _kinetic_cfg(coefficients=table, realizability=True)).realizability
    assert not METHODS["finite_difference"](_kinetic_cfg(realizability=False)).realizability


# --------------------------------------------------------------------------- kinetic noise
@pytest.mark.parametrize("kind, s2", [("angular", lambda x: x * x / 3),
                                      ("vectorial", lambda x: x * x / 3),
                                      ("gaussian", lambda x: x * x)])
def test_kinetic_auto_noise_strength(kind, s2):
    # Variance of one kick: uniform on [-pi eta, pi eta] -> (pi eta)^2 / 3; gaussian of
    # s.d. pi eta -> (pi eta)^2 (small-angle, unwrapped). D_r = s2 / (2 dt) for one kick
    # per dt; the Ito noise of w = sum e_i delta(r - r_i) (Dean 1996, J. Phys. A 29, L613,
    # same computation as for the density) has <xi_a xi_b> = D_r rho0 delta_ab ..., and the
    # engine's convention <xi xi> = 2 noise_strength ... gives noise_strength = D_r rho0/2.
    eta, dt, rho0 = 0.3, 0.5, 2.0
    cfg = cf.load_config({
        "model": {"density": rho0, "noise": eta, "noise_kind": kind},
        "agents": {"dt": dt},
        "continuum": {"kinetic_noise": "auto"},
    })
    expected = s2(math.pi * eta) / (2 * dt) * rho0 / 2
    assert kinetic_coefficients(cfg)["noise_strength"] == pytest.approx(expected, rel=1e-14)
    assert CoefficientModel(cfg).noise_strength == pytest.approx(expected, rel=1e-14)
    fixed = cfg.replace(**{"continuum.kinetic_noise": 0.07})
    assert kinetic_coefficients(fixed)["noise_strength"] == 0.07


def test_kinetic_noise_bad_value_names_key():
    with pytest.raises(cf.ConfigError, match="continuum.kinetic_noise"):
        cf.load_config({"continuum": {"kinetic_noise": -1.0}})


def _density_power(rho):
    """|rho_k|^2 / N at the smallest nonzero wavevectors (the low-k structure factor)."""
    f = np.fft.fft2(rho - rho.mean())
    return float(np.mean(np.abs([f[0, 1], f[1, 0], f[0, -1], f[-1, 0]]) ** 2)) / rho.sum()


def test_kinetic_auto_noise_gives_density_fluctuations():
    # Started exactly homogeneous and ordered, the deterministic equations stay
    # homogeneous (S(k) = 0 exactly); the auto noise must create density structure.
    quiet = METHODS["finite_difference"](_kinetic_cfg(initial_noise=0.0))
    rho, _, _ = _run(quiet, 200)
    assert _density_power(rho) == 0.0 and np.ptp(rho) == 0.0
    noisy = METHODS["finite_difference"](_kinetic_cfg(initial_noise=0.0,
                                                      kinetic_noise="auto"))
    assert noisy.coef.noise_strength > 0
    rho, _, _ = _run(noisy, 200)
    assert _density_power(rho) > 1e-3


# --------------------------------------------------------------------------- diagnosis
def test_divergence_message_names_short_wave_instability():
    # eta = 0.2, rho0 = 2: the kinetic homogeneous ordered state grows at |k| ~ 4 / R
    # (continuum._dispersion.max_growth), beyond half the de-aliased cut-off of a
    # dx = 0.5 grid; without the limiter the run diverges.
    cfg = cf.load_config({
        "domain": {"size": [16.0, 16.0]},
        "model": {"density": 2.0, "noise": 0.2},
        "run": {"duration": 40.0, "sample_every": 1.0, "initial": "ordered"},
        "continuum": {"grid": [32, 32], "dt": 0.05, "method": "finite_difference",
                      "realizability": False},
    })
    with pytest.raises(cf.NumericalError, match="linearly unstable at") as info:
        simulate(cfg, progress=False)
    assert "\n" not in str(info.value)
    assert "raise the noise or use a coefficient table" in str(info.value)


def test_no_instability_hint_inside_the_stable_window():
    assert _linear_instability_hint(_kinetic_cfg(noise=0.3)) is None
    assert _linear_instability_hint(_kinetic_cfg(noise=0.2, grid=[32, 32])) is not None


@pytest.mark.parametrize("method", ["finite_difference", "spectral"])
def test_limited_run_independent_of_thread_count(method, monkeypatch):
    from crossflock.continuum import _fd, _solver

    # force the parallel kernels even on this small grid
    monkeypatch.setattr(_solver, "SMALL_GRID", 0)
    monkeypatch.setattr(_fd, "SERIAL_BELOW", 0)
    cfg = _kinetic_cfg(method, kinetic_noise="auto")

    def run(n):
        s = METHODS[method](cfg, workers=n)
        fields = np.stack(_run(s, 100))
        assert s.limited_cells > 0
        return fields

    out = results_per_thread_count(run)
    for other in out[1:]:
        np.testing.assert_array_equal(other, out[0])
