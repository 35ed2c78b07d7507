"""The shipped scenarios run stably on the continuum engine from their stated start."""

import numpy as np
import pytest

import crossflock as cf
from crossflock._scenarios import scenario_names, scenario_path
from crossflock.continuum import resolve_method, simulate
from crossflock.continuum._dispersion import max_growth

SCENARIOS = ["default", "channel", "obstacles"]


def _check_run(cfg):
    ds = simulate(cfg, progress=False)
    assert float(ds.time[-1]) == pytest.approx(cfg.run.duration)
    mass = ds.rho.sum(("x", "y")).values
    # conservation to round-off: each step (update and limiter rescaling) changes the
    # total by O(eps) relative; allow a worst-case linear accumulation, 4 eps per step
    n_steps = round(cfg.run.duration / cfg.continuum.dt)
    rtol = max(1e-12, 4 * np.finfo(float).eps * n_steps)
    np.testing.assert_allclose(mass, mass[0], rtol=rtol)
    assert float(ds.rho.min()) >= 0.0
    w2 = ds.px.values**2 + ds.py.values**2
    assert np.all(w2 <= ds.rho.values**2 * (1 + 1e-14))  # |w| <= rho (realizability)
    return ds


def test_shipped_scenarios_are_the_ones_checked():
    assert sorted(SCENARIOS) == [n for n in scenario_names() if n in SCENARIOS]


@pytest.mark.parametrize("name", SCENARIOS)
def test_scenario_inside_linearly_stable_window(name):
    # continuum._dispersion: the homogeneous state must not grow at any resolved k
    # (the truncated kinetic equations are unstable at short wavelength at low noise).
    cfg = cf.load_config(scenario_path(name))
    assert cfg.continuum.coefficients == "kinetic"
    assert cfg.continuum.kinetic_noise == "auto"
    rate, _, _ = max_growth(cfg)
    assert rate <= 0.0


@pytest.mark.parametrize("name", SCENARIOS)
def test_scenario_runs_past_former_divergence(name):
    # Before the realizability limiter these diverged at t ~ 2 (obstacles), ~4.5
    # (channel) and ~25 (default); 60 time units on the scenario's own grid, dt and
    # method, noise included.
    cfg = cf.load_config(scenario_path(name), overrides={"run.duration": 60.0})
    assert resolve_method(cfg) == "finite_difference"
    _check_run(cfg)


@pytest.mark.slow
@pytest.mark.parametrize("name", SCENARIOS)
def test_scenario_full_duration(name):
    _check_run(cf.load_config(scenario_path(name)))
