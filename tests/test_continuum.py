"""Continuum engine: analytic references, invariants, output, restart and guards."""

import math

import numpy as np
import pytest
from scipy.special import erfc

import crossflock as cf
from crossflock._geometry import geometry_from_config, grid_coords
from crossflock._kinetic import bdg_onset_sigma, kinetic_coefficients, noise_sigma
from crossflock._runtime import sample_plan
from crossflock.continuum import (
    METHODS,
    FiniteDifferenceSolver,
    SpectralSolver,
    homogeneous_order,
    resolve_method,
    simulate,
)
from tests.conftest import results_per_thread_count

ACTIVE = {"alpha": 1.0, "alpha_rho": 0.5, "beta": 1.0, "pressure": [0.5, 0.1],
          "D_T": 0.5, "D_B": 0.2, "D_2": 0.05, "lambda1": 0.4, "lambda2": 0.2,
          "lambda3": -0.1, "D_rho": 0.1, "noise_strength": 0.0}


def _cfg(domain=None, model=None, run=None, continuum=None):
    base = {
        "domain": {"size": [16.0, 16.0]},
        "model": {},
        "run": {"duration": 2.0, "sample_every": 1.0},
        "continuum": {"grid": [16, 16], "dt": 0.02, "coefficients": dict(ACTIVE)},
    }
    for key, extra in (("domain", domain), ("model", model), ("run", run),
                       ("continuum", continuum)):
        if extra:
            base[key].update(extra)
    return cf.load_config(base)


def _run(solver, steps):
    for _ in range(steps):
        solver.step()
    return solver.fields()


# --------------------------------------------------------------------------- diffusion
D = 1.0
LX = 64.0
T_DIFF = 20.0


def _diffusion_cfg(nx, dt, method, speed=0.5):
    return cf.load_config({
        "domain": {"size": [LX, 8.0]},
        "model": {"radius": 8.0, "speed": speed},
        "run": {"duration": T_DIFF, "sample_every": T_DIFF},
        "continuum": {"grid": [nx, 8], "dt": dt, "method": method,
                      "coefficients": {"alpha": 0.0, "beta": 0.0, "pressure": [],
                                       "D_T": 0.0, "D_rho": D}},
    })


def _step_exact(x, t):
    # Carslaw & Jaeger, Conduction of Heat in Solids, section 2.4: a unit step at a
    # diffuses as (1/2) erfc((a - x) / (2 sqrt(D t))); the top-hat on [L/4, 3L/4] of the
    # periodic box is the sum of an up and a down step and their periodic images.
    s = 2.0 * math.sqrt(D * t)
    a, b = LX / 4, 3 * LX / 4
    out = np.ones_like(x)
    for m in range(-2, 3):
        out += 0.5 * (erfc((a + m * LX - x) / s) - erfc((b + m * LX - x) / s))
    return out


def _diffusion_error(cls, nx, dt, speed=0.5):
    cfg = _diffusion_cfg(nx, dt, cls.name, speed)
    x = (np.arange(nx) + 0.5) * LX / nx
    rho0 = np.broadcast_to(1.0 + ((x > LX / 4) & (x < 3 * LX / 4)), (8, nx))
    zero = np.zeros((8, nx))
    solver = cls(cfg, initial=(rho0, zero, zero))
    rho, wx, wy = _run(solver, round(T_DIFF / dt))
    assert np.all(wx == 0) and np.all(wy == 0)
    return float(np.max(np.abs(rho - _step_exact(x, T_DIFF)[None, :])))


def test_diffusion_step_finite_difference_second_order_in_space():
    # dt ~ dx^2 (explicit limit), so the O(dt^2) time error is O(dx^4): the spatial
    # order 2 of the central scheme dominates.
    errs = [_diffusion_error(FiniteDifferenceSolver, nx, dt)
            for nx, dt in ((32, 0.1), (64, 0.025), (128, 0.00625))]
    orders = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    assert errs[-1] < 1e-3
    np.testing.assert_allclose(orders, 2.0, atol=0.15)


