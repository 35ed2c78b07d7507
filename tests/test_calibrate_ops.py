"""Derivative operators, time stencils and term library of the coefficient fit.

Reference answers are exact calculus on trigonometric and polynomial fields; tolerances
come from the truncation error of each scheme or from round-off.
"""

from __future__ import annotations

import numpy as np
import pytest

from crossflock import InputError
from crossflock.compare._termlib import (
    FiniteDifferenceOperators,
    SpectralOperators,
    continuity_columns,
    library,
    parse_terms,
)
from crossflock.compare._timederiv import SCHEMES, get_scheme, sample_step, time_derivative

L = 2.0 * np.pi


def _grid(n, length=L):
    h = length / n
    x = (np.arange(n) + 0.5) * h
    return x[None, :], x[:, None], h


# ----------------------------------------------------------------------------- spectral
def test_spectral_derivatives_of_trigonometric_field_are_exact():
    # f = sin(2x) cos(3y): d_x = 2 cos 2x cos 3y, d_y = -3 sin 2x sin 3y,
    # d_xx = -4 f, d_yy = -9 f, d_xy = -6 cos 2x sin 3y (exact calculus). The field is
    # band-limited on a 32-point grid, so Fourier derivatives are exact to round-off.
    x, y, h = _grid(32)
    f = np.sin(2 * x) * np.cos(3 * y)
    ops = SpectralOperators(32, 32, h, h)
    d = ops.derivatives(f)
    tol = 1e-11
    np.testing.assert_allclose(d["x"], 2 * np.cos(2 * x) * np.cos(3 * y), atol=tol)
    np.testing.assert_allclose(d["y"], -3 * np.sin(2 * x) * np.sin(3 * y), atol=tol)
    np.testing.assert_allclose(d["xx"], -4 * f, atol=tol)
    np.testing.assert_allclose(d["yy"], -9 * f, atol=tol)
    np.testing.assert_allclose(d["xy"], -6 * np.cos(2 * x) * np.sin(3 * y), atol=tol)


def test_spectral_derivatives_on_rectangular_box_and_batches():
    # Non-square box Lx = 4 pi, Ly = 2 pi: f = cos(x / 2 + y) has d_x f = -sin(.)/2.
    nx, ny = 24, 16
    hx, hy = 4 * np.pi / nx, 2 * np.pi / ny
    x = (np.arange(nx) + 0.5)[None, :] * hx
    y = (np.arange(ny) + 0.5)[:, None] * hy
    f = np.cos(0.5 * x + y)
    batch = np.stack([f, 2 * f])
    d = SpectralOperators(nx, ny, hx, hy).derivatives(batch)
    np.testing.assert_allclose(d["x"][1], -np.sin(0.5 * x + y), atol=1e-11)
    np.testing.assert_allclose(d["xy"][0], -0.5 * np.cos(0.5 * x + y), atol=1e-11)


def test_two_thirds_projection_keeps_low_and_removes_high_modes():
    # On 32 points the 2/3 rule keeps |m| <= 10 (Orszag 1971): mode 10 passes unchanged,
    # mode 11 is removed.
    x, y, h = _grid(32)
    ops = SpectralOperators(32, 32, h, h, dealias=True)
    low = np.cos(10 * x) * np.sin(3 * y)
    np.testing.assert_allclose(ops.filter(low), low, atol=1e-12)
    np.testing.assert_allclose(ops.filter(np.cos(11 * x) + 0 * y), 0.0, atol=1e-12)


def test_gaussian_filter_multiplier_is_exact():
    # Gaussian convolution of cos(k x) multiplies it by exp(-k^2 l^2 / 2) (exact calculus).
    x, y, h = _grid(32)
    ops = SpectralOperators(32, 32, h, h, dealias=False, smoothing=0.4)
    np.testing.assert_allclose(ops.filter(np.cos(3 * x) + 0 * y),
                               np.exp(-0.5 * 9 * 0.16) * np.cos(3 * x) + 0 * y, atol=1e-12)


def test_filter_variance_factor_matches_filtered_white_noise():
    # Filtered unit white noise has per-point variance mean_k |g(k)|^2 (Parseval). With
    # M independent values the sample variance has relative s.d. sqrt(2 / M) (chi^2).
    n, reps = 32, 40
    x, y, h = _grid(n)
    ops = SpectralOperators(n, n, h, h, dealias=True, smoothing=0.3)
    rng = np.random.default_rng(7)
    noise = rng.standard_normal((reps, n, n))
    var = float(np.mean(ops.filter(noise) ** 2))
    expected = ops.noise_variance_factor()
    # filtered values are correlated; the effective count is M g (independent modes kept)
    m_eff = reps * n * n * expected
    assert abs(var / expected - 1.0) < 4.0 * np.sqrt(2.0 / m_eff)


