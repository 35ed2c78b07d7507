"""Shared fixtures: small configs that run in a fraction of a second."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
CONFIGS = REPO / "configs"


def small_mapping(**sections):
    """A tiny periodic scenario as a mapping; ``sections`` update it per section."""
    base = {
        "domain": {"size": [16.0, 16.0], "boundary": "periodic"},
        "model": {"density": 1.0, "speed": 0.5, "radius": 1.0, "noise": 0.2},
        "run": {"duration": 20.0, "sample_every": 2.0, "seed": 3},
        "agents": {"dt": 1.0},
        "continuum": {"grid": [32, 32], "dt": 0.025},
    }
    for name, table in sections.items():
        base.setdefault(name, {}).update(table)
    return base


@pytest.fixture
def small_config():
    import crossflock

    return crossflock.load_config(small_mapping())


def run_cli(*args, cwd=None, timeout=300):
    """Run ``python -m crossflock ARGS`` in a subprocess; returns CompletedProcess."""
    env = dict(os.environ)
    env.setdefault("NUMBA_NUM_THREADS", "2")
    return subprocess.run([sys.executable, "-m", "crossflock", *map(str, args)],
                          cwd=cwd, env=env, capture_output=True, text=True,
                          timeout=timeout, check=False)


@pytest.fixture
def cli():
    return run_cli


def results_per_thread_count(run):
    """``run(n)`` with numba at 1 thread and at its maximum; the list of results.

    The thread count is restored afterwards, so tests can compare results bit for bit.
    """
    import numba

    before = numba.get_num_threads()
    out = []
    try:
        for n in sorted({1, numba.config.NUMBA_NUM_THREADS}):
            numba.set_num_threads(n)
            out.append(run(n))
    finally:
        numba.set_num_threads(before)
    return out
