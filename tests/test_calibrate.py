"""Coefficient fit: exact synthetic fields, warnings, output table, engine recovery."""

from __future__ import annotations

import math
import tomllib
import warnings

import numpy as np
import pytest

import crossflock
from crossflock import InputError
from crossflock._build import field_dataset, particle_dataset
from crossflock.compare._calibrate import (
    COEFFICIENT_NAMES,
    CalibrationWarning,
    calibrate,
)
from tests.conftest import small_mapping

RHO0 = 1.0
V0 = 0.5


def _dataset(mapping, fn, times):
    cfg = crossflock.load_config(mapping)
    nx, ny = cfg.continuum.grid
    lx, ly = cfg.domain.size
    x = (np.arange(nx) + 0.5) * lx / nx
    y = (np.arange(ny) + 0.5) * ly / ny
    fields = [fn(t, x[None, :], y[:, None]) for t in times]
    rho = np.array([f[0] + 0 * x[None, :] + 0 * y[:, None] for f in fields])
    px = np.array([f[1] + 0 * x[None, :] + 0 * y[:, None] for f in fields])
    py = np.array([f[2] + 0 * x[None, :] + 0 * y[:, None] for f in fields])
    order = np.hypot(px.sum((1, 2)), py.sum((1, 2))) / rho.sum((1, 2))
    return field_dataset(cfg, times, x, y, rho, px, py, order)


# Two divergence-free modes of d_t w = alpha w + D_T lap w (exact solution), rho = rho0:
# w = (A e^{s1 t} cos(k1 y), B e^{s2 t} sin(k2 x)), s_i = alpha - D_T k_i^2.
ALPHA, D_T = 0.3, 0.5
K1, K2 = 2 * np.pi * 2 / 16.0, 2 * np.pi * 3 / 16.0


def _linear_modes(t, x, y):
    s1, s2 = ALPHA - D_T * K1**2, ALPHA - D_T * K2**2
    return (RHO0, 0.3 * math.exp(s1 * t) * np.cos(K1 * y),
            0.2 * math.exp(s2 * t) * np.sin(K2 * x))


def _stencil_rate(s, h):
    # the forward stencil applied to exp(s t), divided by exp(s t) (exact algebra)
    return (-3.0 + 4.0 * math.exp(s * h) - math.exp(2.0 * s * h)) / (2.0 * h)


def _expected_fit(k1sq, k2sq, h):
    # exact data: the fit solves rate_i = alpha - D k_i^2 for the two modes
    r1 = _stencil_rate(ALPHA - D_T * K1**2, h)
    r2 = _stencil_rate(ALPHA - D_T * K2**2, h)
    d = (r1 - r2) / (k2sq - k1sq)
    return r1 + d * k1sq, d


H = 0.05
TIMES = np.arange(41) * H
LINEAR_MAPPING = small_mapping(run={"duration": 2.0, "sample_every": H},
                               agents={"dt": H}, continuum={"dt": H / 2})


def test_exact_linear_fields_recover_the_stencil_solution():
    ds = _dataset(LINEAR_MAPPING, _linear_modes, TIMES)
    res = calibrate(ds, terms=["alpha", "D_T"], ridge=0.0)
    a, d = _expected_fit(K1**2, K2**2, H)
    # Spectral derivatives are exact here, so the only error is the time stencil's,
    # which _expected_fit reproduces; what is left is round-off (ridge 0: plain least
    # squares).
    assert res.coefficients["alpha"] == pytest.approx(a, rel=1e-9)
    assert res.coefficients["D_T"] == pytest.approx(d, rel=1e-9)
    # The stated error (Richardson estimate of the O(h^2) bias) covers the truth.
    assert abs(res.coefficients["alpha"] - ALPHA) <= 3 * res.errors["alpha"]
    assert abs(res.coefficients["D_T"] - D_T) <= 3 * res.errors["D_T"]
    assert res.status["alpha"] == res.status["D_T"] == "resolved"
    assert res.r2["w"] == pytest.approx(1.0, abs=1e-6)
    assert res.coefficients["noise_strength"] == pytest.approx(0.0, abs=1e-9)


def test_filtering_the_equation_leaves_coefficients_unchanged():
    # A linear filter applied to both sides keeps an exact relation exact.
    ds = _dataset(LINEAR_MAPPING, _linear_modes, TIMES)
    a, d = _expected_fit(K1**2, K2**2, H)
    res = calibrate(ds, terms=["alpha", "D_T"], smoothing=1.0, dealias=False, ridge=0.0)
    assert res.coefficients["alpha"] == pytest.approx(a, rel=1e-9)
    assert res.coefficients["D_T"] == pytest.approx(d, rel=1e-9)


