"""Time-series statistics against exact results (AR(1), Binder values, jackknife)."""

import numpy as np
import pytest
from scipy.signal import lfilter

import crossflock as cf
from crossflock.compare import (
    analysis_window,
    autocorrelation_time,
    binder_cumulant,
    binder_with_error,
    blocked_jackknife,
    blocking,
    blocking_sem,
    mean_sem,
)

A = 0.9
N = 2**13
REPLICAS = 16


def _ar1(rng, a, n, burn=500):
    """AR(1) x_t = a x_{t-1} + e_t with unit-variance innovations (stationary part)."""
    return lfilter([1.0], [1.0, -a], rng.standard_normal(n + burn))[burn:]


def _exact_sem2(a, n):
    # Textbook (e.g. Priestley 1981, Spectral Analysis and Time Series, sec. 5.3): the
    # asymptotic variance of the mean of AR(1) is sigma^2 (1 + a) / ((1 - a) n) with
    # sigma^2 = 1 / (1 - a^2) the stationary variance for unit innovations.
    return (1.0 / (1 - a * a)) * (1 + a) / ((1 - a) * n)


def _block_mean_var(a, b):
    # Exact variance of the mean of b consecutive AR(1) values (same textbook formula,
    # finite b): sigma^2 / b [1 + 2 sum_{k<b} (1 - k/b) a^k].
    k = np.arange(1, b)
    return (1.0 / (1 - a * a)) / b * (1 + 2 * np.sum((1 - k / b) * a**k))


def test_mean_sem_matches_exact_ar1():
    rng = np.random.default_rng(10)
    ratios, taus = [], []
    for _ in range(REPLICAS):
        x = _ar1(rng, A, N)
        _, sem, tau = mean_sem(x)
        ratios.append(sem**2 / _exact_sem2(A, N))
        taus.append(tau)
    ratios = np.array(ratios)
    # tolerance: 4 standard errors of the replica mean (spread measured, not assumed)
    assert abs(ratios.mean() - 1) < 4 * ratios.std(ddof=1) / np.sqrt(REPLICAS)
    taus = np.array(taus)
    # integrated autocorrelation time of AR(1): (1 + a) / (1 - a) = 19 samples
    assert abs(taus.mean() - (1 + A) / (1 - A)) < 4 * taus.std(ddof=1) / np.sqrt(REPLICAS)


def test_blocking_matches_exact_block_variance():
    # Blocking estimates var(block mean of size b) / n_blocks at its chosen level; compare
    # with the exact finite-b AR(1) value. (Its bias against the asymptotic variance,
    # about tau / b, is why observe() uses mean_sem instead.)
    rng = np.random.default_rng(11)
    ratios, sizes = [], []
    for _ in range(REPLICAS):
        res = blocking(_ar1(rng, A, N))
        assert res.converged
        b = int(res.block_size)
        ratios.append(res.sem**2 / (_block_mean_var(A, b) / (N // b)))
        sizes.append(b)
    ratios = np.array(ratios)
    assert abs(ratios.mean() - 1) < 4 * ratios.std(ddof=1) / np.sqrt(REPLICAS)
    # every chosen block is longer than the correlation time 1 / (1 - a) = 10 samples
    assert min(sizes) > 1 / (1 - A)


def test_blocking_on_uncorrelated_data_and_2d():
    rng = np.random.default_rng(12)
    x = rng.standard_normal((4096, 3))
    res = blocking(x)
    assert res.converged.all()
    # independent samples: the SEM is s / sqrt(n); the blocking estimate has relative
    # error about 1/sqrt(2 (n_blocks - 1)) at its level (chi-square), so allow 4 of those
    expected = x.std(axis=0) / np.sqrt(4096)
    nblocks = 4096 // res.block_size
    assert np.all(np.abs(res.sem / expected - 1) < 4 / np.sqrt(2 * (nblocks - 1)))
    assert blocking_sem(x[:, 0]) == pytest.approx(float(res.sem[0]))


def test_short_series_are_not_resolved():
    # Fewer than MIN_SERIES samples: no error estimate at all.
    x = _ar1(np.random.default_rng(13), 0.95, 10)
    assert np.isnan(mean_sem(x)[1])
    assert np.isnan(blocking_sem(x))
    # the rule's boundary: 20 independent samples are enough, 19 are not
    z = np.random.default_rng(13).standard_normal(20)
    assert np.isfinite(mean_sem(z)[1])
    assert np.isnan(mean_sem(z[:19])[1])


def test_constant_series():
    mean, sem, tau = mean_sem(np.full(50, 0.7))
    assert mean == pytest.approx(0.7) and tau == 1.0
    assert sem == pytest.approx(0.0, abs=1e-15)  # round-off of the mean only
    assert autocorrelation_time(np.full(50, 0.7)) == 1.0


def test_jackknife_of_mean_is_standard_error():
    # Identity: the delete-one jackknife error of the mean equals s / sqrt(n) (ddof 1)
    # (Efron & Tibshirani 1993, An Introduction to the Bootstrap, eq. 11.5).
    x = np.random.default_rng(14).standard_normal(40)
    value, err = blocked_jackknife(np.mean, x, 1)
    assert value == pytest.approx(x.mean())
    assert err == pytest.approx(x.std(ddof=1) / np.sqrt(40), rel=1e-12)
    _, err = blocked_jackknife(np.mean, x, 20)  # only 2 blocks
    assert np.isnan(err)


@pytest.mark.parametrize(("kind", "expected"), [("gaussian", 1 / 3), ("fixed", 2 / 3)])
def test_binder_two_component_values(kind, expected):
    # Binder 1981, Z. Phys. B 43, 119: for a two-component order parameter,
    # G = 1 - <phi^4> / (3 <phi^2>^2) is 1/3 for an isotropic Gaussian (|phi|^2 is
    # exponential, <phi^4> = 2 <phi^2>^2) and 2/3 for a fixed modulus.
    rng = np.random.default_rng(15)
    n = 4000
    if kind == "gaussian":
        phi = np.hypot(rng.standard_normal(n), rng.standard_normal(n))
    else:
        ang = rng.uniform(-np.pi, np.pi, n)
        phi = np.abs(0.8 * np.exp(1j * ang))
    g, err = binder_with_error(phi)
    assert binder_cumulant(phi) == pytest.approx(g)
    if kind == "fixed":
        assert g == pytest.approx(expected, abs=1e-12)
        assert err == pytest.approx(0.0, abs=1e-12)
    else:
        assert np.isfinite(err) and err > 0
        assert abs(g - expected) < 4 * err


def test_binder_error_is_calibrated():
    # The jackknife error must match the spread of G over independent replicas.
    rng = np.random.default_rng(16)
    gs, errs = [], []
    for _ in range(40):
        phi = np.hypot(rng.standard_normal(500), rng.standard_normal(500))
        g, e = binder_with_error(phi)
        gs.append(g)
        errs.append(e)
    spread = np.std(gs, ddof=1)
    # ratio of two error estimates; the sample s.d. of 40 values has relative error
    # 1/sqrt(2*39) = 11 %, so 4 of those bound the ratio
    assert abs(np.mean(errs) / spread - 1) < 4 / np.sqrt(78)


def test_analysis_window_rule():
    t = np.arange(11) * 10.0
    keep = analysis_window(t, 0.2)
    assert t[keep][0] == 20.0 and keep.sum() == 9
    assert analysis_window(t, 0.0).all()
    with pytest.raises(cf.InputError, match="compare.transient"):
        analysis_window(t[:5], 0.5)
    with pytest.raises(cf.InputError, match="no time samples"):
        analysis_window(np.array([]), 0.2)
