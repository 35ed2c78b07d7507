"""Compiled kernels of the finite-difference method (pure functions on arrays).

The grid is cell-centred, with solid cells for discs and walls. Derivatives are
second-order central differences. A neighbour that is solid (a cell inside a disc, or
beyond a channel wall at y = 0 or Ly, which sit on cell faces) is replaced by a ghost
value mirrored through the shared face:

* w: ghost = -w (no-slip, w = 0 on the face);
* rho: ghost = +rho (zero normal gradient, so no diffusive flux through the face).

With these ghosts the central divergence ``(w_E - w_W) / 2dx`` equals the finite-volume
flux difference with face values ``(w_i + w_{i+1}) / 2``, and the face flux is exactly 0
on solid faces, so the total density changes only by round-off. Solid cells hold
rho = w = 0 and are never updated.

Time stepping
-------------
The fully explicit member of the SBDF2 family (see ``_solver``), written with one history
field ``h`` in place of the previous state and right-hand side, as an increment::

    u^{n+1} = u^n + (u^n + h^n + 4 dt N^n) / 3 + (2/3) dW^n,    h^{n+1} = -u^n - 2 dt N^n,

which is ``(3 u^{n+1} - 4 u^n + u^{n-1}) / 2 = dt (2 N^n - N^{n-1}) + dW^n`` with
``h^n = -u^{n-1} - 2 dt N^{n-1}``. The first step is forward Euler,
``u^1 = u^0 + dt N^0 + dW^0``. Its limits (waves, reaction, explicit diffusion) are
checked by :func:`crossflock._stability.check_continuum_dt`.

Temporal blocking
-----------------
One explicit step couples a row only to the rows next to it, so K steps can be taken in
one pass over memory (:func:`fd_advance_kernel`), with split tiling over bands of rows:

1. each band ``[lo, hi)`` (one per thread) advances the trapezoid that depends on its own
   rows only, ``[lo + s, hi - s)`` at step s, and keeps its two edge rows of each step
   (and the history of the row it leaves to its neighbour) in a small edge buffer;
2. then a triangle at each band boundary b computes ``[b - s, b + s)`` at step s from
   those edge rows.

Each tile streams its rows through a wavefront of ring buffers (level s holds the last
rows of step s; all levels together fit the caches, see ``_fd.block_steps``) and writes
its rows after step K. The state is read and written once per K steps instead of once
per step; one step per pass is limited by memory bandwidth on grids larger than the cache
(measured in ``benchmarks/bench_continuum.py``). Every row of every step is computed once,
with the same arithmetic, so the result does not depend on the number of bands (threads)
nor on K: ``advance(K)`` equals K calls of ``step()`` bit for bit. Bands need at least 2K
rows.

References
----------
D. Wonnacott, time skewing (IPDPS 2000; title and venue from memory): blocking several
time steps of an explicit stencil so that the cache, not memory, feeds the arithmetic.
T. Muranushi & J. Makino, "Optimal Temporal Blocking for Stencil Computation", Procedia
Computer Science 51, 1303 (2015): the bytes-per-flop reduction it buys and its limit.
Split tiling (trapezoids, then inverted triangles between them) as in T. Grosser et al.,
"Split tiling for GPUs" (GPGPU-6, 2013; title and venue from memory).
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange

from . import _terms
from ._fma import fmadd
from ._guard import field_stats

__all__ = ["fd_advance_kernel", "fd_advance_kernel_serial", "PAR", "KIN"]

# Layout of the per-call scalar vector ``par`` handed to the kernels.
PAR = ("dx", "dy", "dt", "noise_amp")
# Layout of the kinetic-form vector ``kin`` (see CoefficientModel.kinetic_vector).
KIN = ("q_a", "q_b", "alpha_slope", "alpha_offset", "beta", "D_T", "lambda1", "lambda2",
       "lambda3")

# Optional inputs are passed as None when absent (no noise, no history for a bare
# right-hand side, no fluid rows for an all-fluid row, no kinetic form, only the minimal
# terms): numba compiles a separate version per combination with the unused branches
# removed, which keeps the inner loop free of tests so that it vectorizes. No fast-math
# at all: NaN and Inf propagate to the driver's guard, and the compiler may not fuse
# multiply-adds on its own; the fused ones are written out (``fmadd``, see ._fma), so
# the source fixes every rounding.


def _noalias():
    """``{"noalias": True}`` for :func:`numba.njit` where numba can take it, else ``{}``.

    numba compiles its own parallel-loop bodies with the compiler flag ``noalias`` (every
    pointer argument marked LLVM ``noalias``) once it has checked that their arrays do not
    overlap, but does not offer the flag to ``njit``; this maps the option onto the flag.
    :func:`_row` can promise it: it reads the rows of step ``lv`` through ``ring`` and
    ``ringx`` and writes rows of step ``lv + 1`` through ``rout`` (the same array, never
    the same rows), and updates the history row in place through one argument. The
    compiler then drops the run-time overlap checks (about 100 comparisons) it otherwise
    runs before the vector loop of every row. The neighbours i - 1, i + 1 are read through
    their own argument ``ringx``: read through ``ring``, the compiler, now sure that no
    store touches them, reuses each loaded vector as the next one's neighbour with
    shuffles, which costs more than the loads it saves. Measured at 512 x 512 on the
    2-core machine, interleaved in one process: 8-9% faster ``advance`` than overlap
    checks before every row. The results are the same with or without the flag: no
    rounding is left to the compiler (see ``_fma``).
    """
    from numba.core import compiler, cpu, options

    if "noalias" not in compiler.Flags.options:
        return {}
    if not isinstance(getattr(cpu.CPUTargetOptions, "noalias", None),
                      options.TargetOptions.Mapping):
        cpu.CPUTargetOptions.noalias = options.TargetOptions.Mapping("noalias")
    return {"noalias": True}


# Every kernel here uses numpy's error model: no Python exception paths for a division
# by zero (it gives Inf, which the driver's guard reports). Without those paths numba
# also drops the reference-count updates of the array arguments of every call, atomic
# operations on cache lines that the threads share.
_ERRORS = "numpy"


@numba.njit(cache=True, inline="always", error_model=_ERRORS)
def _ghost4(a, b, c, d, fa, fb, fc, fd, mirror):
    """Four neighbour values under the ghost rule: a solid one (flag 0) reads ``mirror``."""
    return (a if fa else mirror, b if fb else mirror, c if fc else mirror,
            d if fd else mirror)


@numba.njit(cache=True, inline="always", error_model=_ERRORS)
def _solid_zero(a, b, c, fluid):
    """``(a, b, c)``, or zeros in a solid cell."""
    return (a, b, c) if fluid else (0.0, 0.0, 0.0)


@numba.njit(cache=True, error_model=_ERRORS, **_noalias())
def _row(ring, ringx, rout, lv, sa, sb, sc, fl, j, hring, hs, noise, nx, cs, kin, extra,
         p_lin, pressure, par, g):
    """One row of one step: stencil, right-hand side and SBDF2 update.

    Whole arrays and indices are passed rather than row views: a view costs a reference
    count update on the shared array, an atomic operation that the threads would contend
    for on every row.

    Parameters
    ----------
    ring, ringx, rout : (>= nsteps + 1, nslots, 3, stride) float64 ndarray
        The ring rows of every step of the tile, passed three times (see
        :func:`_noalias`). Read: step ``lv`` slots ``sa``, ``sb``, ``sc`` hold rows j-1,
        j, j+1 as ``(rho, w_x, w_y)``, columns 1..nx, with columns 0 and nx + 1 the
        periodic copies of columns nx and 1; column i through ``ring``, columns i +- 1
        through ``ringx``. Written through ``rout``: step ``lv + 1``, slot ``sb``
        (columns 0..nx + 1).
    fl : (ny + 2, nx + 2) uint8 ndarray or None
        Padded fluid mask (rows j..j + 2 are the fluid rows j-1..j+1); None when the
        stencil of row j is all fluid.
    j : int
        The row (for ``fl`` and ``noise``).
    hring : (>= nsteps + m, 1, 3, stride) float64 ndarray
        History rows; row ``hs`` is updated in place.
    noise : (>= nsteps, 2, ny, nx) float64 ndarray or None
        Standard normal noise; ``noise[lv, :, j]`` is used.
    nx : int
    cs : (12,) float64 ndarray
        ``_coefficients.SCALARS``.
    kin : (9,) float64 ndarray or None
        Kinetic form (:data:`KIN`); None for table coefficients.
    extra : None or int
        None: the minimal equations (alignment with alpha(rho), linear pressure, D_T),
        compiled without the other terms; else all terms (:func:`._fd.extra_terms`).
    p_lin : float
        P'(rho) of a linear pressure (used when ``extra`` is None).
    pressure : (K,) float64 ndarray
        Pressure polynomial (used otherwise).
    par : (4,) float64 ndarray
        :data:`PAR`.
    g : (>= nsteps, 3) float64 ndarray
        Row ``lv``: ``(c_s, c_n, c_xi)`` of the update
        ``u' = u + c_s (u + h) + c_n N + c_xi amp xi`` and
        ``h' = -u - 2 dt N`` (:func:`._fd.scheme_table`).
    """
    dx, dy, dt, amp = par[0], par[1], par[2], par[3]
    idx2 = 1.0 / (dx * dx)
    idy2 = 1.0 / (dy * dy)
    i2dx = 0.5 / dx
    i2dy = 0.5 / dy
    i4dxdy = 0.25 / (dx * dy)
    dt2 = 2.0 * dt
    c_s, c_n = g[lv, 0], g[lv, 1]
    c_xi = g[lv, 2] * amp
    out = lv + 1
    alpha0, alpha_rho, beta_t, d_t_t = cs[0], cs[1], cs[2], cs[3]
    lam1_t, lam2_t, lam3_t, d_b, d_2, d_rho, v0, rho0 = (cs[4], cs[5], cs[6], cs[7], cs[8],
                                                          cs[9], cs[10], cs[11])
    # Constant coefficients are folded into the stencil weights (D_T into the Laplacian;
    # for the minimal equations also P' into grad rho and v0 into div w), and the term
    # functions get a unit coefficient, which the compiler removes: fewer multiplications
    # per point. The differences stay exact zeros on a uniform field.
    alpha_c = alpha0 - alpha_rho * rho0
    lap_x, lap_y = d_t_t * idx2, d_t_t * idy2
    grad_x, grad_y = p_lin * i2dx, p_lin * i2dy
    div_x, div_y = v0 * i2dx, v0 * i2dy
    q_a = q_b = a_slope = a_off = k_beta = k_dt = k_l1 = k_l2 = k_l3 = 0.0
    if kin is not None:
        q_a, q_b, a_slope, a_off = kin[0], kin[1], kin[2], kin[3]
        k_beta, k_dt, k_l1, k_l2, k_l3 = kin[4], kin[5], kin[6], kin[7], kin[8]
    for i in range(1, nx + 1):
        r = ring[lv, sb, 0, i]
        ux = ring[lv, sb, 1, i]
        uy = ring[lv, sb, 2, i]
        rE, rW = ringx[lv, sb, 0, i + 1], ringx[lv, sb, 0, i - 1]
        rN, rS = ring[lv, sc, 0, i], ring[lv, sa, 0, i]
        xE, xW = ringx[lv, sb, 1, i + 1], ringx[lv, sb, 1, i - 1]
        xN, xS = ring[lv, sc, 1, i], ring[lv, sa, 1, i]
        yE, yW = ringx[lv, sb, 2, i + 1], ringx[lv, sb, 2, i - 1]
        yN, yS = ring[lv, sc, 2, i], ring[lv, sa, 2, i]
        if fl is not None:  # ghost rule: rho mirrored, w mirrored with a sign change
            fE, fW, fN, fS = fl[j + 1, i + 1], fl[j + 1, i - 1], fl[j + 2, i], fl[j, i]
            rE, rW, rN, rS = _ghost4(rE, rW, rN, rS, fE, fW, fN, fS, r)
            xE, xW, xN, xS = _ghost4(xE, xW, xN, xS, fE, fW, fN, fS, -ux)
            yE, yW, yN, yS = _ghost4(yE, yW, yN, yS, fE, fW, fN, fS, -uy)
        # second differences (unscaled): exact zeros on a uniform field
        sxx_x, syy_x = fmadd(-2.0, ux, xE + xW), fmadd(-2.0, ux, xN + xS)
        sxx_y, syy_y = fmadd(-2.0, uy, yE + yW), fmadd(-2.0, uy, yN + yS)
        if kin is None:
            alpha = fmadd(alpha_rho, r, alpha_c)
            beta, lam1, lam2, lam3 = beta_t, lam1_t, lam2_t, lam3_t
        else:  # Bertin-Droz-Gregoire coefficients at the local density
            rp = max(r, 0.0)
            q = 1.0 / fmadd(q_b, rp, q_a)
            alpha = fmadd(rp, a_slope, a_off)
            beta, d_t, lam1, lam2, lam3 = q * k_beta, q * k_dt, q * k_l1, q * k_l2, q * k_l3
        hxx_x = hyy_x = hxx_y = hyy_y = hxy_x = hxy_y = lap_r = 0.0
        gxx = gxy = gyx = gyy = 0.0  # the velocity gradients serve only the other terms
        if extra is None:  # constants: the other terms fold away at compile time
            lam1 = lam2 = lam3 = c_db = c_d2 = c_drho = 0.0
            slope = vc = 1.0  # folded into grad rho and div w
            dxr, dyr = (rE - rW) * grad_x, (rN - rS) * grad_y
            div_w = fmadd(xE - xW, div_x, (yN - yS) * div_y)
        else:
            c_db, c_d2, c_drho, vc = d_b, d_2, d_rho, v0
            slope = _terms.pressure_slope(r - rho0, pressure)
            dxr, dyr = (rE - rW) * i2dx, (rN - rS) * i2dy
            gxx, gyy = (xE - xW) * i2dx, (yN - yS) * i2dy
            div_w = gxx + gyy
            gyx, gxy = (xN - xS) * i2dy, (yE - yW) * i2dx
            hxx_x, hyy_x, hxx_y, hyy_y = sxx_x * idx2, syy_x * idy2, sxx_y * idx2, syy_y * idy2
            lap_r = (rE + rW - 2.0 * r) * idx2 + (rN + rS - 2.0 * r) * idy2
            xNE, xNW = ringx[lv, sc, 1, i + 1], ringx[lv, sc, 1, i - 1]
            xSE, xSW = ringx[lv, sa, 1, i + 1], ringx[lv, sa, 1, i - 1]
            yNE, yNW = ringx[lv, sc, 2, i + 1], ringx[lv, sc, 2, i - 1]
            ySE, ySW = ringx[lv, sa, 2, i + 1], ringx[lv, sa, 2, i - 1]
            if fl is not None:
                fNE, fNW, fSE, fSW = fl[j + 2, i + 1], fl[j + 2, i - 1], fl[j, i + 1], fl[j, i - 1]
                xNE, xNW, xSE, xSW = _ghost4(xNE, xNW, xSE, xSW, fNE, fNW, fSE, fSW, -ux)
                yNE, yNW, ySE, ySW = _ghost4(yNE, yNW, ySE, ySW, fNE, fNW, fSE, fSW, -uy)
            hxy_x = (xNE - xNW - xSE + xSW) * i4dxdy
            hxy_y = (yNE - yNW - ySE + ySW) * i4dxdy
        # every term but D_T lap(w), which is added below with fused multiply-adds
        fx, fy = _terms.momentum(
            ux, uy, dxr, dyr, gxx, gxy, gyx, gyy, 0.0, 0.0,
            hxx_x, hxy_x, hyy_x, hxx_y, hxy_y, hyy_y,
            alpha, beta, lam1, lam2, lam3, 0.0, c_db, c_d2, slope)
        if kin is None:  # D_T lap(w), D_T in the weights
            fx = fmadd(sxx_x, lap_x, fmadd(syy_x, lap_y, fx))
            fy = fmadd(sxx_y, lap_x, fmadd(syy_y, lap_y, fy))
        else:
            fx = fmadd(d_t, fmadd(sxx_x, idx2, syy_x * idy2), fx)
            fy = fmadd(d_t, fmadd(sxx_y, idx2, syy_y * idy2), fy)
        n0 = _terms.continuity(div_w, lap_r, vc, c_drho)
        a0 = fmadd(c_n, n0, fmadd(c_s, r + hring[hs, 0, 0, i], r))
        a1 = fmadd(c_n, fx, fmadd(c_s, ux + hring[hs, 0, 1, i], ux))
        a2 = fmadd(c_n, fy, fmadd(c_s, uy + hring[hs, 0, 2, i], uy))
        if noise is not None:
            a1 = fmadd(c_xi, noise[lv, 0, j, i - 1], a1)
            a2 = fmadd(c_xi, noise[lv, 1, j, i - 1], a2)
        b0 = fmadd(-dt2, n0, -r)
        b1 = fmadd(-dt2, fx, -ux)
        b2 = fmadd(-dt2, fy, -uy)
        if fl is not None:  # solid cells stay 0
            fc = fl[j + 1, i] != 0
            a0, a1, a2 = _solid_zero(a0, a1, a2, fc)
            b0, b1, b2 = _solid_zero(b0, b1, b2, fc)
        hring[hs, 0, 0, i] = b0
        hring[hs, 0, 1, i] = b1
        hring[hs, 0, 2, i] = b2
        rout[out, sb, 0, i] = a0
        rout[out, sb, 1, i] = a1
        rout[out, sb, 2, i] = a2
    for c in range(3):  # periodic copies in x
        rout[out, sb, c, 0] = rout[out, sb, c, nx]
        rout[out, sb, c, nx + 1] = rout[out, sb, c, 1]


@numba.njit(cache=True, error_model=_ERRORS)
def _load_row(src, j, dst, a, b):
    """Copy ``src[:, j, :]`` into ``dst[a, b, :, 1:nx+1]``, with the periodic copies in
    columns 0 and nx + 1."""
    nx = src.shape[2]
    for c in range(src.shape[0]):
        for i in range(nx):
            dst[a, b, c, i + 1] = src[c, j, i]
        dst[a, b, c, 0] = src[c, j, nx - 1]
        dst[a, b, c, nx + 1] = src[c, j, 0]


@numba.njit(cache=True, error_model=_ERRORS)
def _store_row(src, a, b, dst, j):
    """Copy ``src[a, b, :, 1:nx+1]`` into ``dst[:, j, :]``."""
    nx = dst.shape[2]
    for c in range(dst.shape[0]):
        for i in range(nx):
            dst[c, j, i] = src[a, b, c, i + 1]


@numba.njit(cache=True, error_model=_ERRORS)
def _copy_row(src, a, b, dst, c, d):
    """Copy ``src[a, b]`` into ``dst[c, d]`` (rows of ``(3, stride)``, periodic copies
    included)."""
    for f in range(src.shape[2]):
        for i in range(src.shape[3]):
            dst[c, d, f, i] = src[a, b, f, i]


@numba.njit(cache=True, inline="always", error_model=_ERRORS)
def _held(tri, lo, hi, wall_lo, wall_hi, s, k):
    """Rows ``[a, z)`` a tile holds at level (step) ``s``.

    A band's trapezoid holds ``[lo + s, hi - s)`` (its input rows at ``s = 0``; a side at
    a channel wall does not shrink). The triangle at boundary row ``lo`` computes
    ``[lo - s, lo + s)`` and, below ``K``, also holds the two band rows on each side that
    its next level reads.
    """
    if tri:
        return (lo - s, lo + s) if s == k else (lo - s - 2, lo + s + 2)
    return (lo if wall_lo else lo + s), (hi if wall_hi else hi - s)


@numba.njit(cache=True, error_model=_ERRORS)
def _tile(tri, lo, hi, wall_lo, wall_hi, e_lo, e_hi, u_in, h_in, u_out, h_out, fl, plain,
          nsteps, scheme, cs, kin, extra, p_lin, pressure, par, noise, ring, hring, edge,
          stats):
    """Advance one tile of the split tiling by ``nsteps`` steps (a wavefront over rows).

    ``tri`` False: the trapezoid of band ``[lo, hi)``, which reads only the band's input
    rows. Below step K it saves its edge rows for the triangles: rows ``lo + s, lo + s + 1``
    and the history of row ``lo + s`` into ``edge[e_lo, s]`` slots 2, 3, 5, and rows
    ``hi - s - 2, hi - s - 1`` and the history of row ``hi - s - 1`` into ``edge[e_hi, s]``
    slots 0, 1, 4 (not at a channel wall).
    ``tri`` True: the triangle at boundary row ``lo`` (band ``e_lo - 1`` below, band
    ``e_lo`` above), run after every trapezoid: it takes the band rows it needs from
    ``edge[e_lo]`` and a row's history from there when it first computes the row.

    Together the tiles compute every row of every step exactly once. ``ring`` :
    (>= nsteps + 1, m + 2, 3, stride) rows of each step; ``hring`` : (>= nsteps + m, 1, 3,
    stride) history rows in flight. Each sweep of the wavefront takes ``m`` rows per step
    (step s: rows ``T - s .. T - s + m - 1``), so a step's input rows are read while still
    in the cache for the next ``m`` rows instead of one. ``stats`` (3,): written with the
    guard statistics ``(finite, min rho, max |w|^2)`` of the tile's output rows.
    """
    finite = True
    rmin = np.inf
    w2max = 0.0
    ny, nx = u_in.shape[1], u_in.shape[2]
    k = nsteps
    m = ring.shape[1] - 2  # rows per step and sweep
    ns = m + 2  # ring slots per step: the m new rows and the two before them
    nh = k + m  # history rows in flight
    t0, t1 = (lo - 2, lo + 2 * k + 3) if tri else (lo, hi + k + 1)
    el, eh = edge[e_lo], edge[e_hi]
    for t in range(t0, t1, m):
        for s in range(k + 1):
            a, z = _held(tri, lo, hi, wall_lo, wall_hi, s, k)
            for r in range(max(t - s, a), min(t - s + m, z)):
                j = r % ny
                hs = r % nh
                sb = r % ns
                if tri and (r < lo - s or r >= lo + s):  # a band's row, saved there
                    _copy_row(el, s, r - (lo - s - 2) if r < lo else r - (lo + s) + 2,
                              ring, s, sb)
                    continue
                if tri and (r == lo - s or r == lo + s - 1):  # first step here: history
                    _copy_row(el, s - 1, 4 if r < lo else 5, hring, hs, 0)
                if s == 0:  # (trapezoids only)
                    _load_row(u_in, j, ring, 0, sb)
                    _load_row(h_in, j, hring, hs, 0)
                else:
                    # rows j-1, j, j+1 of step s-1 (all done: rows up to t - s + m of
                    # step s-1 were taken earlier in this sweep) sit in slots (r-1..r+1) % ns
                    sa, sc = (r - 1) % ns, (r + 1) % ns
                    if plain[j]:
                        _row(ring, ring, ring, s - 1, sa, sb, sc, None, j, hring, hs, noise, nx,
                             cs, kin, extra, p_lin, pressure, par, scheme)
                    else:
                        _row(ring, ring, ring, s - 1, sa, sb, sc, fl, j, hring, hs, noise, nx,
                             cs, kin, extra, p_lin, pressure, par, scheme)
                if not tri and s < k:  # edge rows for the triangles
                    if not wall_hi and r >= hi - s - 2:
                        _copy_row(ring, s, sb, eh, s, r - (hi - s - 2))
                        if r == hi - s - 1:
                            _copy_row(hring, hs, 0, eh, s, 4)
                    if not wall_lo and r < lo + s + 2:
                        _copy_row(ring, s, sb, el, s, r - (lo + s) + 2)
                        if r == lo + s:
                            _copy_row(hring, hs, 0, el, s, 5)
                if s == k:
                    _store_row(ring, s, sb, u_out, j)
                    ok, row_min, row_max = field_stats(u_out[0, j:j + 1], u_out[1, j:j + 1],
                                                       u_out[2, j:j + 1])
                    finite = finite and ok
                    rmin = min(rmin, row_min)
                    w2max = max(w2max, row_max)
                    _store_row(hring, hs, 0, h_out, j)
    stats[0] = 1.0 if finite else 0.0
    stats[1] = rmin
    stats[2] = w2max


@numba.njit(cache=True, error_model=_ERRORS)
def check_bands(starts, nsteps, channel):
    """Raise unless every band has at least ``2 nsteps`` rows (the trapezoids must keep
    their edge rows up to step K - 1); a channel of one band has no edge."""
    nb = starts.shape[0] - 1
    if channel and nb == 1:
        return
    for b in range(nb):
        if starts[b + 1] - starts[b] < 2 * nsteps:
            raise ValueError("finite-difference bands must have at least 2 * nsteps rows")


@numba.njit(cache=True, parallel=True, error_model=_ERRORS)
def fd_advance_kernel(u_in, h_in, u_out, h_out, fl, plain, channel, starts, nsteps, scheme,
                      cs, kin, extra, p_lin, pressure, par, noise, ring, hring, edge, stats):
    """Advance the masked-grid state ``nsteps`` explicit SBDF2 steps (tiles in parallel).

    Parameters
    ----------
    u_in : (3, ny, nx) float64 ndarray
        State ``(rho, w_x, w_y)`` (read only).
    h_in : (3, ny, nx) float64 ndarray
        SBDF2 history (read only).
    u_out, h_out : (3, ny, nx) float64 ndarray
        Written: state and history after ``nsteps`` steps (0 in solids).
    fl : (ny + 2, nx + 2) uint8 ndarray
        Fluid mask padded by one cell (:func:`._fd.padded_fluid`).
    plain : (ny,) uint8 ndarray
        1 where rows j-1, j, j+1 are all fluid (:func:`._fd.plain_rows`).
    channel : bool
        Walls beyond rows 0 and ny - 1 (else periodic in y); always periodic in x.
    starts : (nb + 1,) int64 ndarray
        Band boundaries (:func:`._fd.band_starts`), each band at least ``2 nsteps`` rows
        (:func:`check_bands`); the result does not depend on them.
    nsteps : int
    scheme : (>= nsteps, 3) float64 ndarray
        Per step ``(c_s, c_n, c_xi)`` (:func:`._fd.scheme_table`); the
        row of :func:`._fd.rhs_scheme` writes the right-hand side of ``u_in`` instead.
    cs : (12,) float64 ndarray
        Scalars in the order of ``_coefficients.SCALARS``.
    kin : (9,) float64 ndarray or None
        Kinetic form (:data:`KIN`): local Bertin-Droz-Gregoire coefficients.
    extra : None or int
        None for the minimal equations (:func:`._fd.extra_terms`).
    p_lin, pressure : float, (K,) float64 ndarray
        Linear pressure slope, and the pressure polynomial (see :func:`._fd.extra_terms`).
    par : (4,) float64 ndarray
        ``dx, dy, dt, noise_amp`` (:data:`PAR`).
    noise : (>= nsteps, 2, ny, nx) float64 ndarray or None
        Standard normal increments of each step.
    ring : (nb, >= nsteps + 1, m + 2, 3, stride) float64 ndarray
    hring : (nb, >= nsteps + m, 1, 3, stride) float64 ndarray
    edge : (nb, >= nsteps, 6, 3, stride) float64 ndarray
        Scratch (:func:`._fd.scratch`): the rings of each thread's tile and the edge rows
        of each band boundary; larger scratch serves shorter blocks.
    stats : (2 nb, 3) float64 ndarray
        Written: per tile ``(finite, min rho, max |w|^2)`` of its output rows
        (:mod:`._guard`; order-free reductions, so thread-count independent).
    """
    check_bands(starts, nsteps, channel)
    nb = starts.shape[0] - 1
    for b in prange(nb):  # the trapezoids
        _tile(False, starts[b], starts[b + 1], channel and b == 0, channel and b == nb - 1,
              b, (b + 1) % nb, u_in, h_in, u_out, h_out, fl, plain, nsteps, scheme, cs, kin,
              extra, p_lin, pressure, par, noise, ring[b], hring[b], edge, stats[b])
    for b in prange(nb):  # then the triangles at the band boundaries (none at walls)
        if channel and b == 0:
            stats[nb, 0], stats[nb, 1], stats[nb, 2] = 1.0, np.inf, 0.0
        else:
            _tile(True, starts[b], starts[b], False, False, b, b, u_in, h_in, u_out, h_out,
                  fl, plain, nsteps, scheme, cs, kin, extra, p_lin, pressure, par, noise,
                  ring[b], hring[b], edge, stats[nb + b])


def fd_advance_kernel_serial(u_in, h_in, u_out, h_out, fl, plain, channel, starts, nsteps,
                             scheme, cs, kin, extra, p_lin, pressure, par, noise, ring, hring,
                             edge, stats):
    """:func:`fd_advance_kernel` on the calling thread (same arguments, same result).

    Small grids use it: a parallel region per call costs more than it saves there, and
    on shared cores a descheduled worker thread stalls every call (measured 13x slower
    on a 64 x 64 grid with 2 threads on a loaded 2-core machine). It is a Python loop
    over the compiled tiles rather than one more compiled function because numba
    re-optimizes everything a compiled function calls: a layer less saves seconds of
    compilation per kernel variant on a fresh machine.
    """
    check_bands(starts, int(nsteps), bool(channel))
    nb = starts.shape[0] - 1
    channel, nsteps = bool(channel), int(nsteps)
    for b in range(nb):
        _tile(False, int(starts[b]), int(starts[b + 1]), channel and b == 0,
              channel and b == nb - 1, b, (b + 1) % nb, u_in, h_in, u_out, h_out, fl, plain,
              nsteps, scheme, cs, kin, extra, p_lin, pressure, par, noise, ring[b], hring[b],
              edge, stats[b])
    for b in range(nb):
        if channel and b == 0:
            stats[nb] = (1.0, np.inf, 0.0)
        else:
            _tile(True, int(starts[b]), int(starts[b]), False, False, b, b, u_in, h_in, u_out,
                  h_out, fl, plain, nsteps, scheme, cs, kin, extra, p_lin, pressure, par,
                  noise, ring[b], hring[b], edge, stats[nb + b])