def test_finite_difference_path_in_a_channel():
    # In a channel the fit uses central differences away from the walls; the
    # 3-point Laplacian of cos(k y) is -(2 - 2 cos(k dy)) / dy^2 cos(k y) (trigonometry).
    mapping = small_mapping(domain={"boundary": "channel"},
                            run={"duration": 2.0, "sample_every": H}, agents={"dt": H},
                            continuum={"dt": H / 2})
    ds = _dataset(mapping, _linear_modes, TIMES)
    res = calibrate(ds, terms=["alpha", "D_T"], ridge=0.0)
    assert res.provenance["method"] == "finite_difference"
    dx = 16.0 / 32
    k1sq = (2 - 2 * math.cos(K1 * dx)) / dx**2
    k2sq = (2 - 2 * math.cos(K2 * dx)) / dx**2
    a, d = _expected_fit(k1sq, k2sq, H)
    assert res.coefficients["alpha"] == pytest.approx(a, rel=1e-9)
    assert res.coefficients["D_T"] == pytest.approx(d, rel=1e-9)


def test_centred_scheme_on_deterministic_data():
    # centred stencil on exp(s t): sinh(s h) / h (exact algebra)
    ds = _dataset(LINEAR_MAPPING, _linear_modes, TIMES)
    res = calibrate(ds, terms=["alpha", "D_T"], time_scheme="centred", ridge=0.0)
    r1 = math.sinh((ALPHA - D_T * K1**2) * H) / H
    r2 = math.sinh((ALPHA - D_T * K2**2) * H) / H
    d = (r1 - r2) / (K2**2 - K1**2)
    assert res.coefficients["D_T"] == pytest.approx(d, rel=1e-9)
    assert res.coefficients["alpha"] == pytest.approx(r1 + d * K1**2, rel=1e-9)


def test_uniform_state_warns_and_marks_everything_unresolved():
    ds = _dataset(LINEAR_MAPPING, lambda t, x, y: (RHO0, 0.5, 0.0), TIMES)
    with pytest.warns(CalibrationWarning, match="too uniform"):
        res = calibrate(ds)
    for term in ("alpha", "alpha_rho", "beta", "pressure[0]", "D_T", "D_B", "D_2",
                 "lambda1", "lambda2", "lambda3", "D_rho"):
        assert res.status[term] == "unresolved", term
        assert not res.resolvable[term]
    table = res.table()
    assert all(v == 0.0 for k, v in table.items() if k not in ("pressure",
                                                                "noise_strength"))
    assert table["pressure"] == [0.0]


def test_too_few_snapshots_warn():
    ds = _dataset(LINEAR_MAPPING, _linear_modes, TIMES[:3])
    with pytest.warns(CalibrationWarning, match="too few snapshots"):
        res = calibrate(ds, terms=["alpha", "D_T"])
    assert res.status["alpha"] == res.status["D_T"] == "unresolved"
    assert res.coefficients["alpha"] == 0.0


def test_excluded_terms_and_toml_table_round_trip(tmp_path):
    from crossflock._compare_run import load_coefficients_file

    ds = _dataset(LINEAR_MAPPING, _linear_modes, TIMES)
    res = calibrate(ds, terms=["alpha", "D_T"])
    assert res.status["beta"] == "excluded" and res.coefficients["beta"] == 0.0
    doc = tomllib.loads(res.to_toml())
    table = doc["continuum"]["coefficients"]
    assert set(table) == set(COEFFICIENT_NAMES)
    cal = doc["calibration"]
    assert {f"{k}_err" for k in COEFFICIENT_NAMES} <= set(cal)
    assert "alpha" in cal["resolvable"] and "beta" in cal["excluded"]
    assert cal["provenance"]["time_scheme"] == "forward"
    cfg = crossflock.load_config(LINEAR_MAPPING, overrides={"continuum.coefficients": table})
    assert cfg.continuum.coefficients.alpha == pytest.approx(res.coefficients["alpha"])
    assert cfg.continuum.coefficients.D_T == pytest.approx(res.coefficients["D_T"])
    path = tmp_path / "coeffs.toml"
    path.write_text(res.to_toml(), encoding="utf-8")
    assert load_coefficients_file(path) == table  # what `crossflock compare` reads


