"""Run driver: sampling, progress bar, checkpoints and the output Dataset.

Checkpoints. With a ``checkpoint`` path, the full state is written (atomically, through
``crossflock._io.write_dataset``) every ``agents.checkpoint_every`` of simulated time
(rounded to whole steps) and once at the end of the run; with
``checkpoint_every = 0`` only the final one is written. A checkpoint is a particle
Dataset holding the samples so far plus the state in storage order: ``state_x``,
``state_y``, ``state_c``, ``state_s`` (unit heading) and ``state_pid`` on dim
``slot``, and the attributes ``crossflock_checkpoint = 1``, ``n_steps`` and
``rng_state`` (the JSON of the noise Generator's ``bit_generator.state``). Resuming
from it repeats exactly the operations of the unbroken run, so the returned Dataset
is bit-identical to it. A checkpoint is refused (InputError) unless its embedded
config has the same physics, run and engine sections as the one resuming it.
"""

from __future__ import annotations

import sys
import warnings

import numpy as np

from crossflock._build import annotate, particle_dataset
from crossflock._config import Config, load_config, physics_mapping
from crossflock._errors import InputError, NumericalError
from crossflock._io import check_writable, dataset_config, read_dataset, write_dataset
from crossflock._runtime import sample_plan

from ._solver import AgentSolver

__all__ = ["simulate", "snapshot_megabytes", "SNAPSHOT_WARN_MB"]

# Above this estimated snapshot size a UserWarning is issued.
SNAPSHOT_WARN_MB = 1000.0
# Auto progress bar threshold (particle-updates).
_PROGRESS_UPDATES = 10**7

_STATE_ATTRS = {
    "state_x": ("checkpoint x position, storage order", "R"),
    "state_y": ("checkpoint y position, storage order", "R"),
    "state_c": ("checkpoint heading cosine, storage order", "1"),
    "state_s": ("checkpoint heading sine, storage order", "1"),
    "state_pid": ("particle index of each storage slot", "1"),
    "slot": ("storage slot", "1"),
}


def snapshot_megabytes(n_particles: int, n_samples: int) -> float:
    """Size of the x, y, theta snapshots (float64) in MB."""
    return 3 * 8 * n_particles * n_samples / 1e6


class _Record:
    """Preallocated output arrays of one run."""

    def __init__(self, plan, n, snapshots, every_step):
        self.plan = plan
        self.order = np.full(plan.n_samples, np.nan)
        self.snap = [np.empty((plan.n_samples, n)) for _ in range(3)] if snapshots else None
        self.order_step = np.full(plan.n_steps + 1, np.nan) if every_step else None
        self.step_time = np.arange(plan.n_steps + 1) * plan.dt if every_step else None

    def take(self, solver: AgentSolver) -> None:
        """Record what is due after the solver's current step."""
        k = solver.n_steps
        phi = None
        if self.order_step is not None:
            phi = solver.order()
            self.order_step[k] = phi
        if k % self.plan.steps_per_sample == 0:
            s = k // self.plan.steps_per_sample
            phi = solver.order() if phi is None else phi
            if not np.isfinite(phi):
                raise NumericalError(f"particle headings became non-finite at t = "
                                     f"{solver.t:g}", time=solver.t)
            self.order[s] = phi
            if self.snap is not None:
                solver.snapshot_into(self.snap[0][s], self.snap[1][s], self.snap[2][s])

    def dataset(self, cfg, n, n_samples, last_step, **attrs):
        snap = {}
        if self.snap is not None:
            snap = {"x": self.snap[0][:n_samples], "y": self.snap[1][:n_samples],
                    "theta": self.snap[2][:n_samples]}
        step = {}
        if self.order_step is not None:
            step = {"step_time": self.step_time[:last_step + 1],
                    "order_step": self.order_step[:last_step + 1]}
        return particle_dataset(cfg, self.plan.times[:n_samples],
                                self.order[:n_samples], **snap, **step,
                                n_particles=n, **attrs)


def _checkpoint_dataset(cfg, solver, rec):
    k = solver.n_steps
    n_samples = k // rec.plan.steps_per_sample + 1
    state = solver.get_state()
    ds = rec.dataset(cfg, solver.n, n_samples, k, crossflock_checkpoint=1, n_steps=k,
                     rng_state=state["rng_state"])
    ds = ds.assign(
        state_x=("slot", state["x"]), state_y=("slot", state["y"]),
        state_c=("slot", state["c"]), state_s=("slot", state["s"]),
        state_pid=("slot", state["pid"]),
    ).assign_coords(slot=np.arange(solver.n, dtype=np.int64))
    return annotate(ds, _STATE_ATTRS)


def _write_checkpoint(cfg, solver, rec, path):
    write_dataset(_checkpoint_dataset(cfg, solver, rec), path)


