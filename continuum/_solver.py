"""Common machinery of the continuum solvers: grid, initial state, noise, bookkeeping.

Both methods advance ``u = (rho, w_x, w_y)`` with the same second-order semi-implicit
backward-differentiation scheme (SBDF2, Ascher, Ruuth & Wetton 1995)::

    (3 u^{n+1} - 4 u^n + u^{n-1}) / 2 = dt (2 N^n - N^{n-1}) + dt L u^{n+1} + dW^n

where N is the explicit part and L the implicit linear part (the constant-coefficient
diffusion D_T, D_B, D_rho in the spectral method; nothing in the finite-difference method,
which is fully explicit with the limit of :mod:`crossflock._stability`). The first step
is the first-order member (u^1 - u^0 = dt N^0 + dt L u^1 + dW^0). One right-hand-side
evaluation per step.

After every step (and on the initial state) the realizability limiter of
:mod:`._limiter` projects the state onto rho >= 0, |w| <= rho when
``continuum.realizability`` is on ("auto": with kinetic coefficients).

Noise convention
----------------
``<xi_a(r, t) xi_b(r', t')> = 2 noise_strength delta_ab delta(r - r') delta(t - t')``,
added to d_t w only (mass is conserved). On a cell of area ``dx dy`` over a step ``dt``
the increment is ``dW = sqrt(2 noise_strength dt / (dx dy)) N(0, 1)`` per component, so a
linear mode damped at rate ``a`` has stationary cell variance ``noise_strength / (a dx dy)``
(Ornstein-Uhlenbeck; Gardiner, Handbook of Stochastic Methods, section 4.4.4). The
spectral method removes the noise above its 2/3 de-aliasing cut-off like every other
field, which scales the cell variance by the retained fraction of Fourier modes.
"""

from __future__ import annotations

import json
import math

import numba
import numpy as np

from .._geometry import geometry_from_config, grid_coords, grid_mask
from .._runtime import rng_for
from ._coefficients import CoefficientModel
from ._guard import check_state
from ._limiter import apply_realizability

# grids smaller than this step on one numba thread (see ContinuumSolver.advance)
SMALL_GRID = 128 * 256

__all__ = ["ContinuumSolver", "initial_fields"]