def test_bad_input():
    cfg = crossflock.load_config(small_mapping())
    part = particle_dataset(cfg, np.arange(3.0), np.zeros(3))
    with pytest.raises(InputError, match="coarse-grain"):
        calibrate(part)
    ds = _dataset(LINEAR_MAPPING, _linear_modes, TIMES)
    with pytest.raises(InputError, match="not a term"):
        calibrate(ds, terms=["alpha", "gamma"])
    with pytest.raises(InputError, match="bootstrap"):
        calibrate(ds, bootstrap=1)
    with pytest.raises(InputError, match="no variable 'px'"):
        calibrate(ds.drop_vars("px"))
    with pytest.raises(InputError, match="time_scheme"):
        calibrate(ds, time_scheme="leapfrog")


# ----------------------------------------------------------------------------- engine
TRUE = {"alpha": 1.0, "alpha_rho": 0.3, "beta": 1.0, "pressure": [0.5], "D_T": 0.8,
        "lambda1": 0.4, "D_rho": 0.2, "noise_strength": 0.01}


def _engine_mapping(seed):
    # 32 x 32 periodic grid of spacing 2 (so the fastest kept mode relaxes at
    # D_T k_max^2 ~ 0.8 and h = 0.1 resolves it); ordered start at |P| = 0.3 relaxing
    # to sqrt(alpha / beta) = 1 with noise on. dt / h = 1/50 keeps the bias from the
    # engine's two-step noise memory near 1 %.
    return {"domain": {"size": [64.0, 64.0]},
            "model": {"density": RHO0, "speed": V0, "radius": 2.0},
            "run": {"duration": 10.0, "sample_every": 0.1, "seed": seed,
                    "initial": "ordered", "initial_polarization": 0.3},
            "agents": {"dt": 0.1},
            "continuum": {"grid": [32, 32], "dt": 0.002, "initial_noise": 0.2,
                          "coefficients": dict(TRUE)}}


@pytest.fixture(scope="module")
def engine_runs():
    numba = pytest.importorskip("numba")
    continuum = pytest.importorskip("crossflock.continuum")
    threads = numba.get_num_threads()
    numba.set_num_threads(1)  # the machine is shared; results do not depend on it
    try:
        return [continuum.simulate(crossflock.load_config(_engine_mapping(s)),
                                   progress=False) for s in (3, 7)]
    finally:
        numba.set_num_threads(threads)


def _check_leading(res):
    for name in ("alpha", "beta", "pressure", "D_T"):
        c, e, t = res.coefficients[name], res.errors[name], TRUE[name]
        if name == "pressure":
            c, e, t = c[0], e[0], t[0]
        assert abs(c - t) <= 3 * e, (name, c, e)
        assert abs(c - t) <= 0.1 * abs(t), (name, c)


@pytest.mark.parametrize("which", [0, 1])
def test_recovery_from_continuum_engine_single_runs(engine_runs, which):
    res = calibrate(engine_runs[which])
    _check_leading(res)


def test_recovery_from_continuum_engine_joint(engine_runs):
    with warnings.catch_warnings():
        warnings.simplefilter("error", CalibrationWarning)
        res = calibrate(engine_runs)
    _check_leading(res)
    for name in ("alpha_rho", "lambda1", "D_rho", "noise_strength"):
        assert abs(res.coefficients[name] - TRUE[name]) <= 3 * res.errors[name], name
        assert res.status[name] in ("resolved", "estimated")
    for name in ("D_B", "D_2", "lambda2", "lambda3"):  # zero in the truth
        assert res.coefficients[name] == 0.0 and not res.resolvable[name], name
    assert abs(res.v0_fit - V0) <= 3 * res.v0_fit_err
    table = tomllib.loads(res.to_toml())["continuum"]["coefficients"]
    cfg = crossflock.load_config(_engine_mapping(3),
                                 overrides={"continuum.coefficients": table})
    assert cfg.continuum.coefficients.beta == pytest.approx(res.coefficients["beta"])


def test_recovery_in_a_channel_finite_difference_path():
    # Channel walls: the engine's finite-difference solver, and the fit's central
    # differences away from the walls. The explicit two-step scheme's noise memory biases
    # an Ito fit by about dt / h (see _timederiv), so dt / h = 1/100 here.
    numba = pytest.importorskip("numba")
    continuum = pytest.importorskip("crossflock.continuum")
    mapping = _engine_mapping(3)
    mapping["domain"] = {"size": [64.0, 64.0], "boundary": "channel"}
    mapping["continuum"] = dict(mapping["continuum"], dt=0.001)
    threads = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        ds = continuum.simulate(crossflock.load_config(mapping), progress=False)
    finally:
        numba.set_num_threads(threads)
    res = calibrate(ds)
    assert res.provenance["method"] == "finite_difference"
    _check_leading(res)
    assert abs(res.coefficients["D_rho"] - TRUE["D_rho"]) <= 3 * res.errors["D_rho"]