def test_diffusion_step_spectral_second_order_in_time():
    # Fine grid (spatial error ~4e-6 from sampling the step) and slow v0 so the CFL
    # limit admits large dt: the SBDF2 time error dominates and must fall as dt^2.
    errs = [_diffusion_error(SpectralSolver, 512, dt, speed=0.01) for dt in (2.0, 1.0, 0.5)]
    orders = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    np.testing.assert_allclose(orders, 2.0, atol=0.3)


# --------------------------------------------------------------------------- walls
def _channel_cfg(ny, coeffs, dt=0.01):
    return cf.load_config({
        "domain": {"size": [4.0, 16.0], "boundary": "channel"},
        "model": {"speed": 0.5},
        "run": {"duration": 10.0, "sample_every": 1.0},
        "continuum": {"grid": [8, ny], "dt": dt, "coefficients": coeffs},
    })


def _slab_series(y, t, ly, neumann):
    # Carslaw & Jaeger section 3.3: slab 0 < y < L, initial value 1 (Dirichlet, zero
    # surface value) -> sum over odd n of 4/(n pi) sin(n pi y/L) exp(-D n^2 pi^2 t/L^2);
    # step 1 on y < L/2 with insulated faces (Neumann) -> 1/2 + sum 2 sin(n pi/2)/(n pi)
    # cos(n pi y/L) exp(-D n^2 pi^2 t / L^2).
    out = np.full_like(y, 0.5 if neumann else 0.0)
    for n in range(1, 400):
        decay = math.exp(-D * (n * math.pi / ly) ** 2 * t)
        if neumann:
            a_n = 2 * math.sin(n * math.pi / 2) / (n * math.pi)
            out += a_n * np.cos(n * math.pi * y / ly) * decay
        elif n % 2:
            out += 4 / (n * math.pi) * np.sin(n * math.pi * y / ly) * decay
    return out


@pytest.mark.parametrize("neumann", [False, True], ids=["no_slip_w", "no_flux_rho"])
def test_channel_walls_against_slab_solutions(neumann):
    coeffs = {"alpha": 0.0, "beta": 0.0, "pressure": [], "D_T": 0.0 if neumann else D,
              "D_rho": D if neumann else 0.0}
    errs = []
    for ny in (32, 64):
        cfg = _channel_cfg(ny, coeffs, dt=0.004)
        s = FiniteDifferenceSolver(cfg)
        y = s.y[:, None] * np.ones((1, 8))
        if neumann:
            init = (1.0 + (y < 8.0), np.zeros_like(y), np.zeros_like(y))
        else:
            init = (np.ones_like(y), np.ones_like(y), np.zeros_like(y))
        s = FiniteDifferenceSolver(cfg, initial=init)
        mass0 = init[0].sum()
        rho, wx, wy = _run(s, 1000)  # t = 4
        field = rho - 1.0 if neumann else wx
        exact = _slab_series(s.y, 4.0, 16.0, neumann)
        errs.append(float(np.max(np.abs(field - exact[:, None]))))
        np.testing.assert_allclose(rho.sum(), mass0, rtol=1e-13)
        assert np.all(wy == 0)
    # the wall conditions sit on the cell faces, so the error is second order; a
    # condition at the cell centre (or a free-slip / leaky wall) would give O(dy) or O(1)
    assert errs[1] < 2e-3
    assert 3.3 < errs[0] / errs[1] < 4.7


# --------------------------------------------------------------------------- conservation
@pytest.mark.parametrize("case", ["spectral", "fd_periodic", "channel", "obstacles"])
def test_mass_conserved_to_roundoff(case):
    domain = {"size": [16.0, 16.0]}
    method = "finite_difference"
    if case == "spectral":
        method = "spectral"
    elif case == "channel":
        domain["boundary"] = "channel"
    elif case == "obstacles":
        domain["obstacles"] = [{"center": [8.0, 8.0], "radius": 3.0},
                               {"center": [1.0, 2.0], "radius": 2.5}]
    coeffs = dict(ACTIVE, noise_strength=0.01)
    cfg = _cfg(domain=domain, continuum={"method": method, "coefficients": coeffs},
               run={"initial": "ordered", "initial_polarization": 0.5})
    s = METHODS[method](cfg)
    mass0 = s.fields()[0].sum()
    rho, wx, wy = _run(s, 300)
    assert np.isfinite(rho).all()
    assert abs(rho.sum() - mass0) <= 1e-12 * mass0
    if case == "obstacles":
        solid = ~s.mask
        assert solid.sum() > 20
        assert np.all(rho[solid] == 0) and np.all(wx[solid] == 0) and np.all(wy[solid] == 0)
    # something actually moved
    assert np.std(rho) > 1e-3


