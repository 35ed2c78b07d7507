"""Self-contained HTML report: figures as base64-embedded PNGs, tables, config."""

from __future__ import annotations

import base64
import html
import io
from pathlib import Path

import matplotlib

from ._mismatch import _labels

matplotlib.use("Agg")  # files only, never a display; must precede pyplot
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from crossflock._io import atomic_write_text  # noqa: E402

from ._coarse import coarse_grain  # noqa: E402

__all__ = ["write_report"]


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90, bbox_inches="tight")
    plt.close(fig)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img alt="figure" src="data:image/png;base64,{data}">'


def _last_field(ds):
    kind = ds.attrs.get("crossflock_kind")
    if kind == "fields":
        return ds.isel(time=-1)
    if kind == "particles" and all(v in ds for v in ("x", "y", "theta")):
        return coarse_grain(ds.isel(time=[-1])).isel(time=0)
    return None


def _block_mean(x, y, px, py, step):
    # Arrows show the polarization averaged over step x step cells: single cells are
    # too noisy to read.
    by, bx = len(y) // step, len(x) // step

    def blocks(a):
        return a[: by * step, : bx * step].reshape(by, step, bx, step).mean(axis=(1, 3))

    return (blocks(x[None, :] + 0 * y[:, None]), blocks(y[:, None] + 0 * x[None, :]),
            blocks(np.nan_to_num(px)), blocks(np.nan_to_num(py)))


