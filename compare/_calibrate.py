"""Fit the continuum coefficients of GUIDE section 3 to field data.

Method (documented contract)
----------------------------
1. **Data.** Any field run (continuum output or coarse-grained particles, kind
   "fields"), or several runs of the same rho0 and v0 fitted jointly. The first
   ``transient`` fraction of each run is dropped (default 0: relaxation carries
   information about the coefficients).
2. **Time derivative** (:mod:`._timederiv`): by default the second-order one-sided
   difference ``(-3 u_n + 4 u_{n+s} - u_{n+2s}) / (2 h)``, ``h = stride * dt_sample``,
   bias O(h^2) and, unlike the centred difference, unbiased for noise-driven data (Ito).
3. **Space derivatives** (:mod:`._termlib`): spectral in a periodic box without
   obstacles, second-order central differences away from walls and obstacles otherwise.
   Target and library are filtered by the same linear filter (2/3 projection and/or
   Gaussian ``smoothing``), which leaves the coefficients unchanged.
4. **Regression.** The two components of ``d_t w`` are stacked; columns are normalised
   to unit norm and solved by ridge-regularised least squares (``ridge`` relative to the
   unit diagonal). Sparsity by sequential thresholding in the spirit of SINDy
   (Brunton, Proctor & Kutz 2016): at each pass the least significant failing term is
   removed and the rest refitted, until every term passes the resolvability test below.
   Everything is computed from per-snapshot normal equations, so a refit costs a
   ``p x p`` solve.
5. **Uncertainty.** Block bootstrap over time windows: the snapshots are cut into
   ``blocks`` contiguous windows, resampled with replacement ``bootstrap`` times
   (randomness from the "analysis" stream of ``seed``); the statistical error is the
   bootstrap s.d. The time-discretisation error is estimated by Richardson: the fit is
   repeated with the difference taken over ``2 h`` on the same snapshots and
   ``|c(h) - c(2 h)| / (2^p - 1)`` (``p`` the scheme's order) is added in quadrature.
   Errors are conditional on the selected support (pruned terms exactly zero).
6. **Resolvability.** A term is *resolved* when (a) its column is identifiable -- it does
   not vanish identically (rms below 1e-9 of its natural scale, :func:`natural_scale`)
   and is not a linear combination of the other columns (weight above 0.1 in a null
   vector of the normalised Gram matrix with eigenvalue below 1e-10) --, (b) its
   contribution ``rms(c_i X_i) / rms(residual)`` is at least ``min_contribution``,
   (c) ``|c_i| >= significance * error_i`` (the interval excludes 0), and (d) the sign is
   allowed (beta, D_T, D_B, D_2, D_rho >= 0). Terms failing (b) or (c) are *pruned*
   (value 0); a pruned term whose full-model bound ``significance * error`` could still
   contribute as much as the whole residual is *unresolved*; a term failing (a) is
   *unresolved*; a significant term of forbidden sign is *clipped*. Unresolved and
   clipped terms raise a :class:`CalibrationWarning` and are set to 0 in the table.
7. **Density equation.** v0 is known: ``d_t rho + v0 div w = D_rho lap rho`` gives
   D_rho (same tests); the unconstrained fit of ``d_t rho`` on ``(-div w, lap rho)``
   gives ``v0_fit``, a consistency check of the data and the time derivative.
8. **Noise.** ``noise_strength`` is the white-noise equivalent of the ``d_t w`` residual:
   ``Q = <r^2> dx dy h / (2 F g)`` with ``F`` the scheme's noise factor and ``g`` the
   variance factor of the filter, the inverse of the continuum engine's noise convention
   ``<xi xi> = 2 Q delta(r) delta(t)``. Model error also lands in the residual, so for
   particle data it is an upper bound.
9. **Goodness of fit.** ``r2`` per equation, ``1 - SS_res / SS_tot`` of the filtered
   target. Noise in the target bounds it from above, so a correct model on noisy data
   can have a small R^2.

References
----------
.. [1] S. L. Brunton, J. L. Proctor, J. N. Kutz, PNAS 113, 3932 (2016) -- SINDy.
.. [2] B. Efron, R. Tibshirani, An Introduction to the Bootstrap (1993), ch. 8 --
   block bootstrap of dependent data.
"""

from __future__ import annotations

import datetime as _dt
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import tomli_w
import xarray as xr

from crossflock._errors import InputError
from crossflock._geometry import geometry_from_config, grid_mask
from crossflock._io import dataset_config
from crossflock._runtime import rng_for
from crossflock._version import __version__

from ._termlib import (
    FiniteDifferenceOperators,
    SpectralOperators,
    continuity_columns,
    library,
    natural_scale,
    parse_terms,
)
from ._timederiv import get_scheme, sample_step

__all__ = ["calibrate", "CalibrationResult", "CalibrationWarning", "DEFAULT_TERMS",
           "COEFFICIENT_NAMES"]

