"""Finite-difference solver: masked grids (periodic, channel, discs), temporal blocking.

The numerics (stencil, ghost rule at walls and discs, explicit SBDF2 in history form,
temporal blocking over bands of rows) are described and compiled in
:mod:`._fd_kernels`; this module prepares their inputs (padded fluid mask, bands,
scheme tables, scratch), chooses the block length and keeps the solver state.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from ._fd_kernels import fd_advance_kernel, fd_advance_kernel_serial
from ._guard import failure_cause, field_stats
from ._solver import ContinuumSolver

__all__ = ["FiniteDifferenceSolver", "padded_fluid", "plain_rows", "band_starts",
           "scheme_table", "rhs_scheme", "extra_terms", "row_stride", "scratch",
           "block_steps", "scratch_bytes", "aligned_zeros", "SERIAL_BELOW"]

# Grids with fewer points than this run the serial kernel (see fd_advance_kernel_serial).
SERIAL_BELOW = 128 * 256
# Steps per pass over memory in FiniteDifferenceSolver.advance (see "Temporal blocking"):
# as many as keep one band's scratch (:func:`scratch`) within SCRATCH_BYTES, between
# BLOCK_MIN and BLOCK_MAX, and at most ny / BAND_SHARE so that several bands (threads) of
# the 2 K rows a band needs fit the grid. Measured at 512 x 512 on the 2-core machine
# (512 KiB L2 per core, shared L3): the state's memory traffic falls as 1/K and outweighs
# the rings spilling from L2 to L3; K = 20-40 were within a few percent of each other and
# 6-10% faster than K = 14. With the split tiling and the overlap-free row kernel,
# interleaved in one process: K = 48 and 64 4% faster than K = 32, K = 40 2%.
SCRATCH_BYTES = 17 * 256 * 1024  # 4.25 MiB: K = 48 at 512 wide
BLOCK_MIN, BLOCK_MAX = 4, 48
BAND_SHARE = 8
# Rows per step in each sweep of the wavefront (see _fd_kernels._tile): a step's input
# rows are then reused from the cache for ROW_CHUNK rows. 4 measured 7% faster than 1 at
# 512 x 512; 2-8 were within noise of each other.
ROW_CHUNK = 4
# Least distance in bytes between a scratch row's length and a multiple of 4096 bytes
# (see row_stride).
PAGE_GAP = 128
# Byte alignment of the first interior column of every scratch row and of the state and
# noise rows (see aligned_zeros).
ALIGN = 64


def extra_terms(cs, pressure, kinetic):
    """``(extra, p_lin, pressure)`` of the kernels.

    ``extra`` is None for the minimal equations: no lambda1-3, D_B, D_2 or D_rho
    (``cs`` in the order of ``_coefficients.SCALARS``), a pressure of degree at most one
    (its slope ``p_lin``) and table coefficients; else 1. Two variants rather than one
    per term keep the number of compiled kernels (and the first-run compile time) small.
    """
    p = np.ascontiguousarray(pressure, dtype=np.float64).reshape(-1)
    p_lin = float(p[0]) if p.shape[0] else 0.0
    minimal = (not kinetic and p.shape[0] <= 1
               and all(float(cs[i]) == 0.0 for i in (4, 5, 6, 7, 8, 9)))
    return (None if minimal else 1), p_lin, (p if p.shape[0] else np.zeros(1))


def row_stride(nx):
    """Row length of the scratch rows: nx + 2 rounded up to 64 bytes, then lengthened by
    64 bytes until a row is at least :data:`PAGE_GAP` bytes longer or shorter than a
    whole number of 4096-byte pages.

    The CPU guesses whether a load depends on an earlier store from the low 12 address
    bits; rows whose starts differ by a few cache lines modulo 4096 bytes (all the ring's
    rows when a row is 4096 + 64 bytes long) make loads wait on unrelated stores. Measured
    on the 2-core machine (``advance``, 2 threads, interleaved): 3-4% faster at 512 x
    512 and 4-6% at 1024 x 1024 with rows 128 bytes or more off a page multiple than
    with 64 bytes off; no change at 256 x 256 (already 2112 bytes off).
    """
    stride = -(-(nx + 2) // 8) * 8
    while min((stride * 8) % 4096, -(stride * 8) % 4096) < PAGE_GAP:
        stride += 8
    return stride


def _scratch_shapes(nsteps, nx, chunk):
    """Shapes of one band's ring, history ring and edge rows (see
    :func:`._fd_kernels._tile`)."""
    stride = row_stride(nx)
    return ((nsteps + 1, chunk + 2, 3, stride), (nsteps + chunk, 1, 3, stride),
            (nsteps, 6, 3, stride))


def scratch_bytes(nsteps, nx):
    """Bytes of one band's rings (:func:`scratch`) for blocks of ``nsteps`` on a grid
    ``nx`` wide: what cycles through the caches during a block. The edge rows are
    written once and read once per block, so they are not counted."""
    ring, hring, _ = _scratch_shapes(nsteps, nx, ROW_CHUNK)
    return 8 * (math.prod(ring) + math.prod(hring))


def block_steps(nx, ny):
    """Steps per block of :meth:`FiniteDifferenceSolver.advance` on an ``ny x nx`` grid."""
    k = min(BLOCK_MAX, ny // BAND_SHARE)
    while k > BLOCK_MIN and scratch_bytes(k, nx) > SCRATCH_BYTES:
        k -= 1
    return int(min(max(BLOCK_MIN, k), max(1, ny // 2)))  # one band: 2 K rows


def aligned_zeros(shape, lead=0):
    """Zeros of ``shape`` (float64, C order) whose element ``lead`` of the flat array sits
    on an :data:`ALIGN`-byte boundary.

    With a last axis of a multiple of 8 elements, element ``lead`` of every row is then
    aligned. The kernels' vector loads and stores run over the interior columns; when
    those straddle cache lines, half the loads are split in two. Measured at 512 x 512 on
    the 2-core machine: ``advance`` 0.56 against 0.61 ms per step with the interior
    misaligned by 8 bytes, the state of numpy's default 16-byte alignment.
    """
    n = math.prod(shape)
    pad = ALIGN // 8
    buf = np.zeros(n + pad)
    start = (-(buf.ctypes.data // 8) - lead) % pad
    return buf[start:start + n].reshape(shape)


def padded_fluid(fluid, channel):
    """Fluid mask ``(ny + 2, nx + 2)`` uint8 padded by one cell.

    Columns wrap (periodic in x); the extra rows wrap too, or are solid (0) beyond the
    walls of a channel.
    """
    f = np.asarray(fluid, dtype=np.uint8)
    out = np.pad(f, 1, mode="wrap")
    if channel:
        out[0] = 0
        out[-1] = 0
    return np.ascontiguousarray(out)


def plain_rows(fl):
    """``(ny,)`` uint8: 1 where rows j-1, j, j+1 of the padded mask ``fl`` are all fluid."""
    full = fl.all(axis=1)
    return (full[:-2] & full[1:-1] & full[2:]).astype(np.uint8)


def band_starts(ny, nbands):
    """Boundaries ``(nb + 1,)`` int64 of ``nbands`` (at most ``ny``) near-equal bands."""
    nb = max(1, min(int(nbands), int(ny)))
    return np.linspace(0, ny, nb + 1).round().astype(np.int64)


def scheme_table(nsteps, first, dt):
    """``(nsteps, 3)`` rows ``(c_s, c_n, c_xi)`` of the SBDF2 steps.

    The update is ``u' = u + c_s (u + h) + c_n N + c_xi dW``, written as an increment:
    ``(1/3, 4 dt / 3, 2/3)``, which is the module docstring's form, and forward Euler
    ``(0, dt, 1)`` for the first step of a run (``0 (u + h)`` is 0 for finite fields). As
    an increment, a steady state (``u + h = 0``, N = 0) stays exactly steady and the total
    mass changes by round-off only, with no drift from the rounded constants 4/3 and 1/3.
    """
    table = np.tile([1.0 / 3.0, 4.0 * dt / 3.0, 2.0 / 3.0], (nsteps, 1))
    if first:
        table[0] = (0.0, dt, 1.0)
    return table


def rhs_scheme():
    """The one-row table that makes the kernel write N itself, given ``h = 0``:
    ``u' = u - (u + 0) + N``.

    The right-hand side comes out exactly: ``u - u`` is an exact 0, fused or not, from the
    same compiled kernel as the steps.
    """
    return np.array([[-1.0, 1.0, 0.0]])


def scratch(nbands, nsteps, nx, chunk=None):
    """Zeroed ``(ring, hring, edge, stats)`` scratch for
    :func:`._fd_kernels.fd_advance_kernel` (``chunk`` rows per step and sweep of the
    wavefront, default :data:`ROW_CHUNK`)."""
    shapes = _scratch_shapes(nsteps, nx, ROW_CHUNK if chunk is None else int(chunk))
    # column 1 is the first interior column (column 0 holds the periodic copy)
    return tuple(aligned_zeros((nbands, *shape), lead=1) for shape in shapes) + (
        np.zeros((2 * nbands, 3)),)


class FiniteDifferenceSolver(ContinuumSolver):
    """Finite differences on the masked cell-centred grid (periodic, channel, discs).

    :meth:`advance` takes up to :func:`block_steps` steps per pass over memory
    (temporal blocking) when the realizability limiter is off; with it on, every step is
    followed by the limiter (a global mass correction), so steps go one at a time.

    The state ``(u, h)`` lives in one of three buffer sets: a block reads the current
    set and writes a free one, and the set last marked good by :meth:`keep_good` is
    never written, so the driver's guard keeps its last good state without copying it.
    """

    name = "finite_difference"

    def _setup(self):
        self.block = block_steps(self.nx, self.ny)
        self.guard_steps = self.block
        shape = (3, self.ny, self.nx)
        self._sets = [(aligned_zeros(shape), aligned_zeros(shape)) for _ in range(3)]
        self._cur = 0
        self._good_set = None
        self._good_time = 0.0
        self._first = True
        self._fl = padded_fluid(self.mask, self.geometry.channel)
        self._plain = plain_rows(self._fl)
        self._kin = self.coef.kinetic_vector()
        self._terms = extra_terms(self.coef.scalars, self.coef.pressure, self.coef.kinetic)
        self._par = np.array([self.dx, self.dy, self.dt, self._noise_amp])
        # sized for a whole block once: shorter blocks use the leading rows
        self._scratch = {}  # per band count (the thread count may change between calls)
        self._schemes = {first: scheme_table(self.block, first, self.dt)
                         for first in (True, False)}
        self._noise_buf = (aligned_zeros((self.block, 2, self.ny, self.nx))
                           if self._noise_amp != 0.0 else None)
        self._stats = None  # (n_steps, (finite, min rho, max |w|^2)) from the kernel

    @property
    def _u(self):
        return self._sets[self._cur][0]

    @property
    def _h(self):
        return self._sets[self._cur][1]

    def _set_fields(self, rho, wx, wy):
        fluid = self.mask
        self._u[0] = np.where(fluid, rho, 0.0)
        self._u[1] = np.where(fluid, wx, 0.0)
        self._u[2] = np.where(fluid, wy, 0.0)
        self._h[...] = 0.0
        self._first = True
        self._good_set = None
        self._stats = None

    def fields(self):
        return self._u[0].copy(), self._u[1].copy(), self._u[2].copy()

    def rhs(self, u=None, out=None):
        """Explicit right-hand side ``(3, ny, nx)`` of state ``u`` (default current)."""
        u = self._u if u is None else np.ascontiguousarray(u, dtype=np.float64)
        out = np.empty_like(u) if out is None else out
        zero = np.zeros_like(u)
        self._run(u, zero, out, zero, 1, rhs_scheme())
        return out

    # ------------------------------------------------------------------ guard
    def health(self, rho0, w_bound):
        if self._stats is not None and self._stats[0] == self.n_steps:
            return failure_cause(*self._stats[1], rho0, w_bound)
        return failure_cause(*field_stats(*self._u), rho0, w_bound)

    def keep_good(self):
        self._good_set = self._cur
        self._good_time = self.time

    def last_good(self):
        if self._good_set is None:
            raise RuntimeError("no state was kept (call keep_good first)")
        u = self._sets[self._good_set][0]
        return self._good_time, (u[0].copy(), u[1].copy(), u[2].copy())

    # ------------------------------------------------------------------ stepping
    def _bands(self):
        parallel = self.nx * self.ny >= SERIAL_BELOW
        threads = numba.get_num_threads() if parallel else 1
        # bands of at least 2 K rows (see _fd_kernels.check_bands)
        nb = max(1, min(threads, self.ny // (2 * self.block)))
        if nb not in self._scratch:
            self._scratch[nb] = (band_starts(self.ny, nb),) + scratch(nb, self.block, self.nx)
        kernel = fd_advance_kernel if parallel else fd_advance_kernel_serial
        return (kernel,) + self._scratch[nb]

    def _draw_noise(self, nsteps):
        """Standard normal increments in the first ``nsteps`` rows of the ``(block, 2,
        ny, nx)`` buffer (None without noise).

        Drawn step by step from the solver's stream, so a block of K steps uses the
        numbers of K single steps.
        """
        buf = self._noise_buf
        if buf is not None:
            for s in range(nsteps):
                self.rng.standard_normal(out=buf[s])
        return buf

    def _run(self, u_in, h_in, u_out, h_out, nsteps, scheme, noise=None):
        kernel, starts, ring, hring, edge, stats = self._bands()
        kernel(u_in, h_in, u_out, h_out, self._fl, self._plain, self.geometry.channel,
               starts, nsteps, scheme, self.coef.scalars,
               self._kin, *self._terms, self._par, noise, ring, hring, edge,
               stats)
        return stats

    def _advance_block(self, nsteps):
        free = next(i for i in range(3) if i != self._cur and i != self._good_set)
        noise = self._draw_noise(nsteps)
        u_out, h_out = self._sets[free]
        stats = self._run(self._u, self._h, u_out, h_out, nsteps, self._schemes[self._first],
                          noise)
        self._cur = free
        self._first = False
        return stats

    def _step_impl(self):
        self._advance_block(1)
        self._limit(self._u[0], self._u[1], self._u[2])

    def _advance_impl(self, nsteps):
        if self.realizability:  # the limiter acts between steps
            super()._advance_impl(nsteps)
            return
        done = 0
        while done < nsteps:
            k = min(self.block, nsteps - done)
            stats = self._advance_block(k)
            self._count(k)
            done += k
        if nsteps:
            self._stats = (self.n_steps, (bool(stats[:, 0].all()), float(stats[:, 1].min()),
                                          float(stats[:, 2].max())))

    def _state_arrays(self):
        return {"u": self._u, "h": self._h, "first": np.array(int(self._first))}

    def _load_state_arrays(self, arrays):
        self._u[...] = arrays["u"]
        if "h" in arrays:
            self._h[...] = arrays["h"]
        else:  # a checkpoint of the previous layout (u_prev, n_prev)
            self._h[...] = -arrays["u_prev"] - 2.0 * self.dt * arrays["n_prev"]
        self._first = bool(int(np.asarray(arrays["first"])))
        self._good_set = None
        self._stats = None
