"""Speed and memory of the particle engine against a plain numpy + cKDTree step.

Scenario (issue 3): periodic square box, density 2, radius 1, speed 0.5, eta 0.2,
angular noise, dt 1. Prints particle-updates per second (N x steps / wall time, median
of several repeats) for the engine at N = 1e5 and 1e6, for the reference at N = 1e5
(and once at 1e6 with --reference-1e6), their ratio, and the peak RSS of a separate
process that runs ``simulate`` at N = 1e6 without snapshots.

Usage: python benchmarks/bench_agents.py [--repeats 5] [--steps 5] [--reference-1e6]
"""

from __future__ import annotations

import argparse
import math
import os
import resource
import statistics
import subprocess
import sys
import time

import numpy as np
from scipy.spatial import cKDTree

import crossflock
from crossflock.agents import AgentSolver, simulate


def bench_config(n: int, duration: float = 10.0):
    side = math.sqrt(n / 2.0)
    grid = int(math.ceil(side)) + 1
    return crossflock.load_config(None, {
        "domain.size": [side, side], "model.density": 2.0, "model.radius": 1.0,
        "model.speed": 0.5, "model.noise": 0.2, "model.noise_kind": "angular",
        "agents.dt": 1.0, "run.duration": duration, "run.sample_every": 1.0,
        "continuum.grid": [grid, grid], "continuum.dt": 1e-4,
    })


def reference_step(x, y, theta, box, radius, step, eta, rng):
    """The same model step in numpy + scipy.spatial.cKDTree (align, then move)."""
    n = x.size
    tree = cKDTree(np.column_stack((x, y)), boxsize=box)
    pairs = tree.query_pairs(radius, output_type="ndarray")
    i, j = pairs[:, 0], pairs[:, 1]
    c, s = np.cos(theta), np.sin(theta)
    sx = c + np.bincount(i, weights=c[j], minlength=n) + np.bincount(j, weights=c[i],
                                                                     minlength=n)
    sy = s + np.bincount(i, weights=s[j], minlength=n) + np.bincount(j, weights=s[i],
                                                                     minlength=n)
    theta = np.arctan2(sy, sx) + eta * 2.0 * np.pi * (rng.random(n) - 0.5)
    theta = np.pi - np.mod(np.pi - theta, 2.0 * np.pi)
    x = np.mod(x + step * np.cos(theta), box[0])
    y = np.mod(y + step * np.sin(theta), box[1])
    x[x >= box[0]] = 0.0
    y[y >= box[1]] = 0.0
    return x, y, theta


def time_engine(n, repeats, steps, threads):
    import numba

    old = numba.get_num_threads()
    numba.set_num_threads(threads)
    try:
        solver = AgentSolver(bench_config(n))
        solver.step()  # compile / warm caches
        rates = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            for _ in range(steps):
                solver.step()
            rates.append(n * steps / (time.perf_counter() - t0))
    finally:
        numba.set_num_threads(old)
    return statistics.median(rates)


def time_reference(n, repeats, steps):
    cfg = bench_config(n)
    solver = AgentSolver(cfg)
    x, y, theta = solver.x, solver.y, solver.theta
    box = tuple(cfg.domain.size)
    rng = np.random.default_rng(0)
    args = (box, cfg.model.radius, cfg.model.speed * cfg.agents.dt, cfg.model.noise, rng)
    x, y, theta = reference_step(x, y, theta, *args)
    rates = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(steps):
            x, y, theta = reference_step(x, y, theta, *args)
        rates.append(n * steps / (time.perf_counter() - t0))
    return statistics.median(rates)


def rss_child(n: int, duration: float) -> None:
    """Run simulate at N particles without snapshots; print the peak RSS in MB."""
    t0 = time.perf_counter()
    simulate(bench_config(n, duration), progress=False)
    wall = time.perf_counter() - t0
    print(f"{peak_rss_mb():.1f} {wall:.3f}")


def peak_rss_mb() -> float:
    """Peak resident set size of this process in MB.

    VmHWM from /proc (Linux) rather than getrusage's ru_maxrss, which survives
    ``exec`` and would report the parent's peak in a child process.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return float(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeats", type=int, default=5)
    p.add_argument("--steps", type=int, default=5)
    p.add_argument("--reference-1e6", action="store_true",
                   help="also time the reference once at N = 1e6 (slow)")
    p.add_argument("--rss-child", type=int, default=0, help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.rss_child:
        rss_child(args.rss_child, 10.0)
        return
    import numba

    threads = numba.config.NUMBA_NUM_THREADS
    load = " ".join(f"{v:.2f}" for v in os.getloadavg())
    print(f"numba: up to {threads} threads; {args.repeats} repeats x {args.steps} steps "
          f"(medians); load average {load}")
    counts = sorted({1, threads})
    ref5 = time_reference(10**5, args.repeats, args.steps)
    print(f"N=1e5  reference {ref5:.3e} particle-updates/s (numpy + cKDTree)")
    for n, label in ((10**5, "1e5"), (10**6, "1e6")):
        for t in counts:
            rate = time_engine(n, args.repeats, args.steps, t)
            ratio = f", {rate / ref5:.1f}x reference" if n == 10**5 else ""
            print(f"N={label}  engine, {t} thread(s) {rate:.3e} particle-updates/s{ratio}")
    if args.reference_1e6:
        ref6 = time_reference(10**6, 1, 1)
        print(f"N=1e6  reference {ref6:.3e} particle-updates/s (one step)")
    print(f"numba threading layer: {numba.threading_layer()}")
    this = peak_rss_mb()
    print(f"peak RSS of this process (engine + reference): {this:.1f} MB")
    out = subprocess.run([sys.executable, __file__, "--rss-child", str(10**6)],
                         capture_output=True, text=True, check=True).stdout.split()
    print(f"N=1e6  simulate(10 steps, no snapshots) in a fresh process: peak RSS "
          f"{float(out[0]):.1f} MB, wall {float(out[1]):.2f} s (incl. setup)")


if __name__ == "__main__":
    main()
