"""Run loop of the continuum engine: sampling, guards, checkpoints, progress.

The driver owns no numerics: it builds a solver from :data:`METHODS`, steps it, samples
at the times of :func:`crossflock._runtime.sample_plan`, checks the state every few steps
and turns a divergence into :class:`crossflock.NumericalError` (exit code 3) carrying the
samples so far plus the last good state.
"""

from __future__ import annotations

import sys

import numpy as np
import tomli_w

from .._build import annotate, field_dataset
from .._config import load_config
from .._errors import InputError, NumericalError
from .._io import dataset_config, read_dataset, write_dataset
from .._runtime import sample_plan
from .._schema import to_mapping
from .._stability import _method, stability_limit
from ._dispersion import max_growth
from ._fd import FiniteDifferenceSolver
from ._guard import NEGATIVE_DENSITY_TOL, check_state
from ._spectral import SpectralSolver

__all__ = ["METHODS", "resolve_method", "make_solver", "simulate", "check_state",
           "NEGATIVE_DENSITY_TOL", "BLOWUP_FACTOR"]

METHODS = {"spectral": SpectralSolver, "finite_difference": FiniteDifferenceSolver}

# |w| beyond BLOWUP_FACTOR * (rho0 + homogeneous |w| at 2 rho0) is a blow-up.
BLOWUP_FACTOR = 100.0


def resolve_method(cfg) -> str:
    """``continuum.method`` with "auto" resolved (spectral iff periodic, no obstacles)."""
    return _method(cfg)


def make_solver(cfg, **kwargs):
    """The solver object of ``cfg`` (keyword arguments go to its constructor)."""
    return METHODS[resolve_method(cfg)](cfg, **kwargs)


def _w_bound(solver) -> float:
    coef = solver.coef
    rho0 = coef.rho0
    alpha = float(np.max(coef.alpha_at(np.array([rho0, 2.0 * rho0]))))
    beta = coef.get("beta") if not coef.kinetic else float(coef.reference["beta"])
    w_hom = np.sqrt(alpha / beta) if alpha > 0 and beta > 0 else 0.0
    return BLOWUP_FACTOR * (rho0 + w_hom)


def _order(rho, wx, wy):
    mass = float(np.sum(rho))
    return float(np.hypot(np.sum(wx), np.sum(wy)) / mass) if mass > 0 else 0.0


def _resume_key(cfg) -> str:
    """Config text that must match to resume (duration and checkpointing may differ)."""
    m = to_mapping(cfg)
    m["run"].pop("duration", None)
    m["continuum"].pop("checkpoint_every", None)
    return tomli_w.dumps(m)


class _Recorder:
    """Samples held in memory and turned into Datasets."""

    def __init__(self, solver, plan, cfg, method):
        n = plan.n_samples
        shape = (n, solver.ny, solver.nx)
        self.cfg, self.solver, self.plan, self.method = cfg, solver, plan, method
        self.rho = np.zeros(shape)
        self.px = np.zeros(shape)
        self.py = np.zeros(shape)
        self.order = np.zeros(n)
        self.count = 0

    def record(self, index):
        rho, wx, wy = self.solver.fields()
        self.rho[index], self.px[index], self.py[index] = rho, wx, wy
        self.order[index] = _order(rho, wx, wy)
        self.count = index + 1

    def dataset(self, upto=None, extra=None, **attrs):
        n = self.count if upto is None else upto
        s = self.solver
        times = self.plan.times[:n]
        rho, px, py, order = self.rho[:n], self.px[:n], self.py[:n], self.order[:n]
        if extra is not None:  # append the last good state as one more time
            t, (r, wx, wy) = extra
            if n == 0 or t > times[-1]:
                times = np.append(times, t)
                rho = np.concatenate([rho, r[None]])
                px = np.concatenate([px, wx[None]])
                py = np.concatenate([py, wy[None]])
                order = np.append(order, _order(r, wx, wy))
        mask = None if s.mask.all() else s.mask
        return field_dataset(self.cfg, times, s.x, s.y, rho, px, py, order, mask=mask,
                             engine="continuum", method=self.method, dt=s.dt, **attrs)


