"""Synthetic runs for the comparison-layer tests (and checks of the builders themselves).

The engines are not used: runs are built with ``crossflock._build`` from ideal-gas
particles and Gaussian order-parameter / field series, so every expected value is known.
"""

import numpy as np
import pytest

import crossflock as cf
from crossflock._build import field_dataset, particle_dataset
from crossflock._geometry import geometry_from_config, grid_coords, grid_mask


def small_config(**overrides):
    """Small periodic 32 x 32 box on a 32 x 32 grid unless overridden."""
    base = {"domain.size": [32.0, 32.0], "continuum.grid": [32, 32], "run.duration": 200.0,
            "run.sample_every": 2.0, "agents.snapshots": True}
    base.update(overrides)
    return cf.load_config(None, base)


def ideal_gas_run(cfg, n_particles, rng, n_samples=None):
    """Uniform independent particles in the fluid at every sample (rejection sampling)."""
    geom = geometry_from_config(cfg)
    t = np.arange(n_samples or int(cfg.run.duration / cfg.run.sample_every) + 1) \
        * cfg.run.sample_every
    xs, ys = [], []
    for _ in t:
        x = np.empty(0)
        y = np.empty(0)
        while x.size < n_particles:
            cx = rng.uniform(0, geom.lx, 2 * n_particles)
            cy = rng.uniform(0, geom.ly, 2 * n_particles)
            ok = cf._geometry.inside(geom, cx, cy)
            x = np.concatenate([x, cx[ok]])
            y = np.concatenate([y, cy[ok]])
        xs.append(x[:n_particles])
        ys.append(y[:n_particles])
    x, y = np.array(xs), np.array(ys)
    theta = rng.uniform(-np.pi, np.pi, x.shape)
    order = np.hypot(np.cos(theta).sum(1), np.sin(theta).sum(1)) / n_particles
    return particle_dataset(cfg, t, order, x=x, y=y, theta=theta)


def gaussian_field_run(cfg, rng, *, polarization, n_samples, noise=0.05, order_noise=0.01):
    """Field run: rho = rho0 (1 + noise xi), w = rho * P with P along +x.

    ``polarization`` > 0: ordered, |P| = polarization (1 + order_noise * xi').
    ``polarization`` = 0: disordered, P an isotropic 2-component Gaussian of s.d.
    ``order_noise`` per component and cell-independent.
    """
    geom = geometry_from_config(cfg)
    nx, ny = cfg.continuum.grid
    x, y = grid_coords(geom, nx, ny)
    t = np.arange(n_samples) * cfg.run.sample_every
    rho0 = cfg.model.density
    rho = rho0 * (1 + noise * rng.standard_normal((n_samples, ny, nx)))
    if polarization > 0:
        mod = polarization * (1 + order_noise * rng.standard_normal((n_samples, 1, 1)))
        px = rho * mod * (1 + noise * rng.standard_normal(rho.shape))
        py = rho * mod * noise * rng.standard_normal(rho.shape)
    else:
        px = rho * order_noise * rng.standard_normal(rho.shape)
        py = rho * order_noise * rng.standard_normal(rho.shape)
    mask = grid_mask(geom, nx, ny)
    rho, px, py = (np.where(mask, a, 0.0) for a in (rho, px, py))
    order = np.hypot(px.sum((1, 2)), py.sum((1, 2))) / rho.sum((1, 2))
    return field_dataset(cfg, t, x, y, rho, px, py, order, mask=mask, engine="continuum")


def test_ideal_gas_run_is_inside_fluid():
    cfg = small_config(**{"domain.obstacles": [{"center": [16.0, 16.0], "radius": 5.0}]})
    ds = ideal_gas_run(cfg, 500, np.random.default_rng(0), n_samples=3)
    geom = geometry_from_config(cfg)
    assert ds["x"].shape == (3, 500)
    assert cf._geometry.inside(geom, ds["x"].values, ds["y"].values).all()


@pytest.mark.parametrize("pol", [0.0, 0.8])
def test_gaussian_field_run_contract(pol):
    cfg = small_config()
    ds = gaussian_field_run(cfg, np.random.default_rng(1), polarization=pol, n_samples=5)
    assert ds.attrs["crossflock_kind"] == "fields"
    assert ds["rho"].dims == ("time", "y", "x")
