"""Ctrl-C / SIGTERM during run, compare and sweep: files complete or absent; resume."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
import tomli_w

from crossflock import InputError, read_dataset
from tests.conftest import small_mapping


def _start(args, cwd):
    env = dict(os.environ, NUMBA_NUM_THREADS="1")
    return subprocess.Popen([sys.executable, "-m", "crossflock", *map(str, args)], cwd=cwd,
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)


def _wait_for(predicate, proc, timeout=180):
    deadline = time.time() + timeout
    while time.time() < deadline:
        if predicate():
            return True
        if proc.poll() is not None:
            return False
        time.sleep(0.02)
    return False


def _no_partial_files(folder):
    hidden = [p for p in folder.rglob(".*") if p.is_file()]
    assert hidden == [], hidden
    for path in folder.rglob("*.nc"):
        read_dataset(path)  # every file under a final name is complete


def _config(tmp_path, **sections):
    path = tmp_path / "cfg.toml"
    path.write_text(tomli_w.dumps(small_mapping(**sections)))
    return path


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_interrupted_run_keeps_checkpoint_and_resumes(tmp_path, sig):
    cfg = _config(tmp_path, domain={"size": [32.0, 32.0]},
                  run={"duration": 6000.0, "sample_every": 10.0},
                  agents={"checkpoint_every": 200.0},
                  continuum={"grid": [64, 64]})
    out, ckpt = tmp_path / "run.nc", tmp_path / "ckpt.nc"
    proc = _start(["run", cfg, "--engine", "agents", "-o", out, "--checkpoint", ckpt],
                  tmp_path)
    assert _wait_for(ckpt.exists, proc), proc.communicate()
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=120)
    if proc.returncode == 0:
        pytest.skip("the run finished before the signal arrived")
    assert proc.returncode == 130, err
    assert "interrupted" in err and f"--resume {ckpt}" in err
    assert not out.exists()
    _no_partial_files(tmp_path)
    res = subprocess.run([sys.executable, "-m", "crossflock", "run", str(cfg), "--engine",
                          "agents", "-o", str(out), "--resume", str(ckpt)], cwd=tmp_path,
                         capture_output=True, text=True, timeout=300, check=False)
    assert res.returncode == 0, res.stderr
    resumed = read_dataset(out)
    from crossflock import agents, load_config

    unbroken = agents.simulate(load_config(cfg), progress=False)
    np.testing.assert_array_equal(resumed["order"].values, unbroken["order"].values)


def test_sigterm_during_compare_then_rerun_reuses_finished_runs(tmp_path):
    # the particle run is quick, the continuum run long enough to be interrupted
    cfg = _config(tmp_path, run={"duration": 400.0, "sample_every": 4.0},
                  continuum={"dt": 0.01})
    out = tmp_path / "cmp"
    proc = _start(["compare", cfg, "-o", out], tmp_path)
    assert _wait_for(lambda: (out / "agents_fields.nc").exists(), proc), proc.communicate()
    time.sleep(0.5)
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    if proc.returncode in (0, 1):
        pytest.skip("compare finished before the signal arrived")
    assert proc.returncode == 130, err
    assert "re-run the same command to resume" in err
    assert not (out / "continuum.nc").exists()
    _no_partial_files(out)
    read_dataset(out / "agents.nc", kind="particles")


def test_sigint_during_sweep_exits_cleanly(tmp_path):
    sweep = tmp_path / "sweep.toml"
    sweep.write_text(tomli_w.dumps({
        "seeds": 2, "engines": ["agents"], "base": small_mapping(run={"duration": 200.0}),
        "axes": {"model.noise": [0.1, 0.2, 0.3, 0.4, 0.5, 0.6]}}))
    out = tmp_path / "sw"
    args = ["sweep", sweep, "-o", out, "--workers", "1", "--no-progress"]
    proc = _start(args, tmp_path)
    points = out / "points"
    assert _wait_for(lambda: points.exists() and any(
        not p.name.startswith(".") for p in points.glob("*.nc")), proc), proc.communicate()
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    if proc.returncode == 0:
        pytest.skip("the sweep finished before the signal arrived")
    assert proc.returncode == 130, err
    assert "Traceback" not in err
    finished = [p for p in points.glob("*.nc") if not p.name.startswith(".")]
    for p in finished:
        read_dataset(p, kind="sweep")
    res = subprocess.run([sys.executable, "-m", "crossflock", *map(str, args)], cwd=tmp_path,
                         capture_output=True, text=True, timeout=600, check=False)
    assert res.returncode == 0, res.stderr
    assert f"{12 - len(finished)} done, {len(finished)} skipped" in res.stdout


def test_unwritable_output_is_refused_up_front(tmp_path, cli):
    if os.geteuid() == 0:
        # root ignores permission bits: use a path under a regular file instead
        blocker = tmp_path / "file"
        blocker.write_text("")
        target = blocker / "out.nc"
    else:  # pragma: no cover - CI runs as root
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        target = ro / "out.nc"
    cfg = _config(tmp_path)
    res = cli("run", cfg, "--engine", "agents", "-o", target, cwd=tmp_path)
    assert res.returncode == 2, res.stderr
    assert "is not a directory" in res.stderr or "not writable" in res.stderr
    assert "cannot write" not in res.stderr  # refused before the run, not after it
    with pytest.raises(InputError):
        from crossflock._io import check_writable

        check_writable(target)
