"""Time-series statistics: transient rule, blocking errors, autocorrelation, Binder.

Error rules (documented contract):

* Standard error of a time average (``order_sem`` and every other mean in
  :func:`crossflock.compare.observe`): ``sqrt(var * tau / n)`` with the integrated
  autocorrelation time ``tau`` below (:func:`mean_sem`); NaN ("not resolved") when
  Sokal's window is not found, fewer than :data:`MIN_EFFECTIVE` effective samples
  ``n / tau`` remain, or the series has fewer than :data:`MIN_SERIES` samples (too few
  to estimate its own autocorrelation: short correlated series look uncorrelated).
  Sokal's windowed estimate is nearly unbiased, whereas blocking underestimates by
  about ``tau / b`` at the chosen block size b. Why 20: the estimate of tau has a
  relative standard deviation of about ``sqrt(2 (2M + 1) / n) = sqrt(20 / n_eff)``
  with M = 5 tau (Sokal 1997, eq. 3.19 as recalled), so below 20 effective samples the
  error bar itself is uncertain by more than 100 %.
* Cross-check helper :func:`blocking`: the blocking method (Flyvbjerg & Petersen 1989,
  J. Chem. Phys. 91, 461) with the automatic level choice of Jonsson (2018, Phys. Rev. E
  98, 043304): the series is halved repeatedly by averaging neighbours; the first level
  from which the lag-1 autocorrelations of all coarser levels are compatible with zero
  (the sum of ``n_k (gamma_k / s_k^2)^2`` below the 99 % chi-square quantile) is used.
  When no level with at least :data:`MIN_BLOCKS` blocks passes (or the series has fewer
  than :data:`MIN_SERIES` samples), the run is too short for its correlation time and
  the error is NaN ("not resolved").
* Integrated autocorrelation time ``tau = 1 + 2 sum_t rho(t)`` (in samples, so that
  ``var(mean) = var * tau / n``), summed over Sokal's self-consistent window, the
  smallest M with ``M >= 5 tau(M)`` (Sokal 1997, "Monte Carlo methods in statistical
  mechanics", section 3).
* Statistics that are not averages (Binder cumulant, fitted exponents): blocked
  jackknife over contiguous time blocks of ``ceil(2 tau)`` samples; NaN with fewer than
  :data:`MIN_JACKKNIFE_BLOCKS` blocks or :data:`MIN_SERIES` samples.
* Transient: samples with ``t < t0 + transient * (t_end - t0)`` are discarded
  (``compare.transient``, a fraction of the run's duration); at least
  :data:`MIN_SAMPLES` must remain.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats as _sps

from crossflock._errors import InputError

__all__ = [
    "MIN_SAMPLES",
    "MIN_BLOCKS",
    "MIN_JACKKNIFE_BLOCKS",
    "MIN_EFFECTIVE",
    "MIN_SERIES",
    "analysis_window",
    "mean_sem",
    "blocking",
    "blocking_sem",
    "autocorrelation_time",
    "blocked_jackknife",
    "binder_cumulant",
    "binder_with_error",
    "jackknife_block_length",
]

MIN_SAMPLES = 4
MIN_BLOCKS = 8
MIN_EFFECTIVE = 20
MIN_SERIES = 20
MIN_JACKKNIFE_BLOCKS = 4


def analysis_window(time, transient: float) -> np.ndarray:
    """Boolean mask of the samples kept after the transient.

    Parameters
    ----------
    time : (T,) ndarray
    transient : float
        Fraction of the run's duration ``t_end - t0`` to discard, in [0, 1).

    Raises
    ------
    InputError
        When fewer than :data:`MIN_SAMPLES` samples remain.
    """
    time = np.asarray(time, dtype=float)
    if time.size == 0:
        raise InputError("run has no time samples")
    t0, t1 = float(time[0]), float(time[-1])
    start = t0 + transient * (t1 - t0)
    keep = time >= start - 1e-9 * max(1.0, abs(t1))
    if keep.sum() < MIN_SAMPLES:
        raise InputError(
            f"run has {int(keep.sum())} samples after discarding the transient "
            f"(compare.transient = {transient:g} of duration {t1 - t0:g}, {time.size} "
            f"samples in all); need at least {MIN_SAMPLES}: lengthen run.duration or "
            "shorten run.sample_every"
        )
    return keep


class BlockingResult:
    """Outcome of :func:`blocking` for each column.

    Attributes
    ----------
    mean, sem : ndarray
        Mean and standard error (NaN where not converged).
    block_size : ndarray of int
        Samples per block at the chosen level (0 where not converged).
    converged : ndarray of bool
    """

    def __init__(self, mean, sem, block_size, converged):
        self.mean = mean
        self.sem = sem
        self.block_size = block_size
        self.converged = converged


def blocking(data) -> BlockingResult:
    """Blocking analysis of the columns of ``data``.

    Parameters
    ----------
    data : (n,) or (n, m) ndarray
        Time series along axis 0.

    Returns
    -------
    BlockingResult
        Arrays of shape ``()`` for 1-D input, ``(m,)`` otherwise.

    References
    ----------
    Flyvbjerg & Petersen 1989, J. Chem. Phys. 91, 461; Jonsson 2018, Phys. Rev. E 98,
    043304.
    """
    arr = np.asarray(data, dtype=float)
    one_d = arr.ndim == 1
    x = arr.reshape(arr.shape[0], -1)
    mean = x.mean(axis=0) if x.shape[0] else np.full(x.shape[1], np.nan)
    var_levels, stat_levels, n_levels = [], [], []
    while x.shape[0] >= 2:
        n = x.shape[0]
        mu = x.mean(axis=0)
        d = x - mu
        s2 = (d**2).mean(axis=0)
        gamma = (d[:-1] * d[1:]).sum(axis=0) / n
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(s2 > 0, n * (gamma / np.where(s2 > 0, s2, 1.0)) ** 2, 0.0)
        var_levels.append(s2)
        stat_levels.append(t)
        n_levels.append(n)
        half = n // 2
        x = 0.5 * (x[0:2 * half:2] + x[1:2 * half:2])
    m = arr.reshape(arr.shape[0], -1).shape[1]
    sem = np.full(m, np.nan)
    size = np.zeros(m, dtype=np.int64)
    conv = np.zeros(m, dtype=bool)
    d = len(n_levels)
    if d and n_levels[0] >= MIN_SERIES:
        stat = np.array(stat_levels)  # (d, m)
        tail = np.cumsum(stat[::-1], axis=0)[::-1]  # M_j = sum_{k >= j} t_k
        quant = _sps.chi2.ppf(0.99, d - np.arange(d))[:, None]
        for col in range(m):
            for j in range(d):
                if n_levels[j] < MIN_BLOCKS:
                    break
                if tail[j, col] < quant[j, 0]:
                    sem[col] = math.sqrt(var_levels[j][col] / (n_levels[j] - 1))
                    size[col] = 2**j
                    conv[col] = True
                    break
    if one_d:
        return BlockingResult(mean[0], sem[0], size[0], conv[0])
    return BlockingResult(mean, sem, size, conv)


def blocking_sem(series) -> float:
    """Standard error of the mean of a correlated series (NaN when too short).

    See :func:`blocking` for the rule.
    """
    return float(blocking(np.asarray(series, dtype=float).ravel()).sem)


def autocorrelation_time(series, c: float = 5.0, *, strict: bool = False) -> float:
    """Integrated autocorrelation time in samples, ``tau = 1 + 2 sum rho(t)``.

    Sokal's window: the smallest M with ``M >= c tau(M)``; when there is none, the full
    series (or NaN with ``strict``). A constant series gives 1; the result is clipped
    at 1 from below.

    References
    ----------
    Sokal 1997, "Monte Carlo methods in statistical mechanics: foundations and new
    algorithms", in Functional Integration (Plenum), section 3.
    """
    x = np.asarray(series, dtype=float).ravel()
    n = x.size
    if n < 2:
        return float("nan")
    d = x - x.mean()
    var = float(d @ d) / n
    if var <= (1e-12 * abs(float(x.mean()))) ** 2:  # constant up to round-off
        return 1.0
    f = np.fft.rfft(d, 2 * n)
    acf = np.fft.irfft(f * np.conj(f))[:n] / (n * var)
    taus = 1.0 + 2.0 * np.cumsum(acf[1:])
    m = np.arange(1, n)
    ok = np.flatnonzero(m >= c * taus)
    if not ok.size and strict:
        return float("nan")
    tau = taus[ok[0]] if ok.size else taus[-1]
    # Clipped at 1: never claim more independent samples than there are samples (an
    # estimate below 1 is almost always noise in short series).
    return float(max(tau, 1.0))


def mean_sem(data):
    """Mean, standard error and autocorrelation time of the columns of ``data``.

    Parameters
    ----------
    data : (n,) or (n, m) ndarray
        Time along axis 0.

    Returns
    -------
    mean, sem, tau : float or (m,) ndarray
        ``sem = sqrt(var * tau / n)`` (var with ddof 0, tau in samples); ``sem`` is NaN
        when Sokal's window is not found, ``n / tau < MIN_EFFECTIVE`` or
        ``n < MIN_SERIES``.
    """
    arr = np.asarray(data, dtype=float)
    x = arr.reshape(arr.shape[0], -1)
    n = x.shape[0]
    mean = x.mean(axis=0)
    var = x.var(axis=0)
    tau = np.array([autocorrelation_time(x[:, j], strict=True) for j in range(x.shape[1])])
    sem = np.sqrt(var * tau / n)
    ok = np.isfinite(tau) & (n / tau >= MIN_EFFECTIVE) & (n >= MIN_SERIES)
    sem = np.where(ok, sem, np.nan)
    if arr.ndim == 1:
        return float(mean[0]), float(sem[0]), float(tau[0])
    return mean, sem, tau


def jackknife_block_length(tau: float) -> int:
    """Block length of the blocked jackknife: ``ceil(2 tau)`` samples, at least 1."""
    if not np.isfinite(tau):
        return 1
    return max(1, int(math.ceil(2.0 * tau)))


def blocked_jackknife(stat, data, block_len: int):
    """Value and blocked-jackknife error of ``stat(data)``.

    Parameters
    ----------
    stat : callable
        Maps an array (subset of rows of ``data``) to a float or ndarray.
    data : (n, ...) ndarray
        Time along axis 0.
    block_len : int
        Rows per contiguous block; the last ``n mod block_len`` rows are used in the full
        estimate and left out of every block.

    Returns
    -------
    value, err
        ``err`` is NaN with fewer than :data:`MIN_JACKKNIFE_BLOCKS` blocks or fewer than
        :data:`MIN_SERIES` rows.
    """
    data = np.asarray(data)
    value = np.asarray(stat(data), dtype=float)
    nb = data.shape[0] // block_len
    if nb < MIN_JACKKNIFE_BLOCKS or data.shape[0] < MIN_SERIES:
        return value, np.full_like(value, np.nan)
    idx = np.arange(data.shape[0])
    loo = []
    for b in range(nb):
        keep = (idx < b * block_len) | (idx >= (b + 1) * block_len)
        loo.append(np.asarray(stat(data[keep]), dtype=float))
    loo = np.array(loo)
    err = np.sqrt((nb - 1) / nb * ((loo - loo.mean(axis=0)) ** 2).sum(axis=0))
    return value, err


def binder_cumulant(phi) -> float:
    """Binder cumulant ``G = 1 - <phi^4> / (3 <phi^2>^2)`` of samples ``phi``.

    For the modulus of a two-component order parameter G -> 1/3 in the disordered
    (isotropic Gaussian) phase and 2/3 for a fixed modulus (Binder 1981, Z. Phys. B 43,
    119).
    """
    phi = np.asarray(phi, dtype=float)
    m2 = np.mean(phi**2)
    if m2 == 0:
        return float("nan")
    return float(1.0 - np.mean(phi**4) / (3.0 * m2**2))


def binder_with_error(phi, tau: float | None = None):
    """Binder cumulant and its blocked-jackknife error.

    Parameters
    ----------
    phi : (n,) ndarray
    tau : float, optional
        Integrated autocorrelation time in samples (computed when not given).
    """
    phi = np.asarray(phi, dtype=float)
    if tau is None:
        tau = autocorrelation_time(phi)
    value, err = blocked_jackknife(binder_cumulant, phi, jackknife_block_length(tau))
    return float(value), float(err)