def initial_fields(cfg, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Initial ``rho, wx, wy`` ``(ny, nx)`` of a config (GUIDE / issue 4 contract).

    rho = rho0 (1 + initial_noise xi), renormalised to mean rho0 over the fluid;
    w = initial_noise rho0 (xi_x, xi_y), plus rho0 initial_polarization x_hat for an
    "ordered" start; xi standard normal white noise from the "continuum-init" stream;
    zero in solids.
    """
    rng = rng_for(cfg.run.seed, "continuum-init")
    ny, nx = mask.shape
    rho0 = cfg.model.density
    eps = cfg.continuum.initial_noise
    xi = rng.standard_normal((3, ny, nx))
    fluid = mask.astype(float)
    rho = rho0 * (1.0 + eps * xi[0]) * fluid
    rho *= rho0 * fluid.sum() / rho.sum()
    wx = eps * rho0 * xi[1] * fluid
    wy = eps * rho0 * xi[2] * fluid
    if cfg.run.initial == "ordered":
        wx += rho0 * cfg.run.initial_polarization * fluid
    return rho, wx, wy


class ContinuumSolver:
    """Base class: a continuum solver advanced by :meth:`step` (or :meth:`advance`).

    Parameters
    ----------
    cfg : Config
    dt : float, optional
        Time step; default ``cfg.continuum.dt``. Passing a larger one bypasses the
        config's stability check (tests of the divergence guard do this).
    initial : tuple of three (ny, nx) ndarray, optional
        ``rho, wx, wy`` to start from instead of :func:`initial_fields`.

    Attributes
    ----------
    time : float
        Simulated time (``n_steps * dt``).
    n_steps : int
    status : str
        "running" until a step fails.
    limited_cells : int
        Cells changed by the realizability limiter so far (``continuum.realizability``;
        see :mod:`._limiter`).
    """

    name = ""
    guard_steps = 10  # steps between the driver's health checks

    def __init__(self, cfg, *, dt=None, initial=None, workers=None):
        self.cfg = cfg
        self.dt = float(cfg.continuum.dt if dt is None else dt)
        if not (self.dt > 0 and math.isfinite(self.dt)):
            raise ValueError(f"dt must be positive and finite (got {self.dt!r})")
        self.geometry = geometry_from_config(cfg)
        self.nx, self.ny = (int(n) for n in cfg.continuum.grid)
        self.dx = self.geometry.lx / self.nx
        self.dy = self.geometry.ly / self.ny
        self.x, self.y = grid_coords(self.geometry, self.nx, self.ny)
        self.mask = grid_mask(self.geometry, self.nx, self.ny)
        self.coef = CoefficientModel(cfg)
        self.rng = rng_for(cfg.run.seed, "continuum")
        self.workers = 2 if workers is None else int(workers)
        self.time = 0.0
        self.n_steps = 0
        self.status = "running"
        real = cfg.continuum.realizability
        self.realizability = self.coef.kinetic if real == "auto" else bool(real)
        self.limited_cells = 0
        self._checked = None
        self._good = None
        self._fluid8 = np.ascontiguousarray(self.mask, dtype=np.uint8)
        self._noise_amp = math.sqrt(2.0 * self.coef.noise_strength * self.dt
                                    / (self.dx * self.dy))
        self._setup()
        if initial is None:
            initial = initial_fields(cfg, self.mask)
        rho, wx, wy = (np.array(a, dtype=np.float64, order="C") for a in initial)
        for a in (rho, wx, wy):
            if a.shape != (self.ny, self.nx):
                raise ValueError(f"initial fields must be ({self.ny}, {self.nx}), "
                                 f"got {a.shape}")
        # a start with |P| = 1 plus noise leaves the realizable set at once
        self._limit(rho, wx, wy)
        self._set_fields(rho, wx, wy)

    # ------------------------------------------------------------------ public
    def step(self) -> str:
        """Advance one time step; returns :attr:`status`."""
        return self.advance(1)

    def advance(self, nsteps: int) -> str:
        """Advance ``nsteps`` time steps; returns :attr:`status`.

        The same result as ``nsteps`` calls of :meth:`step`, bit for bit; a method may
        take several steps per pass over memory (see ``_fd``).
        """
        if self.status != "running":
            raise RuntimeError(f"solver is {self.status}; cannot step")
        nsteps = int(nsteps)
        if nsteps < 0:
            raise ValueError(f"nsteps must be >= 0 (got {nsteps})")
        nx, ny = self.cfg.continuum.grid
        if nx * ny < SMALL_GRID and numba.get_num_threads() > 1:
            # waking the thread pool costs more than it saves on small grids (and much
            # more on a busy machine); results do not depend on the thread count
            threads = numba.get_num_threads()
            numba.set_num_threads(1)
            try:
                self._advance_impl(nsteps)
            finally:
                numba.set_num_threads(threads)
        else:
            self._advance_impl(nsteps)
        return self.status

    def fields(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Current ``rho, wx, wy`` as ``(ny, nx)`` real arrays (copies)."""
        raise NotImplementedError

    def health(self, rho0: float, w_bound: float) -> str | None:
        """Name of the failure of the current state, or None when it is sound.

        See :mod:`._guard`: NaN or Inf, density below ``-NEGATIVE_DENSITY_TOL rho0``,
        ``|w|`` above ``w_bound``.
        """
        fields = self.fields()
        self._checked = (self.n_steps, fields)
        return check_state(*fields, rho0, w_bound)

    def keep_good(self) -> None:
        """Remember the current state as the last good one (see :meth:`last_good`)."""
        if self._checked is not None and self._checked[0] == self.n_steps:
            fields = self._checked[1]
        else:
            fields = self.fields()
        self._good = (self.time, fields)

    def last_good(self) -> tuple[float, tuple[np.ndarray, np.ndarray, np.ndarray]]:
        """``(time, (rho, wx, wy))`` of the state of the last :meth:`keep_good`."""
        if self._good is None:
            raise RuntimeError("no state was kept (call keep_good first)")
        return self._good

    def get_state(self) -> dict:
        """Everything needed to continue bit-identically (arrays, counters, RNG)."""
        state = {k: np.array(v) for k, v in self._state_arrays().items()}
        state["n_steps"] = self.n_steps
        state["rng"] = json.dumps(self.rng.bit_generator.state)
        return state

    def set_state(self, state: dict) -> None:
        """Restore a :meth:`get_state` snapshot."""
        self._load_state_arrays({k: v for k, v in state.items()
                                 if k not in ("n_steps", "rng")})
        self.n_steps = int(state["n_steps"])
        self.time = self.n_steps * self.dt
        self.rng.bit_generator.state = json.loads(state["rng"])
        self.status = "running"

    # ------------------------------------------------------------------ helpers
    def _limit(self, rho, wx, wy) -> int:
        """Apply the realizability limiter in place (when on); returns cells changed."""
        if not self.realizability:
            return 0
        n = apply_realizability(rho, wx, wy, self._fluid8)
        self.limited_cells += n
        return n

    def _noise(self) -> np.ndarray | None:
        """Noise increments dW ``(2, ny, nx)`` for this step (None without noise)."""
        if self._noise_amp == 0.0:
            return None
        dw = self.rng.standard_normal((2, self.ny, self.nx))
        dw *= self._noise_amp
        if not self.mask.all():
            dw *= self.mask
        return dw

    # ------------------------------------------------------------------ subclass API
    def _advance_impl(self, nsteps: int) -> None:
        """Take ``nsteps`` steps and count them (default: one :meth:`_step_impl` each)."""
        for _ in range(nsteps):
            self._step_impl()
            self._count(1)

    def _count(self, nsteps: int) -> None:
        self.n_steps += nsteps
        self.time = self.n_steps * self.dt

    def _setup(self) -> None:
        raise NotImplementedError

    def _set_fields(self, rho, wx, wy) -> None:
        raise NotImplementedError

    def _step_impl(self) -> None:
        raise NotImplementedError

    def _state_arrays(self) -> dict:
        raise NotImplementedError

    def _load_state_arrays(self, arrays: dict) -> None:
        raise NotImplementedError
