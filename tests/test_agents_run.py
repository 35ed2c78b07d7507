"""Particle engine: one step against numpy, output contract, invariants, boundaries,
determinism across thread counts, checkpoint/restart."""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest
import xarray as xr
from test_agents_common import brute_sums, make_cfg

from crossflock import InputError, NumericalError, read_dataset
from crossflock._geometry import geometry_from_config, inside
from crossflock._runtime import rng_for, sample_plan
from crossflock.agents import AgentSolver, _driver, _solver, polar_order, simulate, wedge_half_width


# ----------------------------------------------------------------- one step vs numpy
def _cells(x, y, lx, ly, radius):
    ncx = max(1, math.floor(lx / radius))
    ncy = max(1, math.floor(ly / radius))
    cx = np.minimum((x * (ncx / lx)).astype(int), ncx - 1)
    cy = np.minimum((y * (ncy / ly)).astype(int), ncy - 1)
    return cy * ncx + cx


def _reference_step(cfg, x, y, theta):
    """One step of the documented model in plain numpy (periodic box).

    The engine draws one noise number per *cell-sorted* slot (stable sort by cell of
    the positions it aligns at), so the reference maps them back to particles.
    """
    lx, ly = cfg.domain.size
    r, step, eta = cfg.model.radius, cfg.model.speed * cfg.agents.dt, cfg.model.noise
    rng = rng_for(cfg.run.seed, "agents")
    kind = cfg.model.noise_kind
    draw = rng.standard_normal(x.size) if kind == "gaussian" else rng.random(x.size)
    if cfg.agents.update == "move_then_align":
        x = np.mod(x + step * np.cos(theta), lx)
        y = np.mod(y + step * np.sin(theta), ly)
    u = np.empty(x.size)
    u[np.argsort(_cells(x, y, lx, ly, r), kind="stable")] = draw
    sx, sy, n = brute_sums(x, y, theta, (lx, ly), r)
    if kind == "angular":  # xi uniform in [-pi eta, pi eta)
        new = np.arctan2(sy, sx) + 2 * np.pi * eta * (u - 0.5)
    elif kind == "gaussian":  # wrapped normal, s.d. pi eta
        new = np.arctan2(sy, sx) + np.pi * eta * u
    else:  # Gregoire & Chate 2004: arg(sum e_j + eta n e(xi)), xi uniform in [-pi, pi)
        xi = 2 * np.pi * (u - 0.5)
        new = np.arctan2(sy + eta * n * np.sin(xi), sx + eta * n * np.cos(xi))
    if cfg.agents.update == "align_then_move":
        x = np.mod(x + step * np.cos(new), lx)
        y = np.mod(y + step * np.sin(new), ly)
    return x, y, new


def _periodic_diff(a, b, length):
    d = a - b
    return np.abs(d - length * np.round(d / length))


@pytest.mark.parametrize("update", ["align_then_move", "move_then_align"])
@pytest.mark.parametrize("kind", ["angular", "gaussian", "vectorial"])
@pytest.mark.parametrize(("size", "radius"), [((7.0, 5.0), 1.0), ((2.5, 2.5), 1.0)])
def test_first_step_matches_numpy_reference(update, kind, size, radius):
    cfg = make_cfg(size, radius, model__noise=0.35, model__noise_kind=kind,
                   model__density=3.0, agents__update=update)
    solver = AgentSolver(cfg)
    x0, y0, t0 = solver.x, solver.y, solver.theta
    solver.step()
    rx, ry, rt = _reference_step(cfg, x0, y0, t0)
    # Round-off only (sums of ~10 unit vectors, one rotation, one move).
    np.testing.assert_array_less(_periodic_diff(solver.x, rx, size[0]), 1e-12)
    np.testing.assert_array_less(_periodic_diff(solver.y, ry, size[1]), 1e-12)
    np.testing.assert_array_less(np.abs(np.exp(1j * solver.theta) - np.exp(1j * rt)), 1e-12)


