"""Compiled kernels of the particle engine and their plain-Python wrappers.

State. A heading is kept as its unit vector (c, s) = (cos theta, sin theta): the
alignment sums need exactly that, the noise is a rotation of the normalised mean
vector, and the move uses it directly, so no arctan2 is spent in a periodic box.
theta = arctan2(s, c), mapped into (-pi, pi], is computed when it is needed (walls,
output).

Cell lists. Every step the particles are binned into cells of side >= R
(``ncx = floor(Lx / R)`` cells across, at least one) and counting-sorted by cell (a
stable, hence deterministic, sort), so the particles of one cell, and of one row of
cells, are contiguous in the sorted buffers and the pair loops read memory almost
sequentially.

Neighbour convention. Particle j is a neighbour of i when the minimum-image distance
(periodic directions only) is strictly less than R; i is its own neighbour. Each
particle is counted once, even when R > L/2 and two periodic images of it lie within
R: the model is "align with the particles within R", not with their images. Obstacles
do not screen alignment (metric alignment ignores line of sight); no pair is ever
taken across a channel wall because y is not wrapped there.

Two accumulation schemes give the same sums (to rounding): with at least three cells
along each periodic side, a half-shell pass visits each pair of cells once and
updates both particles of a pair (rows two apart run in parallel, so no two threads
write one row); otherwise (small boxes) every cell scans its full stencil, with the
neighbour rows and columns deduplicated so that no cell is visited twice when a
periodic side has fewer than three cells.

Determinism. Parallel kernels (``prange``) write only to per-particle slots (or, in
the half-shell pass, to rows no other iteration of the same pass touches); every
random number is drawn by the caller from a numpy Generator into a buffer indexed by
the sorted slot; sums over all particles (the order parameter) use fixed blocks. The
results are therefore bit-identical for any numba thread count.
"""

from __future__ import annotations

import numba
import numpy as np
from numba import prange

from crossflock._errors import InputError
from crossflock._geometry import reflect_kernel

__all__ = [
    "NOISE_CODES",
    "CellGrid",
    "neighbour_sums",
    "neighbour_mean_heading",
    "neighbour_counts",
    "polar_order",
    "wrap_angle",
]

# Noise kinds -> the integer code the kernels switch on.
NOISE_CODES = {"angular": 0, "gaussian": 1, "vectorial": 2}

# Fixed block length of the order-parameter sum: partial sums per block, then a serial
# sum over blocks, so the rounding never depends on how prange splits the loop.
_ORDER_BLOCK = 4096

_TWO_PI = 2.0 * np.pi


# --------------------------------------------------------------------------- scalars
@numba.njit(cache=True, inline="always")
def _wrap_angle(a):
    """Map an angle into (-pi, pi]."""
    if a > np.pi or a <= -np.pi:
        a = a - _TWO_PI * np.ceil((a - np.pi) / _TWO_PI)
        if a <= -np.pi:
            a += _TWO_PI
        elif a > np.pi:
            a -= _TWO_PI
    return a


@numba.njit(cache=True, inline="always")
def _angle(c, s):
    """theta in (-pi, pi] of the unit vector (c, s) (arctan2 gives -pi for s = -0.0)."""
    return _wrap_angle(np.arctan2(s, c))


@numba.njit(cache=True, inline="always")
def _cell_index(v, inv_h, n):
    c = int(v * inv_h)
    if c >= n:  # v == L after rounding, or the last cell being a little wider
        c = n - 1
    elif c < 0:
        c = 0
    return c


@numba.njit(cache=True, inline="always")
def _wrap_once(v, length):
    """Wrap a coordinate displaced by less than ``length`` back into [0, length)."""
    if v >= length:
        v -= length
    elif v < 0.0:
        v += length
        if v >= length:  # -tiny + L rounds to L
            v = 0.0
    return v


