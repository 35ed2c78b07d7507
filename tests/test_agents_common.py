"""Shared helpers of the particle-engine tests (imported by the other test_agents_*).

``make_cfg`` builds a small valid config: the continuum grid and time step are only
chosen to pass the shared validation, the particle engine ignores them.
"""

from __future__ import annotations

import math

import numpy as np

import crossflock


def make_cfg(size=(8.0, 8.0), radius=1.0, **overrides):
    """A validated Config for a box ``size`` with dotted-key ``overrides``.

    Keyword names use ``__`` for the dot: ``model__noise=0.3``.
    """
    lx, ly = size
    # grid spacing <= radius and <= half of every obstacle radius (shared validation)
    spacing = min([radius] + [0.5 * ob["radius"]
                              for ob in overrides.get("domain__obstacles", [])])
    nx = max(8, math.ceil(lx / spacing) + 1)
    ny = max(8, math.ceil(ly / spacing) + 1)
    mapping = {
        "domain.size": [float(lx), float(ly)],
        "model.radius": float(radius),
        "model.speed": 0.5 * float(radius),
        "run.duration": 10.0,
        "run.sample_every": 1.0,
        "continuum.grid": [nx, ny],
        "continuum.dt": 1e-4,
    }
    mapping.update({k.replace("__", "."): v for k, v in overrides.items()})
    return crossflock.load_config(None, mapping)


def brute_sums(x, y, theta, box, radius, channel=False):
    """O(N^2) numpy reference of the neighbour sums (minimum image, i included)."""
    lx, ly = box
    dx = x[:, None] - x[None, :]
    dx -= lx * np.round(dx / lx)
    dy = y[:, None] - y[None, :]
    if not channel:
        dy -= ly * np.round(dy / ly)
    near = dx * dx + dy * dy < radius * radius
    return near @ np.cos(theta), near @ np.sin(theta), near.sum(axis=1)


def test_make_cfg_builds_the_requested_box():
    cfg = make_cfg((5.0, 3.0), 1.5, model__noise=0.3)
    assert tuple(cfg.domain.size) == (5.0, 3.0)
    assert cfg.model.radius == 1.5 and cfg.model.noise == 0.3
