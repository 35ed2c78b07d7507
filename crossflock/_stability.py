"""Explicit stability limit of the continuum time step.

Both continuum methods step with SBDF2 (second-order semi-implicit BDF). The spectral
method treats the constant-coefficient diffusion (D_T at rho0, D_B, D_rho) implicitly;
the finite-difference method is fully explicit. The explicit part is limited by

* waves and advection: dt * c_max <= CFL * dx, with c_max bounding the fastest signal:
  v0 (density advection by w, |w| <= rho) + sqrt(v0 max P'(rho)) (pressure sound) +
  max over rho in [rho0/4, 2 rho0] of (|lambda1| + |lambda2| + 2 |lambda3|)(rho) * rho
  (self-advection, since |w| <= rho);
* local reaction: dt * max(|alpha(rho)|, 2 beta |w|^2) <= 1/2;
* the explicit nonlinear diffusion D_2 (w.grad)^2 w: dt * D_2 |w|^2 (2/dx)^2 ... <= 1/2;
* finite differences only, explicit linear diffusion: the 5-point Laplacian's largest
  eigenvalue is 4 D (1/dx^2 + 1/dy^2) with D = max(D_T(rho) + D_B, D_rho); explicit
  SBDF2 is stable on the negative real axis down to dt * eigenvalue = 4/3, and we keep
  half of that: dt * 4 D (1/dx^2 + 1/dy^2) <= 2/3;
* spectral, "kinetic" coefficients only: the explicit remainder
  (D_T(rho) - D_T(rho0)) lap w obeys the same bound with the spectral eigenvalue
  |D_T(rho) - D_T(rho0)| k_max^2, k_max^2 = (pi/dx)^2 + (pi/dy)^2.

These are deliberately conservative bounds (common practice, no source); a config that
exceeds them is refused with the limit in the message rather than left to blow up.
"""

from __future__ import annotations

import math

import numpy as np

from ._errors import ConfigError

__all__ = ["CFL", "stability_limit", "check_continuum_dt", "resolved_coefficients"]

CFL = 0.3


def resolved_coefficients(cfg, rho=None) -> dict:
    """Coefficients as a dict (kinetic ones evaluated at ``rho``, default rho0)."""
    from ._kinetic import kinetic_local

    coef = cfg.continuum.coefficients
    if coef == "kinetic":
        return kinetic_local(cfg, cfg.model.density if rho is None else rho)
    out = {name: getattr(coef, name) for name in coef.__dataclass_fields__}
    if rho is not None:
        out["alpha"] = coef.alpha + coef.alpha_rho * (np.asarray(rho) - cfg.model.density)
    return out


def stability_limit(cfg) -> tuple[float, str]:
    """Largest stable continuum dt for ``cfg`` and the name of the limiting term."""
    lx, ly = cfg.domain.size
    nx, ny = cfg.continuum.grid
    dx = min(lx / nx, ly / ny)
    rho0 = cfg.model.density
    v0 = cfg.model.speed
    rhos = np.array([0.25 * rho0, rho0, 2.0 * rho0])
    c = resolved_coefficients(cfg, rhos)
    lam_sum = sum(np.abs(np.broadcast_to(c[k], rhos.shape)) * f
                  for k, f in (("lambda1", 1.0), ("lambda2", 1.0), ("lambda3", 2.0)))
    pressure = tuple(c["pressure"])
    drho = rhos - rho0
    slope = sum(k * p * drho ** (k - 1) for k, p in enumerate(pressure, start=1)) \
        if pressure else np.zeros_like(rhos)
    sound = math.sqrt(v0 * max(float(np.max(slope)), 0.0))
    # |w| <= rho locally, so the self-advection speed is bounded by lambda(rho) * rho
    c_max = v0 + sound + float(np.max(lam_sum * rhos))
    limits = {"wave/advection CFL": CFL * dx / c_max}
    alpha = float(np.max(np.abs(np.broadcast_to(c["alpha"], rhos.shape))))
    beta = float(np.max(np.abs(np.broadcast_to(c["beta"], rhos.shape))))
    rate = max(alpha, 2.0 * beta * rho0**2)
    if rate > 0:
        limits["reaction alpha/beta"] = 0.5 / rate
    d2 = float(np.max(np.broadcast_to(c["D_2"], rhos.shape)))
    if d2 > 0:
        limits["explicit D_2 diffusion"] = 0.5 * dx**2 / (4.0 * d2 * rho0**2)
    d_t = np.broadcast_to(c["D_T"], rhos.shape)
    if _method(cfg) == "finite_difference":
        diff = max(float(np.max(d_t)) + float(c["D_B"]), float(c["D_rho"]))
        rate = 4.0 * diff * (1.0 / (lx / nx) ** 2 + 1.0 / (ly / ny) ** 2)
        if rate > 0:
            limits["explicit diffusion"] = (2.0 / 3.0) / rate
    elif cfg.continuum.coefficients == "kinetic":
        corr = float(np.max(np.abs(d_t - float(np.asarray(resolved_coefficients(cfg)["D_T"])))))
        rate = corr * (math.pi**2) * (1.0 / (lx / nx) ** 2 + 1.0 / (ly / ny) ** 2)
        if rate > 0:
            limits["explicit D_T(rho) remainder"] = (2.0 / 3.0) / rate
    name = min(limits, key=limits.get)
    return limits[name], name


def _method(cfg) -> str:
    """``continuum.method`` with "auto" resolved (spectral iff periodic, no obstacles)."""
    method = cfg.continuum.method
    if method == "auto":
        periodic = cfg.domain.boundary == "periodic" and not cfg.domain.obstacles
        return "spectral" if periodic else "finite_difference"
    return method


def check_continuum_dt(cfg) -> None:
    """Raise ConfigError when ``continuum.dt`` exceeds :func:`stability_limit`."""
    limit, name = stability_limit(cfg)
    if cfg.continuum.dt > limit:
        nx, ny = cfg.continuum.grid
        raise ConfigError(
            f"`continuum.dt` must be <= {limit:.4g}, the explicit stability limit "
            f"({name}) on the {nx}x{ny} grid (got {cfg.continuum.dt:g})"
        )