def _checkpoint_dataset(rec, index):
    ds = rec.dataset(upto=index + 1, checkpoint_sample=int(index))
    state = rec.solver.get_state()
    ds.attrs["checkpoint_rng"] = state.pop("rng")
    ds.attrs["checkpoint_n_steps"] = int(state.pop("n_steps"))
    ds.attrs["checkpoint_resume_key"] = _resume_key(rec.cfg)
    names = []
    for name, arr in state.items():
        arr = np.asarray(arr)
        if np.iscomplexobj(arr):
            arr = np.stack([arr.real, arr.imag], axis=-1)
            ds.attrs[f"state_complex_{name}"] = 1
        dims = tuple(f"state_{name}_d{i}" for i in range(arr.ndim))
        ds[f"state_{name}"] = (dims, arr.astype(np.float64))
        names.append(name)
    ds.attrs["checkpoint_state"] = ",".join(names)
    return annotate(ds, {f"state_{n}": ("solver state for restart", "1") for n in names})


def _load_checkpoint(path, cfg, rec):
    ds = read_dataset(path, kind="fields")
    if "checkpoint_state" not in ds.attrs:
        raise InputError(f"resume file {str(path)!r} is not a continuum checkpoint")
    if ds.attrs.get("checkpoint_resume_key") != _resume_key(cfg):
        other = dataset_config(ds)
        raise InputError(
            f"resume file {str(path)!r} was written for a different config "
            f"(method {ds.attrs.get('method')!r}, seed {other.run.seed}); "
            "only run.duration and continuum.checkpoint_every may differ"
        )
    index = int(ds.attrs["checkpoint_sample"])
    if index >= rec.plan.n_samples:
        raise InputError(
            f"resume file {str(path)!r} ends at t = {float(ds.time[-1]):g}, beyond "
            f"run.duration = {cfg.run.duration:g}"
        )
    n = index + 1
    rec.rho[:n] = ds["rho"].values[:n]
    rec.px[:n] = ds["px"].values[:n]
    rec.py[:n] = ds["py"].values[:n]
    rec.order[:n] = ds["order"].values[:n]
    rec.count = n
    state = {}
    for name in str(ds.attrs["checkpoint_state"]).split(","):
        arr = ds[f"state_{name}"].values
        if ds.attrs.get(f"state_complex_{name}"):
            arr = arr[..., 0] + 1j * arr[..., 1]
        state[name] = arr
    state["n_steps"] = int(ds.attrs["checkpoint_n_steps"])
    state["rng"] = str(ds.attrs["checkpoint_rng"])
    rec.solver.set_state(state)
    return index


def _progress_bar(progress, total):
    if progress is False:
        return None
    if progress is None and not (sys.stderr.isatty() and total >= 2000):
        return None
    from tqdm import tqdm

    return tqdm(total=total, file=sys.stderr, unit="step", desc="continuum",
                leave=False)


