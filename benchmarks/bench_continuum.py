"""Speed of a 512 x 512 continuum step: finite differences and spectral vs numpy.

The reference is a plain numpy implementation (np.roll central differences, forward
Euler) of the minimal equations d_t rho = -v0 div w,
d_t w = (alpha - beta |w|^2) w - P1 grad rho + D_T lap w, run in the same process on the
same grid and dt. The finite-difference solver's first step is forward Euler of the same
discretisation, so the two are checked to agree to round-off before timing.

Figures (medians over rounds; each round times every path once, so a round's ratios see
one machine state; each path runs whole calls for at least ``--min-time`` seconds per round,
as timeit's autorange does, so each is timed with its own data in the caches: a single
blocked call right after the reference would mostly time reloading its state and rings):
grid-point-updates per second and the ratio to the reference for

* finite_difference ``step()``: one SBDF2 step per pass over memory;
* finite_difference ``advance(K)``: K steps per pass (temporal blocking, K from
  ``block_steps``), what ``simulate`` uses when the realizability limiter is off;
* spectral ``step()``, and the share of its time spent in FFTs;

plus the machine load average and the peak RSS.

Usage: python benchmarks/bench_continuum.py [--n 512] [--repeats 7] [--min-time 0.2]
       [--threads 1 2]
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import time

import numba
import numpy as np

import crossflock as cf
from crossflock.continuum import FiniteDifferenceSolver, SpectralSolver
from crossflock.continuum import _spectral as spectral_module

COEFFS = {"alpha": 1.0, "beta": 1.0, "pressure": [0.5], "D_T": 0.1}
DT = 0.05
V0 = 0.5
FFT_SHARE_STEPS = 10  # spectral steps per round of the FFT-share measurement


def config(n, method):
    return cf.load_config({
        "domain": {"size": [float(n), float(n)]},
        "model": {"density": 1.0, "speed": V0, "radius": 1.0},
        "run": {"duration": 1.0, "sample_every": 1.0},
        "continuum": {"grid": [n, n], "dt": DT, "method": method, "coefficients": COEFFS},
    })


class NumpyReference:
    """Forward-Euler np.roll implementation of the minimal equations (periodic)."""

    def __init__(self, rho, wx, wy, dx, v0):
        self.rho, self.wx, self.wy = rho.copy(), wx.copy(), wy.copy()
        self.dx, self.v0 = dx, v0

    def _ddx(self, f):
        return (np.roll(f, -1, 1) - np.roll(f, 1, 1)) / (2 * self.dx)

    def _ddy(self, f):
        return (np.roll(f, -1, 0) - np.roll(f, 1, 0)) / (2 * self.dx)

    def _lap(self, f):
        return (np.roll(f, 1, 0) + np.roll(f, -1, 0) + np.roll(f, 1, 1)
                + np.roll(f, -1, 1) - 4 * f) / self.dx**2

    def step(self):
        rho, wx, wy = self.rho, self.wx, self.wy
        s = COEFFS["alpha"] - COEFFS["beta"] * (wx * wx + wy * wy)
        p1 = COEFFS["pressure"][0]
        drho = -self.v0 * (self._ddx(wx) + self._ddy(wy))
        dwx = s * wx - p1 * self._ddx(rho) + COEFFS["D_T"] * self._lap(wx)
        dwy = s * wy - p1 * self._ddy(rho) + COEFFS["D_T"] * self._lap(wy)
        self.rho = rho + DT * drho
        self.wx = wx + DT * dwx
        self.wy = wy + DT * dwy


def timed(step, min_time, per_call=1):
    """Seconds per step of whole calls of ``step`` (each advancing ``per_call`` steps),
    called until at least ``min_time`` seconds have passed."""
    calls = 0
    t0 = time.perf_counter()
    while True:
        step()
        calls += 1
        elapsed = time.perf_counter() - t0
        if elapsed >= min_time:
            return elapsed / (calls * per_call)


def interleaved(paths, repeats, min_time):
    """Per path, the list of seconds per step over ``repeats`` rounds.

    ``paths``: name -> (callable, steps per call). Each round times every path once
    (for at least ``min_time`` seconds), one after the other, so that the ratios of a
    round see the same machine state: on a shared machine the memory-bound reference
    alone drifts by a factor 1.5 within minutes.
    """
    for path in paths.values():
        path[0]()  # warm-up (compilation, caches)
    out = {name: [] for name in paths}
    for _ in range(repeats):
        for name, (step, per_call) in paths.items():
            out[name].append(timed(step, min_time, per_call))
    return out


def fft_share(solver, steps, repeats):
    """Median fraction of a spectral step spent inside scipy.fft calls."""
    spent = [0.0]
    orig_f, orig_i = spectral_module._rfft2, spectral_module._irfft2

    def rfft2(a, workers):
        t0 = time.perf_counter()
        out = orig_f(a, workers)
        spent[0] += time.perf_counter() - t0
        return out

    def irfft2(a, shape, workers):
        t0 = time.perf_counter()
        out = orig_i(a, shape, workers)
        spent[0] += time.perf_counter() - t0
        return out

    spectral_module._rfft2, spectral_module._irfft2 = rfft2, irfft2
    shares = []
    try:
        for _ in range(repeats):
            spent[0] = 0.0
            t0 = time.perf_counter()
            for _ in range(steps):
                solver.step()
            shares.append(spent[0] / (time.perf_counter() - t0))
    finally:
        spectral_module._rfft2, spectral_module._irfft2 = orig_f, orig_i
    return statistics.median(shares)


def check_same_equations(n):
    """Largest relative difference of one step: finite_difference vs the reference."""
    fd = FiniteDifferenceSolver(config(n, "finite_difference"))
    ref = NumpyReference(*fd.fields(), fd.dx, V0)
    fd.step()  # the first SBDF2 step is forward Euler
    ref.step()
    got = np.stack(fd.fields())
    want = np.stack([ref.rho, ref.wx, ref.wy])
    return float(np.max(np.abs(got - want)) / np.max(np.abs(want)))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=512)
    ap.add_argument("--repeats", type=int, default=7)
    ap.add_argument("--min-time", type=float, default=0.2,
                    help="seconds of whole calls per path and round (default 0.2)")
    ap.add_argument("--threads", type=int, nargs="*", default=None,
                    help="numba threads / FFT workers to try (default: 1 and all)")
    args = ap.parse_args(argv)
    n = args.n
    points = n * n
    diff = check_same_equations(n)
    print(f"finite_difference vs numpy reference, one Euler step: max rel. diff {diff:.1e}")
    if diff > 1e-12:
        raise SystemExit("the finite-difference step and the reference disagree")
    threads = args.threads or sorted({1, numba.config.NUMBA_NUM_THREADS})
    for nthreads in threads:
        numba.set_num_threads(nthreads)
        fd = FiniteDifferenceSolver(config(n, "finite_difference"), workers=nthreads)
        sp = SpectralSolver(config(n, "spectral"), workers=nthreads)
        ref = NumpyReference(*fd.fields(), fd.dx, V0)
        k = fd.block
        times = interleaved({
            "ref": (ref.step, 1),
            "step": (fd.step, 1),
            "advance": (lambda fd=fd, k=k: fd.advance(k), k),
            "spectral": (sp.step, 1),
        }, args.repeats, args.min_time)
        share = fft_share(sp, FFT_SHARE_STEPS, args.repeats)
        print(f"grid {n}x{n}, dt {DT}, numba threads {nthreads}, FFT workers "
              f"{sp.workers}, {args.repeats} interleaved rounds of >= {args.min_time} s per "
              f"path (medians), load average {os.getloadavg()[0]:.2f}")
        rows = (("numpy np.roll reference (Euler)", "ref"),
                ("finite_difference step()", "step"),
                (f"finite_difference advance({k})", "advance"),
                ("spectral step()", "spectral"))
        for label, name in rows:
            t = statistics.median(times[name])
            ratio = statistics.median(r / x for r, x in zip(times["ref"], times[name], strict=True))
            print(f"  {label:34s} {t * 1e3:9.3f} ms/step  {points / t:12.4g} point-updates/s"
                  f"  {ratio:6.2f}x")
        ratios = sorted(r / x for r, x in zip(times["ref"], times["advance"], strict=True))
        print(f"  finite_difference (blocked) / numpy: {statistics.median(ratios):.2f}x, "
              f"rounds {ratios[0]:.2f}-{ratios[-1]:.2f}x (target >= 20x); reference "
              f"{min(times['ref']) * 1e3:.2f}-{max(times['ref']) * 1e3:.2f} ms/step")
        print(f"  spectral step time in FFTs:          {100 * share:.1f}% (target >= 60%)")
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"peak RSS: {rss:.1f} MiB")


if __name__ == "__main__":
    main()