DEFAULT_TERMS = ("alpha", "alpha_rho", "beta", "pressure[0]", "D_T", "D_B", "D_2",
                 "lambda1", "lambda2", "lambda3", "D_rho")
# The [continuum.coefficients] keys of crossflock._config.Coefficients, in its order.
COEFFICIENT_NAMES = ("alpha", "alpha_rho", "beta", "pressure", "D_T", "D_B", "D_2",
                     "lambda1", "lambda2", "lambda3", "D_rho", "noise_strength")
NONNEGATIVE = frozenset({"beta", "D_T", "D_B", "D_2", "D_rho", "noise_strength"})

ZERO_COLUMN = 1e-9      # rms below this fraction of the natural scale: column vanishes
NULL_EIGENVALUE = 1e-10  # normalised Gram eigenvalue treated as exact collinearity
NULL_WEIGHT = 0.1        # weight in a null vector that makes a term unidentifiable
CHUNK = 16               # snapshots per vectorised library evaluation


class CalibrationWarning(UserWarning):
    """The data cannot constrain a coefficient (it is set to 0 and marked)."""


# ----------------------------------------------------------------------------- result
@dataclass
class CalibrationResult:
    """Fitted continuum coefficients with uncertainties.

    Attributes
    ----------
    coefficients : dict
        In the ``[continuum.coefficients]`` names; ``pressure`` is a list. Unresolved,
        pruned, clipped and excluded terms are 0.
    errors : dict
        Same keys and shapes: total (bootstrap and Richardson) 1-sigma errors; for a
        pruned or unresolved term, the full-model error (a bound; nan when the term
        could not be fitted at all).
    resolvable : dict
        Term name (``"pressure[0]"`` style) -> bool.
    status : dict
        Term name -> "resolved", "pruned", "unresolved", "clipped" or "excluded";
        ``noise_strength`` -> "estimated" or "unresolved".
    r2 : dict
        ``"w"`` and ``"rho"``: R^2 of each equation.
    contributions : dict
        Term name -> rms(c_i X_i) / rms(residual) of the final model.
    v0, v0_fit, v0_fit_err : float
        Known speed and the free fit of the continuity equation (consistency check).
    provenance : dict
        Data source, scheme, filter, bootstrap settings, version, date.
    """

    coefficients: dict
    errors: dict
    resolvable: dict
    status: dict
    r2: dict
    contributions: dict = field(default_factory=dict)
    v0: float = math.nan
    v0_fit: float = math.nan
    v0_fit_err: float = math.nan
    provenance: dict = field(default_factory=dict)

    def table(self) -> dict:
        """The ``[continuum.coefficients]`` table (coefficients only)."""
        out = {}
        for k in COEFFICIENT_NAMES:
            v = self.coefficients[k]
            out[k] = [float(x) for x in v] if k == "pressure" else float(v)
        return out

    def to_toml(self) -> str:
        """TOML text: ``[continuum.coefficients]`` plus a ``[calibration]`` table.

        ``tomllib.loads(text)["continuum"]["coefficients"]`` can be passed as is to
        ``load_config(..., overrides={"continuum.coefficients": table})``.
        """
        cal = {}
        for k in COEFFICIENT_NAMES:
            e = self.errors[k]
            cal[f"{k}_err"] = [float(x) for x in e] if k == "pressure" else float(e)
        cal["r2_w"] = float(self.r2["w"])
        cal["r2_rho"] = float(self.r2["rho"])
        for s in ("resolved", "pruned", "unresolved", "clipped", "excluded"):
            cal[s] = [t for t, v in self.status.items() if v == s]
        cal["resolvable"] = [t for t, v in self.resolvable.items() if v]
        cal["v0"] = float(self.v0)
        cal["v0_fit"] = float(self.v0_fit)
        cal["v0_fit_err"] = float(self.v0_fit_err)
        cal["provenance"] = {k: v for k, v in self.provenance.items() if v is not None}
        return tomli_w.dumps({"continuum": {"coefficients": self.table()},
                              "calibration": cal})

    def summary(self) -> str:
        """One line per term: value, error, status."""
        lines = []
        for term, st in self.status.items():
            name, k = _coefficient_slot(term)
            v = self.coefficients[name]
            e = self.errors[name]
            if k is not None:
                v = v[k] if k < len(v) else 0.0
                e = e[k] if k < len(e) else math.nan
            lines.append(f"{term:>14s} = {v: .5g} +- {e:.2g}  [{st}]")
        lines.append(f"{'r2':>14s}: w {self.r2['w']:.4f}, rho {self.r2['rho']:.4f}")
        lines.append(f"{'v0':>14s}: known {self.v0:.5g}, fitted {self.v0_fit:.5g} "
                     f"+- {self.v0_fit_err:.2g}")
        return "\n".join(lines)


def _coefficient_slot(term):
    if term.startswith("pressure["):
        return "pressure", int(term[len("pressure["):-1])
    return term, None


