"""The terms of the Toner-Tu equations (GUIDE section 3), one function each.

Every function is pointwise: it takes the local field values and the local derivative
values and returns the contribution to d_t w (a pair ``(fx, fy)``) or to d_t rho. How the
derivatives are obtained is the method's business: the spectral method hands in arrays
computed with FFTs, the finite-difference kernel hands in stencil values at one cell.
That is the derivative-operator abstraction that lets both methods share this code.

The functions are numba-compiled and written with arithmetic only, so they accept
scalars (inside compiled loops) as well as equally shaped ndarrays (from Python, tests).

Notation: ``g_ab = d_a w_b`` (so ``gxy = d_x w_y``), ``h{ab}_c = d_a d_b w_c``.
Sign convention: every function returns the term as it appears on the right-hand side.
"""

from __future__ import annotations

import numba

from ._fma import fmadd

__all__ = [
    "alignment_rate",
    "alignment",
    "pressure_slope",
    "pressure_force",
    "self_advection",
    "divergence_advection",
    "gradient_pressure_w2",
    "transverse_diffusion",
    "bulk_diffusion",
    "anisotropic_diffusion",
    "continuity",
    "momentum",
]

# inline="always": inlined at the numba IR level into the kernels, so no call overhead
# (array arguments such as `pressure` would otherwise be reference-counted per point).
_jit = numba.njit(cache=True, inline="always")


@_jit
def alignment_rate(wx, wy, alpha, beta):
    """The bracket ``alpha(rho) - beta |w|^2`` of the alignment term."""
    return fmadd(-beta, fmadd(wx, wx, wy * wy), alpha)


@_jit
def alignment(wx, wy, alpha, beta):
    """Alignment ``[alpha(rho) - beta |w|^2] w``; ``alpha`` is the local alpha(rho)."""
    s = alignment_rate(wx, wy, alpha, beta)
    return s * wx, s * wy


@_jit
def pressure_slope(drho, pressure):
    """``P'(rho) = sum_k k pressure[k-1] (rho - rho0)^(k-1)`` by Horner's rule.

    Parameters
    ----------
    drho : float or ndarray
        ``rho - rho0``.
    pressure : (K,) float64 ndarray
        Polynomial coefficients; an empty array means no pressure.
    """
    n = pressure.shape[0]
    if n == 1:  # linear pressure, the common case: skip the loop
        return pressure[0] + 0.0 * drho
    s = 0.0 * drho
    for k in range(n, 0, -1):
        s = s * drho + k * pressure[k - 1]
    return s


@_jit
def pressure_force(dxrho, dyrho, slope):
    """``-grad P(rho) = -P'(rho) grad rho`` (chain rule, so only grad rho is needed)."""
    return -slope * dxrho, -slope * dyrho


@_jit
def self_advection(wx, wy, gxx, gxy, gyx, gyy, lambda1):
    """``-lambda1 (w.grad) w``."""
    return -lambda1 * (wx * gxx + wy * gyx), -lambda1 * (wx * gxy + wy * gyy)


@_jit
def divergence_advection(wx, wy, gxx, gyy, lambda2):
    """``-lambda2 (div w) w``."""
    d = gxx + gyy
    return -lambda2 * d * wx, -lambda2 * d * wy


@_jit
def gradient_pressure_w2(wx, wy, gxx, gxy, gyx, gyy, lambda3):
    """``-lambda3 grad |w|^2 = -2 lambda3 (w_b d_a w_b)_a``."""
    return (-2.0 * lambda3 * (wx * gxx + wy * gxy),
            -2.0 * lambda3 * (wx * gyx + wy * gyy))


@_jit
def transverse_diffusion(lapx, lapy, d_t):
    """``D_T lap(w)`` from the Laplacians of the two components."""
    return d_t * lapx, d_t * lapy


@_jit
def bulk_diffusion(hxx_x, hxy_x, hyy_x, hxx_y, hxy_y, hyy_y, d_b):
    """``D_B grad(div w)``: ``(d_xx w_x + d_xy w_y, d_xy w_x + d_yy w_y)``."""
    return d_b * (hxx_x + hxy_y), d_b * (hxy_x + hyy_y)


