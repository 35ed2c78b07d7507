"""Geometry shared by both engines and by coarse-graining.

The domain is the rectangle [0, Lx] x [0, Ly], periodic in x; periodic in y too, or
bounded by walls at y = 0 and y = Ly ("channel"); minus disjoint disc obstacles.
Grids are cell-centred: x_i = (i + 1/2) Lx / nx, so channel walls sit on cell faces.

The numba kernels (``*_kernel``) are pure functions on arrays and scalars so that the
particle engine's compiled loops can call them; the plain-Python functions wrap them for
numpy arrays.

Wall rule (particles): specular reflection. A particle that crosses y = 0 or y = Ly is
mirrored back (y -> -y or 2 Ly - y) and its heading mirrored (theta -> -theta). A particle
that ends a step inside a disc is mirrored through the disc surface along the radial line
(distance d from the centre becomes 2 r - d) and the radial component of its heading is
reversed. With speed * dt < radius (enforced by the config) a particle crosses at most
one surface per step; the reflection is repeated (at most 4 times) if a mirror lands it
in another solid.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

__all__ = [
    "Geometry",
    "geometry_from_config",
    "grid_coords",
    "grid_mask",
    "inside",
    "wall_distance",
    "reflect",
    "minimum_image",
    "reflect_kernel",
    "inside_kernel",
    "wrap_kernel",
]


@dataclass(frozen=True)
class Geometry:
    """Domain geometry in array form.

    Attributes
    ----------
    lx, ly : float
        Box size.
    channel : bool
        Walls at y = 0 and y = Ly (else periodic in y).
    centers : (M, 2) ndarray
        Obstacle centres.
    radii : (M,) ndarray
        Obstacle radii.
    """

    lx: float
    ly: float
    channel: bool
    centers: np.ndarray
    radii: np.ndarray

    @property
    def periodic(self) -> bool:
        """True for a fully periodic box without obstacles."""
        return not self.channel and len(self.radii) == 0

    def fluid_area(self) -> float:
        """Area of the domain not covered by obstacles (discs are disjoint)."""
        return self.lx * self.ly - float(np.pi * np.sum(self.radii**2))


def geometry_from_config(domain) -> Geometry:
    """:class:`Geometry` from a ``DomainConfig`` (or a whole ``Config``)."""
    domain = getattr(domain, "domain", domain)
    centers = np.array([ob.center for ob in domain.obstacles], dtype=float).reshape(-1, 2)
    radii = np.array([ob.radius for ob in domain.obstacles], dtype=float)
    return Geometry(float(domain.size[0]), float(domain.size[1]),
                    domain.boundary == "channel", centers, radii)


def grid_coords(geom: Geometry, nx: int, ny: int) -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre coordinates ``x : (nx,)``, ``y : (ny,)``."""
    x = (np.arange(nx) + 0.5) * (geom.lx / nx)
    y = (np.arange(ny) + 0.5) * (geom.ly / ny)
    return x, y


def minimum_image(d, length):
    """Periodic minimum-image displacement."""
    return d - length * np.round(d / length)


def inside(geom: Geometry, x, y) -> np.ndarray:
    """True where (x, y) lies in the fluid (inside the box, outside every disc)."""
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    return wall_distance(geom, x, y) > 0


def wall_distance(geom: Geometry, x, y) -> np.ndarray:
    """Distance to the nearest solid surface, negative inside a solid.

    ``inf`` everywhere for a periodic box without obstacles.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    dist = np.full(np.broadcast(x, y).shape, np.inf)
    if geom.channel:
        dist = np.minimum(dist, np.minimum(y, geom.ly - y))
    for (cx, cy), r in zip(geom.centers, geom.radii, strict=True):
        ddx = minimum_image(x - cx, geom.lx)
        ddy = y - cy if geom.channel else minimum_image(y - cy, geom.ly)
        dist = np.minimum(dist, np.hypot(ddx, ddy) - r)
    return dist


def grid_mask(geom: Geometry, nx: int, ny: int) -> np.ndarray:
    """Fluid mask ``(ny, nx)`` of cell centres (True = fluid)."""
    x, y = grid_coords(geom, nx, ny)
    return inside(geom, x[None, :], y[:, None])


@numba.njit(cache=True)
def wrap_kernel(v, length):
    """Wrap a coordinate into [0, length)."""
    v = v % length
    if v >= length:  # -tiny % L can round to L
        v -= length
    return v


@numba.njit(cache=True)
def inside_kernel(x, y, lx, ly, channel, centers, radii):
    """Scalar fluid test used inside compiled loops."""
    if channel and (y <= 0.0 or y >= ly):
        return False
    for k in range(radii.shape[0]):
        ddx = x - centers[k, 0]
        ddx -= lx * np.round(ddx / lx)
        ddy = y - centers[k, 1]
        if not channel:
            ddy -= ly * np.round(ddy / ly)
        if ddx * ddx + ddy * ddy <= radii[k] * radii[k]:
            return False
    return True


@numba.njit(cache=True)
def reflect_kernel(x, y, theta, lx, ly, channel, centers, radii):
    """Specular reflection of one particle back into the fluid.

    Returns the corrected ``(x, y, theta)``; x is wrapped into [0, Lx) and, for a
    periodic y, y into [0, Ly).
    """
    for _ in range(4):
        moved = False
        if channel:
            if y < 0.0:
                y = -y
                theta = -theta
                moved = True
            elif y > ly:
                y = 2.0 * ly - y
                theta = -theta
                moved = True
            if y <= 0.0 or y >= ly:  # landing exactly on a wall: nudge inside
                y = min(max(y, 1e-12 * ly), ly * (1.0 - 1e-12))
        for k in range(radii.shape[0]):
            ddx = x - centers[k, 0]
            ddx -= lx * np.round(ddx / lx)
            ddy = y - centers[k, 1]
            if not channel:
                ddy -= ly * np.round(ddy / ly)
            d2 = ddx * ddx + ddy * ddy
            r = radii[k]
            if d2 < r * r:
                d = np.sqrt(d2)
                if d == 0.0:
                    nx_, ny_ = np.cos(theta), np.sin(theta)
                    nx_, ny_ = -nx_, -ny_
                else:
                    nx_, ny_ = ddx / d, ddy / d
                shift = 2.0 * r - d - d
                x += nx_ * shift
                y += ny_ * shift
                ex, ey = np.cos(theta), np.sin(theta)
                dot = ex * nx_ + ey * ny_
                if dot < 0.0:
                    ex -= 2.0 * dot * nx_
                    ey -= 2.0 * dot * ny_
                theta = np.arctan2(ey, ex)
                moved = True
        x = wrap_kernel(x, lx)
        if not channel:
            y = wrap_kernel(y, ly)
        if not moved:
            break
    if theta <= -np.pi:
        theta += 2.0 * np.pi
    elif theta > np.pi:
        theta -= 2.0 * np.pi
    return x, y, theta


def reflect(geom: Geometry, x, y, theta):
    """Vectorised :func:`reflect_kernel` for ``(N,)`` arrays; returns new arrays."""
    x = np.array(x, dtype=float)
    y = np.array(y, dtype=float)
    theta = np.array(theta, dtype=float)
    _reflect_all(x, y, theta, geom.lx, geom.ly, geom.channel, geom.centers, geom.radii)
    return x, y, theta


@numba.njit(cache=True)
def _reflect_all(x, y, theta, lx, ly, channel, centers, radii):
    for i in range(x.shape[0]):
        x[i], y[i], theta[i] = reflect_kernel(x[i], y[i], theta[i], lx, ly, channel,
                                              centers, radii)
