"""Coarse-graining: exact mass, uniform lattice -> uniform field, smoothing, contract."""

import numpy as np
import pytest
from test_compare_synth import ideal_gas_run, small_config

import crossflock as cf
from crossflock._build import particle_dataset
from crossflock._geometry import geometry_from_config, grid_coords, grid_mask
from crossflock.compare import cell_counts, coarse_grain, deposit, smooth

OBSTACLES = [{"center": [10.0, 12.0], "radius": 4.0}, {"center": [31.0, 1.0], "radius": 3.0}]

GEOMETRIES = {
    "periodic": {},
    "channel": {"domain.boundary": "channel"},
    "obstacles": {"domain.obstacles": OBSTACLES},
    "channel+obstacle": {"domain.boundary": "channel",
                         "domain.obstacles": [{"center": [16.0, 16.0], "radius": 6.0}]},
}


def _cic_reference(geom, nx, ny, x, y, theta, fluid):
    """Plain numpy cloud-in-cell with np.add.at (same wall/solid rules)."""
    dx, dy = geom.lx / nx, geom.ly / ny
    gx, gy = x / dx - 0.5, y / dy - 0.5
    i0, j0 = np.floor(gx).astype(int), np.floor(gy).astype(int)
    fx, fy = gx - i0, gy - j0
    cols = [i0 % nx, (i0 + 1) % nx, i0 % nx, (i0 + 1) % nx]
    if geom.channel:
        rows = [np.clip(j0, 0, ny - 1), np.clip(j0, 0, ny - 1),
                np.clip(j0 + 1, 0, ny - 1), np.clip(j0 + 1, 0, ny - 1)]
    else:
        rows = [j0 % ny, j0 % ny, (j0 + 1) % ny, (j0 + 1) % ny]
    w = np.array([(1 - fx) * (1 - fy), fx * (1 - fy), (1 - fx) * fy, fx * fy])
    w = w * np.array([fluid[r, c] for r, c in zip(rows, cols, strict=True)])
    w = w / w.sum(axis=0)
    out = np.zeros((3, ny, nx))
    for q in range(4):
        for comp, val in enumerate((1.0, np.cos(theta), np.sin(theta))):
            np.add.at(out[comp], (rows[q], cols[q]), w[q] * val)
    return out


@pytest.mark.parametrize("name", list(GEOMETRIES))
def test_particle_number_exact(name):
    # Invariant: every particle deposits weight one on fluid cells (round-off only).
    cfg = small_config(**GEOMETRIES[name])
    ds = ideal_gas_run(cfg, 3000, np.random.default_rng(2), n_samples=2)
    f = coarse_grain(ds)
    area = (32 / 32) * (32 / 32)
    mass = f["rho"].sum(("x", "y")).values * area
    np.testing.assert_allclose(mass, 3000, rtol=1e-12)
    np.testing.assert_array_equal(f["cell_count"].sum(("x", "y")).values, 3000)
    solid = ~f["mask"].values.astype(bool)
    assert np.all(f["rho"].values[:, solid] == 0)
    geom = geometry_from_config(cfg)
    counts = cell_counts(geom, 32, 32, ds["x"].values[0], ds["y"].values[0])
    assert counts.sum() == 3000
    assert np.all(counts[solid] == 0)


@pytest.mark.parametrize("name", list(GEOMETRIES))
def test_kernel_matches_numpy_reference(name):
    cfg = small_config(**GEOMETRIES[name])
    geom = geometry_from_config(cfg)
    ds = ideal_gas_run(cfg, 2000, np.random.default_rng(3), n_samples=1)
    x, y, th = (ds[v].values[0] for v in ("x", "y", "theta"))
    fluid = grid_mask(geom, 32, 32)
    got = np.array(deposit(geom, 32, 32, x, y, th))
    ref = _cic_reference(geom, 32, 32, x, y, th, fluid)
    np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("boundary", ["periodic", "channel"])
def test_uniform_lattice_gives_uniform_field(boundary):
    # Two particles per cell side at 1/4 and 3/4 of the cell: CIC spreads them evenly,
    # and in a channel the clamped wall rows receive exactly their share.
    cfg = small_config(**{"domain.boundary": boundary, "domain.size": [32.0, 16.0],
                          "continuum.grid": [32, 16]})
    offs = np.array([0.25, 0.75])
    xs = (np.arange(32)[:, None] + offs).ravel()
    ys = (np.arange(16)[:, None] + offs).ravel()
    x, y = (a.ravel() for a in np.meshgrid(xs, ys))
    theta = np.full(x.size, 0.3)
    ds = particle_dataset(cfg, [0.0], [1.0], x=x[None], y=y[None], theta=theta[None])
    f = coarse_grain(ds)
    np.testing.assert_allclose(f["rho"].values, 4.0, rtol=1e-13)
    np.testing.assert_allclose(f["px"].values, 4.0 * np.cos(0.3), rtol=1e-13)
    np.testing.assert_allclose(f["py"].values, 4.0 * np.sin(0.3), rtol=1e-13)
    np.testing.assert_allclose(f["order"].values, 1.0, rtol=1e-13)


def test_lattice_with_any_offset_is_uniform_in_periodic_box():
    # One particle per cell at the same offset: each cell gets (1-f) + f = 1.
    cfg = small_config()
    rng = np.random.default_rng(4)
    off = rng.uniform(0, 1, 2)
    x, y = (a.ravel() for a in np.meshgrid(np.arange(32) + off[0], np.arange(32) + off[1]))
    th = rng.uniform(-np.pi, np.pi, x.size)
    counts, _, _ = deposit(geometry_from_config(cfg), 32, 32, x, y, th)
    np.testing.assert_allclose(counts, 1.0, rtol=1e-12)


