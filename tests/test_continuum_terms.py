"""Term functions of GUIDE section 3 and the two derivative operators behind them."""

from fractions import Fraction

import numba
import numpy as np
import pytest

import crossflock as cf
from crossflock.continuum import FiniteDifferenceSolver, SpectralSolver, terms
from crossflock.continuum._fma import fmadd

RNG = np.random.default_rng(3)


def test_alignment_fixed_point_and_sign():
    # homogeneous fixed point |w|^2 = alpha / beta (GUIDE section 3)
    w = np.sqrt(2.0 / 3.0)
    fx, fy = terms.alignment(w, 0.0, 2.0, 3.0)
    assert fx == pytest.approx(0.0, abs=1e-15) and fy == 0.0
    fx, _ = terms.alignment(0.5 * w, 0.0, 2.0, 3.0)
    assert fx > 0  # grows below the fixed point


@numba.njit
def _fused(a, b, c):
    return fmadd(a, b, c)


def test_fmadd_rounds_once_as_the_ieee_fused_multiply_add():
    # IEEE 754-2008 fusedMultiplyAdd: the exact a * b + c rounded once. Exact reference:
    # Python's fractions, and float(Fraction) rounds to nearest, ties to even.
    a, b, c = RNG.normal(size=(3, 300)) * np.array([[1.0], [1e3], [1e-2]])
    for x, y, z in zip(a, b, c, strict=True):
        assert _fused(x, y, z) == float(Fraction(x) * Fraction(y) + Fraction(z))
    e = 1.0 + 2.0**-30  # e * e - 1 = 2^-29 + 2^-60: two roundings lose the 2^-60
    assert _fused(e, e, -1.0) == 2.0**-29 + 2.0**-60 != e * e - 1.0
    # on arrays (the spectral method): numpy's two roundings, bit for bit
    np.testing.assert_array_equal(_fused(a, b, c), a * b + c)


def test_alignment_on_arrays_keeps_numpy_rounding():
    # the term functions also accept arrays (both kernels call them point by point):
    # on arrays, the fused multiply-adds of the scalar path must leave plain numpy's
    # numbers exactly
    wx, wy, alpha = RNG.normal(size=(3, 40))
    fx, fy = terms.alignment(wx, wy, alpha, 0.7)
    s = alpha - 0.7 * (wx * wx + wy * wy)
    np.testing.assert_array_equal(fx, s * wx)
    np.testing.assert_array_equal(fy, s * wy)


def test_pressure_slope_matches_numpy_polyder():
    # numpy.polynomial as the reference for d/drho sum_k p_k drho^k
    p = np.array([0.5, -0.2, 0.03])
    drho = RNG.normal(size=50)
    ref = np.polynomial.Polynomial(np.concatenate([[0.0], p])).deriv()(drho)
    np.testing.assert_allclose(terms.pressure_slope(drho, p), ref, rtol=1e-13)
    assert terms.pressure_slope(0.3, np.zeros(0)) == 0.0


def test_terms_accept_arrays_and_scalars_alike():
    a = RNG.normal(size=(6, 5, 4))
    out = terms.gradient_pressure_w2(*a, 0.3)
    for j in range(5):
        for i in range(4):
            sx, sy = terms.gradient_pressure_w2(*a[:, j, i], 0.3)
            assert out[0][j, i] == pytest.approx(sx) and out[1][j, i] == pytest.approx(sy)


def _cfg(coeffs, n=32, method="finite_difference"):
    return cf.load_config({
        "domain": {"size": [16.0, 16.0]},
        "run": {"duration": 1.0, "sample_every": 1.0},
        "continuum": {"grid": [n, n], "dt": 0.001, "method": method, "coefficients": coeffs},
    })


def _fields(x, y, k):
    """Smooth periodic fields and their derivatives in closed form."""
    cx, sx, cy, sy = np.cos(k * x), np.sin(k * x), np.cos(k * y), np.sin(k * y)
    f = {
        "rho": 2.0 + 0.1 * cx, "rx": -0.1 * k * sx, "ry": 0 * x,
        "wx": 0.5 + 0.2 * sy + 0.1 * cx,
        "wy": 0.3 * cx + 0.15 * sy + 0.1 * sx * sy,
    }
    f["gxx"], f["gyx"] = -0.1 * k * sx, 0.2 * k * cy  # g_ab = d_a w_b
    f["gxy"] = -0.3 * k * sx + 0.1 * k * cx * sy
    f["gyy"] = 0.15 * k * cy + 0.1 * k * sx * cy
    f["xxx"], f["xxy"], f["xyy"] = -0.1 * k * k * cx, 0 * x, -0.2 * k * k * sy  # of w_x
    f["yxx"] = -0.3 * k * k * cx - 0.1 * k * k * sx * sy
    f["yxy"] = 0.1 * k * k * cx * cy
    f["yyy"] = -0.15 * k * k * sy - 0.1 * k * k * sx * sy
    return f