# ----------------------------------------------------------------------------- finite diff
def _fd_error(n):
    x, y, h = _grid(n)
    f = np.sin(x) * np.cos(2 * y)
    ops = FiniteDifferenceOperators(np.ones((n, n), bool), h, h, periodic_y=True)
    d = ops.derivatives(f)
    exact = {"x": np.cos(x) * np.cos(2 * y), "y": -2 * np.sin(x) * np.sin(2 * y),
             "xx": -f, "yy": -4 * f, "xy": -2 * np.cos(x) * np.sin(2 * y)}
    return {k: float(np.max(np.abs(d[k] - exact[k]))) for k in exact}


def test_finite_differences_converge_at_second_order():
    # Central differences have error h^2/6 f''' (first) and h^2/12 f'''' (second
    # derivatives) plus O(h^4), so halving h divides the error by 4 (1 + O(h^2)).
    coarse, fine = _fd_error(32), _fd_error(64)
    for k in coarse:
        ratio = coarse[k] / fine[k]
        assert 3.8 < ratio < 4.2, (k, ratio)


def test_finite_difference_leading_error_coefficient():
    # d_x sin(x) by central differences is sin(h)/h cos x exactly (trigonometry).
    n = 40
    x, y, h = _grid(n)
    ops = FiniteDifferenceOperators(np.ones((n, n), bool), h, h, periodic_y=True)
    d = ops.derivatives(np.sin(x) + 0 * y)
    np.testing.assert_allclose(d["x"], np.sin(h) / h * np.cos(x + 0 * y), atol=1e-13)


def test_finite_difference_valid_points_stay_away_from_mask_and_walls():
    n = 16
    fluid = np.ones((n, n), bool)
    fluid[6:9, 6:9] = False
    ops = FiniteDifferenceOperators(fluid, 1.0, 1.0, periodic_y=False)
    v = ops.valid
    assert not v[0].any() and not v[-1].any()          # channel walls
    assert not v[5:10, 5:10].any()                       # obstacle and its 8-neighbours
    assert v[1:5, :].all() and v[11:-1, :].all()        # far from both
    assert v[5:10, 0:5].all()


def test_masked_gaussian_filter_is_linear_and_zero_off_valid():
    n = 24
    fluid = np.ones((n, n), bool)
    fluid[10:14, 10:14] = False
    ops = FiniteDifferenceOperators(fluid, 1.0, 1.0, periodic_y=True, smoothing=1.5)
    rng = np.random.default_rng(2)
    a, b = rng.standard_normal((2, n, n))
    np.testing.assert_allclose(ops.filter(2 * a - 3 * b),
                               2 * ops.filter(a) - 3 * ops.filter(b), atol=1e-12)
    assert np.all(ops.filter(a)[~ops.valid] == 0.0)
    # a constant is reproduced on valid points (normalised convolution)
    np.testing.assert_allclose(ops.filter(np.ones((n, n)))[ops.valid], 1.0, atol=1e-12)


# ----------------------------------------------------------------------------- time
def test_time_schemes_exact_on_polynomials_of_their_order():
    # forward and centred are second order: exact on quadratics; euler on linear data.
    t = np.arange(12) * 0.3
    quad = 2.0 + 0.5 * t - 1.5 * t**2
    for name in ("forward", "centred"):
        idx, du = time_derivative(quad, 0.3, name)
        np.testing.assert_allclose(du, 0.5 - 3.0 * t[idx], atol=1e-12)
    idx, du = time_derivative(2.0 + 0.7 * t, 0.3, "euler")
    np.testing.assert_allclose(du, 0.7, atol=1e-12)


@pytest.mark.parametrize("name, order", [("forward", 2), ("centred", 2), ("euler", 1)])
def test_time_scheme_convergence_order(name, order):
    # d_t exp(-t) = -exp(-t); the stencil error is C h^order (1 + O(h)).
    errs = []
    for h in (0.02, 0.01):
        t = np.arange(0.0, 2.0 + 1e-9, h)
        idx, du = time_derivative(np.exp(-t), h, name)
        errs.append(np.max(np.abs(du + np.exp(-t[idx]))))
    assert abs(np.log2(errs[0] / errs[1]) - order) < 0.1


def test_stride_is_difference_over_several_samples():
    t = np.arange(20) * 0.1
    u = t**2
    idx, du = time_derivative(u, 0.1, "forward", stride=3)
    np.testing.assert_allclose(du, 2 * t[idx], atol=1e-12)
    assert idx[0] == 0 and idx[-1] == 20 - 1 - 6