def _snapshots(runs):
    fields = {name: f for name, f in ((n, _last_field(ds)) for n, ds in runs.items())
              if f is not None}
    if not fields:
        return "<p>No field snapshots (no field run and no particle snapshots).</p>"
    fig, axes = plt.subplots(1, len(fields), figsize=(4.4 * len(fields), 4), squeeze=False,
                             layout="constrained")
    for ax, (name, f) in zip(axes[0], fields.items(), strict=True):
        x, y = f["x"].values, f["y"].values
        rho = f["rho"].values
        im = ax.imshow(rho, origin="lower", cmap="viridis",
                       extent=(0, x[-1] + x[0], 0, y[-1] + y[0]))
        step = max(1, max(len(x), len(y)) // 16)
        ax.quiver(*_block_mean(x, y, f["px"].values, f["py"].values, step),
                  color="white", pivot="mid")
        ax.set_title(f"{name}: t = {float(f['time']):g}")
        ax.set_xlabel("x")
        ax.set_ylabel("y")
        fig.colorbar(im, ax=ax, shrink=0.8, label="rho")
    return _png(fig)


def _order(observables):
    fig, ax = plt.subplots(figsize=(7, 3.5))
    for name, obs in observables.items():
        ax.plot(obs["time"].values, obs["order"].values, label=name)
        start = obs.attrs.get("analysis_start")
        if start is not None:
            ax.axvline(float(start), color="grey", ls=":", lw=1)
    ax.set_xlabel("time")
    ax.set_ylabel("polar order")
    ax.set_ylim(0, 1.05)
    ax.legend()
    return _png(fig)


def _structure(observables):
    fig, ax = plt.subplots(figsize=(5.5, 4))
    for name, obs in observables.items():
        s = obs["structure_factor"].values
        if np.isfinite(s).any():
            ax.errorbar(obs["k"].values, s, yerr=obs["structure_factor_err"].values,
                        fmt=".-", ms=3, label=name)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("k")
    ax.set_ylabel("S(k)")
    ax.legend()
    return _png(fig)


def _gnf(observables):
    fig, ax = plt.subplots(figsize=(5.5, 4))
    anchor = None
    for name, obs in observables.items():
        m, s = obs["gnf_mean"].values, obs["gnf_std"].values
        ok = np.isfinite(m) & np.isfinite(s) & (m > 0) & (s > 0)
        if not ok.any():
            continue
        expo = float(obs["gnf_exponent"].values)
        err = float(obs["gnf_exponent_err"].values)
        line = ax.loglog(m[ok], s[ok], "o", ms=4,
                         label=f"{name}: {expo:.3f} +/- {err:.2g}")[0]
        if np.isfinite(expo):
            c = np.exp(np.mean(np.log(s[ok]) - expo * np.log(m[ok])))
            ax.loglog(m[ok], c * m[ok] ** expo, "-", color=line.get_color(), lw=1)
        anchor = anchor or (m[ok][0], s[ok][0], m[ok][-1])
    if anchor is not None:
        m0, s0, m1 = anchor
        mm = np.array([m0, m1])
        for slope, style in ((0.5, "--"), (0.8, ":")):
            ax.loglog(mm, s0 * (mm / m0) ** slope, style, color="k", lw=1,
                      label=f"slope {slope:g}")
    ax.set_xlabel("<N>")
    ax.set_ylabel("Delta N")
    ax.legend(fontsize=8)
    return _png(fig)


def _mismatch_table(mismatch):
    a, b = _labels(mismatch)
    head = ["observable", f"a: {a}", f"b: {b}", "a - b", "+/-", "z", "tolerance", "verdict"]
    rows = []
    for i, name in enumerate(mismatch["observable"].values):
        cells = [html.escape(str(name))]
        for v in ("value_a", "value_b", "difference", "difference_err", "z", "tolerance"):
            x = float(mismatch[v].values[i])
            cells.append("nan" if not np.isfinite(x) else f"{x:.4g}")
        verdict = str(mismatch["verdict"].values[i])
        if not int(mismatch["in_overall"].values[i]):
            verdict += " (info)"
        cells.append(html.escape(verdict))
        cls = verdict.split(" (")[0].replace(" ", "-")
        rows.append(f'<tr class="{cls}">' + "".join(f"<td>{c}</td>" for c in cells)
                    + "</tr>")
    overall = html.escape(str(mismatch.attrs.get("verdict", "")))
    reason = html.escape(str(mismatch.attrs.get("reason", "")))
    return ("<table><tr>" + "".join(f"<th>{h}</th>" for h in head) + "</tr>"
            + "".join(rows) + "</table>"
            + f"<p><b>Overall: {overall}</b> &mdash; {reason}</p>")


_STYLE = """body{font-family:sans-serif;max-width:1100px;margin:2em auto;color:#222}
table{border-collapse:collapse}td,th{border:1px solid #bbb;padding:3px 8px;text-align:right}
td:first-child,th:first-child{text-align:left}tr.holds td:last-child{color:#176b17}
tr.fails td:last-child{color:#a01010}tr.not-resolved td:last-child{color:#8a6d00}
pre{background:#f5f5f5;padding:1em;overflow-x:auto}"""


def write_report(path, *, runs: dict, observables: dict, mismatch, extra_sections=None) -> Path:
    """Write the self-contained HTML report.

    Parameters
    ----------
    path : str or Path
        Output file (written atomically).
    runs : dict of str -> xarray.Dataset
        Run Datasets by label; the last sample of each field run (or coarse-grained
        particle snapshot) is drawn.
    observables : dict of str -> xarray.Dataset
        Observables by label (same labels as ``runs``).
    mismatch : xarray.Dataset
        From :func:`crossflock.compare.compare`.
    extra_sections : mapping of str -> str, optional
        Extra sections, title -> plain text (escaped, shown preformatted).

    Returns
    -------
    Path
    """
    parts = [
        "<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
        "<title>crossflock report</title>", f"<style>{_STYLE}</style></head><body>",
        "<h1>crossflock: does the continuum description hold?</h1>",
        "<h2>Verdicts</h2>", _mismatch_table(mismatch),
        "<h2>Field snapshots (last sample)</h2>", _snapshots(runs),
        "<h2>Polar order</h2>", _order(observables),
        "<h2>Structure factor</h2>", _structure(observables),
        "<h2>Number fluctuations</h2>",
        "<p>Fitted exponents with reference slopes 1/2 (normal fluctuations) and 4/5 "
        "(Toner 2019, 2D ordered phase).</p>", _gnf(observables),
    ]
    for title, text in dict(extra_sections or {}).items():
        parts += [f"<h2>{html.escape(str(title))}</h2>", f"<pre>{html.escape(str(text))}</pre>"]
    parts += ["<h2>Resolved config</h2>",
              f"<pre>{html.escape(str(mismatch.attrs.get('config', '')))}</pre>",
              "</body></html>"]
    return atomic_write_text(path, "\n".join(parts))
