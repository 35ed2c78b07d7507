"""Full linear stability of the homogeneous states (dispersion relation).

Linearise GUIDE section 3 about rho = rho0, w = w0 x_hat (w0 = sqrt(alpha/beta) when
alpha(rho0) > 0, else 0) with perturbations exp(i k.r + s t). With "kinetic" coefficients
every coefficient depends on rho, but at linear order only the rho-dependence of
alpha(rho) - beta(rho) w0^2 survives (the others multiply gradients of the base state).
The 3 x 3 growth matrix for (drho, dw_x, dw_y) is::

    s drho = -v0 i k.dw - D_rho k^2 drho
    s dw   = -i lambda1 w0 k_x dw - i lambda2 w0 (k.dw) x_hat - 2 i lambda3 w0 k dw_x
             - 2 beta w0^2 dw_x x_hat + w0 (alpha' - beta' w0^2) drho x_hat
             - i k P'(rho0) drho - D_T k^2 dw - D_B k (k.dw) - D_2 w0^2 k_x^2 dw

Its eigenvalue with the largest real part is the growth rate of the mode k. Near the
onset the ordered state is unstable at long wavelengths along the order (the banding
instability of Bertin, Droz & Gregoire 2009); the truncated kinetic equations can also be
unstable at short wavelengths deep in the ordered phase (also discussed there), which no
grid can resolve safely.
"""

from __future__ import annotations

import numpy as np

__all__ = ["base_state", "growth_matrix", "growth_rates", "max_growth"]


def _coeffs(cfg, rho):
    from crossflock._stability import resolved_coefficients

    return resolved_coefficients(cfg, np.asarray(rho, dtype=float))


def base_state(cfg) -> dict:
    """Homogeneous state and the linear coefficients about it.

    Returns
    -------
    dict
        ``w0``, ``alpha``, ``beta``, ``dalpha`` (d alpha/d rho), ``dbeta``, ``P1``
        (P'(rho0)), ``lambda1..3``, ``D_T``, ``D_B``, ``D_2``, ``D_rho``, ``v0``.
    """
    rho0 = cfg.model.density
    h = 1e-4 * rho0
    c0 = _coeffs(cfg, rho0)
    cp, cm = _coeffs(cfg, rho0 + h), _coeffs(cfg, rho0 - h)
    alpha = float(np.asarray(c0["alpha"]))
    beta = float(np.asarray(c0["beta"]))
    w0 = float(np.sqrt(alpha / beta)) if alpha > 0 and beta > 0 else 0.0
    pressure = tuple(c0["pressure"])
    return {
        "w0": w0,
        "alpha": alpha,
        "beta": beta,
        "dalpha": float((np.asarray(cp["alpha"]) - np.asarray(cm["alpha"])) / (2 * h)),
        "dbeta": float((np.asarray(cp["beta"]) - np.asarray(cm["beta"])) / (2 * h)),
        "P1": float(pressure[0]) if pressure else 0.0,
        **{k: float(np.asarray(c0[k])) for k in ("lambda1", "lambda2", "lambda3", "D_T",
                                                 "D_B", "D_2", "D_rho")},
        "v0": cfg.model.speed,
    }


def growth_matrix(b: dict, kx, ky) -> np.ndarray:
    """Growth matrices ``(..., 3, 3)`` for wavevectors ``kx, ky`` (broadcast)."""
    kx, ky = np.broadcast_arrays(np.asarray(kx, float), np.asarray(ky, float))
    k2 = kx**2 + ky**2
    w0, v0 = b["w0"], b["v0"]
    m = np.zeros(kx.shape + (3, 3), dtype=complex)
    m[..., 0, 0] = -b["D_rho"] * k2
    m[..., 0, 1] = -1j * v0 * kx
    m[..., 0, 2] = -1j * v0 * ky
    diag = -1j * b["lambda1"] * w0 * kx - b["D_T"] * k2 - b["D_2"] * w0**2 * kx**2
    if w0 > 0:
        diag = diag + (b["alpha"] - b["beta"] * w0**2)
    else:
        diag = diag + b["alpha"]
    m[..., 1, 1] = diag
    m[..., 2, 2] = diag
    # x component: lambda2 (k.dw) w0, lambda3 2 w0 k_x dw_x, saturation, D_B
    m[..., 1, 1] += -1j * b["lambda2"] * w0 * kx - 2j * b["lambda3"] * w0 * kx \
        - 2 * b["beta"] * w0**2 - b["D_B"] * kx * kx
    m[..., 1, 2] += -1j * b["lambda2"] * w0 * ky - b["D_B"] * kx * ky
    m[..., 2, 1] += -2j * b["lambda3"] * w0 * ky - b["D_B"] * ky * kx
    m[..., 2, 2] += -b["D_B"] * ky * ky
    m[..., 1, 0] = w0 * (b["dalpha"] - b["dbeta"] * w0**2) - 1j * kx * b["P1"]
    m[..., 2, 0] = -1j * ky * b["P1"]
    return m


def growth_rates(cfg, kx, ky) -> np.ndarray:
    """Largest real part of the growth-matrix eigenvalues at each wavevector."""
    b = base_state(cfg)
    return np.linalg.eigvals(growth_matrix(b, kx, ky)).real.max(axis=-1)


def max_growth(cfg, kmax=None, n=64) -> tuple[float, float, float]:
    """(rate, kx, ky) of the fastest-growing mode with 0 < |k| <= kmax.

    ``kmax`` defaults to the 2/3-de-aliased grid cut-off (2/3) pi / dx.
    """
    lx, ly = cfg.domain.size
    nx, ny = cfg.continuum.grid
    if kmax is None:
        kmax = (2.0 / 3.0) * np.pi / max(lx / nx, ly / ny)
    k = np.linspace(-kmax, kmax, 2 * n + 1)
    kx, ky = np.meshgrid(k, k)
    keep = (kx**2 + ky**2 > 0) & (kx**2 + ky**2 <= kmax**2)
    rates = np.full(kx.shape, -np.inf)
    rates[keep] = growth_rates(cfg, kx[keep], ky[keep])
    i = np.unravel_index(np.argmax(rates), rates.shape)
    return float(rates[i]), float(kx[i]), float(ky[i])
