"""Linear theory of the homogeneous states (used by tests and the validation suite).

Homogeneous ordered state
-------------------------
For uniform rho0 the alignment term gives |w|^2 = alpha / beta when alpha = alpha(rho0) > 0
and w = 0 otherwise, so the polar order of the homogeneous state is
``sqrt(alpha / beta) / rho0`` (or 0).

Sound speeds (Tu, Toner & Ulm 1998, PRL 80, 4819)
-------------------------------------------------
Linearise GUIDE section 3 about rho0, w = w0 x_hat with w0 = sqrt(alpha/beta) and plane
waves exp(i k.r - i omega t), k = k (cos theta, sin theta). The longitudinal perturbation
dw_x relaxes at the fast rate 2 alpha and is slaved to the density,
``dw_x = a drho`` with ``a = alpha_rho / (2 beta w0)`` (from
``alpha_rho drho w0 - 2 beta w0^2 dw_x = 0``). What remains is::

    omega drho = v0 a k_x drho + v0 k_y dw_y
    omega dw_y = lambda1 w0 k_x dw_y + (P'(rho0) + 2 lambda3 w0 a) k_y drho

whose eigenvalues are exactly the TTU form
``c(theta) = (gamma + v2)/2 cos(theta) +- sqrt(((gamma - v2)/2)^2 cos^2(theta)
+ c0^2 sin^2(theta))`` with::

    gamma = lambda1 w0                 (advection of the transverse mode)
    v2    = v0 a = v0 alpha_rho / (2 beta w0)
    c0^2  = v0 (P'(rho0) + 2 lambda3 w0 a) = v0 (P'(rho0) + lambda3 alpha_rho / beta)

valid for k c << 2 alpha (corrections to the real part are of order (k c / 2 alpha)^2).
lambda2 and the diffusion constants only enter at higher order in k (damping).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["linear_sound_speeds", "sound_speed_parameters", "homogeneous_order"]


def _get(coeffs, name, default=0.0):
    if isinstance(coeffs, dict):
        return coeffs.get(name, default)
    return getattr(coeffs, name, default)


def sound_speed_parameters(coeffs, rho0, w0, v0=1.0):
    """(gamma, v2, c0) of the TTU formula for the crossflock coefficients.

    Parameters
    ----------
    coeffs : mapping or Coefficients
        ``alpha_rho``, ``beta``, ``pressure``, ``lambda1``, ``lambda3``.
    rho0, w0 : float
        Density and |w| of the homogeneous ordered state (w0 > 0).
    v0 : float
        Self-propulsion speed in the continuity equation.
    """
    beta = float(_get(coeffs, "beta"))
    alpha_rho = float(_get(coeffs, "alpha_rho"))
    pressure = tuple(_get(coeffs, "pressure", ()))
    p1 = float(pressure[0]) if pressure else 0.0  # P'(rho0): only the linear coefficient
    a = alpha_rho / (2.0 * beta * w0)
    gamma = float(_get(coeffs, "lambda1")) * w0
    v2 = v0 * a
    c0_sq = v0 * (p1 + 2.0 * float(_get(coeffs, "lambda3")) * w0 * a)
    return gamma, v2, math.sqrt(c0_sq) if c0_sq >= 0 else complex(0, math.sqrt(-c0_sq))


def linear_sound_speeds(coeffs, rho0, w0, theta, v0=1.0):
    """Tu-Toner-Ulm sound speeds ``(c_plus, c_minus)`` at angle ``theta`` to the order.

    Parameters
    ----------
    coeffs : mapping or Coefficients
        Table coefficients (see :func:`sound_speed_parameters`).
    rho0, w0 : float
        Homogeneous ordered state.
    theta : float or ndarray
        Angle between the wavevector and the order direction (rad).
    v0 : float
        Self-propulsion speed (``model.speed``).

    Returns
    -------
    c_plus, c_minus : float or ndarray

    References
    ----------
    .. [1] Y. Tu, J. Toner, M. Ulm, Phys. Rev. Lett. 80, 4819 (1998).
    """
    gamma, v2, c0 = sound_speed_parameters(coeffs, rho0, w0, v0)
    cos = np.cos(theta)
    sin = np.sin(theta)
    mean = 0.5 * (gamma + v2) * cos
    root = np.sqrt(((gamma - v2) / 2.0) ** 2 * cos**2 + (c0 * c0) * sin**2)
    return mean + root, mean - root


def homogeneous_order(cfg) -> float:
    """Polar order |w| / rho of the homogeneous state at rho0 (0 when alpha <= 0)."""
    from ._coefficients import CoefficientModel

    coef = CoefficientModel(cfg)
    alpha = float(coef.alpha_at(coef.rho0))
    beta = coef.get("beta") if not coef.kinetic else float(coef.reference["beta"])
    if alpha <= 0 or beta <= 0:
        return 0.0 if alpha <= 0 else math.inf
    return math.sqrt(alpha / beta) / coef.rho0
