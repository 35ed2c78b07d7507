"""Initial particle states.

Positions are uniform in the fluid: uniform draws in the box, rejected when they fall in
a solid (channel wall or obstacle, tested with the core's ``inside``), repeated in
batches until N are kept (deterministic for a given Generator).

Headings: "disordered" draws theta uniform in (-pi, pi]. "ordered" with target
polarization p draws theta uniform in the wedge [-pi a, pi a] around +x, with a in
[0, 1] solving sin(pi a) / (pi a) = p, since E[cos theta] = sin(pi a) / (pi a) and
E[sin theta] = 0 for that wedge: the expected polarization is p along +x (p = 1: all
headings 0; p = 0: uniform).
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import brentq

from crossflock._geometry import Geometry, inside

__all__ = ["uniform_positions", "initial_headings", "wedge_half_width"]


def uniform_positions(geom: Geometry, n: int, rng: np.random.Generator):
    """``x, y : (n,)`` uniform in the fluid of ``geom``."""
    xs, ys = [], []
    kept = 0
    frac = max(geom.fluid_area() / (geom.lx * geom.ly), 1e-3)
    while kept < n:
        m = int(1.1 * (n - kept) / frac) + 16
        x = rng.random(m) * geom.lx
        y = rng.random(m) * geom.ly
        ok = inside(geom, x, y) & (x < geom.lx) & (y < geom.ly)
        xs.append(x[ok])
        ys.append(y[ok])
        kept += int(ok.sum())
    return np.concatenate(xs)[:n], np.concatenate(ys)[:n]


def wedge_half_width(p: float) -> float:
    """``a`` in [0, 1] with sin(pi a) / (pi a) = p (a = 0 for p = 1)."""
    if p >= 1.0:
        return 0.0
    if p <= 0.0:
        return 1.0
    return float(brentq(lambda a: np.sinc(a) - p, 0.0, 1.0, xtol=1e-15))


def initial_headings(kind: str, polarization: float, n: int, rng: np.random.Generator):
    """``theta : (n,)`` in (-pi, pi] for ``run.initial`` = ``kind``."""
    u = rng.random(n)
    if kind == "disordered":
        return np.pi - 2.0 * np.pi * u  # u in [0, 1) -> (-pi, pi]
    a = wedge_half_width(polarization)
    return np.pi * a * (2.0 * u - 1.0)