@numba.njit(cache=True, inline="always")
def _advance(x, y, c, s, step, lx, ly, channel, centers, radii):
    """Move by ``step`` along (c, s) and apply the boundary rule; new (x, y, c, s).

    Walls and obstacles go through the core's ``reflect_kernel`` (specular reflection;
    the heading is recomputed only when it was reflected). A plain periodic box needs
    one conditional wrap per coordinate, since a step is shorter than R <= min(L).
    """
    x = x + step * c
    y = y + step * s
    if channel or radii.shape[0] > 0:
        th = _angle(c, s)
        x, y, th2 = reflect_kernel(x, y, th, lx, ly, channel, centers, radii)
        if th2 != th:
            c = np.cos(th2)
            s = np.sin(th2)
        return x, y, c, s
    return _wrap_once(x, lx), _wrap_once(y, ly), c, s


# --------------------------------------------------------------------------- pair sums
@numba.njit(cache=True, inline="always")
def _pairs_acc(i0, i1, lo, hi, same, shx, shy, xs, ys, cs, ss, r2, acc_x, acc_y, acc_n,
               counts):
    """Every pair (i in [i0, i1), j in [lo, hi)) closer than R adds each one's heading
    to the other's sums; ``same``: the ranges are one cell, pairs i < j only.

    ``shx``, ``shy`` (0 or +-L) take j to the periodic image next to i. With at least
    three cells of side >= R per periodic side that image is the only one that can be
    within R, so this equals the minimum-image test (bit for bit: the same single
    addition). The sums of i stay in registers over the j loop (j never equals i).
    The test is branch-free: about a third of the candidates are neighbours, and a
    branch on that would be mispredicted all the time.
    """
    for i in range(i0, i1):
        xi = xs[i]
        yi = ys[i]
        ci = cs[i]
        si = ss[i]
        ax = 0.0
        ay = 0.0
        an = 0.0
        for j in range(i + 1 if same else lo, hi):
            dx = xs[j] - xi + shx
            dy = ys[j] - yi + shy
            w = 1.0 if dx * dx + dy * dy < r2 else 0.0
            ax += w * cs[j]
            ay += w * ss[j]
            an += w
            acc_x[j] += w * ci
            acc_y[j] += w * si
            if counts:  # loop-invariant: LLVM unswitches it
                acc_n[j] += w
        acc_x[i] += ax
        acc_y[i] += ay
        if counts:
            acc_n[i] += an


@numba.njit(cache=True, inline="always")
def _row_pairs(cy, xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
               acc_x, acc_y, acc_n, counts):
    """Half-shell pass of row cy: every pair with one particle in row cy and the other
    in row cy or cy + 1, exactly once (needs ncx >= 3, and ncy >= 3 when y is
    periodic). Writes the sums of rows cy and cy + 1 only.

    For cell (cx, cy) the half stencil is the cell itself, cell cx + 1 of the row, and
    cells cx - 1 .. cx + 1 of row cy + 1 (one slot range, two at the periodic seam).
    """
    row = cy * ncx
    nxt = cy + 1
    shy = 0.0
    if nxt >= ncy:
        nxt = 0 if wrap_y else -1
        shy = ly  # row 0 seen from the last row
    nrow = nxt * ncx
    for cx in range(ncx):
        i0 = cell_start[row + cx]
        i1 = cell_start[row + cx + 1]
        if i1 == i0:
            continue
        _pairs_acc(i0, i1, i0, i1, True, 0.0, 0.0, xs, ys, cs, ss, r2,
                   acc_x, acc_y, acc_n, counts)
        if cx + 1 < ncx:
            right, shx = row + cx + 1, 0.0
        else:
            right, shx = row, lx
        _pairs_acc(i0, i1, cell_start[right], cell_start[right + 1], False, shx, 0.0,
                   xs, ys, cs, ss, r2, acc_x, acc_y, acc_n, counts)
        if nxt < 0:
            continue
        if cx == 0:
            a0, a1, b0, b1, shb = nrow, nrow + 2, nrow + ncx - 1, nrow + ncx, -lx
        elif cx == ncx - 1:
            a0, a1, b0, b1, shb = nrow + cx - 1, nrow + ncx, nrow, nrow + 1, lx
        else:
            a0, a1, b0, b1, shb = nrow + cx - 1, nrow + cx + 2, 0, 0, 0.0
        _pairs_acc(i0, i1, cell_start[a0], cell_start[a1], False, 0.0, shy, xs, ys, cs,
                   ss, r2, acc_x, acc_y, acc_n, counts)
        if b1 > b0:
            _pairs_acc(i0, i1, cell_start[b0], cell_start[b1], False, shb, shy, xs, ys,
                       cs, ss, r2, acc_x, acc_y, acc_n, counts)


