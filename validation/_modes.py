"""Small-amplitude Fourier modes in the continuum engine (items 4 and 5).

A mode ``k = 2 pi (m / Lx, n / Ly)`` of the linearised equations about the homogeneous
ordered state (rho0, w0 x_hat) is an eigenvector ``v`` of the 3 x 3 growth matrix of
:func:`crossflock.continuum._dispersion.growth_matrix` with eigenvalue ``s``. Starting
the engine from ``u0 + eps Re(v exp(i k.r))`` excites that eigenmode alone (the
conjugate at ``-k`` is the eigenvector of ``M(-k) = conj M(k)``), so the Fourier
coefficient of rho at ``k`` evolves as ``exp(s t)``: its log-modulus grows at
``Re s`` and its phase turns at ``Im s = -omega``. Several modes at distinct
wavevectors can share one run: at amplitude ``eps`` they interact only at order
``eps^2``.
"""

from __future__ import annotations

import numpy as np

import crossflock
from crossflock.continuum import _dispersion, make_solver, simulate

__all__ = ["mode_config", "eigenmode", "initial_state", "run_modes", "mode_series"]


def mode_config(coefficients: dict, *, size, grid, rho0, v0, dt, duration,
                sample_every, realizability=False):
    """Deterministic spectral continuum config for a linear test (no noise).

    ``model.radius`` is set to the grid spacing (the config requires the grid to
    resolve it; it plays no role with a coefficient table) and ``agents.dt`` so that
    the particle section stays valid.
    """
    lx, ly = (float(s) for s in size)
    nx, ny = (int(g) for g in grid)
    radius = max(lx / nx, ly / ny)
    table = dict(coefficients, noise_strength=0.0)
    cont = {"grid": [nx, ny], "dt": dt, "method": "spectral", "coefficients": table,
            "initial_noise": 0.0}
    # the limiter |w| <= rho must not act in a linear test (w0 < rho0 in every table
    # used here, so it would not bind; off makes sure)
    cont["realizability"] = bool(realizability)
    return crossflock.load_config({
        "domain": {"size": [lx, ly], "boundary": "periodic"},
        "model": {"density": rho0, "speed": v0, "radius": radius},
        "run": {"duration": duration, "sample_every": sample_every, "seed": 1,
                "initial": "ordered"},
        # any agents.dt with speed * dt < radius dividing sample_every
        "agents": {"dt": sample_every / np.ceil(2.0 * sample_every * v0 / radius)},
        "continuum": cont,
    })


def wavevector(cfg, m: int, n: int) -> tuple[float, float]:
    lx, ly = cfg.domain.size
    return 2 * np.pi * m / lx, 2 * np.pi * n / ly


def eigenmode(cfg, m: int, n: int, pick="max_real"):
    """Eigenvalues and eigenvectors of the growth matrix at mode ``(m, n)``.

    Parameters
    ----------
    pick : "max_real" | "plus" | "minus" | "all"
        The least-stable eigenvalue; the propagating sound branch with the larger
        ("plus") or smaller ("minus") phase speed ``-Im s / |k|`` (of the two least
        damped); or all three.

    Returns
    -------
    s : complex (or (3,) complex ndarray for "all")
    v : (3,) complex ndarray (or (3, 3) columns for "all")
    """
    b = _dispersion.base_state(cfg)
    kx, ky = wavevector(cfg, m, n)
    s, v = np.linalg.eig(_dispersion.growth_matrix(b, kx, ky))
    if pick == "all":
        return s, v
    if pick == "max_real":
        i = int(np.argmax(s.real))
    else:
        slow = np.argsort(-s.real)[:2]  # the fast longitudinal relaxation is dropped
        speeds = -s[slow].imag
        i = int(slow[np.argmax(speeds)] if pick == "plus" else slow[np.argmin(speeds)])
    return complex(s[i]), v[:, i]


def initial_state(cfg, modes, eps: float):
    """``rho, wx, wy`` (ny, nx): homogeneous ordered state plus eigenmodes.

    ``modes`` is a list of ``(m, n, v)``; each eigenvector is scaled so that its rho
    component has modulus ``eps rho0`` (or its largest component, when rho is absent).
    """
    rho0 = cfg.model.density
    w0 = _dispersion.base_state(cfg)["w0"]
    lx, ly = cfg.domain.size
    nx, ny = cfg.continuum.grid
    x = np.arange(nx) * lx / nx
    y = np.arange(ny) * ly / ny
    xx, yy = np.meshgrid(x, y)
    u = [np.full((ny, nx), rho0), np.full((ny, nx), w0), np.zeros((ny, nx))]
    for m, n, v in modes:
        kx, ky = wavevector(cfg, m, n)
        ref = v[0] if abs(v[0]) > 1e-8 * np.max(np.abs(v)) else v[np.argmax(np.abs(v))]
        vv = v / ref * eps * rho0
        phase = np.exp(1j * (kx * xx + ky * yy))
        for c in range(3):
            u[c] = u[c] + (vv[c] * phase).real
    return tuple(np.ascontiguousarray(a) for a in u)


def run_modes(cfg, modes, eps: float):
    """Run the engine from :func:`initial_state`; returns the field Dataset.

    On one numba thread: these grids are small, and on a shared 2-core machine the
    parallel kernels' thread start-up dominated (45 s against 3 s for the tiny item 4
    run). The results do not depend on the thread count (project rule).
    """
    import numba

    threads = numba.get_num_threads()
    numba.set_num_threads(1)
    try:
        solver = make_solver(cfg, initial=initial_state(cfg, modes, eps))
        return simulate(cfg, solver=solver, progress=False)
    finally:
        numba.set_num_threads(threads)


def mode_series(ds, m: int, n: int, var="rho") -> np.ndarray:
    """Complex Fourier coefficient of ``var`` at mode ``(m, n)`` per sample ``(T,)``.

    Normalised like the initial amplitude: ``(2 / (nx ny)) sum f exp(-i k.r)``.
    """
    f = np.fft.fft2(ds[var].values, axes=(1, 2))
    ny, nx = f.shape[1:]
    return 2.0 * f[:, n % ny, m % nx] / (nx * ny)