# ----------------------------------------------------------------------------- data
@dataclass
class _Run:
    """One field run ready for the fit."""

    u: np.ndarray          # (T, 3, ny, nx): rho, w_x, w_y
    dt: float
    dx: float
    dy: float
    ops: object
    rho0: float
    v0: float
    source: str


def _require_fields(ds, where):
    if not isinstance(ds, xr.Dataset):
        raise InputError(f"{where} must be an xarray.Dataset (got {type(ds).__name__})")
    kind = ds.attrs.get("crossflock_kind", "fields")
    if kind != "fields":
        raise InputError(
            f"{where} holds {kind!r} data; calibrate needs a field run (kind 'fields'): "
            "coarse-grain particle runs first"
        )
    for name in ("rho", "px", "py"):
        if name not in ds:
            raise InputError(f"{where} has no variable {name!r} (a field run needs "
                             "rho, px, py)")
        if tuple(ds[name].dims) != ("time", "y", "x"):
            raise InputError(f"{where} variable {name!r} must have dims (time, y, x) "
                             f"(got {tuple(ds[name].dims)})")


def _spacing(coord, name, where):
    c = np.asarray(coord, dtype=float)
    if c.size < 3:
        raise InputError(f"{where} coordinate {name!r} needs at least 3 points "
                         f"(got {c.size})")
    d = np.diff(c)
    h = float(np.median(d))
    if not h > 0 or np.max(np.abs(d - h)) > 1e-6 * h:
        raise InputError(f"{where} coordinate {name!r} must be equally spaced")
    return h


def _prepare(ds, where, *, rho0, v0, transient, dealias, smoothing) -> _Run:
    _require_fields(ds, where)
    cfg = dataset_config(ds) if ds.attrs.get("config") else None
    if rho0 is None:
        if cfg is None:
            raise InputError(f"{where} carries no config; pass rho0= and v0=")
        rho0 = float(cfg.model.density)
    if v0 is None:
        if cfg is None:
            raise InputError(f"{where} carries no config; pass rho0= and v0=")
        v0 = float(cfg.model.speed)
    dt = sample_step(ds["time"].values)
    dx = _spacing(ds["x"].values, "x", where)
    dy = _spacing(ds["y"].values, "y", where)
    ny, nx = ds.sizes["y"], ds.sizes["x"]
    if "mask" in ds:
        fluid = np.asarray(ds["mask"].values).astype(bool)
    elif cfg is not None:
        fluid = grid_mask(geometry_from_config(cfg), nx, ny)
    else:
        fluid = np.ones((ny, nx), dtype=bool)
    channel = cfg is not None and cfg.domain.boundary == "channel"
    if fluid.all() and not channel:
        ops = SpectralOperators(nx, ny, dx, dy, dealias=dealias, smoothing=smoothing)
    else:
        ops = FiniteDifferenceOperators(fluid, dx, dy, periodic_y=not channel,
                                        smoothing=smoothing)
    time = ds["time"].values.astype(float)
    keep = time >= time[0] + transient * (time[-1] - time[0]) - 1e-9 * dt
    u = np.stack([ds[v].values[keep] for v in ("rho", "px", "py")], axis=1)
    u = np.ascontiguousarray(u, dtype=np.float64)
    if not np.isfinite(u).all():
        raise InputError(f"{where} fields contain NaN or Inf")
    source = str(ds.encoding.get("source", ds.attrs.get("title", "dataset")))
    return _Run(u, dt, dx, dy, ops, float(rho0), float(v0), source)


# ----------------------------------------------------------------------------- normal eqs
@dataclass
class _Normal:
    """Per-snapshot normal equations of one linear model ``y ~ X c``.

    ``G (n, p, p)``, ``b (n, p)``, ``yy``, ``sy``, ``m`` (number of values) per snapshot;
    ``b2`` and ``yy2``: the same target differenced over ``2 h`` (nan-free only where
    ``has2``); ``kappa``: factor turning a mean square residual into a noise strength.
    """

    G: np.ndarray
    b: np.ndarray
    yy: np.ndarray
    sy: np.ndarray
    m: np.ndarray
    b2: np.ndarray
    yy2: np.ndarray
    has2: np.ndarray
    kappa: np.ndarray
    block: np.ndarray = None  # (n,) block index

    @staticmethod
    def concat(parts):
        return _Normal(*(np.concatenate([getattr(p, f) for p in parts])
                         for f in ("G", "b", "yy", "sy", "m", "b2", "yy2", "has2",
                                   "kappa")))

    def subset(self, cols):
        """The normal equations of the columns ``cols`` only."""
        c = np.asarray(cols, dtype=int)
        return _Normal(self.G[:, c][:, :, c], self.b[:, c], self.yy, self.sy, self.m,
                       self.b2[:, c], self.yy2, self.has2, self.kappa, self.block)

    def shift_target(self, col, coef):
        """Normal equations of ``y - coef X[:, col]`` against the other columns."""
        keep = [i for i in range(self.G.shape[1]) if i != col]
        G = self.G
        b = self.b - coef * G[:, :, col]
        yy = self.yy - 2.0 * coef * self.b[:, col] + coef**2 * G[:, col, col]
        b2 = self.b2 - coef * G[:, :, col]
        yy2 = self.yy2 - 2.0 * coef * self.b2[:, col] + coef**2 * G[:, col, col]
        out = _Normal(G, b, yy, self.sy, self.m, b2, yy2, self.has2, self.kappa,
                      self.block)
        return out.subset(keep)


