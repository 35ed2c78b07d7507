"""observe(): particle runs (with/without snapshots), coarse-grained and continuum fields."""

import numpy as np
import pytest
from scipy import stats
from test_compare_synth import gaussian_field_run, ideal_gas_run, small_config

import crossflock as cf
from crossflock._build import particle_dataset
from crossflock.compare import coarse_grain, observe

N_PARTICLES = 2000


@pytest.fixture(scope="module")
def gas():
    cfg = small_config()
    return ideal_gas_run(cfg, N_PARTICLES, np.random.default_rng(30), n_samples=81)


@pytest.fixture(scope="module")
def gas_obs(gas):
    return observe(gas)


def test_ideal_gas_order_and_binder(gas_obs):
    obs = gas_obs
    assert obs.attrs["crossflock_kind"] == "observables"
    assert obs.attrs["counts_source"] == "exact particle counts per cell"
    assert obs.attrs["unavailable"] == ""
    # |sum of N random unit vectors| / N is Rayleigh with sigma^2 = 1 / (2N), mean
    # sqrt(pi / (4N)) (random walk in the plane; scipy.stats.rayleigh as reference)
    ref = stats.rayleigh(scale=np.sqrt(1 / (2 * N_PARTICLES)))
    assert abs(float(obs.order_mean) - ref.mean()) < 4 * float(obs.order_sem)
    # the modulus of an isotropic 2-component Gaussian: G = 1/3 (Binder 1981)
    assert abs(float(obs.binder) - 1 / 3) < 4 * float(obs.binder_err)
    assert int(obs.n_samples) == 65  # 81 samples, first 20 % of the duration dropped
    assert float(obs.order_tau) >= 2.0  # at least one sample interval
    assert float(obs.n_effective) <= 65


def test_ideal_gas_structure_and_fluctuations(gas_obs):
    obs = gas_obs
    s, e = obs.structure_factor.values, obs.structure_factor_err.values
    assert np.all(np.abs(s - 1) < 4.5 * e)  # S(q) = 1 for an ideal gas (GUIDE sec. 6)
    # Binomial sub-box counts (scipy.stats.binom): the exact expected exponent is the
    # slope of log sqrt(N p (1 - p)) vs log N p over the same boxes (slightly below 1/2
    # because of the 1 - p factor).
    cells = obs.gnf_box_cells.values
    p = cells**2 / 32**2
    slope = np.polyfit(np.log(N_PARTICLES * p),
                       0.5 * np.log(stats.binom(N_PARTICLES, p).var()), 1)[0]
    assert abs(float(obs.gnf_exponent) - slope) < 4 * float(obs.gnf_exponent_err)
    tiling = 32 % cells == 0  # boxes cover the whole box: the mean is exactly N p
    np.testing.assert_allclose(obs.gnf_mean.values[tiling], N_PARTICLES * p[tiling],
                               rtol=1e-12)
    assert int(obs.band_present) == 0 and np.isnan(float(obs.band_speed))
    assert float(obs.correlation_length) < 1.0  # uncorrelated headings


def test_without_snapshots_only_order_observables(gas):
    cfg = small_config(**{"agents.snapshots": False})
    ds = particle_dataset(cfg, gas["time"].values, gas["order"].values)
    obs = observe(ds)
    full = observe(gas)
    for v in ("order_mean", "order_sem", "binder", "binder_err"):
        assert float(obs[v]) == float(full[v])
    for v in ("gnf_exponent", "gnf_exponent_err", "band_present", "correlation_length"):
        assert np.isnan(float(obs[v]))
    assert np.isnan(obs.structure_factor.values).all()
    assert obs.sizes["k"] == full.sizes["k"] and obs.sizes["box"] == full.sizes["box"]
    assert "snapshots" in obs.attrs["unavailable"]


def test_coarse_grained_field_run(gas, gas_obs):
    f = coarse_grain(gas)
    obs = observe(f)
    assert obs.attrs["counts_source"] == "exact particle counts per cell"
    assert obs.attrs["engine"] == "agents-coarse-grained"
    # same data, same code: identical observables whichever of the two is observed
    for v in ("order_mean", "binder", "structure_factor", "gnf_std", "gnf_exponent",
              "correlation_length"):
        np.testing.assert_allclose(obs[v].values, gas_obs[v].values, rtol=1e-10)
    # without the exact counts, the cloud-in-cell density is used instead
    obs_cic = observe(f.drop_vars("cell_count"))
    assert obs_cic.attrs["counts_source"] == "rho * cell area"
    assert not np.allclose(obs_cic.gnf_std.values, gas_obs.gnf_std.values)


def test_ordered_field_run_and_geometry():
    cfg = small_config(**{"domain.obstacles": [{"center": [16.0, 16.0], "radius": 4.0}]})
    ds = gaussian_field_run(cfg, np.random.default_rng(31), polarization=0.8, n_samples=60)
    obs = observe(ds)
    assert float(obs.order_mean) == pytest.approx(0.8, abs=0.01)
    # nearly fixed modulus: close to the ordered value 2/3 (Binder 1981)
    assert float(obs.binder) == pytest.approx(2 / 3, abs=0.01)
    assert np.isfinite(obs.structure_factor.values).all()
    assert np.isfinite(float(obs.gnf_exponent_err))
    for v in obs.variables:
        assert "long_name" in obs[v].attrs and "units" in obs[v].attrs


def test_observables_round_trip_netcdf(tmp_path, gas_obs):
    path = cf.write_dataset(gas_obs, tmp_path / "obs.nc")
    back = cf.read_dataset(path, kind="observables")
    np.testing.assert_array_equal(back.structure_factor.values,
                                  gas_obs.structure_factor.values)


def test_observe_errors(gas):
    cfg = small_config()
    short = particle_dataset(cfg, [0.0, 2.0, 4.0], [0.1, 0.2, 0.3])
    with pytest.raises(cf.InputError, match="samples after discarding the transient"):
        observe(short)
    obs = observe(gas)
    with pytest.raises(cf.InputError, match="particle or field run"):
        observe(obs)
    bad = particle_dataset(cfg, [0.0, 4.0, 2.0, 6.0, 8.0], [0.1] * 5)
    with pytest.raises(cf.InputError, match="strictly increasing"):
        observe(bad)


def test_observe_is_deterministic(gas):
    # No randomness in the analysis: the same run gives bit-identical observables.
    a, b = observe(gas), observe(gas)
    for v in a.data_vars:
        np.testing.assert_array_equal(a[v].values, b[v].values)
