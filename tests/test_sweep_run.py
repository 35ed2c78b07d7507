"""Sweeps on a real dask LocalCluster: combined dataset, resume after a kill, lost worker."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time

import numpy as np
import pytest
import xarray as xr

from crossflock._sweep import load_sweep
from crossflock._sweep_run import run_sweep

TINY_BASE = '''
[base.domain]
size = [12.0, 12.0]
[base.model]
density = 1.0
speed = 0.5
noise = 0.2
[base.run]
duration = 10.0
sample_every = 1.0
seed = 4
[base.agents]
dt = 0.5
[base.continuum]
grid = [24, 24]
dt = 0.02
'''


def _sweep_file(tmp_path, engines, extra_axes="", duration=None):
    text = f'seeds = 2\nengines = {engines!r}\n'.replace("'", '"') + TINY_BASE
    text += '\n[axes]\n"model.density" = [0.5, 1.0, 1.5]\n"model.noise" = [0.1, 0.3, 0.6]\n'
    text += extra_axes
    if duration:
        text += f'[set]\n"run.duration" = {duration}\n'
    path = tmp_path / "sweep.toml"
    path.write_text(text)
    return path


def _quiet(msg):
    pass


def _finished(out):
    """Point files under their final names (pathlib's glob also matches dot files)."""
    folder = out / "points"
    if not folder.exists():
        return []
    return [p for p in folder.glob("*.nc") if not p.name.startswith(".")]


def test_local_cluster_3x3x2_both_engines(tmp_path):
    sweep = load_sweep(_sweep_file(tmp_path, ["agents", "continuum"]))
    summary = run_sweep(sweep, tmp_path / "out", workers=2, progress=False, log=_quiet)
    assert summary.failed == {} and summary.done == 18 and summary.skipped == 0
    ds = xr.open_dataset(tmp_path / "out" / "sweep.nc")
    assert dict(ds.sizes) == {"density": 3, "noise": 3, "seed": 2}
    assert (ds["done"] == 1).all()
    for var in ("agents_order_mean", "continuum_order_mean", "agents_binder", "verdict_code"):
        assert np.isfinite(ds[var].values).all(), var
    # the embedded sweep configuration names each axis's config key
    assert ds["noise"].attrs["config_key"] == "model.noise"
    for fig in ("phase_diagram.png", "validity_map.png", "summary.html"):
        assert (tmp_path / "out" / fig).stat().st_size > 0
    # low noise, high density orders more than high noise (Vicsek et al. 1995, qualitative)
    order = ds["agents_order_mean"].mean("seed")
    assert float(order.sel(density=1.5, noise=0.1)) > float(order.sel(density=1.5, noise=0.6))
    ds.close()


def _env():
    env = dict(os.environ)
    env["NUMBA_NUM_THREADS"] = "1"
    return env


def test_killed_sweep_resumes_and_equals_an_unbroken_one(tmp_path):
    path = _sweep_file(tmp_path, ["agents"], duration=60.0)
    sweep = load_sweep(path)
    unbroken = tmp_path / "unbroken"
    run_sweep(sweep, unbroken, workers=2, progress=False, log=_quiet)

    out = tmp_path / "broken"
    cmd = [sys.executable, "-m", "crossflock", "sweep", str(path), "-o", str(out),
           "--workers", "1", "--no-progress"]
    proc = subprocess.Popen(cmd, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            start_new_session=True)
    deadline = time.time() + 240
    while time.time() < deadline:
        points = _finished(out)
        if len(points) >= 3 or proc.poll() is not None:
            break
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)  # the whole sweep: driver, scheduler and workers
    proc.wait(timeout=60)
    finished = len(_finished(out))
    assert 3 <= finished < 18, finished
    # SIGKILL can leave a hidden temporary file, never a half-written final name
    from crossflock import read_dataset

    for f in _finished(out):
        assert read_dataset(f, kind="sweep").attrs["task_key"]

    res = subprocess.run(cmd, env=_env(), capture_output=True, text=True, timeout=600,
                         check=False)
    assert res.returncode == 0, res.stderr
    assert f"{18 - finished} done, {finished} skipped, 0 failed" in res.stdout
    assert not list((out / "points").glob(".*")), "stale temporary files were not cleaned"
    a = xr.open_dataset(unbroken / "sweep.nc")
    b = xr.open_dataset(out / "sweep.nc")
    # same seeds, same numbers, whatever the worker count (2 vs 1) and the interruption
    for var in a.data_vars:
        np.testing.assert_array_equal(a[var].values, b[var].values, err_msg=var)
    a.close()
    b.close()


def test_worker_killed_mid_task_still_completes(tmp_path):
    from dask.distributed import Client, LocalCluster

    sweep = load_sweep(_sweep_file(tmp_path, ["agents"], duration=60.0))
    cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                           host="127.0.0.1", dashboard_address=None, silence_logs=50)
    client = Client(cluster)
    result = {}

    def target():
        result["summary"] = run_sweep(sweep, tmp_path / "out",
                                      scheduler=cluster.scheduler_address, progress=False,
                                      log=_quiet)

    thread = threading.Thread(target=target)
    thread.start()
    killed = False
    deadline = time.time() + 120
    while time.time() < deadline and not killed:
        busy = [w for w, tasks in client.processing().items() if tasks]
        done = _finished(tmp_path / "out")
        if busy and done:
            pids = client.run(os.getpid, workers=[busy[0]])
            os.kill(pids[busy[0]], signal.SIGKILL)
            killed = True
        time.sleep(0.02)
    thread.join(timeout=600)
    client.close()
    cluster.close()
    assert killed, "no task was seen running"
    summary = result["summary"]
    assert summary.failed == {} and summary.done + summary.skipped == 18
    ds = xr.open_dataset(tmp_path / "out" / "sweep.nc")
    assert (ds["done"] == 1).all()
    ds.close()


@pytest.mark.parametrize("bad, match", [(["--workers", "0"], "--workers must be a positive")])
def test_sweep_cli_bad_input(cli, tmp_path, bad, match):
    path = _sweep_file(tmp_path, ["agents"])
    res = cli("sweep", path, "-o", tmp_path / "o", *bad, cwd=tmp_path)
    assert res.returncode == 2 and match in res.stderr and "Traceback" not in res.stderr


def test_embedded_scheduler_listens_on_localhost_only():
    from crossflock._sweep_run import _client

    client, cluster = _client(1, None, 1)
    try:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        for addr in client.scheduler_info()["workers"]:
            assert addr.startswith("tcp://127.0.0.1:")
    finally:
        client.close()
        cluster.close()


def test_interrupt_teardown_mutes_every_dask_logger():
    # dask's logging set-up gives children such as tornado.application their own level
    # and handler; after an interrupt none of them may print a teardown traceback
    import logging

    import distributed  # noqa: F401  (its import configures the loggers)

    from crossflock._sweep_run import _silence_dask

    names = ["distributed", "distributed.client", "tornado", "tornado.application",
             "asyncio"]
    saved = {name: logging.getLogger(name).level for name in names}
    assert logging.getLogger("tornado.application").isEnabledFor(logging.ERROR)
    try:
        _silence_dask()
        for name in names:
            assert not logging.getLogger(name).isEnabledFor(logging.CRITICAL), name
    finally:
        for name, level in saved.items():
            logging.getLogger(name).setLevel(level)