def _accumulate(run: _Run, w_terms, scheme, stride) -> tuple[_Normal, _Normal]:
    """Normal equations of the ``d_t w`` and ``d_t rho`` fits of one run."""
    u = run.u
    ops = run.ops
    n_t = u.shape[0]
    h = stride * run.dt
    index = scheme.valid_indices(n_t, stride)
    lo2, hi2 = scheme.span(2 * stride)
    valid = ops.valid
    nv = int(valid.sum())
    p = len(w_terms)
    out_w = {k: [] for k in ("G", "b", "yy", "sy", "b2", "yy2")}
    out_r = {k: [] for k in ("G", "b", "yy", "sy", "b2", "yy2")}
    has2 = (index >= lo2) & (index < n_t - hi2)
    for start in range(0, index.size, CHUNK):
        idx = index[start:start + CHUNK]
        f = u[idx]
        d = ops.derivatives(f)
        targ = ops.filter(scheme.apply(u, idx, stride, h))[..., valid]  # (c, 3, nv)
        ok2 = has2[start:start + CHUNK]
        targ2 = np.zeros_like(targ)
        if ok2.any():
            i2 = idx[ok2]
            targ2[ok2] = ops.filter(scheme.apply(u, i2, 2 * stride, 2 * h))[..., valid]
        if p:
            x = ops.filter(library(f, d, run.rho0, w_terms))[..., valid]  # (c,p,2,nv)
            x = x.reshape(x.shape[0], p, 2 * nv)
        else:
            x = np.zeros((idx.size, 0, 2 * nv))
        y = targ[:, 1:].reshape(idx.size, 2 * nv)
        y2 = targ2[:, 1:].reshape(idx.size, 2 * nv)
        _append(out_w, x, y, y2)
        xr_ = ops.filter(continuity_columns(d))[..., valid]  # (c, 2, nv)
        _append(out_r, xr_, targ[:, 0], targ2[:, 0])
    kappa_w = run.dx * run.dy * h / (2.0 * scheme.noise_factor * ops.noise_variance_factor())
    n = index.size

    def build(acc, m_per):
        arr = {k: (np.concatenate(v) if v else np.zeros((0,))) for k, v in acc.items()}
        return _Normal(arr["G"], arr["b"], arr["yy"], arr["sy"], np.full(n, float(m_per)),
                       arr["b2"], arr["yy2"], has2.copy(), np.full(n, kappa_w))

    return build(out_w, 2 * nv), build(out_r, nv)


def _append(acc, x, y, y2):
    acc["G"].append(np.einsum("tip,tjp->tij", x, x))
    acc["b"].append(np.einsum("tip,tp->ti", x, y))
    acc["yy"].append(np.einsum("tp,tp->t", y, y))
    acc["sy"].append(y.sum(axis=1))
    acc["b2"].append(np.einsum("tip,tp->ti", x, y2))
    acc["yy2"].append(np.einsum("tp,tp->t", y2, y2))


