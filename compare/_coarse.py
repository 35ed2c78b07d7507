"""Coarse-graining of particle snapshots onto the continuum grid.

Rules (documented contract):

* Cloud-in-cell (bilinear) weights onto the cell-centred grid of
  :func:`crossflock._geometry.grid_coords`; periodic wrap in x, and in y unless the
  domain is a channel, where weights that would cross a wall are clamped onto the wall
  cell (no mass leaves through a wall).
* Weight landing on a solid (obstacle) cell is dropped and the particle's remaining
  weights rescaled to one, so every particle deposits exactly one unit onto fluid cells.
* ``rho`` = weight / cell area, ``px``/``py`` = weighted sum of cos/sin theta / cell area.
* ``cell_count`` (extra variable): the exact integer number of particles per cell (the
  cell containing the particle, or the nearest fluid cell when that cell's centre is
  solid), never smoothed; :func:`crossflock.compare.observe` takes S(k) and number
  fluctuations from it, so they carry no cloud-in-cell smearing.
* Optional Gaussian smoothing of standard deviation ``smoothing`` (length units):
  spectral (exact Gaussian multiplier) in a fully periodic box; otherwise the
  mass-conserving normalised convolution ``m * G(f / G(m))`` with the fluid mask ``m``
  (G symmetric, so the total is unchanged and nothing is smeared into solids).
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from scipy import ndimage
from scipy.spatial import cKDTree

from crossflock._build import annotate, field_dataset
from crossflock._errors import InputError
from crossflock._geometry import Geometry, geometry_from_config, grid_coords, grid_mask
from crossflock._io import dataset_config

from ._kernels import cic_deposit_kernel, ngp_count_kernel

__all__ = ["coarse_grain", "deposit", "cell_counts", "smooth", "fallback_map",
           "polar_order", "CELL_COUNT_ATTRS"]

CELL_COUNT_ATTRS = ("exact particle number per cell (nearest grid point)", "1")


def fallback_map(geom: Geometry, fluid: np.ndarray) -> np.ndarray:
    """Nearest fluid cell (flat index) of every solid cell; -1 on fluid cells.

    Parameters
    ----------
    geom : Geometry
    fluid : (ny, nx) bool ndarray

    Returns
    -------
    (ny, nx) int64 ndarray
    """
    ny, nx = fluid.shape
    out = np.full((ny, nx), -1, dtype=np.int64)
    if fluid.all():
        return out
    if not fluid.any():
        raise InputError("the grid has no fluid cell (obstacles cover the whole domain)")
    x, y = grid_coords(geom, nx, ny)
    xx, yy = np.meshgrid(x, y)
    # A y box three times the height never wraps a distance below Ly: non-periodic in y.
    box = [geom.lx, 3.0 * geom.ly if geom.channel else geom.ly]
    pts = np.column_stack([xx.ravel(), yy.ravel()])
    flat_fluid = np.flatnonzero(fluid.ravel())
    tree = cKDTree(pts[flat_fluid], boxsize=box)
    solid = np.flatnonzero(~fluid.ravel())
    _, idx = tree.query(pts[solid])
    out.ravel()[solid] = flat_fluid[idx]
    return out


def _positions(x, y, theta=None):
    arrays = [np.ascontiguousarray(a, dtype=np.float64) for a in (x, y)]
    if theta is not None:
        arrays.append(np.ascontiguousarray(theta, dtype=np.float64))
    shape = arrays[0].shape
    if arrays[0].ndim != 1 or any(a.shape != shape for a in arrays):
        raise InputError(
            f"particle arrays must be 1-D and of equal length (got shapes "
            f"{[a.shape for a in arrays]})"
        )
    if not all(np.isfinite(a).all() for a in arrays):
        raise InputError("particle positions or headings contain NaN or Inf")
    return arrays


def deposit(geom: Geometry, nx: int, ny: int, x, y, theta, *, fluid=None, fallback=None):
    """Cloud-in-cell weights, cos and sin sums of one snapshot.

    Parameters
    ----------
    geom : Geometry
    nx, ny : int
        Grid size.
    x, y, theta : (N,) ndarray
    fluid : (ny, nx) bool ndarray, optional
        Fluid mask (default :func:`grid_mask`).
    fallback : (ny, nx) int64 ndarray, optional
        From :func:`fallback_map` (computed when not given).

    Returns
    -------
    counts, csum, ssum : (ny, nx) ndarray
        Particle weight per cell (sums to N), sum of cos(theta), sum of sin(theta).
    """
    x, y, theta = _positions(x, y, theta)
    fluid = grid_mask(geom, nx, ny) if fluid is None else np.asarray(fluid, dtype=bool)
    if fallback is None:
        fallback = fallback_map(geom, fluid)
    counts = np.zeros((ny, nx))
    csum = np.zeros((ny, nx))
    ssum = np.zeros((ny, nx))
    cic_deposit_kernel(x, y, theta, float(geom.lx), float(geom.ly), bool(geom.channel),
                       not bool(fluid.all()), fluid.astype(np.uint8), fallback,
                       counts, csum, ssum)
    return counts, csum, ssum


def cell_counts(geom: Geometry, nx: int, ny: int, x, y, *, fluid=None, fallback=None):
    """Exact integer particle counts per cell, ``(ny, nx)`` float ndarray.

    A particle is counted in the cell that contains it, or, when that cell's centre is
    solid, in the nearest fluid cell (so the total is exactly N).
    """
    x, y = _positions(x, y)
    fluid = grid_mask(geom, nx, ny) if fluid is None else np.asarray(fluid, dtype=bool)
    if fallback is None:
        fallback = fallback_map(geom, fluid)
    counts = np.zeros((ny, nx))
    ngp_count_kernel(x, y, float(geom.lx), float(geom.ly), bool(geom.channel), fallback,
                     counts)
    return counts


def smooth(fields: np.ndarray, sigma: float, geom: Geometry, fluid: np.ndarray):
    """Gaussian smoothing of ``(..., ny, nx)`` fields that keeps every total.

    Parameters
    ----------
    fields : (..., ny, nx) ndarray
    sigma : float
        Standard deviation in length units (0 returns a copy).
    geom : Geometry
    fluid : (ny, nx) bool ndarray

    Returns
    -------
    (..., ny, nx) ndarray
    """
    fields = np.array(fields, dtype=float)
    if sigma == 0:
        return fields
    ny, nx = fields.shape[-2:]
    dx, dy = geom.lx / nx, geom.ly / ny
    if not geom.channel and fluid.all():
        kx = 2 * np.pi * np.fft.fftfreq(nx, dx)
        ky = 2 * np.pi * np.fft.fftfreq(ny, dy)
        mult = np.exp(-0.5 * sigma**2 * (kx[None, :] ** 2 + ky[:, None] ** 2))
        return np.fft.ifft2(np.fft.fft2(fields) * mult).real
    m = fluid.astype(float)
    sig = (sigma / dy, sigma / dx)
    mode = ("constant" if geom.channel else "wrap", "wrap")

    def g(a):
        return ndimage.gaussian_filter(a, sig, mode=mode, truncate=4.0)

    gm = g(m)
    out = np.empty_like(fields)
    flat_in = fields.reshape(-1, ny, nx)
    flat_out = out.reshape(-1, ny, nx)
    for i in range(flat_in.shape[0]):
        ratio = np.where(fluid, flat_in[i] / np.where(fluid, gm, 1.0), 0.0)
        flat_out[i] = m * g(ratio)
    return out


def polar_order(rho, px, py) -> np.ndarray:
    """``|integral w| / integral rho`` of ``(T, ny, nx)`` fields, ``(T,)``."""
    mass = rho.sum(axis=(-2, -1))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.hypot(px.sum(axis=(-2, -1)), py.sum(axis=(-2, -1))) / mass


def coarse_grain(ds: xr.Dataset, *, grid=None, smoothing=None) -> xr.Dataset:
    """Field Dataset of a particle run's snapshots.

    Parameters
    ----------
    ds : xarray.Dataset
        Particle run with ``x``, ``y``, ``theta`` over (time, particle).
    grid : (int, int), optional
        ``(nx, ny)``; default ``continuum.grid`` of the run's config.
    smoothing : float, optional
        Gaussian smoothing length; default ``compare.smoothing``.

    Returns
    -------
    xarray.Dataset
        Field run (``rho``, ``px``, ``py`` over (time, y, x), ``order``, ``mask``) with
        ``engine = "agents-coarse-grained"``, plus ``cell_count`` (exact counts per
        cell) and the attributes ``smoothing`` and ``source_engine``.

    Raises
    ------
    InputError
        When the run has no snapshots or the grid/smoothing is invalid.
    """
    if ds.attrs.get("crossflock_kind") != "particles":
        raise InputError(
            f"coarse_grain needs a particle run (got crossflock_kind "
            f"{ds.attrs.get('crossflock_kind')!r})"
        )
    if not all(v in ds for v in ("x", "y", "theta")):
        raise InputError("particle run has no snapshots (x, y, theta); rerun with "
                         "agents.snapshots = true")
    cfg = dataset_config(ds)
    nx, ny = cfg.continuum.grid if grid is None else grid
    if int(nx) != nx or int(ny) != ny or nx < 1 or ny < 1:
        raise InputError(f"grid must be two positive integers [nx, ny] (got {grid!r})")
    nx, ny = int(nx), int(ny)
    sigma = cfg.compare.smoothing if smoothing is None else float(smoothing)
    if not np.isfinite(sigma) or sigma < 0:
        raise InputError(f"smoothing must be a non-negative length (got {smoothing!r})")
    geom = geometry_from_config(cfg)
    fluid = grid_mask(geom, nx, ny)
    fallback = fallback_map(geom, fluid)
    xs, ys, ths = (np.asarray(ds[v].values, dtype=float) for v in ("x", "y", "theta"))
    nt = xs.shape[0]
    out = np.zeros((3, nt, ny, nx))
    exact = np.zeros((nt, ny, nx))
    for t in range(nt):
        out[:, t] = deposit(geom, nx, ny, xs[t], ys[t], ths[t], fluid=fluid,
                            fallback=fallback)
        exact[t] = cell_counts(geom, nx, ny, xs[t], ys[t], fluid=fluid, fallback=fallback)
    out = smooth(out, sigma, geom, fluid)
    area = (geom.lx / nx) * (geom.ly / ny)
    rho, px, py = out / area
    x, y = grid_coords(geom, nx, ny)
    fields = field_dataset(cfg, ds["time"].values, x, y, rho, px, py,
                           polar_order(rho, px, py), mask=fluid,
                           engine="agents-coarse-grained", smoothing=sigma,
                           source_engine=str(ds.attrs.get("engine", "agents")))
    fields["cell_count"] = (("time", "y", "x"), exact)
    return annotate(fields, {"cell_count": CELL_COUNT_ATTRS})
