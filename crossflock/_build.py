"""The one thin layer that turns arrays into xarray Datasets.

Engines and analysis code compute with plain ndarrays and call these builders to get
Datasets that follow the output contract (GUIDE section 4): every variable has a
``long_name`` and ``units``; global attributes carry the resolved config as TOML,
the version, ``Conventions`` and a ``crossflock_kind`` tag the reader checks.
"""

from __future__ import annotations

import datetime as _dt

import numpy as np
import xarray as xr

from ._config import Config, config_to_toml
from ._version import FORMAT_VERSION, __version__

__all__ = [
    "KINDS",
    "VARIABLE_ATTRS",
    "global_attrs",
    "annotate",
    "particle_dataset",
    "field_dataset",
]

KINDS = ("particles", "fields", "observables", "mismatch", "sweep", "reference")

# long_name, units for every variable crossflock writes; builders and analysis code use
# this one table so names never drift between engines.
VARIABLE_ATTRS = {
    "time": ("simulated time", "R / v0 time units"),
    "particle": ("particle index", "1"),
    "x": ("x position", "R"),
    "y": ("y position", "R"),
    "theta": ("heading angle in (-pi, pi]", "rad"),
    "order": ("polar order parameter |sum P| / N", "1"),
    "order_step": ("polar order parameter at every step", "1"),
    "step_time": ("time of every step", "R / v0 time units"),
    "rho": ("number density", "R-2"),
    "px": ("polarization density, x component", "R-2"),
    "py": ("polarization density, y component", "R-2"),
    "mask": ("fluid mask (1 = fluid, 0 = solid)", "1"),
    "k": ("wavenumber", "R-1"),
    "box": ("sub-box side length", "R"),
}


def global_attrs(cfg: Config, kind: str, title: str, **extra) -> dict:
    """Global attributes of a crossflock file."""
    if kind not in KINDS:
        raise ValueError(f"unknown dataset kind {kind!r}")
    now = _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    attrs = {
        "title": title,
        "Conventions": "CF-1.11",
        "crossflock_version": __version__,
        "crossflock_format": FORMAT_VERSION,
        "crossflock_kind": kind,
        "history": f"{now} created by crossflock {__version__}",
        "config": config_to_toml(cfg) if cfg is not None else "",
    }
    attrs.update(extra)
    return attrs


def annotate(ds: xr.Dataset, extra: dict | None = None) -> xr.Dataset:
    """Fill in ``long_name``/``units`` from :data:`VARIABLE_ATTRS` (and ``extra``)."""
    table = dict(VARIABLE_ATTRS)
    if extra:
        table.update(extra)
    for name in list(ds.variables):
        if name in table:
            long_name, units = table[name]
            ds[name].attrs.setdefault("long_name", long_name)
            ds[name].attrs.setdefault("units", units)
        else:
            ds[name].attrs.setdefault("long_name", str(name).replace("_", " "))
            ds[name].attrs.setdefault("units", "1")
    return ds


def particle_dataset(cfg: Config, time, order, *, x=None, y=None, theta=None,
                     step_time=None, order_step=None, engine="agents", **attrs):
    """Particle run Dataset.

    Parameters
    ----------
    cfg : Config
    time : (T,) ndarray
        Sample times.
    order : (T,) ndarray
        Polar order at the sample times.
    x, y, theta : (T, N) ndarray, optional
        Snapshots (all three or none).
    step_time, order_step : (S,) ndarray, optional
        Order at every step.
    """
    data = {"order": ("time", np.asarray(order, dtype=float))}
    coords = {"time": np.asarray(time, dtype=float)}
    if x is not None:
        n = np.asarray(x).shape[1]
        coords["particle"] = np.arange(n, dtype=np.int64)
        data["x"] = (("time", "particle"), np.asarray(x, dtype=float))
        data["y"] = (("time", "particle"), np.asarray(y, dtype=float))
        data["theta"] = (("time", "particle"), np.asarray(theta, dtype=float))
    if order_step is not None:
        coords["step_time"] = np.asarray(step_time, dtype=float)
        data["order_step"] = ("step_time", np.asarray(order_step, dtype=float))
    ds = xr.Dataset(data, coords=coords)
    n_particles = attrs.pop("n_particles", None)
    ds.attrs = global_attrs(cfg, "particles", "crossflock particle run", engine=engine,
                            **attrs)
    if n_particles is not None:
        ds.attrs["n_particles"] = int(n_particles)
    return annotate(ds)


def field_dataset(cfg: Config, time, x, y, rho, px, py, order, *, mask=None,
                  engine="continuum", **attrs):
    """Field run Dataset (continuum output or coarse-grained particles).

    Parameters
    ----------
    time : (T,) ndarray
    x : (nx,) ndarray
    y : (ny,) ndarray
        Coordinates of the grid points actually used.
    rho, px, py : (T, ny, nx) ndarray
    order : (T,) ndarray
    mask : (ny, nx) bool ndarray, optional
        Fluid mask (walls and obstacles); stored as 0/1.
    """
    dims = ("time", "y", "x")
    data = {
        "rho": (dims, np.asarray(rho, dtype=float)),
        "px": (dims, np.asarray(px, dtype=float)),
        "py": (dims, np.asarray(py, dtype=float)),
        "order": ("time", np.asarray(order, dtype=float)),
    }
    if mask is not None:
        data["mask"] = (("y", "x"), np.asarray(mask, dtype=np.int8))
    coords = {"time": np.asarray(time, dtype=float), "y": np.asarray(y, dtype=float),
              "x": np.asarray(x, dtype=float)}
    ds = xr.Dataset(data, coords=coords)
    ds.attrs = global_attrs(cfg, "fields", f"crossflock field run ({engine})",
                            engine=engine, **attrs)
    return annotate(ds)