@_jit
def anisotropic_diffusion(wx, wy, hxx_x, hxy_x, hyy_x, hxx_y, hxy_y, hyy_y, d_2):
    """``D_2 (w.grad)^2 w``, read as ``D_2 w_a w_b d_a d_b w`` (second derivative along w).

    The product rule part ``((w.grad) w).grad w`` of a literal double application is
    left out: it is a nonlinear advection, not a diffusion, and Toner-Tu's D_2 is the
    anisotropic diffusion along the order direction.
    """
    axx = wx * wx
    axy = 2.0 * wx * wy
    ayy = wy * wy
    return (d_2 * (axx * hxx_x + axy * hxy_x + ayy * hyy_x),
            d_2 * (axx * hxx_y + axy * hxy_y + ayy * hyy_y))


@_jit
def continuity(div_w, lap_rho, v0, d_rho):
    """``d_t rho = -v0 div(w) + D_rho lap(rho)`` (the diffusion is skipped when D_rho is
    0, as in :func:`momentum`)."""
    out = -v0 * div_w
    if d_rho != 0.0:
        out = out + d_rho * lap_rho
    return out


@_jit
def momentum(wx, wy, dxrho, dyrho, gxx, gxy, gyx, gyy, lapx, lapy,
             hxx_x, hxy_x, hyy_x, hxx_y, hxy_y, hyy_y,
             alpha, beta, lambda1, lambda2, lambda3, d_t, d_b, d_2, slope):
    """Sum of the momentum terms handed to it (the caller passes 0 for terms it treats
    elsewhere, e.g. implicitly): alignment, pressure, lambda1-3, D_T, D_B and D_2.

    The fields and derivatives may be scalars or equally shaped arrays; the
    coefficients ``lambda1`` ... ``d_2`` must be scalars (they select the terms).
    ``slope`` is P'(rho) from :func:`pressure_slope` (the caller evaluates it: passing
    the coefficient array down to every grid point would cost reference counting).
    ``lapx, lapy`` serve D_T only: the finite-difference kernel passes ``d_t = 0`` and
    adds D_T lap(w) itself with fused multiply-adds, and in its minimal variant hands in
    ``dxrho, dyrho`` already multiplied by P' with ``slope = 1``; so a new term uses the
    second derivatives ``h..`` and the gradients ``g..``, never these.

    Returns
    -------
    fx, fy : float or ndarray
        Right-hand side of ``d_t w`` without noise.
    """
    # Terms whose coefficient is 0 are skipped: the branches are the same at every
    # grid point (well predicted) and save most of the arithmetic of a minimal model.
    # alignment plus pressure, as one multiply-add per component (see ._fma)
    ax, ay = pressure_force(dxrho, dyrho, slope)
    s = alignment_rate(wx, wy, alpha, beta)
    fx = fmadd(s, wx, ax)
    fy = fmadd(s, wy, ay)
    if lambda1 != 0.0:
        ax, ay = self_advection(wx, wy, gxx, gxy, gyx, gyy, lambda1)
        fx = fx + ax
        fy = fy + ay
    if lambda2 != 0.0:
        ax, ay = divergence_advection(wx, wy, gxx, gyy, lambda2)
        fx = fx + ax
        fy = fy + ay
    if lambda3 != 0.0:
        ax, ay = gradient_pressure_w2(wx, wy, gxx, gxy, gyx, gyy, lambda3)
        fx = fx + ax
        fy = fy + ay
    if d_t != 0.0:
        ax, ay = transverse_diffusion(lapx, lapy, d_t)
        fx = fx + ax
        fy = fy + ay
    if d_b != 0.0:
        ax, ay = bulk_diffusion(hxx_x, hxy_x, hyy_x, hxx_y, hxy_y, hyy_y, d_b)
        fx = fx + ax
        fy = fy + ay
    if d_2 != 0.0:
        ax, ay = anisotropic_diffusion(wx, wy, hxx_x, hxy_x, hyy_x, hxx_y, hxy_y, hyy_y,
                                       d_2)
        fx = fx + ax
        fy = fy + ay
    return fx, fy
