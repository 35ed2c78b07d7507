"""The particle solver: state, one time step, counters.

Model (metric Vicsek family). With e(a) = (cos a, sin a) and S_i = sum of e(theta_j) over
the particles j within R of i (i included, see ``_kernels`` for the exact convention):

- angular:   theta_i <- arg S_i + xi,  xi uniform in [-pi eta, pi eta)
- gaussian:  theta_i <- arg S_i + xi,  xi normal with s.d. pi eta (wrapped)
- vectorial: theta_i <- arg(S_i + eta n_i e(xi)),  xi uniform in [-pi, pi), n_i the
  number of neighbours (i included) (Gregoire & Chate 2004)

followed (``agents.update = "align_then_move"``, the default, as in Vicsek et al. 1995)
by r_i <- r_i + v0 dt e(theta_i) with the *new* heading; ``"move_then_align"`` moves
with the old heading first and then aligns at the new positions. After a move the
core's boundary rule is applied (specular reflection off channel walls and disc
obstacles, periodic wrap elsewhere), so no particle ever ends a step inside a solid.

Randomness: each step draws N numbers (uniform in [0, 1), or standard normals for
"gaussian") from the ``"agents"`` stream of ``crossflock._runtime.rng_for`` into a
preallocated buffer, number k going to the particle in cell-sorted slot k. The
initial state comes from the separate ``"agents-init"`` stream (see ``_initial``).

Storage: positions and unit headings (cos theta, sin theta) in cell-sorted order
(re-sorted every step, which is also what keeps memory access local); ``pid`` maps a
storage slot to the particle index. The public ``x``, ``y``, ``theta`` are in
particle-index order, theta = arctan2(sin, cos) in (-pi, pi].
"""

from __future__ import annotations

import contextlib
import json

import numba
import numpy as np

from crossflock._errors import ConfigError, InputError
from crossflock._geometry import geometry_from_config, inside
from crossflock._runtime import rng_for

from ._initial import initial_headings, uniform_positions
from ._kernels import (
    NOISE_CODES,
    CellGrid,
    _align_kernel,
    _angle_scatter_kernel,
    _move_kernel,
    _order_kernel,
    _scatter_kernel,
    _unit_kernel,
    order_buffer,
)

__all__ = ["AgentSolver", "particle_count", "PARALLEL_MIN_PARTICLES"]

# Below this many particles a step runs on one numba thread: waking the thread pool
# for each of the half-dozen kernels of a step costs more than it saves (and far more
# on a loaded machine). The numbers are the same either way.
PARALLEL_MIN_PARTICLES = 20000


def particle_count(cfg) -> int:
    """N = round(model.density * fluid area); ConfigError when that is zero."""
    geom = geometry_from_config(cfg)
    n = int(round(cfg.model.density * geom.fluid_area()))
    if n < 1:
        raise ConfigError(
            f"`model.density` = {cfg.model.density:g} gives no particle in a fluid area "
            f"of {geom.fluid_area():g} (need density * area >= 0.5)"
        )
    return n


