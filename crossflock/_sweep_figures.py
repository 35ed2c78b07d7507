"""Figures and the HTML summary of a sweep (phase diagram, bands, validity map)."""

from __future__ import annotations

import base64
import html
import io
from pathlib import Path

import numpy as np

from ._io import atomic_path, atomic_write_text

__all__ = ["write_figures"]

_PANELS = {
    "phase_diagram": [("agents_order_mean", "particles: polar order"),
                      ("agents_binder", "particles: Binder cumulant"),
                      ("continuum_order_mean", "continuum: polar order"),
                      ("continuum_binder", "continuum: Binder cumulant")],
    "bands": [("agents_band_present", "particles: band fraction"),
              ("continuum_band_present", "continuum: band fraction")],
    "validity_map": [("verdict_code", "verdict (1 holds, 0 unresolved, -1 fails)"),
                     ("mismatch_order_z", "order mismatch (standard errors)")],
}


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90, bbox_inches="tight")
    return buf.getvalue()


def _panel(ax, ds, var, title):
    dims = [d for d in ds[var].dims if d != "seed"]
    mean = ds[var].mean("seed", skipna=True) if "seed" in ds[var].dims else ds[var]
    if len(dims) == 1:
        x = ds[dims[0]].values
        ax.plot(x, mean.values, "o-")
        ax.set_xlabel(ds[dims[0]].attrs.get("config_key", dims[0]))
    else:
        xd, yd = dims[1], dims[0]
        img = mean.transpose(yd, xd, *dims[2:]).values
        while img.ndim > 2:
            img = img[..., 0]
        cmap = "RdYlGn" if var == "verdict_code" else "viridis"
        vmin, vmax = (-1, 1) if var == "verdict_code" else (None, None)
        xs, ys = ds[xd].values, ds[yd].values
        m = ax.pcolormesh(np.arange(len(xs)), np.arange(len(ys)), img, shading="nearest",
                          cmap=cmap, vmin=vmin, vmax=vmax)
        ax.set_xticks(np.arange(len(xs)), [f"{v:g}" if isinstance(v, float) else str(v)
                                           for v in xs], rotation=45)
        ax.set_yticks(np.arange(len(ys)), [f"{v:g}" if isinstance(v, float) else str(v)
                                           for v in ys])
        ax.set_xlabel(ds[xd].attrs.get("config_key", xd))
        ax.set_ylabel(ds[yd].attrs.get("config_key", yd))
        ax.figure.colorbar(m, ax=ax)
    ax.set_title(title, fontsize=9)


def write_figures(ds, outdir, summary) -> dict:
    """Write the PNG figures and ``summary.html``; returns {name: path}."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    outdir = Path(outdir)
    out, images = {}, {}
    for name, panels in _PANELS.items():
        panels = [(v, t) for v, t in panels if v in ds and np.isfinite(ds[v].values).any()]
        if not panels:
            continue
        fig, axes = plt.subplots(1, len(panels), figsize=(4.2 * len(panels), 3.6),
                                 squeeze=False)
        for ax, (var, title) in zip(axes[0], panels, strict=True):
            _panel(ax, ds, var, title)
        fig.tight_layout()
        data = _png(fig)
        plt.close(fig)
        path = outdir / f"{name}.png"
        with atomic_path(path, suffix=".png") as tmp:
            tmp.write_bytes(data)
        out[name] = path
        images[name] = base64.b64encode(data).decode()
    rows = "".join(
        f"<tr><td>{html.escape(k)}</td><td>{html.escape(v)}</td></tr>"
        for k, v in sorted(summary.failed.items()))
    body = [f"<h1>crossflock sweep</h1><p>{html.escape(summary.line())}</p>"]
    for name, b64 in images.items():
        body.append(f"<h2>{name.replace('_', ' ')}</h2>"
                    f"<img alt='{name}' src='data:image/png;base64,{b64}'>")
    if rows:
        body.append(f"<h2>failed tasks</h2><table border=1><tr><th>task</th><th>reason</th>"
                    f"</tr>{rows}</table>")
    page = ("<!DOCTYPE html><html><head><meta charset='utf-8'><title>crossflock sweep</title>"
            "</head><body>" + "".join(body) + "</body></html>")
    out["summary"] = atomic_write_text(outdir / "summary.html", page)
    return out