def test_mass_conserved_kinetic_channel_with_obstacle():
    cfg = cf.load_config({
        "domain": {"size": [16.0, 16.0], "boundary": "channel",
                   "obstacles": [{"center": [8.0, 8.0], "radius": 3.0}]},
        "model": {"noise": 0.3},
        "run": {"duration": 2.0, "sample_every": 1.0},
        "continuum": {"grid": [32, 32], "dt": 0.05},
    })
    assert resolve_method(cfg) == "finite_difference"
    ds = simulate(cfg, progress=False)
    mass = ds.rho.sum(("x", "y")).values
    np.testing.assert_allclose(mass, mass[0], rtol=1e-12)
    assert "mask" in ds and int(ds.mask.sum()) == int(METHODS["finite_difference"](cfg).mask.sum())


# --------------------------------------------------------------------------- noise
def _ar2_variance(a, dt, gamma, area):
    """Stationary variance of the SBDF2 recurrence for dw = -a w dt + dW (AR(2) formula,
    Box & Jenkins, Time Series Analysis, section 3.2.4)."""
    phi1 = (4 - 4 * a * dt) / 3
    phi2 = -(1 - 2 * a * dt) / 3
    s2 = (4 / 9) * 2 * gamma * dt / area
    return (1 - phi2) * s2 / ((1 + phi2) * ((1 - phi2) ** 2 - phi1**2))


@pytest.mark.parametrize("method", ["finite_difference", "spectral"])
def test_noise_variance_of_damped_mode(method):
    # Ornstein-Uhlenbeck process dw = -a w dt + sqrt(2 Gamma / dA) dW has stationary
    # variance Gamma / (a dA) (Gardiner, Handbook of Stochastic Methods, section 4.4.4);
    # alpha = -a with every other term off makes each cell (each Fourier mode) such a
    # process. The spectral method keeps only the modes inside its 2/3 filter.
    a, gamma, dt = 0.5, 0.1, 0.02
    coeffs = {"alpha": -a, "beta": 0.0, "pressure": [], "D_T": 0.0, "noise_strength": gamma}
    cfg = _cfg(continuum={"method": method, "coefficients": coeffs, "dt": dt,
                          "initial_noise": 0.0})
    s = METHODS[method](cfg)
    area = s.dx * s.dy
    frac = s.retained_fraction() if method == "spectral" else 1.0
    _run(s, round(10 / a / dt))  # 10 relaxation times
    per = round(2.0 / a / dt)  # samples 2 relaxation times apart: nearly independent
    v = []
    for _ in range(60):
        _, wx, wy = _run(s, per)
        v.append(0.5 * (np.mean(wx**2) + np.mean(wy**2)))
    v = np.array(v)
    expected = frac * gamma / (a * area)
    sem = v.std(ddof=1) / math.sqrt(v.size)
    bias = abs(frac * _ar2_variance(a, dt, gamma, area) - expected)  # O(a dt) scheme bias
    assert abs(v.mean() - expected) < 4 * sem + bias
    assert bias < 0.02 * expected  # the tolerance stays meaningful


# --------------------------------------------------------------------------- BDG onset
def _kinetic_cfg(density, noise, initial="ordered"):
    return cf.load_config({
        "domain": {"size": [16.0, 16.0]},
        "model": {"density": density, "speed": 2.0, "noise": noise},
        "agents": {"dt": 0.25},
        "run": {"duration": 20.0, "sample_every": 1.0, "initial": initial,
                "initial_polarization": 0.5},
        "continuum": {"grid": [16, 16], "dt": 0.02},
    })


def _onset_density(noise):
    c = kinetic_coefficients(_kinetic_cfg(1.0, noise))
    return 1.0 - c["alpha"] / c["alpha_rho"]  # mu is linear in rho: mu(rho_t) = 0


