"""Sweep scaling: 8 points on 1 vs 2 dask workers, and the per-point overhead.

Reference: the same 8 (point, seed) tasks evaluated one after another in this process
with :func:`crossflock._pipeline.evaluate` (no dask, no files). Printed: medians of the
wall times, the 1 -> 2 worker speed-up, and the per-point overhead of the sweep machinery
((sweep with 1 worker - serial reference) / points; includes cluster start-up, point
files, combining and figures).

Usage: ``python benchmarks/bench_sweep.py [--repeats 3] [--duration 200]``
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import tempfile
import time
from pathlib import Path

import numba
import tomli_w

from crossflock._pipeline import evaluate
from crossflock._sweep import load_sweep
from crossflock._sweep_run import run_sweep

BASE = {
    "domain": {"size": [24.0, 24.0]},
    "model": {"density": 2.0, "speed": 0.5, "noise": 0.3},
    "run": {"duration": 200.0, "sample_every": 2.0, "seed": 1, "initial": "ordered"},
    "agents": {"dt": 1.0},
    "continuum": {"grid": [24, 24], "dt": 0.05, "method": "finite_difference",
                  "kinetic_noise": "auto"},
}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--duration", type=float, default=200.0,
                    help="simulated time per task (longer tasks amortise start-up)")
    args = ap.parse_args()
    BASE["run"]["duration"] = args.duration
    work = Path(tempfile.mkdtemp(prefix="bench-sweep-"))
    path = work / "sweep.toml"
    path.write_text(tomli_w.dumps({"seeds": 2, "engines": ["agents", "continuum"],
                                   "base": BASE,
                                   "axes": {"model.noise": [0.3, 0.32, 0.34, 0.36]}}))
    sweep = load_sweep(path)
    tasks = sweep.tasks()
    numba.set_num_threads(1)
    evaluate(tasks[0].config, sweep.engines)  # compile once (workers share the cache)
    serial = []
    for _ in range(args.repeats):
        t = time.perf_counter()
        for task in tasks:
            evaluate(task.config, sweep.engines)
        serial.append(time.perf_counter() - t)
    timings = {}
    for workers in (1, 2):
        runs = []
        for r in range(args.repeats):
            out = work / f"w{workers}-{r}"
            t = time.perf_counter()
            run_sweep(sweep, out, workers=workers, progress=False, log=lambda m: None)
            runs.append(time.perf_counter() - t)
            shutil.rmtree(out)
        timings[workers] = statistics.median(runs)
    ref = statistics.median(serial)
    n = len(tasks)
    print(f"machine: {os.cpu_count()} cores, load {os.getloadavg()[0]:.2f}")
    print(f"{n} tasks (both engines, 24x24, {args.duration:g} time units each)")
    print(f"serial reference (in process) : {ref:8.2f} s  ({ref / n:.2f} s per task)")
    print(f"sweep, 1 worker               : {timings[1]:8.2f} s")
    print(f"sweep, 2 workers              : {timings[2]:8.2f} s")
    print(f"speed-up 1 -> 2 workers       : {timings[1] / timings[2]:8.2f}x")
    print(f"per-point overhead (1 worker) : {(timings[1] - ref) / n:8.2f} s")
    shutil.rmtree(work)


if __name__ == "__main__":
    main()