@numba.njit(cache=True, inline="always")
def _range_acc(lo, hi, i0, i1, xs, ys, cs, ss, wrap_y, lx, ly, r2, acc_x, acc_y, acc_n):
    """Add the particles of slots [lo, hi) closer than R to each particle of slots
    [i0, i1) to that particle's sums (one-sided; full-shell scheme)."""
    hx = 0.5 * lx
    hy = 0.5 * ly
    for j in range(lo, hi):
        xj = xs[j]
        yj = ys[j]
        cj = cs[j]
        sj = ss[j]
        for i in range(i0, i1):
            dx = xj - xs[i]
            if dx > hx:
                dx -= lx
            elif dx < -hx:
                dx += lx
            dy = yj - ys[i]
            if wrap_y:
                if dy > hy:
                    dy -= ly
                elif dy < -hy:
                    dy += ly
            w = 1.0 if dx * dx + dy * dy < r2 else 0.0
            acc_x[i] += w * cj
            acc_y[i] += w * sj
            acc_n[i] += w


@numba.njit(cache=True, inline="always")
def _cell_sums(c, xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
               acc_x, acc_y, acc_n):
    """Full-shell sums of the particles of cell c (any number of cells per side).

    The cells cx - 1 .. cx + 1 of a row are one slot range (two at the periodic
    seam); a row of three or fewer cells is taken whole, which visits each of its
    cells exactly once. Rows cy - 1 .. cy + 1 are wrapped when y is periodic (all
    rows, once each, when there are three or fewer) and clipped in a channel.
    Writes the slots of cell c only.
    """
    i0 = cell_start[c]
    i1 = cell_start[c + 1]
    if i1 == i0:
        return
    for i in range(i0, i1):
        acc_x[i] = 0.0
        acc_y[i] = 0.0
        acc_n[i] = 0.0
    cy = c // ncx
    cx = c - cy * ncx
    if wrap_y and ncy <= 3:
        r_lo, r_hi = 0, ncy
    else:
        r_lo, r_hi = cy - 1, cy + 2
        if not wrap_y:
            r_lo = max(r_lo, 0)
            r_hi = min(r_hi, ncy)
    for ry in range(r_lo, r_hi):
        row = ry
        if row < 0:
            row += ncy
        elif row >= ncy:
            row -= ncy
        row *= ncx
        if ncx <= 3:
            a0, a1, b0, b1 = row, row + ncx, 0, 0
        elif cx == 0:
            a0, a1, b0, b1 = row, row + 2, row + ncx - 1, row + ncx
        elif cx == ncx - 1:
            a0, a1, b0, b1 = row + cx - 1, row + ncx, row, row + 1
        else:
            a0, a1, b0, b1 = row + cx - 1, row + cx + 2, 0, 0
        _range_acc(cell_start[a0], cell_start[a1], i0, i1, xs, ys, cs, ss, wrap_y, lx,
                   ly, r2, acc_x, acc_y, acc_n)
        if b1 > b0:
            _range_acc(cell_start[b0], cell_start[b1], i0, i1, xs, ys, cs, ss, wrap_y,
                       lx, ly, r2, acc_x, acc_y, acc_n)