def test_bdg_onset_density():
    # Bertin, Droz & Gregoire 2006, PRE 74, 022101: the homogeneous ordered state exists
    # where mu(rho) > 0, i.e. above rho_t given by mu(rho_t) = 0.
    rho_t = _onset_density(0.2)
    above = simulate(_kinetic_cfg(2.0 * rho_t, 0.2), progress=False)
    below_cfg = _kinetic_cfg(0.5 * rho_t, 0.2)
    below = simulate(below_cfg, progress=False)
    target = homogeneous_order(_kinetic_cfg(2.0 * rho_t, 0.2))
    assert target > 0 and homogeneous_order(below_cfg) == 0
    # above: relaxes (rate 2 alpha ~ 0.5) from P = 0.5 to the homogeneous order
    np.testing.assert_allclose(above.order.values[-1], target, rtol=0.02)
    # below: w decays at least as fast as exp(alpha t) (the beta term only adds decay)
    alpha = float(METHODS["spectral"](below_cfg).coef.alpha_at(0.5 * rho_t))
    assert alpha < 0
    assert below.order.values[-1] < 1.05 * 0.5 * math.exp(alpha * 20.0)


def test_no_order_above_sigma_t():
    # BDG 2006: no density orders when exp(-sigma^2/2) < 2/3, sigma_t = sqrt(2 ln 1.5).
    assert bdg_onset_sigma() == pytest.approx(math.sqrt(2 * math.log(1.5)))
    noise = 0.55
    assert noise_sigma(noise, "angular") > bdg_onset_sigma()
    for density in (1.0, 8.0):
        cfg = _kinetic_cfg(density, noise)
        ds = simulate(cfg, progress=False)
        assert homogeneous_order(cfg) == 0
        assert ds.order.values[-1] < 0.5 * ds.order.values[0]
    assert kinetic_coefficients(_kinetic_cfg(1.0, noise))["alpha_rho"] < 0


# --------------------------------------------------------------------------- methods agree
def _smooth_initial(s):
    kx, ky = 2 * np.pi / 16.0, 2 * np.pi / 16.0
    x, y = s.x[None, :], s.y[:, None]
    rho = 1.0 + 0.1 * np.cos(kx * x) * np.ones_like(y) + 0.05 * np.sin(ky * y)
    wx = 0.6 + 0.1 * np.sin(ky * y) * np.ones_like(x)
    wy = 0.1 * np.cos(kx * x + ky * y)
    return rho, wx, wy


def test_spectral_and_finite_difference_agree():
    errs = []
    for n in (16, 32):
        cfg = _cfg(model={"density": 1.0}, continuum={"grid": [n, n], "dt": 0.01})
        out = []
        for cls in (SpectralSolver, FiniteDifferenceSolver):
            s0 = cls(cfg)
            s = cls(cfg, initial=_smooth_initial(s0))
            out.append(np.stack(_run(s, 200)))
        errs.append(float(np.max(np.abs(out[0] - out[1]))))
    # the spectral solution is converged; the FD error is second order in dx
    assert errs[1] < 5e-3
    assert 3.0 < errs[0] / errs[1] < 5.0


# --------------------------------------------------------------------------- output
def test_output_contract_and_order():
    cfg = _cfg(domain={"boundary": "channel"}, run={"initial": "ordered"})
    ds = simulate(cfg, progress=False)
    plan = sample_plan(cfg.run, cfg.continuum.dt, "continuum.dt")
    np.testing.assert_array_equal(ds.time.values, plan.times)
    x, y = grid_coords(geometry_from_config(cfg), 16, 16)
    np.testing.assert_array_equal(ds.x.values, x)
    np.testing.assert_array_equal(ds.y.values, y)
    assert ds.rho.dims == ("time", "y", "x")
    assert ds.attrs["engine"] == "continuum" and ds.attrs["method"] == "finite_difference"
    for name in ("rho", "px", "py", "order"):
        assert "long_name" in ds[name].attrs and "units" in ds[name].attrs
    order = np.hypot(ds.px.sum(("x", "y")), ds.py.sum(("x", "y"))) / ds.rho.sum(("x", "y"))
    np.testing.assert_allclose(ds.order.values, order.values, rtol=1e-12)
    assert ds.order.values[0] == pytest.approx(1.0, abs=0.02)


