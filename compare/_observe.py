"""``observe``: the same observables, computed the same way, for every kind of run.

Inputs: a particle run (with or without snapshots), a coarse-grained field run or a
continuum field run. Samples before ``t0 + compare.transient * (t_end - t0)`` are
discarded (see :mod:`crossflock.compare._stats`).

Which data each observable uses:

* ``order*``, ``binder*``: the run's own ``order`` series (exact particle order for
  particle runs); always available.
* ``structure_factor``, ``gnf_*``: particle number per cell. For particles (a particle
  run with snapshots, or its :func:`coarse_grain` output, which carries ``cell_count``)
  these are the *exact* integer counts per cell, so the shot-noise level of S(k) is
  exactly 1 and sub-box counts are exact; for continuum fields ``rho * cell area``.
  (Cloud-in-cell ``rho`` would carry the window ``prod_d (1 - 2/3 sin^2(k_d h_d / 2))``
  on uncorrelated particles and smear counts across the edges of small boxes, which
  lowers Delta N there and raises the fitted exponent.) The attribute
  ``counts_source`` says which was used.
* ``band_*``, ``correlation_length``, ``polarization_correlation``: the fields
  (particle runs with snapshots are coarse-grained first with :func:`coarse_grain`).

Without snapshots the count and field observables are NaN and the ``unavailable``
attribute says why.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from crossflock._build import annotate, global_attrs
from crossflock._errors import InputError
from crossflock._geometry import geometry_from_config, grid_mask
from crossflock._io import dataset_config

from ._bands import detect_band
from ._coarse import coarse_grain
from ._fluctuations import gnf_box_sizes, gnf_exponent
from ._stats import analysis_window, binder_with_error, mean_sem
from ._structure import (
    correlation_length,
    polarization_correlation,
    structure_factor_series,
)

__all__ = ["observe", "OBSERVABLE_ATTRS"]

OBSERVABLE_ATTRS = {
    "order_mean": ("time-averaged polar order after the transient", "1"),
    "order_sem": ("standard error of order_mean (autocorrelation time)", "1"),
    "order_tau": ("integrated autocorrelation time of the order", "R / v0 time units"),
    "n_effective": ("effective number of independent order samples n / tau", "1"),
    "n_samples": ("number of samples after the transient", "1"),
    "binder": ("Binder cumulant 1 - <phi^4> / (3 <phi^2>^2) of the order", "1"),
    "binder_err": ("blocked-jackknife error of the Binder cumulant", "1"),
    "structure_factor": ("radially averaged density structure factor S(k)", "1"),
    "structure_factor_err": ("standard error of S(k)", "1"),
    "gnf_mean": ("mean particle number in a sub-box", "1"),
    "gnf_std": ("standard deviation of the particle number in a sub-box", "1"),
    "gnf_box_cells": ("sub-box side in grid cells", "1"),
    "gnf_exponent": ("exponent of Delta N ~ <N>^exponent", "1"),
    "gnf_exponent_err": ("blocked-jackknife error of gnf_exponent", "1"),
    "band_present": ("travelling band detected (1) or not (0)", "1"),
    "band_wavelength": ("band wavelength", "R"),
    "band_speed": ("band speed along the mean polarization", "R / (R / v0 time units)"),
    "band_contrast": ("relative amplitude of the band's density modulation", "1"),
    "correlation_length": ("1/e length of the polarization correlation", "R"),
    "polarization_correlation": ("connected polarization density correlation", "1"),
    "r": ("distance", "R"),
}


def _counts_and_fields(ds, geom, keep):
    """(counts, fields Dataset or None, fluid, unavailable reason, counts source)."""
    kind = ds.attrs.get("crossflock_kind")
    sub = ds.isel(time=np.flatnonzero(keep))
    if kind == "particles":
        if not all(v in ds for v in ("x", "y", "theta")):
            return None, None, None, ("particle run has no snapshots (rerun with "
                                      "agents.snapshots = true)"), "none"
        sub = coarse_grain(sub)
    elif kind != "fields":
        raise InputError(
            f"observe needs a particle or field run (got crossflock_kind {kind!r})")
    for v in ("rho", "px", "py"):
        if v not in sub:
            raise InputError(f"field run lacks the variable {v!r}")
    nx, ny = sub.sizes["x"], sub.sizes["y"]
    fluid = sub["mask"].values.astype(bool) if "mask" in sub else grid_mask(geom, nx, ny)
    # Solid cells may hold NaN or junk in an engine's output: zero them once here.
    sub = sub.copy()
    for v in ("rho", "px", "py"):
        sub[v] = sub[v].where(fluid, 0.0)
    if "cell_count" in sub:
        return (sub["cell_count"].values, sub, fluid, "",
                "exact particle counts per cell")
    area = (geom.lx / nx) * (geom.ly / ny)
    return sub["rho"].values * area, sub, fluid, "", "rho * cell area"


def observe(ds: xr.Dataset) -> xr.Dataset:
    """Observables of one run.

    Parameters
    ----------
    ds : xarray.Dataset
        Particle run or field run (continuum or coarse-grained).

    Returns
    -------
    xarray.Dataset
        ``crossflock_kind = "observables"``; variables listed in
        :data:`OBSERVABLE_ATTRS` plus the ``order`` series; coordinates ``time``, ``k``,
        ``box`` (sub-box side, ``l sqrt(dx dy)``) and ``r``.

    Raises
    ------
    InputError
        Unknown kind, missing variables, or fewer than 4 samples after the transient.
    """
    cfg = dataset_config(ds)
    geom = geometry_from_config(cfg)
    if "order" not in ds or "time" not in ds.coords:
        raise InputError("run lacks the `order` time series")
    time = np.asarray(ds["time"].values, dtype=float)
    if time.size > 1 and not np.all(np.diff(time) > 0):
        raise InputError("run's time coordinate is not strictly increasing")
    keep = analysis_window(time, cfg.compare.transient)
    order = np.asarray(ds["order"].values, dtype=float)
    phi = order[keep]
    t_kept = time[keep]
    mean, sem, tau = mean_sem(phi)
    dt_sample = float(np.median(np.diff(t_kept))) if t_kept.size > 1 else np.nan
    binder, binder_err = binder_with_error(phi, tau)

    counts, fields, fluid, unavailable, counts_source = _counts_and_fields(ds, geom, keep)
    if fields is not None:
        nx, ny = fields.sizes["x"], fields.sizes["y"]
    else:
        nx, ny = cfg.continuum.grid
        fluid = grid_mask(geom, nx, ny)
    sizes = gnf_box_sizes(nx, ny, cfg.compare.gnf_sizes)
    box = sizes * np.sqrt((geom.lx / nx) * (geom.ly / ny))
    k, s_t = structure_factor_series(
        counts if counts is not None else np.ones((1, ny, nx)), geom.lx, geom.ly, fluid)
    zeros = np.zeros((1, ny, nx))
    if fields is not None:
        s_mean, s_err, _ = mean_sem(s_t)
        g_mean, g_std, g_exp, g_err = gnf_exponent(counts, sizes, fluid)
        rho, px, py = (fields[v].values for v in ("rho", "px", "py"))
        band = detect_band(t_kept, rho, px, py, geom.lx, geom.ly, fluid, geom.channel)
        r, corr = polarization_correlation(px, py, geom.lx, geom.ly, fluid, geom.channel)
        xi = correlation_length(r, corr)
    else:
        s_mean = s_err = np.full(k.size, np.nan)
        g_mean = g_std = np.full(sizes.size, np.nan)
        g_exp = g_err = np.nan
        band = {"present": np.nan, "wavelength": np.nan, "speed": np.nan,
                "contrast": np.nan, "axis": ""}
        r, _ = polarization_correlation(zeros, zeros, geom.lx, geom.ly, fluid,
                                        geom.channel)
        corr = np.full(r.size, np.nan)
        xi = np.nan

    data = {
        "order": ("time", order),
        "order_mean": mean,
        "order_sem": sem,
        "order_tau": tau * dt_sample,
        "n_effective": phi.size / tau,
        "n_samples": int(phi.size),
        "binder": binder,
        "binder_err": binder_err,
        "structure_factor": ("k", np.asarray(s_mean, dtype=float)),
        "structure_factor_err": ("k", np.asarray(s_err, dtype=float)),
        "gnf_mean": ("box", np.asarray(g_mean, dtype=float)),
        "gnf_std": ("box", np.asarray(g_std, dtype=float)),
        "gnf_box_cells": ("box", sizes.astype(np.int64)),
        "gnf_exponent": float(g_exp),
        "gnf_exponent_err": float(g_err),
        "band_present": float(band["present"]),
        "band_wavelength": float(band["wavelength"]),
        "band_speed": float(band["speed"]),
        "band_contrast": float(band["contrast"]),
        "correlation_length": float(xi),
        "polarization_correlation": ("r", np.asarray(corr, dtype=float)),
    }
    coords = {"time": time, "k": k, "box": box, "r": r}
    out = xr.Dataset(data, coords=coords)
    out.attrs = global_attrs(
        cfg, "observables", "crossflock observables",
        source_kind=str(ds.attrs.get("crossflock_kind")),
        engine=str(ds.attrs.get("engine", "")),
        analysis_start=float(t_kept[0]),
        transient=float(cfg.compare.transient),
        counts_source=counts_source,
        band_axis=str(band["axis"]),
        unavailable=(f"structure_factor, gnf_*, band_*, correlation_length: {unavailable}"
                     if unavailable else ""),
    )
    return annotate(out, OBSERVABLE_ATTRS)
