"""``compare``: per-observable mismatch of two observable sets, with verdicts.

Verdict rule for one observable, with difference ``d``, combined standard error
``e = sqrt(e_a^2 + e_b^2)``, tolerance ``tol`` and significance ``s``
(``compare.tolerance.significance``, default 3):

* "holds" when ``|d| + s e <= tol`` (the difference is within tolerance even at the
  edge of its error bar);
* "fails" when ``|d| - s e > tol`` (beyond tolerance by more than s errors);
* "not resolved" otherwise, and whenever ``d`` or ``e`` is not finite (too short a run
  for an error estimate, or an observable that one run cannot provide).

Observables compared: ``order_mean`` (tolerance ``order``), ``binder`` (``binder``),
the structure factor as ``ln(S_a / S_b)`` of the band-averaged S(k) in three
log-spaced k bands over the wavenumbers both runs share (``structure_factor_long``,
``_mid``, ``_short``; tolerance ``structure_factor``), and ``gnf_exponent``
(``gnf_exponent``). The overall verdict uses ``order_mean``, ``binder``, the
long-wavelength S(k) band and ``gnf_exponent`` (the hydrodynamic claims of a continuum
description); the shorter bands are reported but not part of it. Overall: "fails" if
any of those fails, else "not resolved" if any is not resolved, else "holds".
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from crossflock._build import annotate, global_attrs
from crossflock._config import Tolerances
from crossflock._errors import InputError
from crossflock._io import dataset_config

__all__ = ["compare", "verdict", "verdict_table", "sk_bands", "VERDICTS", "OVERALL"]

VERDICTS = ("holds", "fails", "not resolved")
OVERALL = ("order_mean", "binder", "structure_factor_long", "gnf_exponent")
_BANDS = ("long", "mid", "short")

_ATTRS = {
    "observable": ("compared observable", "1"),
    "value_a": ("value in run a", "1"),
    "value_b": ("value in run b", "1"),
    "error_a": ("standard error in run a", "1"),
    "error_b": ("standard error in run b", "1"),
    "difference": ("a - b (ln S_a / S_b for structure_factor_*)", "1"),
    "difference_err": ("combined standard error of the difference", "1"),
    "z": ("|difference| / difference_err", "1"),
    "tolerance": ("tolerance on |difference|", "1"),
    "verdict": ("holds, fails or not resolved", "1"),
    "in_overall": ("1 when the observable enters the overall verdict", "1"),
    "k_low": ("lower wavenumber of the S(k) band", "R-1"),
    "k_high": ("upper wavenumber of the S(k) band", "R-1"),
    "verdict_overall": ("overall verdict", "1"),
}


def verdict(diff: float, err: float, tol: float, significance: float) -> str:
    """Verdict of one observable (see the module docstring for the rule)."""
    if not (np.isfinite(diff) and np.isfinite(err)):
        return "not resolved"
    if abs(diff) + significance * err <= tol:
        return "holds"
    if abs(diff) - significance * err > tol:
        return "fails"
    return "not resolved"


def sk_bands(obs_a: xr.Dataset, obs_b: xr.Dataset):
    """Band-averaged S(k) of both runs over their shared wavenumbers.

    Returns
    -------
    list of dict
        One per band ("long", "mid", "short"): ``k_low``, ``k_high``, ``a``, ``b``,
        ``ea``, ``eb`` (band means and their errors, errors of different shells combined
        as independent).
    """
    ka = obs_a["k"].values
    kb = obs_b["k"].values
    ib, ia = [], []
    for i, k in enumerate(ka):
        j = np.flatnonzero(np.isclose(kb, k, rtol=1e-9, atol=0.0))
        if j.size:
            ia.append(i)
            ib.append(j[0])
    out = []
    if len(ia) < len(_BANDS):
        return [dict(k_low=np.nan, k_high=np.nan, a=np.nan, b=np.nan, ea=np.nan, eb=np.nan)
                for _ in _BANDS]
    k = ka[ia]
    sa, ea = obs_a["structure_factor"].values[ia], obs_a["structure_factor_err"].values[ia]
    sb, eb = obs_b["structure_factor"].values[ib], obs_b["structure_factor_err"].values[ib]
    edges = np.geomspace(k.min(), k.max(), len(_BANDS) + 1)
    for n in range(len(_BANDS)):
        sel = (k >= edges[n]) & ((k < edges[n + 1]) if n < len(_BANDS) - 1 else True)
        m = int(sel.sum())
        if m == 0:
            out.append(dict(k_low=edges[n], k_high=edges[n + 1], a=np.nan, b=np.nan,
                            ea=np.nan, eb=np.nan))
            continue
        out.append(dict(k_low=edges[n], k_high=edges[n + 1],
                        a=float(np.mean(sa[sel])), b=float(np.mean(sb[sel])),
                        ea=float(np.sqrt(np.sum(ea[sel] ** 2)) / m),
                        eb=float(np.sqrt(np.sum(eb[sel] ** 2)) / m)))
    return out


def _ln_ratio(band):
    a, b, ea, eb = band["a"], band["b"], band["ea"], band["eb"]
    if not (a > 0 and b > 0):
        return np.nan, np.nan
    return float(np.log(a / b)), float(np.hypot(ea / a, eb / b))


def _scalar(obs, name):
    return float(obs[name].values) if name in obs else np.nan


def compare(obs_a: xr.Dataset, obs_b: xr.Dataset, *, tolerances=None) -> xr.Dataset:
    """Mismatch of two observable Datasets.

    Parameters
    ----------
    obs_a, obs_b : xarray.Dataset
        From :func:`crossflock.compare.observe`.
    tolerances : crossflock._config.Tolerances, optional
        Default ``compare.tolerance`` of ``obs_a``'s config.

    Returns
    -------
    xarray.Dataset
        ``crossflock_kind = "mismatch"``, dimension ``observable``; variables
        ``value_a``, ``value_b``, ``error_a``, ``error_b``, ``difference``,
        ``difference_err``, ``z``, ``tolerance``, ``verdict``, ``in_overall``,
        ``k_low``/``k_high`` (S(k) bands) and the scalar ``verdict_overall``; global
        attributes ``verdict`` and ``reason``.
    """
    for name, obs in (("a", obs_a), ("b", obs_b)):
        if obs.attrs.get("crossflock_kind") != "observables":
            raise InputError(
                f"compare needs observables (argument {name} has crossflock_kind "
                f"{obs.attrs.get('crossflock_kind')!r}; run observe() first)"
            )
    cfg = dataset_config(obs_a)
    tol = cfg.compare.tolerance if tolerances is None else tolerances
    if not isinstance(tol, Tolerances):
        raise InputError(f"tolerances must be a crossflock Tolerances (got {type(tol).__name__})")
    sig = tol.significance
    rows = []
    for name, err_name, t in (("order_mean", "order_sem", tol.order),
                              ("binder", "binder_err", tol.binder)):
        a, b = _scalar(obs_a, name), _scalar(obs_b, name)
        ea, eb = _scalar(obs_a, err_name), _scalar(obs_b, err_name)
        rows.append(dict(name=name, a=a, b=b, ea=ea, eb=eb, d=a - b,
                         e=float(np.hypot(ea, eb)), tol=t))
    for label, band in zip(_BANDS, sk_bands(obs_a, obs_b), strict=True):
        d, e = _ln_ratio(band)
        rows.append(dict(name=f"structure_factor_{label}", a=band["a"], b=band["b"],
                         ea=band["ea"], eb=band["eb"], d=d, e=e, tol=tol.structure_factor,
                         k_low=band["k_low"], k_high=band["k_high"]))
    a, b = _scalar(obs_a, "gnf_exponent"), _scalar(obs_b, "gnf_exponent")
    ea, eb = _scalar(obs_a, "gnf_exponent_err"), _scalar(obs_b, "gnf_exponent_err")
    rows.append(dict(name="gnf_exponent", a=a, b=b, ea=ea, eb=eb, d=a - b,
                     e=float(np.hypot(ea, eb)), tol=tol.gnf_exponent))
    for row in rows:
        row["v"] = verdict(row["d"], row["e"], row["tol"], sig)
        with np.errstate(invalid="ignore", divide="ignore"):
            row["z"] = abs(row["d"]) / row["e"] if row["e"] > 0 else (
                0.0 if row["d"] == 0 else np.inf)
    overall, reason = _overall(rows, obs_a, obs_b)
    names = [r["name"] for r in rows]

    def col(key, default=np.nan):
        return ("observable", np.array([r.get(key, default) for r in rows], dtype=float))

    ds = xr.Dataset(
        {
            "value_a": col("a"), "value_b": col("b"),
            "error_a": col("ea"), "error_b": col("eb"),
            "difference": col("d"), "difference_err": col("e"), "z": col("z"),
            "tolerance": col("tol"),
            "verdict": ("observable", np.array([r["v"] for r in rows], dtype=object)),
            "in_overall": ("observable",
                           np.array([int(r["name"] in OVERALL) for r in rows], np.int8)),
            "k_low": col("k_low"), "k_high": col("k_high"),
            "verdict_overall": ((), overall),
            "significance": ((), float(sig)),
        },
        coords={"observable": np.array(names, dtype=object)},
    )
    ds.attrs = global_attrs(
        cfg, "mismatch", "crossflock mismatch", verdict=overall, reason=reason,
        engine_a=str(obs_a.attrs.get("engine", "")),
        engine_b=str(obs_b.attrs.get("engine", "")),
    )
    return annotate(ds, {**_ATTRS, "significance": ("standard errors of the verdict rule",
                                                    "1")})


def _describe(row):
    if not np.isfinite(row["d"]):
        return f"{row['name']} (not available in both runs)"
    if not np.isfinite(row["e"]):
        return f"{row['name']} (difference {row['d']:.3g} but no error estimate: run too short)"
    return (f"{row['name']} (|diff| {abs(row['d']):.3g} +/- {row['e']:.2g}, "
            f"tolerance {row['tol']:.3g})")


def _overall(rows, obs_a, obs_b):
    used = [r for r in rows if r["name"] in OVERALL]
    failed = [r for r in used if r["v"] == "fails"]
    unresolved = [r for r in used if r["v"] == "not resolved"]
    if failed:
        return "fails", "fails: " + "; ".join(_describe(r) for r in failed)
    if unresolved:
        return "not resolved", "not resolved: " + "; ".join(_describe(r) for r in unresolved)
    return "holds", "holds: " + ", ".join(r["name"] for r in used) + " within tolerance"


def _labels(mismatch: xr.Dataset) -> tuple[str, str]:
    """Short names of the two compared runs (their engines), "a" and "b" if unknown."""
    short = {"agents-coarse-grained": "particles", "agents": "particles"}
    a = str(mismatch.attrs.get("engine_a", "a"))
    b = str(mismatch.attrs.get("engine_b", "b"))
    return short.get(a, a), short.get(b, b)


def verdict_table(mismatch: xr.Dataset) -> str:
    """Plain-text table of a mismatch Dataset (for the CLI)."""
    a, b = _labels(mismatch)
    head = ("observable", a, b, "a - b", "+/-", "z", "tol", "verdict")
    lines = []
    def g(v, i):
        x = float(mismatch[v].values[i])
        return "nan" if not np.isfinite(x) else f"{x:.4g}"

    for i, name in enumerate(mismatch["observable"].values):
        mark = "" if int(mismatch["in_overall"].values[i]) else " (info)"
        lines.append((str(name), *(g(v, i) for v in ("value_a", "value_b", "difference",
                                                     "difference_err", "z", "tolerance")),
                      str(mismatch["verdict"].values[i]) + mark))
    widths = [max(len(r[c]) for r in [head, *lines]) for c in range(len(head))]

    def fmt(r):
        return "  ".join(c.ljust(w) if j in (0, 7) else c.rjust(w)
                         for j, (c, w) in enumerate(zip(r, widths, strict=True))).rstrip()

    rule = "-" * len(fmt(head))
    text = [fmt(head), rule, *map(fmt, lines), rule,
            f"overall: {mismatch.attrs.get('verdict', str(mismatch['verdict_overall'].values))}",
            f"reason: {mismatch.attrs.get('reason', '')}"]
    return "\n".join(text)
