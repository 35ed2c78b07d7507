"""Particle runs with a discarded transient (items 2 and 3).

``crossflock.agents.simulate`` keeps snapshots for the whole run; the band and
number-fluctuation items need only the stationary part, often of tens of thousands of
particles, so they step :class:`crossflock.agents.AgentSolver` through the transient and
then hand each sample to a callback (which keeps what it needs: counts per cell, or
positions for a particle Dataset built by ``crossflock._build.particle_dataset``).
"""

from __future__ import annotations

import numpy as np

import crossflock
from crossflock.agents import AgentSolver

__all__ = ["particle_config", "run_sampled", "snapshot_dataset"]


def particle_config(*, size, density, speed, noise, noise_kind="vectorial", seed=1,
                    initial="ordered", duration=1.0, sample_every=1.0, grid=None,
                    transient=0.0, snapshots=False):
    """Particle config (the continuum grid is the coarse-graining grid, dx = R)."""
    lx, ly = (float(s) for s in size)
    grid = [int(lx), int(ly)] if grid is None else [int(g) for g in grid]
    return crossflock.load_config({
        "domain": {"size": [lx, ly], "boundary": "periodic"},
        "model": {"density": density, "speed": speed, "radius": 1.0, "noise": noise,
                  "noise_kind": noise_kind},
        "run": {"duration": float(duration), "sample_every": float(sample_every),
                "seed": int(seed), "initial": initial},
        "agents": {"dt": 1.0, "snapshots": bool(snapshots)},
        # dt small enough for any grid of the coarse-graining (never run here)
        "continuum": {"grid": grid, "dt": 0.01},
        "compare": {"transient": float(transient)},
    })


def run_sampled(cfg, transient_steps: int, n_samples: int, every_steps: int, on_sample):
    """Step through ``transient_steps``, then call ``on_sample(i, solver)`` at
    ``n_samples`` samples ``every_steps`` apart. Returns ``(times, order)`` of the
    samples."""
    solver = AgentSolver(cfg)
    for _ in range(transient_steps):
        solver.step()
    times = np.empty(n_samples)
    order = np.empty(n_samples)
    for i in range(n_samples):
        if i:
            for _ in range(every_steps):
                solver.step()
        times[i] = solver.t
        order[i] = solver.order()
        on_sample(i, solver)
    return times, order


def snapshot_dataset(cfg, transient_steps: int, n_samples: int, every_steps: int):
    """Particle Dataset (with snapshots) of the samples after the transient."""
    from crossflock._build import particle_dataset

    n = AgentSolver(cfg).n
    snap = [np.empty((n_samples, n)) for _ in range(3)]

    def keep(i, solver):
        solver.snapshot_into(snap[0][i], snap[1][i], snap[2][i])

    times, order = run_sampled(cfg, transient_steps, n_samples, every_steps, keep)
    return particle_dataset(cfg, times, order, x=snap[0], y=snap[1], theta=snap[2],
                            n_particles=n)
