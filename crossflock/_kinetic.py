"""Bertin-Droz-Gregoire kinetic coefficients mapped onto the crossflock equations.

BDG derive, from a Boltzmann equation for binary alignment collisions, the hydrodynamic
equation (units v0 = 1, 2 d0 v0 = 1)::

    d_t w + gamma (w.grad) w = -1/2 grad(rho - kappa w^2) + (mu - xi w^2) w
                               + nu lap(w) - kappa (div w) w

with the coefficients of :func:`bdg_dimensionless`. crossflock's equation (GUIDE
section 3) has the same terms under other names; the physical units of ``[model]``
follow from the length unit L* = 2 R (so that d0 = R) and the time unit T* = L* / v0:
rho~ = L*^2 rho, w~ = L*^2 w, t~ = t / T*, x~ = x / L*. Substituting into the BDG
equation and dividing by T* L*^2 gives (checked term by term): alpha = mu / T*,
beta = xi L*^4 / T*, D_T = nu L*^2 / T*, lambda1 = gamma L*^2 v0, lambda2 = kappa L*^2 v0,
lambda3 = -kappa L*^2 v0 / 2, P(rho) = (v0 / 2)(rho - rho0) (crossflock's continuity
equation carries the factor v0: d_t rho = -v0 div w), and lambda~ = lambda T*.

Mapping of the alignment model onto BDG (an approximation, stated here and in the docs):

* The collision noise s.d. ``sigma`` is the s.d. of the wrapped Gaussian that has the same
  first circular moment as the particle noise: sin(pi eta) / (pi eta) for angular noise,
  exp(-(pi eta)^2 / 2) for the "gaussian" kind. Vectorial noise uses the angular formula
  (its effective angular spread depends on the neighbour count; this is the crudest part).
* Each particle is kicked by the noise once per time step whatever its neighbours do, so
  the self-diffusion ("tumble") rate is lambda = 1 / agents.dt with sigma0 = sigma unless
  ``continuum.kinetic_lambda`` sets it.
* BDG's pressure-like term is -1/2 grad(rho - kappa w^2) with kappa = kappa(rho);
  crossflock's lambda3 grad|w|^2 with lambda3 = -kappa/2 evaluated locally drops the
  (|w|^2 / 2) grad kappa part (second order in gradients times w^2).
* Far from the onset (rho >> rho_t, small noise) the truncated BDG equations have a
  short-wavelength instability of the homogeneous ordered state (growth rate ~0.28 at
  |k| ~ 4 / R for rho0 = 2, eta = 0.2; stable at eta = 0.3, see
  ``crossflock.continuum._dispersion.max_growth``); continuum runs there diverge (exit 3,
  and the message says so). This is a property of the truncated equations, not of the
  particles.
* Noise (``continuum.kinetic_noise = "auto"``): the BDG equations are deterministic, so
  the fluctuations of the particles are put back as the additive polarization noise of
  GUIDE section 3. Every heading gets one random kick per ``agents.dt`` of variance s2,
  hence rotational diffusion D_r = s2 / (2 agents.dt), with the small-angle variances
  s2 = (pi eta)^2 / 3 (angular, uniform kick; also used for vectorial noise, an
  approximation) and s2 = (pi eta)^2 (gaussian kind, unwrapped value). Ito calculus on
  w = sum_i e_i delta(r - r_i) (as Dean 1996, J. Phys. A 29, L613, does for the density)
  gives a noise sum_i sqrt(2 D_r) e_i^perp dW_i delta(r - r_i) whose correlation,
  averaged over headings, is <xi_a xi_b> = D_r rho0 delta_ab delta(r - r') delta(t - t'),
  i.e. noise_strength = D_r rho0 / 2 in the engine's convention
  <xi xi> = 2 noise_strength delta delta. This is an estimate: it ignores the extra
  fluctuations from alignment (neighbour-count noise) and the anisotropy of e^perp in
  the ordered state.
* ``continuum.kinetic_D_rho`` adds a density diffusion, a numerical regularisation of
  steep fronts (particles have none at the hydrodynamic level).
* BDG is a dilute, binary-collision theory; Vicsek particles at density ~ 1 per R^2 have
  several neighbours at once, so the coefficients are indicative, not quantitative.

References
----------
.. [1] E. Bertin, M. Droz, G. Gregoire, Phys. Rev. E 74, 022101 (2006).
.. [2] E. Bertin, M. Droz, G. Gregoire, J. Phys. A 42, 445001 (2009).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "noise_sigma",
    "bdg_dimensionless",
    "bdg_constants",
    "kinetic_linear_form",
    "units",
    "tumble_rate",
    "kinetic_coefficients",
    "kinetic_local",
    "bdg_onset_sigma",
    "rotational_diffusion",
    "kinetic_noise_strength",
]


def bdg_onset_sigma() -> float:
    """Noise s.d. above which no density orders: exp(-sigma_t^2/2) = 2/3 (BDG 2006)."""
    return math.sqrt(2.0 * math.log(1.5))


def noise_sigma(noise: float, noise_kind: str) -> float:
    """Equivalent wrapped-Gaussian s.d. of the particle noise (first circular moment).

    Returns ``inf`` when the first moment vanishes (eta = 1 angular noise).
    """
    x = math.pi * noise
    if noise_kind == "gaussian":
        return x
    moment = 1.0 if x == 0 else math.sin(x) / x
    if moment <= 0:
        return math.inf
    return math.sqrt(-2.0 * math.log(moment))


def bdg_dimensionless(rho, sigma, sigma0, lam):
    """BDG coefficients in BDG units (v0 = 1, 2 d0 v0 = 1).

    Parameters
    ----------
    rho : float or ndarray
        Density in BDG units.
    sigma, sigma0 : float
        S.d. of the collision noise and of the self-diffusion noise.
    lam : float
        Self-diffusion (tumble) rate in BDG units.

    Returns
    -------
    dict
        nu, gamma, kappa, mu, xi (arrays shaped like ``rho``).
    """
    rho = np.asarray(rho, dtype=float)
    k = bdg_constants(sigma, sigma0, lam)
    nu = 0.25 / (k["nu_a"] + k["nu_b"] * rho)
    return {"nu": nu, "gamma": k["gamma_per_nu"] * nu, "kappa": k["kappa_per_nu"] * nu,
            "mu": k["mu_slope"] * rho + k["mu_offset"], "xi": k["xi_per_nu"] * nu}


def bdg_constants(sigma, sigma0, lam) -> dict:
    """The density-independent factors of the BDG coefficients (BDG units).

    nu = 1/4 (nu_a + nu_b rho)^-1; gamma, kappa and xi are nu times ``*_per_nu``;
    mu = mu_slope rho + mu_offset (the formulas of :func:`bdg_dimensionless`).
    """
    e2 = math.exp(-2.0 * sigma**2)
    eh = math.exp(-0.5 * sigma**2)
    return {
        "nu_a": lam * (1.0 - math.exp(-2.0 * sigma0**2)),
        "nu_b": (4.0 / math.pi) * (14.0 / 15.0 + (2.0 / 3.0) * e2),
        "gamma_per_nu": (8.0 / math.pi) * (16.0 / 15.0 + 2.0 * e2 - eh),
        "kappa_per_nu": (8.0 / math.pi) * (4.0 / 15.0 + 2.0 * e2 + eh),
        "xi_per_nu": (64.0 / math.pi**2) * (eh - 0.4) * (1.0 / 3.0 + e2),
        "mu_slope": (4.0 / math.pi) * (eh - 2.0 / 3.0),
        "mu_offset": -lam * (1.0 - math.exp(-0.5 * sigma0**2)),
    }


def kinetic_linear_form(cfg) -> dict:
    """Physical-unit constants of the local kinetic coefficients.

    With q(rho) = 1 / (q_a + q_b rho): alpha(rho) = alpha_slope rho + alpha_offset and
    beta, D_T, lambda1..3 = ``per_q[name]`` q(rho). Lets a solver evaluate
    :func:`kinetic_local` every step into preallocated buffers.
    """
    m = cfg.model
    length, tau = units(m)
    l2 = length**2
    sigma = noise_sigma(m.noise, m.noise_kind)
    k = bdg_constants(sigma, sigma, tumble_rate(cfg) * tau)
    nu_per_q = 0.25  # nu = 0.25 q in BDG units
    return {
        "q_a": k["nu_a"],
        "q_b": k["nu_b"] * l2,
        "alpha_slope": k["mu_slope"] * l2 / tau,
        "alpha_offset": k["mu_offset"] / tau,
        "per_q": {
            "beta": nu_per_q * k["xi_per_nu"] * l2 * l2 / tau,
            "D_T": nu_per_q * l2 / tau,
            "lambda1": nu_per_q * k["gamma_per_nu"] * l2 * m.speed,
            "lambda2": nu_per_q * k["kappa_per_nu"] * l2 * m.speed,
            "lambda3": -0.5 * nu_per_q * k["kappa_per_nu"] * l2 * m.speed,
        },
    }


def units(model) -> tuple[float, float]:
    """(L*, T*): BDG length and time units in the physical units of ``[model]``."""
    length = 2.0 * model.radius
    return length, length / model.speed


def tumble_rate(cfg) -> float:
    """Self-diffusion rate lambda in physical 1/time."""
    lam = cfg.continuum.kinetic_lambda
    return 1.0 / cfg.agents.dt if lam == "auto" else float(lam)


def rotational_diffusion(cfg) -> float:
    """Rotational diffusion D_r = s2 / (2 agents.dt) of the particle headings.

    s2 is the small-angle variance of one noise kick: (pi eta)^2 / 3 for the angular
    (uniform) and vectorial kinds, (pi eta)^2 for the gaussian kind.
    """
    m = cfg.model
    x = math.pi * m.noise
    s2 = x * x if m.noise_kind == "gaussian" else x * x / 3.0
    return s2 / (2.0 * cfg.agents.dt)


def kinetic_noise_strength(cfg) -> float:
    """``noise_strength`` in kinetic mode: ``continuum.kinetic_noise`` resolved.

    "auto" gives D_r rho0 / 2 (module docstring); a number is used as it is.
    """
    val = cfg.continuum.kinetic_noise
    if val == "auto":
        return 0.5 * rotational_diffusion(cfg) * cfg.model.density
    return float(val)


def kinetic_local(cfg, rho):
    """Kinetic coefficients evaluated at the local density ``rho`` (physical units).

    Parameters
    ----------
    cfg : Config
    rho : float or (ny, nx) ndarray

    Returns
    -------
    dict
        ``alpha`` (= alpha(rho), the full local growth rate), ``beta``, ``D_T``,
        ``lambda1``, ``lambda2``, ``lambda3`` shaped like ``rho``; ``pressure`` (tuple),
        ``D_B``, ``D_2``, ``D_rho``, ``noise_strength`` (floats).
    """
    m = cfg.model
    length, tau = units(m)
    sigma = noise_sigma(m.noise, m.noise_kind)
    lam = tumble_rate(cfg) * tau
    c = bdg_dimensionless(np.asarray(rho, dtype=float) * length**2, sigma, sigma, lam)
    l2 = length**2
    return {
        "alpha": c["mu"] / tau,
        "beta": c["xi"] * l2 * l2 / tau,
        "D_T": c["nu"] * l2 / tau,
        "lambda1": c["gamma"] * l2 * m.speed,
        "lambda2": c["kappa"] * l2 * m.speed,
        "lambda3": -0.5 * c["kappa"] * l2 * m.speed,
        "pressure": (0.5 * m.speed,),
        "D_B": 0.0,
        "D_2": 0.0,
        "D_rho": float(cfg.continuum.kinetic_D_rho),
        "noise_strength": kinetic_noise_strength(cfg),
    }


def kinetic_coefficients(cfg) -> dict:
    """Kinetic coefficients at the mean density, in the table form of GUIDE section 3.

    ``alpha_rho`` is the exact slope d alpha / d rho (mu is linear in rho); the
    coefficients that depend on rho through nu are given at rho0.
    """
    at = kinetic_local(cfg, cfg.model.density)
    out = {k: (float(v) if not isinstance(v, tuple) else list(v)) for k, v in at.items()}
    out["alpha_rho"] = kinetic_linear_form(cfg)["alpha_slope"]
    order = ["alpha", "alpha_rho", "beta", "pressure", "D_T", "D_B", "D_2", "lambda1",
             "lambda2", "lambda3", "D_rho", "noise_strength"]
    return {k: out[k] for k in order}