# --------------------------------------------------------------------------- kernels
@numba.njit(cache=True)
def _sort_kernel(x, y, c, s, pid, inv_hx, inv_hy, ncx, ncy, cell_of, cell_start, cursor,
                 xs, ys, cs, ss, pids, acc_x, acc_y, acc_n):
    """Bin by cell (row-major, cy * ncx + cx) and counting-sort into the ``*s`` buffers.

    Stable, hence deterministic. ``cell_start`` : (ncells + 1,) gets the first sorted
    slot of every cell; ``cell_of`` : (N,), ``cursor`` : (ncells,) are scratch. The
    neighbour sums ``acc_*`` are started with each particle's own heading (a particle
    is its own neighbour) on the way. Serial on purpose: a scatter with running
    cursors, cheap next to the pair loops, and one parallel region less per step.
    """
    ncells = cursor.shape[0]
    for k in range(ncells + 1):
        cell_start[k] = 0
    for i in range(x.shape[0]):
        k = _cell_index(y[i], inv_hy, ncy) * ncx + _cell_index(x[i], inv_hx, ncx)
        cell_of[i] = k
        cell_start[k + 1] += 1
    for k in range(ncells):
        cell_start[k + 1] += cell_start[k]
        cursor[k] = cell_start[k]
    for i in range(x.shape[0]):
        k = cell_of[i]
        m = cursor[k]
        cursor[k] = m + 1
        xs[m] = x[i]
        ys[m] = y[i]
        cs[m] = c[i]
        ss[m] = s[i]
        pids[m] = pid[i]
        acc_x[m] = c[i]
        acc_y[m] = s[i]
        acc_n[m] = 1.0


