"""Sampling plan and random streams shared by both engines.

Both engines sample at t = 0, sample_every, 2 sample_every, ... <= duration, so their
outputs share one time axis. Random numbers come from numpy Generators seeded from
``run.seed`` with a fixed spawn key per stream, so results never depend on thread or
worker counts, and the two engines never share a stream.
"""

from __future__ import annotations

import math

import numpy as np

from ._errors import ConfigError

__all__ = ["SamplePlan", "sample_plan", "rng_for", "STREAMS"]

# Spawn keys of the random streams; never reorder (that would change every result).
STREAMS = {"agents": 1, "continuum": 2, "agents-init": 3, "continuum-init": 4,
           "analysis": 5}


class SamplePlan:
    """Steps per sample and sample times for one engine.

    Attributes
    ----------
    steps_per_sample : int
    n_samples : int
        Number of samples including t = 0.
    times : (n_samples,) ndarray
    """

    def __init__(self, steps_per_sample: int, n_samples: int, dt: float):
        self.steps_per_sample = steps_per_sample
        self.n_samples = n_samples
        self.dt = dt
        self.times = np.arange(n_samples) * (steps_per_sample * dt)

    @property
    def n_steps(self) -> int:
        return self.steps_per_sample * (self.n_samples - 1)


def sample_plan(run, dt: float, key: str) -> SamplePlan:
    """Plan for an engine with time step ``dt`` (config key ``key`` for messages).

    Raises
    ------
    ConfigError
        When ``run.sample_every`` is not a whole multiple of ``dt``.
    """
    ratio = run.sample_every / dt
    steps = round(ratio)
    if steps < 1 or abs(ratio - steps) > 1e-9 * max(1.0, ratio):
        raise ConfigError(
            f"`run.sample_every` = {run.sample_every:g} must be a whole multiple of "
            f"`{key}` (got {key} = {dt:g}, ratio {ratio:.6g})"
        )
    n_samples = int(math.floor(run.duration / run.sample_every + 1e-9)) + 1
    return SamplePlan(steps, n_samples, dt)


def rng_for(seed: int, stream: str) -> np.random.Generator:
    """Generator for ``stream`` (a key of :data:`STREAMS`) seeded from ``seed``."""
    return np.random.default_rng(np.random.SeedSequence(int(seed),
                                                        spawn_key=(STREAMS[stream],)))