def test_update_orders_differ():
    a = simulate(make_cfg(model__noise=0.2, run__duration=5.0))
    b = simulate(make_cfg(model__noise=0.2, run__duration=5.0,
                          agents__update="move_then_align"))
    assert not np.array_equal(a.order.values[1:], b.order.values[1:])


# ----------------------------------------------------------------- output contract
def test_dataset_contract_and_invariants():
    cfg = make_cfg((9.0, 6.0), 1.0, model__density=2.5, run__duration=12.0,
                   run__sample_every=3.0, agents__dt=0.5, agents__snapshots=True,
                   agents__order_every="step")
    ds = simulate(cfg)
    plan = sample_plan(cfg.run, cfg.agents.dt, "agents.dt")
    n = round(2.5 * 54.0)
    assert ds.attrs["n_particles"] == n
    np.testing.assert_array_equal(ds.time.values, plan.times)
    assert ds.x.dims == ("time", "particle") and ds.x.shape == (plan.n_samples, n)
    assert ds.order_step.shape == (plan.n_steps + 1,)
    np.testing.assert_allclose(ds.step_time.values, np.arange(plan.n_steps + 1) * 0.5)
    # order at the samples is the per-step order at those steps, bit for bit
    np.testing.assert_array_equal(ds.order_step.values[::plan.steps_per_sample],
                                  ds.order.values)
    # invariants: headings in (-pi, pi], positions in the box, order from theta
    th = ds.theta.values
    assert np.all(th > -np.pi) and np.all(th <= np.pi)
    assert np.all((ds.x.values >= 0) & (ds.x.values < 9.0))
    assert np.all((ds.y.values >= 0) & (ds.y.values < 6.0))
    for k in range(plan.n_samples):
        assert ds.order.values[k] == pytest.approx(polar_order(th[k]), abs=1e-13)
    for name in ds.variables:
        assert "long_name" in ds[name].attrs and "units" in ds[name].attrs


def test_default_output_has_no_snapshots():
    ds = simulate(make_cfg(run__duration=4.0))
    assert set(ds.data_vars) == {"order"}
    assert ds.order.shape == (5,)


def test_particle_count_and_initial_distributions():
    cfg = make_cfg((60.0, 60.0), 1.0, model__density=5.0, run__initial="ordered",
                   run__initial_polarization=0.6)
    s = AgentSolver(cfg)
    assert s.n == 18000
    # wedge of half-width pi a with sinc(a) = p has E[cos theta] = p, E[sin theta] = 0
    a = wedge_half_width(0.6)
    assert np.sinc(a) == pytest.approx(0.6, abs=1e-12)
    th = s.theta
    assert np.all(np.abs(th) <= np.pi * a + 1e-12)
    # sample mean of cos theta: standard error sqrt(Var cos / N) < sqrt(0.5 / N)
    se = math.sqrt(0.5 / s.n)
    assert np.cos(th).mean() == pytest.approx(0.6, abs=5 * se)
    assert np.sin(th).mean() == pytest.approx(0.0, abs=5 * se)
    # positions uniform: each quarter of the box holds N/4 +- binomial s.d.
    q = (s.x < 30.0).astype(int) + 2 * (s.y < 30.0)
    counts = np.bincount(q, minlength=4)
    sd = math.sqrt(s.n * 0.25 * 0.75)
    np.testing.assert_array_less(np.abs(counts - s.n / 4), 5 * sd)
    d = AgentSolver(make_cfg((60.0, 60.0), 1.0, model__density=5.0)).theta
    assert abs(np.cos(d).mean()) < 5 * se and abs(np.sin(d).mean()) < 5 * se


def test_snapshot_size_warning(monkeypatch):
    monkeypatch.setattr(_driver, "SNAPSHOT_WARN_MB", 0.01)
    cfg = make_cfg(run__duration=3.0, agents__snapshots=True)
    mb = _driver.snapshot_megabytes(128, 4)
    assert mb == pytest.approx(3 * 8 * 128 * 4 / 1e6)
    with pytest.warns(UserWarning, match=f"about {mb:.0f} MB"):
        simulate(cfg)


