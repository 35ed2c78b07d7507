"""Coarse-graining speed: numba cloud-in-cell deposit vs a plain numpy np.add.at reference.

Usage: python benchmarks/bench_coarse.py [N] [NX]   (default 10^6 particles, 128 x 128)

Prints the median of several repeats for each implementation, their ratio, particles per
second and the peak RSS of the process. The reference computes the same periodic
cloud-in-cell weights with np.add.at (same numbers to round-off, checked before timing).
"""

from __future__ import annotations

import resource
import sys
import time

import numpy as np

from crossflock._geometry import Geometry
from crossflock.compare import deposit

REPEATS = 5


def numpy_reference(lx, ly, nx, ny, x, y, theta):
    """Periodic cloud-in-cell deposit with np.add.at: counts, cos and sin sums."""
    gx, gy = x / (lx / nx) - 0.5, y / (ly / ny) - 0.5
    i0, j0 = np.floor(gx).astype(np.int64), np.floor(gy).astype(np.int64)
    fx, fy = gx - i0, gy - j0
    i0 %= nx
    j0 %= ny
    i1, j1 = (i0 + 1) % nx, (j0 + 1) % ny
    c, s = np.cos(theta), np.sin(theta)
    out = np.zeros((3, ny, nx))
    for (jj, ii), w in (((j0, i0), (1 - fx) * (1 - fy)), ((j0, i1), fx * (1 - fy)),
                        ((j1, i0), (1 - fx) * fy), ((j1, i1), fx * fy)):
        np.add.at(out[0], (jj, ii), w)
        np.add.at(out[1], (jj, ii), w * c)
        np.add.at(out[2], (jj, ii), w * s)
    return out


def _median_time(fn, repeats=REPEATS):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def main(argv):
    n = int(float(argv[1])) if len(argv) > 1 else 10**6
    nx = int(argv[2]) if len(argv) > 2 else 128
    lx = ly = 128.0
    geom = Geometry(lx, ly, False, np.zeros((0, 2)), np.zeros(0))
    rng = np.random.default_rng(0)
    x, y = rng.uniform(0, lx, n), rng.uniform(0, ly, n)
    theta = rng.uniform(-np.pi, np.pi, n)
    fluid = np.ones((nx, nx), bool)
    fallback = np.full((nx, nx), -1, np.int64)

    def fast():
        return deposit(geom, nx, nx, x, y, theta, fluid=fluid, fallback=fallback)

    def ref():
        return numpy_reference(lx, ly, nx, nx, x, y, theta)

    got, want = np.array(fast()), ref()  # also compiles / warms up
    assert np.allclose(got, want, rtol=1e-10, atol=1e-9), "implementations disagree"
    t_fast = _median_time(fast)
    t_ref = _median_time(ref)
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"coarse-graining {n} particles onto {nx} x {nx} cells, median of {REPEATS}")
    print(f"  numba cloud-in-cell   : {t_fast * 1e3:9.2f} ms  ({n / t_fast:.3g} particles/s)")
    print(f"  numpy np.add.at ref.  : {t_ref * 1e3:9.2f} ms  ({n / t_ref:.3g} particles/s)")
    print(f"  speed-up (ref / numba): {t_ref / t_fast:9.1f}x")
    print(f"  peak RSS              : {rss_mb:9.1f} MB")


if __name__ == "__main__":
    main(sys.argv)