# ----------------------------------------------------------------------------- solving
class _Fitter:
    """Least squares on block-summed normal equations with a block bootstrap."""

    def __init__(self, ne: _Normal, n_blocks, weights, ridge, order):
        self.ne = ne
        self.n_blocks = n_blocks
        nb = n_blocks

        def bsum(a, mask=None):
            out = np.zeros((nb,) + a.shape[1:])
            sel = slice(None) if mask is None else mask
            np.add.at(out, ne.block[sel], a[sel])
            return out

        self.G = bsum(ne.G)
        self.b = bsum(ne.b)
        self.yy = bsum(ne.yy)
        self.sy = bsum(ne.sy)
        self.m = bsum(ne.m)
        self.km = bsum(ne.kappa * ne.m) / np.maximum(bsum(ne.m), 1.0)  # per-block kappa
        h2 = ne.has2
        self.G_sub = ne.G[h2].sum(axis=0)
        self.b_sub = ne.b[h2].sum(axis=0)
        self.b2_sub = ne.b2[h2].sum(axis=0)
        self.yy_sub = ne.yy[h2].sum()
        self.yy2_sub = ne.yy2[h2].sum()
        self.m_sub = float(np.sum(ne.m[h2]))
        self.kappa_sub = (float(np.sum(ne.kappa[h2] * ne.m[h2])) / self.m_sub
                          if self.m_sub > 0 else 0.0)
        self.weights = weights  # (B, nb) block multiplicities
        self.ridge = ridge
        self.richardson = 2.0**order - 1.0

    def solve(self, G, b, active):
        """Ridge solution on unit-norm columns; zeros outside ``active``."""
        p = b.shape[-1]
        c = np.zeros(b.shape[:-1] + (p,))
        a = np.asarray(active, dtype=int)
        if a.size == 0:
            return c
        Ga = G[..., a[:, None], a[None, :]]
        ba = b[..., a]
        s = np.sqrt(np.maximum(np.diagonal(self.G.sum(axis=0))[a], 1e-300))
        Gn = Ga / (s[:, None] * s[None, :])
        Gn = Gn + self.ridge * np.eye(a.size)
        c[..., a] = np.linalg.solve(Gn, (ba / s)[..., None])[..., 0] / s
        return c

    def ss_res(self, G, b, yy, c):
        return yy - 2.0 * np.einsum("...i,...i->...", c, b) + np.einsum(
            "...i,...ij,...j->...", c, G, c)

    def fit(self, active):
        """Coefficients, statistical and systematic errors, and residual sums."""
        G, b, yy = self.G.sum(0), self.b.sum(0), self.yy.sum(0)
        c = self.solve(G, b, active)
        wG = np.einsum("rk,kij->rij", self.weights, self.G)
        wb = np.einsum("rk,ki->ri", self.weights, self.b)
        cb = self.solve(wG, wb, active)
        stat = cb.std(axis=0, ddof=1) if cb.shape[0] > 1 else np.full(c.shape, np.nan)
        c1 = self.solve(self.G_sub, self.b_sub, active)
        c2 = self.solve(self.G_sub, self.b2_sub, active)
        sys = np.abs(c1 - c2) / self.richardson
        return c, stat, sys, cb, self.ss_res(G, b, yy, c)

    def noise(self, c, cb, active):
        """White-noise strength of the residual and its error.

        The residual variance of a difference over ``h`` misses the damping of the noise
        within ``h`` (a first-order effect, ``1 - a h`` for a mode damped at rate
        ``a``), so the value is extrapolated by Richardson from ``h`` and ``2 h`` on the
        same snapshots, ``Q = 2 Q(h) - Q(2 h)``; the error is the bootstrap s.d. of
        ``Q(h)`` and the size of that correction in quadrature.
        """
        per = self.ss_res(self.G, self.b, self.yy, c)       # (nb,)
        q_all = float(np.sum(self.km * per) / np.sum(self.m))
        perb = self.ss_res(self.G[None], self.b[None], self.yy[None], cb[:, None, :])
        qb = np.einsum("rk,rk->r", self.weights, self.km * perb) / (self.weights @ self.m)
        stat = float(qb.std(ddof=1)) if qb.size > 1 else math.nan
        if self.m_sub <= 0:
            return q_all, stat
        c1 = self.solve(self.G_sub, self.b_sub, active)
        c2 = self.solve(self.G_sub, self.b2_sub, active)
        k = self.kappa_sub / self.m_sub
        q1 = float(self.ss_res(self.G_sub, self.b_sub, self.yy_sub, c1)) * k
        q2 = float(self.ss_res(self.G_sub, self.b2_sub, self.yy2_sub, c2)) * 2.0 * k
        return q_all + (q1 - q2), float(np.hypot(stat, q1 - q2))

    def r2(self, ss_res):
        yy, sy, m = self.yy.sum(), self.sy.sum(), self.m.sum()
        ss_tot = yy - sy**2 / m
        return float(1.0 - ss_res / ss_tot) if ss_tot > 0 else math.nan


def _identifiable(fitter: _Fitter, names, natural, n_values) -> tuple[list, dict]:
    """Indices of identifiable columns and the reason for each rejected one."""
    G = fitter.G.sum(axis=0)
    diag = np.diagonal(G)
    rms = np.sqrt(np.maximum(diag, 0.0) / max(n_values, 1.0))
    reasons = {}
    ok = []
    for i, name in enumerate(names):
        if rms[i] > ZERO_COLUMN * natural[i]:
            ok.append(i)
        else:
            reasons[name] = "its column vanishes in the data (too uniform a state)"
    while ok:
        s = np.sqrt(diag[ok])
        R = G[np.ix_(ok, ok)] / (s[:, None] * s[None, :])
        ev, vec = np.linalg.eigh(R)
        null = vec[:, ev < NULL_EIGENVALUE * len(ok)]
        if null.shape[1] == 0:
            break
        bad = [ok[j] for j in range(len(ok)) if np.max(np.abs(null[j])) > NULL_WEIGHT]
        for i in bad:
            reasons[names[i]] = "its column is a combination of other terms in the data"
        ok = [i for i in ok if i not in bad]
    return ok, reasons