def _load_checkpoint(cfg, solver, rec, path):
    ds = read_dataset(path, kind="particles")
    if int(ds.attrs.get("crossflock_checkpoint", 0)) != 1:
        raise InputError(f"resume file {str(path)!r} is not an agents checkpoint "
                         "(no crossflock_checkpoint attribute)")
    if physics_mapping(dataset_config(ds)) != physics_mapping(cfg):
        raise InputError(f"resume file {str(path)!r} was written by a different config; "
                         "resume with the config of the interrupted run")
    k = int(ds.attrs["n_steps"])
    if ds.sizes.get("slot") != solver.n or k > rec.plan.n_steps:
        raise InputError(f"resume file {str(path)!r} does not match this run "
                         f"({ds.sizes.get('slot')} particles, step {k})")
    solver.set_state({"x": ds["state_x"].values, "y": ds["state_y"].values,
                      "c": ds["state_c"].values, "s": ds["state_s"].values,
                      "pid": ds["state_pid"].values,
                      "n_steps": k, "rng_state": str(ds.attrs["rng_state"])})
    n_samples = ds.sizes["time"]
    rec.order[:n_samples] = ds["order"].values
    if rec.snap is not None:
        for arr, name in zip(rec.snap, ("x", "y", "theta"), strict=True):
            arr[:n_samples] = ds[name].values
    if rec.order_step is not None:
        rec.order_step[:k + 1] = ds["order_step"].values


def _progress_bar(progress, total, initial, updates):
    if progress is None:
        progress = sys.stderr.isatty() and updates > _PROGRESS_UPDATES
    if not progress:
        return None
    from tqdm import tqdm

    return tqdm(total=total, initial=initial, file=sys.stderr, unit="step",
                desc="agents", dynamic_ncols=True)


def simulate(cfg, *, progress=None, checkpoint=None, resume=None):
    """Run the particle engine from a config.

    Parameters
    ----------
    cfg : crossflock.Config
        (or anything :func:`crossflock.load_config` accepts).
    progress : bool or None
        True: tqdm bar on stderr; False: none; None: a bar only when stderr is a
        terminal and the run has more than 1e7 particle-updates.
    checkpoint : path, optional
        Where to keep the latest checkpoint (see module docstring).
    resume : path, optional
        Checkpoint to continue from; must come from the same config.

    Returns
    -------
    xarray.Dataset
        ``order`` (time); ``x``, ``y``, ``theta`` (time, particle) when
        ``agents.snapshots``; ``order_step`` (step_time) when
        ``agents.order_every = "step"``; attribute ``n_particles``.

    Raises
    ------
    InputError
        ``resume`` is not a checkpoint of this config.
    NumericalError
        Non-finite headings (never expected); ``last_good`` holds the samples
        recorded before the failure.
    """
    if not isinstance(cfg, Config):
        cfg = load_config(cfg)
    if checkpoint is not None:
        check_writable(checkpoint)  # fail now, not at the first checkpoint
    plan = sample_plan(cfg.run, cfg.agents.dt, "agents.dt")
    solver = AgentSolver(cfg)
    n = solver.n
    if cfg.agents.snapshots:
        mb = snapshot_megabytes(n, plan.n_samples)
        if mb > SNAPSHOT_WARN_MB:
            warnings.warn(f"agents snapshots of {n} particles x {plan.n_samples} samples "
                          f"will take about {mb:.0f} MB", UserWarning, stacklevel=2)
    rec = _Record(plan, n, cfg.agents.snapshots, cfg.agents.order_every == "step")
    if resume is not None:
        _load_checkpoint(cfg, solver, rec, resume)
    else:
        rec.take(solver)
    every = cfg.agents.checkpoint_every
    ckpt_steps = max(1, round(every / plan.dt)) if every > 0 else 0
    bar = _progress_bar(progress, plan.n_steps, solver.n_steps, n * plan.n_steps)
    try:
        while solver.n_steps < plan.n_steps:
            solver.step()
            try:
                rec.take(solver)
            except NumericalError as exc:
                good = (solver.n_steps - 1) // plan.steps_per_sample + 1
                exc.last_good = rec.dataset(cfg, n, good, solver.n_steps - 1)
                raise
            if bar is not None:
                bar.update(1)
            if checkpoint is not None and ckpt_steps and solver.n_steps % ckpt_steps == 0 \
                    and solver.n_steps < plan.n_steps:
                _write_checkpoint(cfg, solver, rec, checkpoint)
    finally:
        if bar is not None:
            bar.close()
    if checkpoint is not None:
        _write_checkpoint(cfg, solver, rec, checkpoint)
    return rec.dataset(cfg, n, plan.n_samples, plan.n_steps)
