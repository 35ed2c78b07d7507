"""S(k), number fluctuations and correlation length against exact ideal-gas results."""

import numpy as np
import pytest
from scipy import stats
from test_compare_synth import ideal_gas_run, small_config

from crossflock._geometry import geometry_from_config
from crossflock.compare import (
    cell_counts,
    coarse_grain,
    correlation_length,
    deposit,
    gnf_box_sizes,
    gnf_exponent,
    number_fluctuations,
    polarization_correlation,
    smooth,
    structure_factor,
)
from crossflock.compare._fluctuations import box_sums
from crossflock.compare._structure import radial_average, radial_bins


def _ideal_counts(n_particles, n_samples, seed, size=32.0, grid=32):
    cfg = small_config(**{"domain.size": [size, size], "continuum.grid": [grid, grid]})
    geom = geometry_from_config(cfg)
    rng = np.random.default_rng(seed)
    counts = np.stack([
        cell_counts(geom, grid, grid, rng.uniform(0, size, n_particles),
                    rng.uniform(0, size, n_particles))
        for _ in range(n_samples)])
    return geom, counts


def test_ideal_gas_structure_factor_is_one():
    # N independent uniform points in a periodic box: S(q) = 1 at every q != 0 of the
    # reciprocal lattice (GUIDE sec. 6; e.g. Hansen & McDonald, Theory of Simple Liquids,
    # ch. 4, the uncorrelated limit). Exact cell counts keep every Fourier phase exact
    # up to the cell position, so the expectation is 1 on the grid too.
    geom, counts = _ideal_counts(2000, 60, seed=20)
    k, s, err = structure_factor(counts, geom.lx, geom.ly)
    assert np.all(np.isfinite(err)) and np.all(err > 0)
    z = (s - 1) / err
    # each shell within 4.5 errors (about 30 shells: family-wise false alarm < 1e-3)
    assert np.all(np.abs(z) < 4.5)
    # the pooled mean over all shells within 4 of its (independent-shell) errors
    assert abs(np.mean(s) - 1) < 4 * np.sqrt(np.sum(err**2)) / len(s)


def test_cloud_in_cell_window_of_ideal_gas():
    # Derived here (and e.g. Jing 2005, ApJ 620, 559, eq. 20 with p = 2): CIC deposit of
    # uncorrelated points has <|N_k|^2> / N = prod_d (1 - 2/3 sin^2(k_d h / 2)), since a
    # point at fraction f between two nodes contributes |(1 - f) + f e^{-i k h}|^2 with
    # mean 2/3 + cos(k h) / 3. Checked mode by mode (no radial averaging).
    cfg = small_config(**{"domain.size": [16.0, 16.0], "continuum.grid": [16, 16]})
    geom = geometry_from_config(cfg)
    rng = np.random.default_rng(21)
    n, t = 1000, 200
    power = []
    for _ in range(t):
        c, _, _ = deposit(geom, 16, 16, rng.uniform(0, 16, n), rng.uniform(0, 16, n),
                          np.zeros(n))
        power.append(np.abs(np.fft.fft2(c - c.mean())) ** 2 / n)
    power = np.array(power)
    kh = 2 * np.pi * np.fft.fftfreq(16)
    window = (1 - 2 / 3 * np.sin(kh[None, :] / 2) ** 2) * (1 - 2 / 3 * np.sin(kh[:, None] / 2) ** 2)
    mean = power.mean(0)
    err = power.std(0, ddof=1) / np.sqrt(t)
    nonzero = np.ones((16, 16), bool)
    nonzero[0, 0] = False
    assert np.all(np.abs(mean - window)[nonzero] < 4.5 * err[nonzero])


def test_radial_average_against_brute_force():
    index, kmag, nbins = radial_bins(12, 8, 12.0, 4.0)
    vals = kmag**2
    got = radial_average(vals, index, nbins)
    dk = 2 * np.pi / 12.0
    for j in range(nbins):
        sel = [(vals[a, b]) for a in range(8) for b in range(12)
               if kmag[a, b] > 0 and kmag[a, b] <= np.pi and round(kmag[a, b] / dk) == j + 1]
        if sel:
            assert got[j] == pytest.approx(np.mean(sel))
        else:
            assert np.isnan(got[j])


def test_sub_box_counts_are_binomial():
    # N uniform points: the count in a box covering a fraction p of the area is
    # Binomial(N, p) (reference: scipy.stats.binom). Boxes tile the domain, so the pooled
    # variance about the exact mean N p estimates N p (1 - p) without bias; the tolerance
    # uses the spread of the per-snapshot variances (snapshots are independent).
    n, t = 3000, 60
    geom, counts = _ideal_counts(n, t, seed=22)
    sizes = np.array([1, 2, 4, 8])
    mean, std = number_fluctuations(counts, sizes)
    s1, s2, nbox = box_sums(counts, sizes)
    per_time_var = s2 / nbox - (s1 / nbox) ** 2
    for i, ell in enumerate(sizes):
        p = ell**2 / 32**2
        ref = stats.binom(n, p)
        assert mean[i] == pytest.approx(ref.mean(), rel=1e-12)
        err = per_time_var[:, i].std(ddof=1) / np.sqrt(t)
        assert abs(std[i] ** 2 - ref.var()) < 4 * err