def test_progress_bar_on_stderr(capsys):
    simulate(_cfg(), progress=True)
    assert "continuum" in capsys.readouterr().err


# --------------------------------------------------------------------------- restart
@pytest.mark.parametrize("method", ["spectral", "finite_difference"])
def test_checkpoint_resume_bit_identical(tmp_path, method):
    coeffs = dict(ACTIVE, noise_strength=0.01)
    base = {"method": method, "coefficients": coeffs, "checkpoint_every": 1.0}
    full = simulate(_cfg(run={"duration": 4.0}, continuum=base), progress=False)
    part_path = tmp_path / "ck.nc"
    simulate(_cfg(run={"duration": 2.0}, continuum=base), progress=False,
             checkpoint=part_path)
    resumed = simulate(_cfg(run={"duration": 4.0}, continuum=base), progress=False,
                       resume=part_path)
    for name in ("rho", "px", "py", "order"):
        np.testing.assert_array_equal(resumed[name].values, full[name].values)
    with pytest.raises(cf.InputError, match="different config"):
        simulate(_cfg(run={"duration": 4.0, "seed": 7}, continuum=base), progress=False,
                 resume=part_path)


# --------------------------------------------------------------------------- guards
def test_blowup_guard_from_too_large_dt():
    cfg = _cfg(run={"duration": 20.0, "initial": "ordered"})
    with pytest.raises(cf.NumericalError, match=r"diverged at t = .*dt = 1 exceeds") as exc:
        simulate(cfg, dt=1.0, progress=False)
    err = exc.value
    assert err.exit_code == 3 and 0 < err.time <= 20.0
    good = err.last_good
    assert good.time.values[-1] < err.time
    assert np.isfinite(good.rho.values).all() and np.isfinite(good.px.values).all()
    assert good.attrs["last_good_time"] == good.time.values[-1]


def test_blowup_guard_from_unbounded_coefficients():
    coeffs = {"alpha": 1.0, "beta": 0.0, "pressure": [0.5], "D_T": 0.5}
    cfg = _cfg(run={"duration": 20.0, "initial": "ordered"}, continuum={"coefficients": coeffs})
    with pytest.raises(cf.NumericalError, match="blow-up bound") as exc:
        simulate(cfg, progress=False)
    # |w| = rho0 e^t reaches 100 rho0 near t = ln 100
    assert exc.value.time == pytest.approx(math.log(100.0), abs=1.0)


@pytest.mark.parametrize("method", ["spectral", "finite_difference"])
def test_result_independent_of_thread_count(method, monkeypatch):
    from crossflock.continuum import _fd, _solver

    # force the parallel kernels even on this small grid
    monkeypatch.setattr(_solver, "SMALL_GRID", 0)
    monkeypatch.setattr(_fd, "SERIAL_BELOW", 0)
    coeffs = dict(ACTIVE, noise_strength=0.01)
    cfg = _cfg(continuum={"method": method, "coefficients": coeffs})
    out = results_per_thread_count(
        lambda n: np.stack(_run(METHODS[method](cfg, workers=n), 50)))
    for other in out[1:]:
        np.testing.assert_array_equal(other, out[0])


def test_local_kinetic_coefficients_match_the_direct_formula():
    # the solvers' buffered closed form against kinetic_local (the BDG 2006 formulas)
    from crossflock._kinetic import kinetic_local
    from crossflock.continuum import CoefficientModel

    cfg = cf.load_config(_mapping_kinetic_r13())
    rho = np.random.default_rng(0).uniform(-0.1, 6.0, (7, 9))
    out = CoefficientModel(cfg).local(rho)
    ref = kinetic_local(cfg, np.maximum(rho, 0.0))
    for i, name in enumerate(("alpha", "beta", "D_T", "lambda1", "lambda2", "lambda3")):
        np.testing.assert_allclose(out[i], ref[name], rtol=1e-13, atol=1e-15, err_msg=name)


def _mapping_kinetic_r13():
    return {"domain": {"size": [13.0, 13.0]},
            "model": {"density": 2.0, "radius": 1.3, "noise": 0.3},
            "run": {"duration": 10.0, "sample_every": 1.0}, "agents": {"dt": 0.5},
            "continuum": {"grid": [16, 16], "dt": 0.01}}
