"""Time derivatives of sampled fields for the coefficient fit (finite differences in time).

A scheme is a stencil on the sample axis: ``d_t u(t_n) ~ sum_j c_j u(t_{n + o_j s}) / h``
with ``h = s * dt_sample`` (``s`` = ``stride``, the temporal coarse-graining: the difference
is taken over ``s`` samples). Three schemes, as data in :data:`SCHEMES`:

``"forward"`` (default)
    Second-order one-sided ``(-3 u_n + 4 u_{n+s} - u_{n+2s}) / (2 h)``; truncation error
    ``-(h^2 / 3) d_t^3 u``, i.e. a bias O(h^2). Every noise increment it contains lies
    after ``t_n``, so for a stochastic equation ``du = f dt + dW`` it is an unbiased
    estimate of the drift ``f(u(t_n))`` to O(h^2) (the stencil is exact on the quadratic
    Taylor polynomial of the conditional mean ``E[u(t_n + s) | u(t_n)]``, the Ito drift).
``"centred"``
    ``(u_{n+s} - u_{n-s}) / (2 h)``; bias ``(h^2 / 6) d_t^3 u`` for smooth data, but its
    backward half holds the noise increment that built ``u(t_n)``: for noise-driven
    fluctuations it is correlated with the regressors and biases the drift towards zero
    (for a stationary reversible process the bias is 100 %). Use it only for
    deterministic or transient-dominated data.
``"euler"``
    First-order ``(u_{n+s} - u_n) / h``; bias ``(h / 2) d_t^2 u``; Ito-consistent.

``noise_factor``: when the data carry white-noise increments of variance ``2 Q h`` over
every interval ``h``, the stencil applied to them has variance ``noise_factor * 2 Q / h``
(2.5 for "forward", 0.5 for "centred", 1 for "euler"). It converts the residual variance
of the fit into a noise strength.

Data from a multistep integrator. The Ito argument needs the sample to be the whole state
of the generator. A two-step integrator (the continuum engine's SBDF2) also carries the
previous step, whose noise leaks into the next increments: for noise-driven fluctuations
the "forward" fit is then biased low by about ``1.1 dt_engine / h`` (measured ~2 % for
``dt_engine / h = 1/50``; it vanishes for a one-step Euler-Maruyama generator). Keep the
sample interval many engine steps long.

Block-averaging the fields in time before differencing is deliberately not offered: the
averaged regressors would contain the noise increments of the difference window and bias
the drift in the same way as the centred scheme.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from crossflock._errors import InputError

__all__ = ["TimeScheme", "SCHEMES", "get_scheme", "time_derivative", "sample_step"]


@dataclass(frozen=True)
class TimeScheme:
    """A finite-difference stencil on the sample axis.

    Attributes
    ----------
    name : str
    offsets : tuple of int
        Sample offsets in units of the stride.
    weights : tuple of float
        Stencil weights (divide by ``h``).
    order : int
        Order of the truncation error in ``h``.
    noise_factor : float
        Variance of the stencil applied to white-noise increments, in units of ``2 Q / h``.
    ito : bool
        True when the stencil only looks forward (unbiased drift for noisy data).
    """

    name: str
    offsets: tuple[int, ...]
    weights: tuple[float, ...]
    order: int
    noise_factor: float
    ito: bool

    def span(self, stride: int) -> tuple[int, int]:
        """Samples needed before and after ``t_n``."""
        return -min(self.offsets) * stride, max(self.offsets) * stride

    def valid_indices(self, n_times: int, stride: int) -> np.ndarray:
        """Sample indices ``n`` at which the stencil fits inside ``[0, n_times)``."""
        before, after = self.span(stride)
        return np.arange(before, n_times - after)

    def apply(self, u: np.ndarray, index: np.ndarray, stride: int, h: float) -> np.ndarray:
        """Stencil of ``u`` (time on axis 0) at the sample indices ``index``."""
        out = 0.0
        for o, c in zip(self.offsets, self.weights, strict=True):
            out = out + c * u[index + o * stride]
        return np.asarray(out) / h


def _noise_factor(offsets, weights) -> float:
    # The stencil as a sum over forward increments du_k = u_{k+1} - u_k (sum c = 0):
    # sum_j c_j u_{o_j} = -sum_k (sum_{o_j <= k} c_j) du_k, each du_k of variance 2 Q h0.
    # With s = 1 and h = h0 the variance over h^2 is (sum_k a_k^2) * 2 Q / h.
    ks = range(min(offsets), max(offsets))
    a = [sum(c for o, c in zip(offsets, weights, strict=True) if o <= k) for k in ks]
    return float(np.sum(np.square(a)))


def _scheme(name, offsets, weights, order, ito):
    return TimeScheme(name, tuple(offsets), tuple(float(w) for w in weights), order,
                      _noise_factor(offsets, weights), ito)


SCHEMES = {
    "forward": _scheme("forward", (0, 1, 2), (-1.5, 2.0, -0.5), 2, True),
    "centred": _scheme("centred", (-1, 1), (-0.5, 0.5), 2, False),
    "euler": _scheme("euler", (0, 1), (-1.0, 1.0), 1, True),
}


def get_scheme(name: str) -> TimeScheme:
    """The scheme called ``name`` (a key of :data:`SCHEMES`)."""
    try:
        return SCHEMES[name]
    except KeyError:
        raise InputError(
            f"`time_scheme` must be one of {', '.join(repr(k) for k in SCHEMES)} "
            f"(got {name!r})"
        ) from None


def sample_step(time) -> float:
    """The sampling interval of a uniformly sampled time axis.

    Raises
    ------
    InputError
        Fewer than two samples, or samples not equally spaced (to 1e-6 relative).
    """
    t = np.asarray(time, dtype=float)
    if t.ndim != 1 or t.size < 2:
        raise InputError(f"time axis must hold at least 2 samples (got {t.size})")
    d = np.diff(t)
    step = float(np.median(d))
    if not step > 0 or np.max(np.abs(d - step)) > 1e-6 * step:
        raise InputError(
            "time samples must be equally spaced and increasing "
            f"(got spacings from {float(d.min()):g} to {float(d.max()):g})"
        )
    return step


def time_derivative(u, dt: float, scheme: str = "forward", stride: int = 1):
    """Time derivative of sampled data.

    Parameters
    ----------
    u : (T, ...) ndarray
        Samples, time on axis 0, spacing ``dt``.
    dt : float
        Sampling interval.
    scheme : str
        A key of :data:`SCHEMES`.
    stride : int
        Difference over ``stride`` samples (``h = stride * dt``).

    Returns
    -------
    index : (T',) int ndarray
        Sample indices at which the derivative is given.
    du : (T', ...) ndarray
    """
    sch = get_scheme(scheme)
    if int(stride) != stride or stride < 1:
        raise InputError(f"`stride` must be a positive integer (got {stride!r})")
    u = np.asarray(u, dtype=float)
    index = sch.valid_indices(u.shape[0], int(stride))
    return index, sch.apply(u, index, int(stride), stride * dt)