def test_gnf_exponent_of_independent_poisson_cells_is_one_half():
    # Independent Poisson cells of mean m: a box of l^2 cells is Poisson(m l^2), so
    # Delta N = <N>^(1/2) exactly (known scaling).
    rng = np.random.default_rng(23)
    counts = rng.poisson(3.0, size=(80, 64, 64)).astype(float)
    _, _, expo, err = gnf_exponent(counts, np.array([1, 2, 4, 8, 16]))
    assert np.isfinite(err) and 0 < err < 0.05
    assert abs(expo - 0.5) < 4 * err


def test_gnf_exponent_of_gaussian_field_with_known_scaling():
    # Gaussian field delta = a * white (circular convolution) with |A(k)|^2 = k^-1.2: the
    # exact variance of a box sum is (1/n^2) sum_k |W_l(k)|^2 |A(k)|^2 (Parseval), W_l the
    # DFT of the box indicator. Its log-log slope against <N> = rho0 l^2 is the known
    # exponent (asymptotically (2 + 1.2) / 4 = 0.8); the estimate from samples must match
    # it within its jackknife error.
    n, t, rho0 = 64, 60, 50.0
    rng = np.random.default_rng(24)
    k = 2 * np.pi * np.hypot(np.fft.fftfreq(n)[None, :], np.fft.fftfreq(n)[:, None])
    amp = np.zeros((n, n))
    amp[k > 0] = k[k > 0] ** -0.6
    white = rng.standard_normal((t, n, n))
    counts = rho0 + np.fft.ifft2(np.fft.fft2(white) * amp).real
    sizes = np.array([1, 2, 4, 8, 16])
    exact = []
    for ell in sizes:
        box = np.zeros((n, n))
        box[:ell, :ell] = 1.0
        exact.append(np.sum(np.abs(np.fft.fft2(box)) ** 2 * amp**2) / n**2)
    slope_exact = np.polyfit(np.log(rho0 * sizes**2.0), 0.5 * np.log(exact), 1)[0]
    assert slope_exact > 0.7  # anomalous by construction
    mean, std, expo, err = gnf_exponent(counts, sizes)
    np.testing.assert_allclose(mean, rho0 * sizes**2.0, rtol=1e-12)
    assert np.isfinite(err) and err > 0
    assert abs(expo - slope_exact) < 4 * err


def test_gnf_excludes_solid_boxes_and_sizes():
    assert list(gnf_box_sizes(128, 128, 10)) == sorted(set(gnf_box_sizes(128, 128, 10)))
    assert gnf_box_sizes(128, 64, 10).max() == 16
    counts = np.ones((3, 16, 16))
    fluid = np.ones((16, 16), bool)
    fluid[0, 0] = False
    s1, s2, nbox = box_sums(counts, np.array([1, 4, 16]), fluid)
    assert list(nbox) == [255, 15, 0]
    mean, std = number_fluctuations(counts, np.array([1, 4, 16]), fluid)
    assert mean[1] == 16 and std[1] == 0 and np.isnan(mean[2])


def test_correlation_length_of_smoothed_white_noise():
    # White noise smoothed by a Gaussian of s.d. s has correlation exp(-r^2 / (4 s^2))
    # (convolution of two Gaussians), which is 1/e at r = 2 s. Error from 8 independent
    # groups of snapshots.
    cfg = small_config(**{"domain.size": [64.0, 64.0], "continuum.grid": [64, 64]})
    geom = geometry_from_config(cfg)
    rng = np.random.default_rng(25)
    s = 2.0
    fluid = np.ones((64, 64), bool)
    xis = []
    for _ in range(8):
        px = smooth(rng.standard_normal((4, 64, 64)), s, geom, fluid)
        py = smooth(rng.standard_normal((4, 64, 64)), s, geom, fluid)
        r, c = polarization_correlation(px, py, 64.0, 64.0)
        assert c[0] == pytest.approx(1.0)
        xis.append(correlation_length(r, c))
    xis = np.array(xis)
    assert abs(xis.mean() - 2 * s) < 4 * xis.std(ddof=1) / np.sqrt(len(xis))


def test_correlation_in_channel_uses_fluid_pairs_only():
    # Uncorrelated noise in a channel: C(r > 0) ~ 0, so the 1/e length is below one cell.
    cfg = small_config(**{"domain.boundary": "channel"})
    ds = ideal_gas_run(cfg, 4000, np.random.default_rng(26), n_samples=4)
    f = coarse_grain(ds)
    r, c = polarization_correlation(f["px"].values, f["py"].values, 32.0, 32.0,
                                    channel=True)
    assert r[0] == 0 and c[0] == pytest.approx(1.0)
    assert correlation_length(r, c) < 1.0
    assert correlation_length([0.0, 1.0], [1.0, 0.9]) != correlation_length([0.0, 1.0],
                                                                           [1.0, 0.1])
    assert np.isnan(correlation_length([0.0, 1.0], [1.0, 0.9]))