@pytest.mark.parametrize("name", list(GEOMETRIES))
def test_smoothing_keeps_mass_and_solids_empty(name):
    cfg = small_config(**GEOMETRIES[name], **{"compare.smoothing": 1.5})
    ds = ideal_gas_run(cfg, 2000, np.random.default_rng(5), n_samples=2)
    raw = coarse_grain(ds, smoothing=0.0)
    f = coarse_grain(ds)
    assert f.attrs["smoothing"] == 1.5
    for v in ("rho", "px", "py"):
        np.testing.assert_allclose(f[v].sum(("x", "y")).values, raw[v].sum(("x", "y")).values,
                                   rtol=1e-10, atol=1e-9)
    solid = ~f["mask"].values.astype(bool)
    assert np.all(f["rho"].values[:, solid] == 0)
    # Smoothing reduces the cell-to-cell variance of a noisy field.
    fluid = ~solid
    assert f["rho"].values[:, fluid].var() < 0.5 * raw["rho"].values[:, fluid].var()


def test_spectral_smoothing_is_exact_gaussian():
    # A Gaussian of s.d. s smoothed by s' becomes a Gaussian of s.d. sqrt(s^2 + s'^2)
    # (convolution of Gaussians); far from the periodic images this is exact.
    cfg = small_config(**{"domain.size": [64.0, 64.0], "continuum.grid": [64, 64]})
    geom = geometry_from_config(cfg)
    x, y = grid_coords(geom, 64, 64)
    r2 = (x[None, :] - 32) ** 2 + (y[:, None] - 32) ** 2
    s, s2 = 2.0, 1.5
    f = np.exp(-r2 / (2 * s**2)) / (2 * np.pi * s**2)
    g = smooth(f[None], s2, geom, np.ones((64, 64), bool))[0]
    st = np.hypot(s, s2)
    np.testing.assert_allclose(g, np.exp(-r2 / (2 * st**2)) / (2 * np.pi * st**2),
                               atol=1e-10)


def test_coarse_grain_contract():
    cfg = small_config(**{"domain.size": [16.0, 8.0], "continuum.grid": [16, 8]})
    ds = ideal_gas_run(cfg, 1000, np.random.default_rng(6), n_samples=3)
    f = coarse_grain(ds)
    assert f.attrs["crossflock_kind"] == "fields"
    assert f.attrs["engine"] == "agents-coarse-grained"
    x, y = grid_coords(geometry_from_config(cfg), 16, 8)
    np.testing.assert_array_equal(f["x"].values, x)
    np.testing.assert_array_equal(f["y"].values, y)
    assert f["rho"].shape == (3, 8, 16)
    # order of the field equals the particle order |sum e| / N (mass is exact)
    np.testing.assert_allclose(f["order"].values, ds["order"].values, rtol=1e-10)
    for v in f.variables:
        assert "long_name" in f[v].attrs and "units" in f[v].attrs
    g = coarse_grain(ds, grid=(8, 8))
    assert g["rho"].shape == (3, 8, 8)


def test_coarse_grain_errors():
    cfg = small_config()
    ds = particle_dataset(cfg, [0.0, 1.0], [0.1, 0.2])
    with pytest.raises(cf.InputError, match="no snapshots"):
        coarse_grain(ds)
    good = ideal_gas_run(cfg, 10, np.random.default_rng(7), n_samples=1)
    with pytest.raises(cf.InputError, match="smoothing"):
        coarse_grain(good, smoothing=-1.0)
    with pytest.raises(cf.InputError, match="grid"):
        coarse_grain(good, grid=(0, 4))
    bad = good.copy(deep=True)
    bad["x"][0, 0] = np.nan
    with pytest.raises(cf.InputError, match="NaN"):
        coarse_grain(bad)


def test_particle_surrounded_by_solid_cells_goes_to_nearest_fluid_cell():
    # A hand-made mask where all four CIC cells of a particle are solid: its whole
    # weight goes to the nearest fluid cell (the measure-zero fallback path).
    cfg = small_config(**{"domain.size": [8.0, 8.0], "continuum.grid": [8, 8]})
    geom = geometry_from_config(cfg)
    fluid = np.ones((8, 8), bool)
    fluid[2:6, 2:6] = False
    fluid[2, 2] = True  # nearest fluid cell to the particle below
    counts, csum, _ = deposit(geom, 8, 8, [3.6], [3.6], [0.0], fluid=fluid)
    assert counts.sum() == 1.0 and counts[2, 2] == 1.0 and csum[2, 2] == 1.0
    exact = cell_counts(geom, 8, 8, [3.6], [3.6], fluid=fluid)
    assert exact[2, 2] == 1.0


def test_field_run_with_nan_in_solid_cells():
    from test_compare_synth import gaussian_field_run

    from crossflock.compare import observe

    cfg = small_config(**{"domain.obstacles": [{"center": [16.0, 16.0], "radius": 5.0}]})
    ds = gaussian_field_run(cfg, np.random.default_rng(8), polarization=0.8, n_samples=30)
    solid = ~ds["mask"].values.astype(bool)
    for v in ("rho", "px", "py"):
        ds[v].values[:, solid] = np.nan
    obs = observe(ds)
    assert np.isfinite(obs.structure_factor.values).all()
    assert np.isfinite(float(obs.correlation_length))