@pytest.mark.parametrize("name", list(SCHEMES))
def test_noise_factor_matches_random_walk(name):
    # Random walk with increments of variance 2 Q h: the stencil has variance
    # noise_factor * 2 Q / h. The estimate from M samples of a variance has relative
    # s.d. sqrt(2 / M) (chi^2); neighbouring stencils overlap, so use M / 3.
    rng = np.random.default_rng(11)
    q, h, n = 0.3, 0.05, 60000
    walk = np.cumsum(np.sqrt(2 * q * h) * rng.standard_normal(n))
    _, du = time_derivative(walk, h, name)
    ratio = np.var(du) / (get_scheme(name).noise_factor * 2 * q / h)
    assert abs(ratio - 1.0) < 4 * np.sqrt(2.0 / (du.size / 3))


def test_noise_factor_values():
    # From the stencils: forward (3 dW1 - dW2) / 2 -> 10/4; centred (dW1 + dW2)/2 -> 1/2.
    assert SCHEMES["forward"].noise_factor == pytest.approx(2.5)
    assert SCHEMES["centred"].noise_factor == pytest.approx(0.5)
    assert SCHEMES["euler"].noise_factor == pytest.approx(1.0)


def test_time_errors():
    with pytest.raises(InputError, match="time_scheme"):
        get_scheme("backward")
    with pytest.raises(InputError, match="equally spaced"):
        sample_step([0.0, 0.1, 0.3])
    with pytest.raises(InputError, match="at least 2"):
        sample_step([0.0])
    with pytest.raises(InputError, match="stride"):
        time_derivative(np.zeros(5), 0.1, "forward", stride=0)


# ----------------------------------------------------------------------------- library
def test_library_terms_match_exact_calculus():
    # rho = 1 + 0.2 sin y, w = (sin x cos y, 0.5 cos x); all derivatives by hand.
    n = 32
    x, y, h = _grid(n)
    rho0 = 1.0
    rho = rho0 + 0.2 * np.sin(y) + 0 * x
    wx = np.sin(x) * np.cos(y)
    wy = 0.5 * np.cos(x) + 0 * y
    fields = np.stack([rho, wx, wy])
    ops = SpectralOperators(n, n, h, h)
    terms = ["alpha", "alpha_rho", "beta", "pressure[0]", "pressure[1]", "D_T", "D_B",
             "D_2", "lambda1", "lambda2", "lambda3"]
    lib = library(fields, ops.derivatives(fields), rho0, terms)
    # exact derivatives
    rx, ry = 0 * x + 0 * y, 0.2 * np.cos(y) + 0 * x
    gxx, gyx = np.cos(x) * np.cos(y), -np.sin(x) * np.sin(y)      # d_x wx, d_y wx
    gxy, gyy = -0.5 * np.sin(x) + 0 * y, 0 * x + 0 * y             # d_x wy, d_y wy
    hxx_x, hxy_x, hyy_x = -wx, -np.cos(x) * np.sin(y), -wx
    hxx_y, hxy_y, hyy_y = -wy, 0 * x + 0 * y, 0 * x + 0 * y
    w2 = wx**2 + wy**2
    drho = rho - rho0
    div = gxx + gyy
    exact = {
        "alpha": (wx, wy),
        "alpha_rho": (drho * wx, drho * wy),
        "beta": (-w2 * wx, -w2 * wy),
        "pressure[0]": (-rx, -ry),
        "pressure[1]": (-2 * drho * rx, -2 * drho * ry),
        "D_T": (hxx_x + hyy_x, hxx_y + hyy_y),
        "D_B": (hxx_x + hxy_y, hxy_x + hyy_y),
        "D_2": (wx * wx * hxx_x + 2 * wx * wy * hxy_x + wy * wy * hyy_x,
                wx * wx * hxx_y + 2 * wx * wy * hxy_y + wy * wy * hyy_y),
        "lambda1": (-(wx * gxx + wy * gyx), -(wx * gxy + wy * gyy)),
        "lambda2": (-div * wx, -div * wy),
        "lambda3": (-2 * (wx * gxx + wy * gxy), -2 * (wx * gyx + wy * gyy)),
    }
    for i, name in enumerate(terms):
        np.testing.assert_allclose(lib[i, 0], exact[name][0], atol=1e-11, err_msg=name)
        np.testing.assert_allclose(lib[i, 1], exact[name][1], atol=1e-11, err_msg=name)
    cols = continuity_columns(ops.derivatives(fields))
    np.testing.assert_allclose(cols[0], -div, atol=1e-11)
    np.testing.assert_allclose(cols[1], -0.2 * np.sin(y) + 0 * x, atol=1e-11)


def test_parse_terms():
    assert parse_terms(["alpha", "D_rho", "pressure[0]"]) == (("alpha", "pressure[0]"), True)
    with pytest.raises(InputError, match="not a term"):
        parse_terms(["alpha", "gamma"])
    with pytest.raises(InputError, match="repeat"):
        parse_terms(["alpha", "alpha"])
    with pytest.raises(InputError, match="consecutive"):
        parse_terms(["pressure[1]"])