def _select(fitter: _Fitter, names, active, *, significance, min_contribution, nonneg):
    """Sequential thresholding; returns final fit, statuses and full-model errors."""
    status = {}
    c, stat, sys, cb, ss = fitter.fit(active)
    full_err = np.hypot(stat, sys)
    full_ss = ss
    active = list(active)
    colnorm = np.sqrt(np.maximum(np.diagonal(fitter.G.sum(axis=0)), 0.0))
    while active:
        err = np.hypot(stat, sys)
        res = math.sqrt(max(ss, 0.0))
        fails = []
        for i in active:
            t = abs(c[i]) / err[i] if err[i] > 0 else (math.inf if c[i] != 0 else 0.0)
            contrib = abs(c[i]) * colnorm[i] / res if res > 0 else math.inf
            negative = names[i] in nonneg and c[i] < 0
            if t < significance or contrib < min_contribution:
                fails.append((0, t, i, "pruned"))
            elif negative:
                fails.append((1, -t, i, "clipped"))
        if not fails:
            break
        _, _, worst, why = min(fails)
        status[names[worst]] = why
        active.remove(worst)
        c, stat, sys, cb, ss = fitter.fit(active)
    for i in active:
        status[names[i]] = "resolved"
    res_full = math.sqrt(max(full_ss, 0.0))
    for i, name in enumerate(names):
        if status.get(name) == "pruned" and res_full > 0:
            bound = significance * full_err[i] * colnorm[i] / res_full
            if not np.isfinite(bound) or bound >= 1.0:
                status[name] = "unresolved"
    return c, np.hypot(stat, sys), cb, ss, status, full_err, active