def _expected(term, f, c):
    """The GUIDE section-3 term written out by hand (independent of _terms)."""
    wx, wy = f["wx"], f["wy"]
    if term == "lambda1":  # -lambda1 (w.grad) w
        return (-c * (wx * f["gxx"] + wy * f["gyx"]), -c * (wx * f["gxy"] + wy * f["gyy"]))
    if term == "lambda2":  # -lambda2 (div w) w
        d = f["gxx"] + f["gyy"]
        return -c * d * wx, -c * d * wy
    if term == "lambda3":  # -lambda3 grad |w|^2
        return (-c * 2 * (wx * f["gxx"] + wy * f["gxy"]),
                -c * 2 * (wx * f["gyx"] + wy * f["gyy"]))
    if term == "D_T":
        return c * (f["xxx"] + f["xyy"]), c * (f["yxx"] + f["yyy"])
    if term == "D_B":  # grad div w
        return c * (f["xxx"] + f["yxy"]), c * (f["xxy"] + f["yyy"])
    if term == "D_2":  # w_a w_b d_a d_b w
        return tuple(c * (wx * wx * f[p + "xx"] + 2 * wx * wy * f[p + "xy"]
                          + wy * wy * f[p + "yy"]) for p in ("x", "y"))
    if term == "pressure":  # -grad P, P = c (rho - rho0)
        return -c * f["rx"], -c * f["ry"]
    raise KeyError(term)


@pytest.mark.parametrize("term", ["lambda1", "lambda2", "lambda3", "D_T", "D_B", "D_2",
                                  "pressure"])
def test_each_term_against_analytic_derivatives(term):
    # One term switched on, smooth periodic fields with closed-form derivatives: the
    # spectral operator reproduces the term to round-off, the finite-difference one to
    # its truncation error (k dx)^2 / 6 ~ 2e-3 relative per derivative (1% allowed).
    from scipy import fft

    c = 0.7
    coeffs = {"alpha": 0.0, "beta": 0.0, "pressure": [], "D_T": 0.0,
              term: [c] if term == "pressure" else c}
    k = 2 * np.pi / 16.0
    for method, n in (("spectral", 32), ("finite_difference", 64)):
        cfg = _cfg(coeffs, n, method)
        cls = SpectralSolver if method == "spectral" else FiniteDifferenceSolver
        s0 = cls(cfg)
        x, y = np.meshgrid(s0.x, s0.y)
        f = _fields(x, y, k)
        ex = _expected(term, f, c)
        scale = max(np.max(np.abs(ex[0])), np.max(np.abs(ex[1])))
        assert scale > 1e-3
        s = cls(cfg, initial=(f["rho"], f["wx"], f["wy"]))
        if method == "spectral":
            got = fft.irfft2(s.explicit_rhs()[1:], s=(n, n), axes=(-2, -1))
            uh = s._uh[1:]
            if term == "D_T":  # implicit in the spectral method: apply its symbol
                got = got + fft.irfft2(-c * s._k2 * uh, s=(n, n), axes=(-2, -1))
            elif term == "D_B":
                kr = s._kx * uh[0] + s._ky * uh[1]
                got = got + fft.irfft2(np.stack([-c * s._kx * kr, -c * s._ky * kr]),
                                       s=(n, n), axes=(-2, -1))
            tol = 1e-10 * max(scale, 1.0)
        else:
            got = s.rhs()[1:]
            tol = 0.01 * scale
        np.testing.assert_allclose(got[0], ex[0], atol=tol)
        np.testing.assert_allclose(got[1], ex[1], atol=tol)


def test_continuity_flux_form():
    # d_t rho = -v0 div w + D_rho lap rho on the same smooth fields
    coeffs = {"alpha": 0.0, "beta": 0.0, "pressure": [], "D_T": 0.0, "D_rho": 0.4}
    k = 2 * np.pi / 16.0
    s0 = FiniteDifferenceSolver(_cfg(coeffs, 64))
    x, y = np.meshgrid(s0.x, s0.y)
    f = _fields(x, y, k)
    s = FiniteDifferenceSolver(_cfg(coeffs, 64), initial=(f["rho"], f["wx"], f["wy"]))
    v0 = s.cfg.model.speed
    ex = -v0 * (f["gxx"] + f["gyy"]) + 0.4 * (-0.1 * k * k * np.cos(k * x))
    np.testing.assert_allclose(s.rhs()[0], ex, atol=0.01 * np.max(np.abs(ex)))
