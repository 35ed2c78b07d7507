"""Giant number fluctuations: sub-box counts and their scaling exponent.

Rules (documented contract):

* Box sides of ``l`` cells, ``l`` log-spaced integers from 1 to ``min(nx, ny) // 4``
  (``compare.gnf_sizes`` of them before removing duplicates, so at least 4 boxes per
  side). Boxes are ``l x l`` cells tiling the grid from the origin (the last
  ``n mod l`` rows/columns are left out); a box containing any solid cell is excluded.
* For each size, ``<N>`` and ``Delta N^2 = <N^2> - <N>^2`` are pooled over the boxes
  and the kept time samples.
* The exponent is the least-squares slope of ``log Delta N`` against ``log <N>`` over
  the sizes with ``Delta N > 0``; its error is the blocked jackknife over contiguous
  time blocks (:func:`crossflock.compare.blocked_jackknife`).
"""

from __future__ import annotations

import numpy as np

from ._stats import autocorrelation_time, blocked_jackknife, jackknife_block_length

__all__ = ["gnf_box_sizes", "box_sums", "number_fluctuations", "fit_exponent",
           "gnf_exponent"]


def gnf_box_sizes(nx: int, ny: int, count: int) -> np.ndarray:
    """Box sides in cells (unique, increasing) for ``count`` log-spaced sizes."""
    top = max(1, min(nx, ny) // 4)
    sizes = np.unique(np.rint(np.geomspace(1, top, count)).astype(np.int64))
    return sizes[sizes >= 1]


def box_sums(counts, sizes, fluid=None):
    """Per-time first and second moments of sub-box counts.

    Parameters
    ----------
    counts : (T, ny, nx) ndarray
    sizes : (S,) int ndarray
        Box sides in cells.
    fluid : (ny, nx) bool ndarray, optional

    Returns
    -------
    s1, s2 : (T, S) ndarray
        Sum over kept boxes of N and of N^2 at each time.
    nbox : (S,) int ndarray
        Number of kept boxes per size.
    """
    counts = np.asarray(counts, dtype=float)
    nt, ny, nx = counts.shape
    fluid = np.ones((ny, nx), bool) if fluid is None else np.asarray(fluid, bool)
    s1 = np.zeros((nt, len(sizes)))
    s2 = np.zeros((nt, len(sizes)))
    nbox = np.zeros(len(sizes), dtype=np.int64)
    for i, ell in enumerate(sizes):
        by, bx = ny // ell, nx // ell
        c = counts[:, : by * ell, : bx * ell].reshape(nt, by, ell, bx, ell).sum(axis=(2, 4))
        ok = fluid[: by * ell, : bx * ell].reshape(by, ell, bx, ell).all(axis=(1, 3))
        vals = c[:, ok]
        s1[:, i] = vals.sum(axis=1)
        s2[:, i] = (vals**2).sum(axis=1)
        nbox[i] = int(ok.sum())
    return s1, s2, nbox


def _moments(s1, s2, nbox):
    n = s1.shape[0] * nbox
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = s1.sum(axis=0) / n
        var = s2.sum(axis=0) / n - mean**2
    return mean, np.sqrt(np.clip(var, 0.0, None))


def number_fluctuations(counts, sizes, fluid=None):
    """Mean and standard deviation of sub-box counts for each box size.

    Returns
    -------
    mean, std : (S,) ndarray
        NaN for sizes without any kept box.
    """
    return _moments(*box_sums(counts, sizes, fluid))


def fit_exponent(mean, std):
    """Slope of ``log std`` vs ``log mean`` (NaN with fewer than 2 usable sizes)."""
    mean = np.asarray(mean, dtype=float)
    std = np.asarray(std, dtype=float)
    ok = np.isfinite(mean) & np.isfinite(std) & (mean > 0) & (std > 0)
    if ok.sum() < 2:
        return float("nan")
    slope, _ = np.polyfit(np.log(mean[ok]), np.log(std[ok]), 1)
    return float(slope)


def gnf_exponent(counts, sizes, fluid=None):
    """Number-fluctuation curve, exponent and its blocked-jackknife error.

    Parameters
    ----------
    counts : (T, ny, nx) ndarray
    sizes : (S,) int ndarray
    fluid : (ny, nx) bool ndarray, optional

    Returns
    -------
    mean, std : (S,) ndarray
    exponent, err : float
        The jackknife block length is ``ceil(2 tau)`` with tau the largest integrated
        autocorrelation time of the per-snapshot box variances over the sizes (the
        slowest fluctuations set the block length).
    """
    s1, s2, nbox = box_sums(counts, sizes, fluid)
    mean, std = _moments(s1, s2, nbox)
    data = np.stack([s1, s2], axis=-1)  # (T, S, 2)
    usable = nbox > 0
    if not usable.any():
        return mean, std, float("nan"), float("nan")
    with np.errstate(invalid="ignore", divide="ignore"):
        per_time_var = s2[:, usable] / nbox[usable] - (s1[:, usable] / nbox[usable]) ** 2
    taus = [autocorrelation_time(per_time_var[:, j]) for j in range(per_time_var.shape[1])]
    taus = [t for t in taus if np.isfinite(t)]
    block = jackknife_block_length(max(taus) if taus else np.nan)

    def stat(d):
        return fit_exponent(*_moments(d[..., 0], d[..., 1], nbox))

    value, err = blocked_jackknife(stat, data, block)
    return mean, std, float(value), float(err)
