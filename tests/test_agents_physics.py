"""Particle engine against outside references (exact limits and Vicsek et al. 1995)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from test_agents_common import make_cfg

from crossflock.agents import simulate


def _order_samples(cfg):
    """Per-step polar order after the first step (t = 0 is the initial state)."""
    return simulate(cfg).order_step.values[1:]


def _all_to_all_cfg(kind, eta, steps):
    # Box 4 x 4, R = 4: minimum-image distances are at most 4 / sqrt(2) < R, so every
    # particle aligns with all N = 3 * 16 = 48 of them and takes the same mean heading
    # Theta; after each step theta_i = Theta + xi_i with fresh independent xi_i, so the
    # per-step order phi = |sum_i e(xi_i)| / N is an independent sample every step.
    return make_cfg((4.0, 4.0), 4.0, model__density=3.0, model__noise=eta,
                    model__noise_kind=kind, model__speed=1.0,
                    run__duration=float(steps), run__sample_every=float(steps),
                    agents__order_every="step")


def _check_second_moment(phi, rho, n):
    """<phi^2> = rho^2 + (1 - rho^2) / N for N i.i.d. headings of mean resultant rho.

    E|sum_i e(xi_i)|^2 = N + N (N - 1) rho^2 (independent xi_i with E e(xi) = rho),
    divided by N^2. Tolerance: 4 standard errors of the sample mean of phi^2.
    """
    p2 = phi**2
    expected = rho**2 + (1.0 - rho**2) / n
    se = p2.std(ddof=1) / math.sqrt(p2.size)
    assert abs(p2.mean() - expected) < 4 * se, (p2.mean(), expected, se)


@pytest.mark.parametrize("eta", [0.15, 0.35])
def test_all_to_all_wrapped_gaussian_order(eta):
    # Mardia & Jupp, Directional Statistics (2000), sec. 3.5.7: the wrapped normal of
    # s.d. sigma has mean resultant length rho = exp(-sigma^2 / 2); here sigma = pi eta.
    cfg = _all_to_all_cfg("gaussian", eta, 3000)
    phi = _order_samples(cfg)
    rho = math.exp(-((math.pi * eta) ** 2) / 2)
    _check_second_moment(phi, rho, 48)
    # first moment: <phi> -> rho up to O(1/N); 4 s.e. plus the finite-N bias bound
    # (1 - rho^2) / (2 N rho) from expanding sqrt(<phi^2>)
    se = phi.std(ddof=1) / math.sqrt(phi.size)
    assert abs(phi.mean() - rho) < 4 * se + (1 - rho**2) / (2 * 48 * rho)


def test_all_to_all_uniform_angular_order():
    # Uniform xi on [-pi eta, pi eta]: E e(xi) = sin(pi eta) / (pi eta) (elementary
    # integral; Mardia & Jupp sec. 3.5.2 for the circular uniform as eta -> 1).
    eta = 0.3
    phi = _order_samples(_all_to_all_cfg("angular", eta, 3000))
    _check_second_moment(phi, float(np.sinc(eta)), 48)


def test_full_angular_noise_gives_random_headings():
    # eta = 1: xi uniform on the whole circle, so headings are independent uniform
    # angles whatever the neighbours, and <phi^2> = 1/N (Mardia & Jupp: rho = 0).
    cfg = make_cfg((10.0, 10.0), 1.0, model__density=2.0, model__noise=1.0,
                   run__duration=1500.0, run__sample_every=1500.0,
                   agents__order_every="step")
    phi = _order_samples(cfg)
    _check_second_moment(phi, 0.0, 200)


def _late_order(noise, seed):
    # Vicsek et al. 1995 (PRL 75, 1226), Fig. 2a setting: N = 400, L = 10 (rho = 4);
    # here v0 = 0.5, dt = 1, disordered start, last 100 of 300 steps.
    cfg = make_cfg((10.0, 10.0), 1.0, model__density=4.0, model__noise=noise,
                   run__seed=seed, run__duration=300.0, run__sample_every=1.0)
    return simulate(cfg).order.values[-100:].mean()


def test_vicsek_low_noise_orders_high_noise_does_not():
    # Qualitative (Vicsek et al. 1995, Fig. 2a, read from memory): at rho = 4 and
    # eta_V = 2 pi eta = 0.63 the order is about 0.9; at eta_V = 5.65 it is close
    # to the random-heading value. Thresholds: ordered > 0.8; disordered below 4
    # times the random value sqrt(pi / (4 N)) = 0.044 (Rayleigh mean for N = 400).
    assert _late_order(0.1, seed=3) > 0.8
    assert _late_order(0.9, seed=3) < 4 * math.sqrt(math.pi / (4 * 400))


@pytest.mark.slow
@pytest.mark.parametrize("seed", [1, 2, 3, 4])
def test_vicsek_order_decreases_with_noise(seed):
    # Vicsek et al. 1995, Fig. 2a: phi decreases monotonically with eta at fixed rho
    # (differences here are many standard errors apart).
    values = [_late_order(eta, seed) for eta in (0.05, 0.3, 0.5, 0.9)]
    assert all(a > b for a, b in zip(values[:-1], values[1:], strict=True))


@pytest.mark.slow
def test_all_to_all_vectorial_limit():
    # Vectorial noise with all-to-all coupling: theta_i = arg(S + eta N e(xi_i)) with
    # S = N P e(Theta); for a steady |P| = phi the heading relative to Theta is
    # arg(phi + eta e(xi)), so phi solves phi = E cos(arg(phi + eta e(xi))) up to
    # O(1/N) (self-consistency, Gregoire & Chate 2004). Check at eta = 0.5: the
    # fixed point computed by quadrature.
    eta = 0.5
    xi = np.linspace(-np.pi, np.pi, 20001)
    phi_star = 1.0
    for _ in range(200):
        phi_star = np.trapezoid(np.cos(np.arctan2(eta * np.sin(xi), phi_star
                                                  + eta * np.cos(xi))), xi) / (2 * np.pi)
    cfg = make_cfg((4.0, 4.0), 4.0, model__density=30.0, model__noise=eta,
                   model__noise_kind="vectorial", model__speed=1.0,
                   run__duration=2000.0, run__sample_every=2000.0,
                   run__initial="ordered", agents__order_every="step")
    phi = simulate(cfg).order_step.values[200:]
    # correlated samples: compare with an error bar of 4 s.e. from 20 blocks, plus
    # the O(1/N) finite-size shift bound 1/N
    blocks = phi[: phi.size // 20 * 20].reshape(20, -1).mean(axis=1)
    se = blocks.std(ddof=1) / math.sqrt(20)
    assert abs(phi.mean() - phi_star) < 4 * se + 1.0 / 480