class AgentSolver:
    """Metric alignment model on the shared geometry.

    Parameters
    ----------
    cfg : crossflock.Config
    x, y, theta : (N,) ndarray, optional
        Initial state (all three or none); by default drawn from the
        ``"agents-init"`` stream as documented in ``_initial``. Positions must lie in
        the fluid.

    Attributes
    ----------
    n : int
        Number of particles.
    n_steps : int
        Steps taken.
    t : float
        Simulated time ``n_steps * agents.dt``.
    x, y, theta : (N,) ndarray
        Current state in particle-index order (copies).
    rng : numpy.random.Generator
        The noise stream (``"agents"``), one draw of N numbers per step.
    """

    def __init__(self, cfg, *, x=None, y=None, theta=None):
        self.cfg = cfg
        self.geom = geometry_from_config(cfg)
        m = cfg.model
        if m.noise_kind not in NOISE_CODES:
            raise ConfigError(f"`model.noise_kind` must be one of {sorted(NOISE_CODES)} "
                              f"(got {m.noise_kind!r})")
        self.dt = float(cfg.agents.dt)
        self._noise_code = NOISE_CODES[m.noise_kind]
        self._eta = float(m.noise)
        self._move_first = cfg.agents.update == "move_then_align"
        self._step_len = float(m.speed) * self.dt
        g = self.geom
        self._walls = (g.lx, g.ly, g.channel, np.ascontiguousarray(g.centers, dtype=float),
                       np.ascontiguousarray(g.radii, dtype=float))
        if x is None and y is None and theta is None:
            n = particle_count(cfg)
            init = rng_for(cfg.run.seed, "agents-init")
            x, y = uniform_positions(g, n, init)
            theta = initial_headings(cfg.run.initial, cfg.run.initial_polarization, n, init)
        elif x is None or y is None or theta is None:
            raise InputError("AgentSolver: give all of x, y, theta or none of them")
        self._x = np.array(x, dtype=np.float64)
        self._y = np.array(y, dtype=np.float64)
        theta = np.ascontiguousarray(theta, dtype=np.float64)
        n = self._x.size
        if self._x.shape != (n,) or self._y.shape != (n,) or theta.shape != (n,) or n < 1:
            raise InputError("AgentSolver: x, y, theta must be 1-d arrays of one length >= 1")
        if not np.all(inside(g, self._x, self._y) & (self._x >= 0) & (self._x < g.lx)
                      & (self._y >= 0) & (self._y < g.ly)):
            raise InputError("AgentSolver: initial positions must lie in the fluid")
        self.n = n
        self._c, self._s = np.empty(n), np.empty(n)
        _unit_kernel(theta, self._c, self._s)
        self._pid = np.arange(n, dtype=np.int64)
        self._grid = CellGrid(g.lx, g.ly, float(m.radius), g.channel, n)
        self._noise = np.empty(n)
        self._order_buf = order_buffer(n)
        self.rng = rng_for(cfg.run.seed, "agents")
        self.n_steps = 0

    # ----------------------------------------------------------------- stepping
    @property
    def t(self) -> float:
        return self.n_steps * self.dt

    @contextlib.contextmanager
    def _threads(self):
        """One numba thread for small systems (see PARALLEL_MIN_PARTICLES)."""
        if self.n >= PARALLEL_MIN_PARTICLES:
            yield
            return
        threads = numba.get_num_threads()
        numba.set_num_threads(1)  # a thread-local setting
        try:
            yield
        finally:
            numba.set_num_threads(threads)

    def step(self) -> None:
        """Advance one time step ``agents.dt``."""
        with self._threads():
            self._step_impl()
        self.n_steps += 1

    def _step_impl(self) -> None:
        # Noise first, from the Generator into a preallocated buffer: one number per
        # sorted slot, so nothing depends on numba's thread count.
        if self._noise_code == 1:
            self.rng.standard_normal(out=self._noise)
        else:
            self.rng.random(out=self._noise)
        grid = self._grid
        if self._move_first:
            _move_kernel(self._x, self._y, self._c, self._s, self._step_len, *self._walls)
        grid.sort(self._x, self._y, self._c, self._s, self._pid)
        grid.accumulate(counts=self._noise_code == NOISE_CODES["vectorial"])
        # The sorted copies live in the grid; the new state overwrites the old arrays.
        _align_kernel(grid.xs, grid.ys, grid.acc_x, grid.acc_y, grid.acc_n,
                      self._noise_code, self._eta, self._noise, not self._move_first,
                      self._step_len, *self._walls, self._x, self._y, self._c, self._s)
        self._pid, grid.pids = grid.pids, self._pid

    # ----------------------------------------------------------------- observables
    def order(self) -> float:
        """Polar order ``|sum_i e(theta_i)| / N`` now."""
        with self._threads():
            return float(_order_kernel(self._c, self._s, self._order_buf))

    def _particle_order(self, src: np.ndarray, out: np.ndarray | None = None):
        out = np.empty(self.n) if out is None else out
        with self._threads():
            _scatter_kernel(src, self._pid, out)
        return out

    def _theta_into(self, out: np.ndarray | None = None):
        out = np.empty(self.n) if out is None else out
        with self._threads():
            _angle_scatter_kernel(self._c, self._s, self._pid, out)
        return out

    @property
    def x(self) -> np.ndarray:
        return self._particle_order(self._x)

    @property
    def y(self) -> np.ndarray:
        return self._particle_order(self._y)

    @property
    def theta(self) -> np.ndarray:
        return self._theta_into()

    def snapshot_into(self, x_out, y_out, theta_out) -> None:
        """Write the state in particle order into three ``(N,)`` views."""
        self._particle_order(self._x, x_out)
        self._particle_order(self._y, y_out)
        self._theta_into(theta_out)

    # ----------------------------------------------------------------- checkpoint
    def get_state(self) -> dict:
        """Everything needed to continue bit-identically (arrays copied)."""
        return {
            "x": self._x.copy(), "y": self._y.copy(), "c": self._c.copy(),
            "s": self._s.copy(),
            "pid": self._pid.copy(), "n_steps": int(self.n_steps),
            "rng_state": json.dumps(self.rng.bit_generator.state),
        }

    def set_state(self, state: dict) -> None:
        """Restore a :meth:`get_state` dict (storage order, step counter, RNG)."""
        for name in ("x", "y", "c", "s"):
            arr = np.asarray(state[name], dtype=np.float64)
            if arr.shape != (self.n,):
                raise InputError(f"checkpoint state `{name}` has shape {arr.shape}, "
                                 f"expected ({self.n},)")
            getattr(self, "_" + name)[:] = arr
        pid = np.asarray(state["pid"], dtype=np.int64)
        if pid.shape != (self.n,) or not np.array_equal(np.sort(pid), np.arange(self.n)):
            raise InputError("checkpoint state `pid` is not a permutation of the particles")
        self._pid[:] = pid
        self.n_steps = int(state["n_steps"])
        self.rng.bit_generator.state = json.loads(state["rng_state"])