@numba.njit(cache=True, parallel=True)
def _half_shell_kernel(xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
                       acc_x, acc_y, acc_n, counts):
    """Neighbour sums per sorted slot by half-shell passes over the rows.

    The sums must hold each particle's own heading on entry (``_sort_kernel`` puts
    it there). Even rows, then odd rows, run in parallel, and, when y is periodic
    with an odd number of rows (the last row would write row 0 together with row 0's
    own pass), the last row alone. Passes in one phase are two rows apart and write
    disjoint rows, and the order in which any particle's sums are accumulated is
    fixed by this schedule, not by the thread count.
    """
    lone = wrap_y and ncy % 2 == 1
    n_even = (ncy - 1) // 2 if lone else (ncy + 1) // 2
    for k in prange(n_even):
        _row_pairs(2 * k, xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
                   acc_x, acc_y, acc_n, counts)
    for k in prange(ncy // 2):
        _row_pairs(2 * k + 1, xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
                   acc_x, acc_y, acc_n, counts)
    if lone:
        _row_pairs(ncy - 1, xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
                   acc_x, acc_y, acc_n, counts)


@numba.njit(cache=True, parallel=True)
def _full_shell_kernel(xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
                       acc_x, acc_y, acc_n):
    """Neighbour sums per sorted slot, every cell scanning its full stencil."""
    for c in prange(ncx * ncy):
        _cell_sums(c, xs, ys, cs, ss, cell_start, ncx, ncy, wrap_y, lx, ly, r2,
                   acc_x, acc_y, acc_n)


@numba.njit(cache=True, parallel=True)
def _align_kernel(xs, ys, acc_x, acc_y, acc_n, noise_code, eta, noise, do_move, step, lx,
                  ly, channel, centers, radii, out_x, out_y, out_c, out_s):
    """New headings from the neighbour sums and the noise; optionally move.

    Writes slot i of ``out_*`` for sorted slot i. ``noise`` : (N,) uniform [0, 1)
    numbers (angular, vectorial) or standard normals (gaussian), one per sorted slot.
    Angular and Gaussian noise rotate the mean direction by xi; vectorial noise adds
    eta n e(xi) to the sum before normalising. ``do_move``: advance by ``step``
    = v0 dt along the new heading and apply the boundary rule; else copy positions.
    """
    for i in prange(xs.shape[0]):
        sx = acc_x[i]
        sy = acc_y[i]
        u = noise[i]
        if noise_code == 2:  # vectorial (Gregoire-Chate): arg(S + eta n e(xi))
            xi_ = _TWO_PI * (u - 0.5)
            en = eta * acc_n[i]
            sx += en * np.cos(xi_)
            sy += en * np.sin(xi_)
            cr = 1.0
            sr = 0.0
        else:
            # angular: xi uniform in [-pi eta, pi eta); gaussian: xi of s.d. pi eta
            xi_ = eta * _TWO_PI * (u - 0.5) if noise_code == 0 else eta * np.pi * u
            cr = np.cos(xi_)
            sr = np.sin(xi_)
        norm = np.sqrt(sx * sx + sy * sy)
        if norm > 0.0:
            sx /= norm
            sy /= norm
        else:  # exactly cancelling neighbours: take +x, like arctan2(0, 0) = 0
            sx = 1.0
            sy = 0.0
        c = sx * cr - sy * sr
        s = sx * sr + sy * cr
        if do_move:
            out_x[i], out_y[i], out_c[i], out_s[i] = _advance(xs[i], ys[i], c, s, step, lx,
                                                              ly, channel, centers, radii)
        else:
            out_x[i] = xs[i]
            out_y[i] = ys[i]
            out_c[i] = c
            out_s[i] = s


@numba.njit(cache=True, parallel=True)
def _move_kernel(x, y, c, s, step, lx, ly, channel, centers, radii):
    """Advance every particle by ``step`` along its heading, in place, with walls."""
    for i in prange(x.shape[0]):
        x[i], y[i], c[i], s[i] = _advance(x[i], y[i], c[i], s[i], step, lx, ly, channel,
                                          centers, radii)


@numba.njit(cache=True, parallel=True)
def _order_kernel(c, s, partial):
    """|sum_i (c_i, s_i)| / N with fixed-block partial sums (``partial``: (B, 2))."""
    n = c.shape[0]
    nblocks = partial.shape[0]
    for b in prange(nblocks):
        lo = b * _ORDER_BLOCK
        hi = min(lo + _ORDER_BLOCK, n)
        px = 0.0
        py = 0.0
        for i in range(lo, hi):
            px += c[i]
            py += s[i]
        partial[b, 0] = px
        partial[b, 1] = py
    px = 0.0
    py = 0.0
    for b in range(nblocks):
        px += partial[b, 0]
        py += partial[b, 1]
    return np.sqrt(px * px + py * py) / n


@numba.njit(cache=True, parallel=True)
def _unit_kernel(theta, c, s):
    for i in prange(theta.shape[0]):
        c[i] = np.cos(theta[i])
        s[i] = np.sin(theta[i])


@numba.njit(cache=True, parallel=True)
def _angle_scatter_kernel(c, s, pid, out):
    """``out[pid[i]] = theta_i`` in (-pi, pi] (back to particle order)."""
    for i in prange(c.shape[0]):
        out[pid[i]] = _angle(c[i], s[i])


@numba.njit(cache=True, parallel=True)
def _scatter_kernel(src, pid, dst):
    """``dst[pid[i]] = src[i]`` (back to particle order; pid is a permutation)."""
    for i in prange(src.shape[0]):
        dst[pid[i]] = src[i]


@numba.njit(cache=True, parallel=True)
def _wrap_angles_kernel(a):
    for i in prange(a.shape[0]):
        a[i] = _wrap_angle(a[i])


# --------------------------------------------------------------------------- wrappers
class CellGrid:
    """Cell lists and preallocated buffers for ``n`` particles in one box.

    Parameters
    ----------
    lx, ly : float
        Box sides.
    radius : float
        Interaction radius, ``0 < radius <= min(lx, ly)``.
    channel : bool
        y is not periodic (walls).
    n : int
        Number of particles.

    Attributes
    ----------
    ncx, ncy : int
        Cells per side (cell sides ``Lx / ncx >= R``, ``Ly / ncy >= R``).
    cell_start : (ncx * ncy + 1,) int64 ndarray
        First sorted slot of every cell (after :meth:`sort`).
    xs, ys, cs, ss : (n,) ndarray
        Positions and unit headings in sorted order.
    pids : (n,) int64 ndarray
        Particle index of each sorted slot.
    acc_x, acc_y, acc_n : (n,) ndarray
        Neighbour sums of the headings and neighbour counts (after :meth:`accumulate`).
    """

    def __init__(self, lx: float, ly: float, radius: float, channel: bool, n: int):
        self.lx, self.ly, self.radius = float(lx), float(ly), float(radius)
        self.channel = bool(channel)
        self.wrap_y = not self.channel
        self.ncx = max(1, int(np.floor(self.lx / self.radius)))
        self.ncy = max(1, int(np.floor(self.ly / self.radius)))
        self.inv_hx = self.ncx / self.lx
        self.inv_hy = self.ncy / self.ly
        self.r2 = self.radius * self.radius
        ncells = self.ncx * self.ncy
        self.cell_start = np.zeros(ncells + 1, dtype=np.int64)
        self._cursor = np.zeros(ncells, dtype=np.int64)
        self._cell_of = np.zeros(n, dtype=np.int64)
        self.xs, self.ys, self.cs, self.ss = (np.zeros(n) for _ in range(4))
        self.pids = np.zeros(n, dtype=np.int64)
        self.acc_x, self.acc_y, self.acc_n = (np.zeros(n) for _ in range(3))

    @property
    def half_shell(self) -> bool:
        """Whether :meth:`accumulate` uses the half-shell (pair-symmetric) scheme."""
        return self.ncx >= 3 and (self.channel or self.ncy >= 3)

    def sort(self, x, y, c, s, pid) -> None:
        """Bin the particles and counting-sort them into ``xs, ys, cs, ss, pids``."""
        _sort_kernel(x, y, c, s, pid, self.inv_hx, self.inv_hy, self.ncx, self.ncy,
                     self._cell_of, self.cell_start, self._cursor, self.xs, self.ys,
                     self.cs, self.ss, self.pids, self.acc_x, self.acc_y, self.acc_n)

    def accumulate(self, counts: bool = True) -> None:
        """Neighbour sums ``acc_x, acc_y`` (and counts ``acc_n``) of the sorted particles
        (call right after :meth:`sort`).

        ``counts=False`` may skip the counts (``acc_n`` is then left undefined).

        Half-shell scheme with at least three cells along every periodic side, else
        the full-shell scan (see the module docstring).
        """
        args = (self.xs, self.ys, self.cs, self.ss, self.cell_start, self.ncx, self.ncy,
                self.wrap_y, self.lx, self.ly, self.r2, self.acc_x, self.acc_y,
                self.acc_n)
        if self.half_shell:
            _half_shell_kernel(*args, counts)
        else:
            _full_shell_kernel(*args)


def _as_arrays(x, y, theta, box, radius, channel):
    x = np.ascontiguousarray(x, dtype=np.float64)
    y = np.ascontiguousarray(y, dtype=np.float64)
    theta = np.ascontiguousarray(theta, dtype=np.float64)
    if x.ndim != 1 or x.shape != y.shape or x.shape != theta.shape:
        raise InputError(f"x, y, theta must be 1-d arrays of one length (got shapes "
                         f"{x.shape}, {y.shape}, {theta.shape})")
    lx, ly = (float(v) for v in box)
    if not (lx > 0 and ly > 0):
        raise InputError(f"box must have two positive sides (got {tuple(box)!r})")
    if not (0 < radius <= min(lx, ly)):
        raise InputError(f"radius must be in (0, min(box)] = (0, {min(lx, ly):g}] "
                         f"(got {radius!r})")
    if x.size and (x.min() < 0 or x.max() >= lx or y.min() < 0 or y.max() >= ly):
        raise InputError(f"positions must lie in [0, Lx) x [0, Ly) = [0, {lx:g}) x "
                         f"[0, {ly:g})")
    return x, y, theta, lx, ly


def neighbour_sums(x, y, theta, box, radius, channel=False):
    """Sum of unit headings and number of particles within ``radius`` of each particle.

    Parameters
    ----------
    x, y, theta : (N,) ndarray
        Positions in ``[0, Lx) x [0, Ly)`` and headings.
    box : (2,) sequence
        ``(Lx, Ly)``.
    radius : float
        Interaction radius, ``0 < radius <= min(Lx, Ly)``.
    channel : bool
        Walls at y = 0, Ly (no periodic image in y).

    Returns
    -------
    sx, sy : (N,) ndarray
        ``sum_j cos(theta_j)``, ``sum_j sin(theta_j)`` over the neighbours j of i (i
        included): minimum-image distance strictly below ``radius``, each particle once.
    count : (N,) int64 ndarray
        Number of neighbours, i included.
    """
    x, y, theta, lx, ly = _as_arrays(x, y, theta, box, radius, channel)
    n = x.shape[0]
    grid = CellGrid(lx, ly, float(radius), bool(channel), n)
    c, s = np.empty(n), np.empty(n)
    _unit_kernel(theta, c, s)
    grid.sort(x, y, c, s, np.arange(n, dtype=np.int64))
    grid.accumulate()
    sx, sy, count = np.empty(n), np.empty(n), np.empty(n)
    for src, dst in ((grid.acc_x, sx), (grid.acc_y, sy), (grid.acc_n, count)):
        _scatter_kernel(src, grid.pids, dst)
    return sx, sy, count.astype(np.int64)


def neighbour_mean_heading(x, y, theta, box, radius, channel=False):
    """Mean heading angle ``arg(sum_j e(theta_j))`` over the neighbours of each particle.

    Same parameters as :func:`neighbour_sums`; returns ``(N,)`` angles in (-pi, pi].
    """
    sx, sy, _ = neighbour_sums(x, y, theta, box, radius, channel)
    return wrap_angle(np.arctan2(sy, sx))


def neighbour_counts(x, y, box, radius, channel=False):
    """Number of particles within ``radius`` of each particle, itself included."""
    x = np.asarray(x, dtype=np.float64)
    return neighbour_sums(x, y, np.zeros_like(x), box, radius, channel)[2]


def order_buffer(n: int) -> np.ndarray:
    """Scratch of :func:`_order_kernel` for ``n`` particles."""
    return np.zeros((max(1, -(-n // _ORDER_BLOCK)), 2))


def polar_order(theta) -> float:
    """Polar order parameter ``|sum_i e(theta_i)| / N`` (fixed summation order).

    Parameters
    ----------
    theta : (N,) ndarray, N >= 1
    """
    theta = np.ascontiguousarray(theta, dtype=np.float64)
    if theta.ndim != 1 or theta.size == 0:
        raise InputError(f"theta must be a non-empty 1-d array (got shape {theta.shape})")
    c, s = np.empty(theta.size), np.empty(theta.size)
    _unit_kernel(theta, c, s)
    return float(_order_kernel(c, s, order_buffer(theta.size)))


def wrap_angle(a) -> np.ndarray:
    """Angles mapped into (-pi, pi] (a new float64 array)."""
    a = np.array(a, dtype=np.float64)
    flat = a.reshape(-1)
    _wrap_angles_kernel(flat)
    return flat.reshape(a.shape)