def test_progress_bar_on_stderr(capsys):
    cfg = make_cfg(run__duration=3.0)
    simulate(cfg, progress=True)
    assert "agents" in capsys.readouterr().err
    simulate(cfg, progress=False)
    simulate(cfg)  # None: not a terminal under pytest -> off
    assert capsys.readouterr().err == ""


def test_solver_counters_and_state_errors():
    s = AgentSolver(make_cfg(agents__dt=0.5))
    for _ in range(3):
        s.step()
    assert s.n_steps == 3 and s.t == 1.5
    with pytest.raises(InputError, match="all of x, y, theta"):
        AgentSolver(make_cfg(), x=[1.0])
    with pytest.raises(InputError, match="in the fluid"):
        AgentSolver(make_cfg(domain__boundary="channel"), x=[1.0], y=[0.0], theta=[0.0])


# ----------------------------------------------------------------- walls, obstacles
def _single(cfg, x, y, theta):
    return AgentSolver(cfg, x=[x], y=[y], theta=[theta])


def test_specular_reflection_at_channel_wall():
    cfg = make_cfg((6.0, 6.0), 1.0, domain__boundary="channel", model__noise=0.0)
    s = _single(cfg, 3.0, 5.8, math.pi / 4)
    s.step()
    # crossing y = Ly: y -> 2 Ly - y, theta -> -theta (core wall rule)
    h = 0.5 / math.sqrt(2.0)
    assert s.x[0] == pytest.approx(3.0 + h, abs=1e-12)
    assert s.y[0] == pytest.approx(12.0 - (5.8 + h), abs=1e-12)
    assert s.theta[0] == pytest.approx(-math.pi / 4, abs=1e-12)
    s.step()
    assert s.y[0] == pytest.approx(12.0 - (5.8 + h) - h, abs=1e-12)


def test_specular_reflection_at_obstacle():
    cfg = make_cfg((6.0, 6.0), 1.0, model__noise=0.0,
                   domain__obstacles=[{"center": [3.0, 3.0], "radius": 1.0}])
    s = _single(cfg, 3.0, 1.8, math.pi / 2)
    s.step()
    # ends 0.7 from the centre -> mirrored to 2 r - d = 1.3, radial heading reversed
    assert s.x[0] == pytest.approx(3.0, abs=1e-12)
    assert s.y[0] == pytest.approx(3.0 - 1.3, abs=1e-12)
    assert s.theta[0] == pytest.approx(-math.pi / 2, abs=1e-12)
    # oblique hit: the tangential heading component is kept
    s = _single(cfg, 2.0, 1.5, math.pi / 4)
    s.step()
    x1, y1 = s.x[0], s.y[0]
    assert math.hypot(x1 - 3.0, y1 - 3.0) > 1.0


@pytest.mark.parametrize("update", ["align_then_move", "move_then_align"])
def test_no_particle_ever_inside_a_solid(update):
    cfg = make_cfg((12.0, 8.0), 1.0, domain__boundary="channel", model__density=2.0,
                   model__noise=0.3, model__speed=0.45, agents__update=update,
                   domain__obstacles=[{"center": [3.0, 4.0], "radius": 1.5},
                                      {"center": [8.5, 3.0], "radius": 1.0}])
    geom = geometry_from_config(cfg)
    s = AgentSolver(cfg)
    assert s.n == round(2.0 * geom.fluid_area())
    for _ in range(150):
        s.step()
        x, y, th = s.x, s.y, s.theta
        assert np.all(inside(geom, x, y))
        assert np.all((x >= 0) & (x < 12.0))
        assert np.all((th > -np.pi) & (th <= np.pi))
    assert s.n == x.size