def simulate(cfg=None, *, progress=None, checkpoint=None, resume=None, dt=None,
             solver=None):
    """Run the continuum engine.

    Parameters
    ----------
    cfg : Config or anything :func:`crossflock.load_config` accepts
    progress : bool or None
        True: tqdm bar on stderr; None: only on a TTY for runs of 2000 steps or more;
        False: off.
    checkpoint : path, optional
        Written (atomically) every ``continuum.checkpoint_every`` simulated time.
    resume : path, optional
        A checkpoint of the same config (``run.duration`` may be longer); the result is
        bit-identical to an uninterrupted run.
    dt : float, optional
        Override of ``continuum.dt`` that bypasses the stability check (for tests of
        the divergence guard only); the sampling plan still uses ``continuum.dt``
        multiples, so it must divide ``run.sample_every``.
    solver : ContinuumSolver, optional
        A ready solver (its config must be ``cfg``); overrides ``dt``.

    Returns
    -------
    xarray.Dataset
        ``rho``, ``px``, ``py`` (time, y, x), ``order`` (time); ``mask`` when walls or
        obstacles are present.

    Raises
    ------
    NumericalError
        On NaN/Inf, negative density or blow-up (``.time``, ``.last_good``).
    InputError
        A resume file that is not a checkpoint of this config.
    """
    from .._config import Config

    if not isinstance(cfg, Config):
        cfg = load_config(cfg)
    method = resolve_method(cfg)
    if solver is None:
        solver = METHODS[method](cfg, dt=dt)
    step_dt = solver.dt
    plan = sample_plan(cfg.run, step_dt, "continuum.dt")
    rec = _Recorder(solver, plan, cfg, method)
    start = 0
    if resume is not None:
        start = _load_checkpoint(resume, cfg, rec)
    else:
        rec.record(0)
    every = cfg.continuum.checkpoint_every
    ck_samples = max(1, round(every / cfg.run.sample_every)) if every > 0 else 0
    w_bound = _w_bound(solver)
    rho0 = cfg.model.density
    solver.keep_good()
    guard_every = max(1, min(solver.guard_steps, plan.steps_per_sample))
    bar = _progress_bar(progress, plan.n_steps - start * plan.steps_per_sample)
    try:
        for index in range(start + 1, plan.n_samples):
            done = 0
            while done < plan.steps_per_sample:
                n = min(guard_every, plan.steps_per_sample - done)
                solver.advance(n)
                done += n
                cause = solver.health(rho0, w_bound)
                if cause is not None:
                    solver.status = "failed"
                    raise _diverged(cfg, solver, cause, rec, solver.last_good())
                solver.keep_good()
            rec.record(index)
            if bar is not None:
                bar.update(plan.steps_per_sample)
            if checkpoint is not None and ck_samples and index % ck_samples == 0:
                write_dataset(_checkpoint_dataset(rec, index), checkpoint)
    finally:
        if bar is not None:
            bar.close()
    return rec.dataset()


def _linear_instability_hint(cfg) -> str | None:
    """Hint naming a short-wavelength linear instability of the homogeneous state.

    Returns None unless the fastest-growing mode within the de-aliased cut-off grows
    and lies beyond half of that cut-off (a long-wave instability such as banding is
    physics the grid can follow; a short-wave one is not).
    """
    try:
        rate, kx, ky = max_growth(cfg)
    except Exception:  # the hint must never mask the divergence itself
        return None
    lx, ly = cfg.domain.size
    nx, ny = cfg.continuum.grid
    cutoff = (2.0 / 3.0) * np.pi / max(lx / nx, ly / ny)
    k = float(np.hypot(kx, ky))
    if rate <= 0 or k <= 0.5 * cutoff:
        return None
    return (f"the homogeneous state of these equations is linearly unstable at |k| = "
            f"{k:.3g} (growth {rate:.3g}); known for truncated kinetic equations deep in "
            "the ordered phase; raise the noise or use a coefficient table")


def _diverged(cfg, solver, cause, rec, last_good):
    limit, name = stability_limit(cfg)
    nx, ny = solver.nx, solver.ny
    t = solver.time
    hint = (f"dt = {solver.dt:g} exceeds the explicit limit {limit:.3g} ({name})"
            if solver.dt > limit else
            f"dt = {solver.dt:g} is within the explicit limit {limit:.3g} ({name}); "
            f"the {nx}x{ny} grid may be too coarse for the gradients that formed, or the "
            "coefficients admit no bounded state (beta <= 0?)")
    linear = _linear_instability_hint(cfg)
    if linear:
        hint = linear
    ds = rec.dataset(extra=last_good, last_good_time=float(last_good[0]),
                     failure=cause, failure_time=float(t))
    msg = (f"continuum run diverged at t = {t:g} ({cause}); {hint}; "
           f"last good state at t = {last_good[0]:g}")
    return NumericalError(msg, time=t, last_good=ds)