# ----------------------------------------------------------------------------- public
def calibrate(ds, *, terms=None, bootstrap=50, transient=None, smoothing=None, seed=0,
              time_scheme="forward", stride=1, blocks=None, significance=3.0,
              min_contribution=1e-3, ridge=1e-10, dealias=True, rho0=None,
              v0=None) -> CalibrationResult:
    """Fit the continuum coefficients of GUIDE section 3 to field data.

    Parameters
    ----------
    ds : xarray.Dataset or sequence of Dataset
        Field run(s) (kind "fields": ``rho``, ``px``, ``py`` over (time, y, x)); several
        runs are fitted jointly and must share rho0 and v0.
    terms : sequence of str, optional
        Terms to fit (:data:`DEFAULT_TERMS`; add ``"pressure[1]"`` for a quadratic
        pressure). Terms left out are 0 in the table and marked "excluded".
    bootstrap : int
        Bootstrap replicates (>= 2).
    transient : float, optional
        Fraction of each run dropped at the start (default 0).
    smoothing : float, optional
        Gaussian filter length applied to both sides of the equations (default none).
    seed : int
        Seed of the bootstrap ("analysis" stream).
    time_scheme : {"forward", "centred", "euler"}
        Time derivative (:mod:`crossflock.compare._timederiv`).
    stride : int
        Difference over ``stride`` samples (temporal coarse-graining).
    blocks : int, optional
        Time windows of the block bootstrap (default ``min(10, snapshots // 2)``).
    significance : float
        ``|c| / error`` a term needs to be kept.
    min_contribution : float
        ``rms(c X) / rms(residual)`` a term needs to be kept.
    ridge : float
        Ridge parameter on unit-norm columns.
    dealias : bool
        Include the 2/3 projection in the spectral equation filter.
    rho0, v0 : float, optional
        Override the values of the embedded config (needed when there is none).

    Returns
    -------
    CalibrationResult

    Warns
    -----
    CalibrationWarning
        Too few snapshots, unidentifiable (too uniform) terms, loosely bounded terms and
        significant terms of forbidden sign; those coefficients are 0 and marked.

    Raises
    ------
    InputError
        Not a field run, unequal sampling, bad options.
    """
    datasets = [ds] if isinstance(ds, xr.Dataset) else list(ds) if isinstance(
        ds, Sequence) else [ds]
    if not datasets:
        raise InputError("calibrate needs at least one field run")
    terms = DEFAULT_TERMS if terms is None else terms
    w_terms, fit_d_rho = parse_terms(terms)
    scheme = get_scheme(time_scheme)
    if isinstance(bootstrap, bool) or int(bootstrap) != bootstrap or bootstrap < 2:
        raise InputError(f"`bootstrap` must be an integer >= 2 (got {bootstrap!r})")
    if isinstance(stride, bool) or int(stride) != stride or stride < 1:
        raise InputError(f"`stride` must be a positive integer (got {stride!r})")
    transient = 0.0 if transient is None else float(transient)
    if not 0.0 <= transient < 1.0:
        raise InputError(f"`transient` must be in [0, 1) (got {transient!r})")
    smoothing = 0.0 if smoothing is None else float(smoothing)
    if not (smoothing >= 0.0 and math.isfinite(smoothing)):
        raise InputError(f"`smoothing` must be a non-negative length (got {smoothing!r})")
    for key, val in (("significance", significance), ("min_contribution", min_contribution),
                     ("ridge", ridge)):
        if not (float(val) >= 0.0 and math.isfinite(float(val))):
            raise InputError(f"`{key}` must be a non-negative number (got {val!r})")

    runs = [_prepare(d, f"dataset {i}" if len(datasets) > 1 else "dataset", rho0=rho0,
                     v0=v0, transient=transient, dealias=dealias, smoothing=smoothing)
            for i, d in enumerate(datasets)]
    rho0_, v0_ = runs[0].rho0, runs[0].v0
    for r in runs[1:]:
        if not (math.isclose(r.rho0, rho0_) and math.isclose(r.v0, v0_)):
            raise InputError("runs fitted jointly must share rho0 and v0 "
                             f"(got {rho0_:g}, {v0_:g} and {r.rho0:g}, {r.v0:g})")
    parts = [_accumulate(r, w_terms, scheme, int(stride)) for r in runs]
    n_snap = [p[0].G.shape[0] for p in parts]
    total = int(sum(n_snap))
    n_blocks = int(blocks) if blocks is not None else min(10, total // 2)
    all_names = list(w_terms) + (["D_rho"] if fit_d_rho else [])
    provenance = {
        "sources": [r.source for r in runs],
        "snapshots": total,
        "sample_interval": runs[0].dt,
        "time_scheme": scheme.name,
        "stride": int(stride),
        "method": runs[0].ops.method,
        "dealias": bool(dealias),
        "smoothing": smoothing,
        "transient": transient,
        "bootstrap": int(bootstrap),
        "blocks": n_blocks,
        "seed": int(seed),
        "significance": float(significance),
        "min_contribution": float(min_contribution),
        "rho0": rho0_,
        "crossflock_version": __version__,
        "created": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
    }
    if n_blocks < 2 or total < 4 or any(n < 1 for n in n_snap):
        warnings.warn(
            f"too few snapshots ({total} usable after the transient and the "
            f"{scheme.name} time stencil; need >= 4 and >= 2 bootstrap blocks): no "
            "coefficient can be constrained, all are set to 0 and marked unresolved",
            CalibrationWarning, stacklevel=2)
        return _empty_result(all_names, w_terms, v0_, provenance)

    # contiguous time windows, numbered across runs
    block_of = []
    for n in n_snap:
        share = min(n, max(1, round(n_blocks * n / total)))
        block_of.append(np.array_split(np.arange(n), share))
    edges, counter = [], 0
    for chunks in block_of:
        b = np.empty(sum(len(c) for c in chunks), dtype=int)
        for c in chunks:
            b[c] = counter
            counter += 1
        edges.append(b)
    n_blocks = counter
    provenance["blocks"] = n_blocks
    rng = rng_for(int(seed), "analysis")
    weights = rng.multinomial(n_blocks, np.full(n_blocks, 1.0 / n_blocks),
                              size=int(bootstrap)).astype(float)

    ne_w = _Normal.concat([p[0] for p in parts])
    ne_r = _Normal.concat([p[1] for p in parts])
    ne_w.block = ne_r.block = np.concatenate(edges)

    length = min(runs[0].dx, runs[0].dy)
    status, contributions = {}, {}
    coef_vals, err_vals = {}, {}
    warn_lines = []

    # --- momentum equation
    fit_w = _Fitter(ne_w, n_blocks, weights, ridge, scheme.order)
    n_values = float(ne_w.m.sum())
    natural = [natural_scale(t, rho0_, length) for t in w_terms]
    ok, reasons = _identifiable(fit_w, list(w_terms), natural, n_values)
    c, err, cb, ss, st, full_err, active = _select(
        fit_w, list(w_terms), ok, significance=significance,
        min_contribution=min_contribution, nonneg=NONNEGATIVE)
    colnorm = np.sqrt(np.maximum(np.diagonal(fit_w.G.sum(0)), 0.0))
    res = math.sqrt(max(ss, 0.0))
    for i, t in enumerate(w_terms):
        if t in reasons:
            status[t] = "unresolved"
            warn_lines.append(f"{t}: {reasons[t]}")
            coef_vals[t], err_vals[t] = 0.0, math.nan
            continue
        status[t] = st[t]
        keep = st[t] == "resolved"
        coef_vals[t] = float(c[i]) if keep else 0.0
        err_vals[t] = float(err[i]) if keep else float(full_err[i])
        contributions[t] = float(abs(c[i]) * colnorm[i] / res) if keep and res > 0 else 0.0
        if st[t] == "unresolved":
            warn_lines.append(f"{t}: the data bound it only loosely "
                              f"(+-{full_err[i]:.2g}); set to 0")
        elif st[t] == "clipped":
            warn_lines.append(f"{t}: fitted with the forbidden sign (must be >= 0); "
                              "set to 0")
    r2_w = fit_w.r2(ss) if w_terms else math.nan
    # the residual of the selected model (all of d_t w when nothing is resolved)
    q, q_err = fit_w.noise(c, cb, active)
    noise_status = "estimated"

    # --- continuity equation: D_rho with v0 known, v0 free as a check
    fit_r = _Fitter(ne_r, n_blocks, weights, ridge, scheme.order)
    v0_fit, v0_err = math.nan, math.nan
    r_ok, r_reasons = _identifiable(fit_r, ["v0", "D_rho"],
                                    [natural_scale("v0", rho0_, length),
                                     natural_scale("D_rho", rho0_, length)],
                                    float(ne_r.m.sum()))
    if 0 in r_ok:
        cr, sr, yr, _, _ = fit_r.fit(r_ok)
        v0_fit, v0_err = float(cr[0]), float(np.hypot(sr[0], yr[0]))
    d_rho = 0.0
    ne_d = ne_r.shift_target(0, v0_)
    fit_d = _Fitter(ne_d, n_blocks, weights, ridge, scheme.order)
    if fit_d_rho:
        if 1 not in r_ok:
            status["D_rho"] = "unresolved"
            warn_lines.append("D_rho: " + r_reasons.get(
                "D_rho", "its column is a combination of other terms in the data"))
            coef_vals["D_rho"], err_vals["D_rho"] = 0.0, math.nan
            ss_d = fit_d.ss_res(fit_d.G.sum(0), fit_d.b.sum(0), fit_d.yy.sum(0),
                                np.zeros(1))
        else:
            cd, ed, _, ss_d, std_, fe, _ = _select(
                fit_d, ["D_rho"], [0], significance=significance,
                min_contribution=min_contribution, nonneg=NONNEGATIVE)
            status["D_rho"] = std_["D_rho"]
            keep = std_["D_rho"] == "resolved"
            d_rho = float(cd[0]) if keep else 0.0
            coef_vals["D_rho"] = d_rho
            err_vals["D_rho"] = float(ed[0]) if keep else float(fe[0])
            if std_["D_rho"] == "unresolved":
                warn_lines.append(f"D_rho: the data bound it only loosely "
                                  f"(+-{fe[0]:.2g}); set to 0")
            elif std_["D_rho"] == "clipped":
                warn_lines.append("D_rho: fitted negative (must be >= 0); set to 0")
    else:
        ss_d = fit_d.ss_res(fit_d.G.sum(0), fit_d.b.sum(0), fit_d.yy.sum(0), np.zeros(1))
    if fit_d_rho and status["D_rho"] == "resolved":
        ss_d = fit_d.ss_res(fit_d.G.sum(0), fit_d.b.sum(0), fit_d.yy.sum(0),
                            np.array([d_rho]))
    r2_rho = fit_r.r2(ss_d)

    for t in DEFAULT_TERMS + ("pressure[1]",):
        status.setdefault(t, "excluded")
    if warn_lines:
        warnings.warn("calibration cannot constrain: " + "; ".join(warn_lines),
                      CalibrationWarning, stacklevel=2)
    coefficients, errors = _tables(coef_vals, err_vals, status, q, q_err)
    status["noise_strength"] = noise_status
    resolvable = {t: status[t] == "resolved" for t in status if t != "noise_strength"}
    resolvable["noise_strength"] = noise_status == "estimated"
    return CalibrationResult(coefficients, errors, resolvable, status,
                             {"w": r2_w, "rho": r2_rho}, contributions, v0_, v0_fit,
                             v0_err, provenance)


def _tables(coef_vals, err_vals, status, q, q_err):
    orders = sorted(int(t[len("pressure["):-1]) for t in coef_vals
                    if t.startswith("pressure["))
    coefficients, errors = {}, {}
    for k in COEFFICIENT_NAMES:
        if k == "pressure":
            coefficients[k] = [coef_vals.get(f"pressure[{j}]", 0.0) for j in orders] or [0.0]
            errors[k] = [err_vals.get(f"pressure[{j}]", math.nan) for j in orders] or [
                math.nan]
        elif k == "noise_strength":
            coefficients[k], errors[k] = max(float(q), 0.0), float(q_err)
        else:
            coefficients[k] = coef_vals.get(k, 0.0)
            errors[k] = err_vals.get(k, math.nan)
    return coefficients, errors


def _empty_result(all_names, w_terms, v0, provenance):
    status = {t: "unresolved" for t in all_names}
    for t in DEFAULT_TERMS + ("pressure[1]",):
        status.setdefault(t, "excluded")
    coef_vals = {t: 0.0 for t in all_names}
    err_vals = {t: math.nan for t in all_names}
    coefficients, errors = _tables(coef_vals, err_vals, status, 0.0, math.nan)
    status["noise_strength"] = "unresolved"
    resolvable = {t: False for t in status}
    return CalibrationResult(coefficients, errors, resolvable, status,
                             {"w": math.nan, "rho": math.nan}, {}, v0, math.nan,
                             math.nan, provenance)