# ----------------------------------------------------------------- determinism
@pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="needs 2 numba threads")
@pytest.mark.parametrize("overrides", [
    {"model__noise_kind": "vectorial"},
    {"domain__boundary": "channel", "model__noise_kind": "gaussian",
     "domain__obstacles": [{"center": [4.0, 4.0], "radius": 1.0}]},
])
def test_identical_for_one_and_two_threads(overrides, monkeypatch):
    # small systems step on one thread by design; force the threaded path
    monkeypatch.setattr(_solver, "PARALLEL_MIN_PARTICLES", 0)
    cfg = make_cfg((10.0, 9.0), 1.0, model__density=3.0, model__noise=0.25,
                   run__duration=30.0, run__sample_every=5.0, agents__snapshots=True,
                   agents__order_every="step", **overrides)
    old = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = simulate(cfg)
        numba.set_num_threads(2)
        two = simulate(cfg)
    finally:
        numba.set_num_threads(old)
    xr.testing.assert_equal(one, two)  # exact equality of every value


def test_same_seed_same_run_other_seed_other_run():
    a = simulate(make_cfg(run__duration=5.0))
    b = simulate(make_cfg(run__duration=5.0))
    c = simulate(make_cfg(run__duration=5.0, run__seed=2))
    xr.testing.assert_equal(a, b)
    assert not np.array_equal(a.order.values, c.order.values)


# ----------------------------------------------------------------- checkpoint
class _Crash(Exception):
    pass


def _checkpoint_cfg(**extra):
    base = dict(model__density=2.0, model__noise=0.3, model__noise_kind="gaussian",
                run__duration=20.0, run__sample_every=2.0, agents__checkpoint_every=6.0,
                agents__snapshots=True, agents__order_every="step")
    return make_cfg((8.0, 8.0), 1.0, **{**base, **extra})


@pytest.mark.parametrize("extra", [{}, {"domain__boundary": "channel",
                                        "agents__update": "move_then_align"}])
def test_resume_is_bit_identical(tmp_path, monkeypatch, extra):
    cfg = _checkpoint_cfg(**extra)
    unbroken = simulate(cfg)
    path = tmp_path / "run.ckpt.nc"
    real = _driver._write_checkpoint

    def write_then_crash(*args):
        real(*args)
        raise _Crash  # killed right after the first checkpoint (t = 6)

    monkeypatch.setattr(_driver, "_write_checkpoint", write_then_crash)
    with pytest.raises(_Crash):
        simulate(cfg, checkpoint=path)
    monkeypatch.setattr(_driver, "_write_checkpoint", real)
    ck = read_dataset(path)
    assert int(ck.attrs["n_steps"]) == 6 and ck.sizes["time"] == 4
    resumed = simulate(cfg, resume=path, checkpoint=path)
    xr.testing.assert_equal(resumed, unbroken)
    # the final checkpoint holds the whole run
    final = read_dataset(path)
    assert int(final.attrs["n_steps"]) == 20
    np.testing.assert_array_equal(final.order.values, unbroken.order.values)


def test_resume_refuses_other_config_and_non_checkpoints(tmp_path):
    cfg = _checkpoint_cfg()
    path = tmp_path / "c.nc"
    simulate(cfg, checkpoint=path)
    with pytest.raises(InputError, match="different config"):
        simulate(_checkpoint_cfg(model__noise=0.31), resume=path)
    plain = tmp_path / "plain.nc"
    from crossflock import write_dataset

    write_dataset(simulate(cfg), plain)
    with pytest.raises(InputError, match="not an agents checkpoint"):
        simulate(cfg, resume=plain)
    with pytest.raises(InputError, match="does not exist"):
        simulate(cfg, resume=tmp_path / "missing.nc")


def test_checkpoint_folder_checked_before_running(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        simulate(_checkpoint_cfg(), checkpoint=tmp_path / "missing" / "c.nc")


def test_non_finite_order_raises_with_last_good_samples(monkeypatch):
    cfg = make_cfg(run__duration=6.0, run__sample_every=2.0)
    real = AgentSolver.order

    def poisoned(self):
        return float("nan") if self.n_steps >= 3 else real(self)

    monkeypatch.setattr(AgentSolver, "order", poisoned)
    with pytest.raises(NumericalError, match="non-finite") as info:
        simulate(cfg)
    assert info.value.time == 4.0  # first sample after the failure
    np.testing.assert_array_equal(info.value.last_good.time.values, [0.0, 2.0])
