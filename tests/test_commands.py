"""End-to-end CLI: run, analyze, compare (with resume), coefficients -> compare, check."""

from __future__ import annotations

import tomllib

import numpy as np
import pytest
import tomli_w
import xarray as xr

from crossflock import read_dataset
from tests.conftest import small_mapping


def _tiny(tmp_path, **sections):
    mapping = small_mapping(**sections)
    if "size" not in sections.get("domain", {}):
        mapping["domain"]["size"] = [12.0, 12.0]
    if "grid" not in sections.get("continuum", {}):
        mapping["continuum"]["grid"] = [24, 24]
    path = tmp_path / "tiny.toml"
    path.write_text(tomli_w.dumps(mapping))
    return path


def test_run_and_analyze_both_engines(cli, tmp_path):
    cfg = _tiny(tmp_path)
    for engine in ("agents", "continuum"):
        out = tmp_path / f"{engine}.nc"
        res = cli("run", cfg, "--engine", engine, "-o", out, "--set", "agents.snapshots=true",
                  cwd=tmp_path)
        assert res.returncode == 0, res.stderr
        ds = read_dataset(out)
        assert ds.attrs["engine"] == engine
        assert ds["order"].sizes["time"] == 11  # t = 0, 2, ..., 20
        obs = tmp_path / f"{engine}_obs.nc"
        res = cli("analyze", out, "-o", obs, cwd=tmp_path)
        assert res.returncode == 0, res.stderr
        o = read_dataset(obs, kind="observables")
        assert 0.0 <= float(o["order_mean"]) <= 1.0
    res = cli("analyze", cfg, "-o", tmp_path / "x.nc", cwd=tmp_path)
    assert res.returncode == 2 and "not a readable netCDF file" in res.stderr


def test_compare_writes_everything_and_resumes(cli, tmp_path):
    cfg = _tiny(tmp_path)
    out = tmp_path / "cmp"
    res = cli("compare", cfg, "-o", out, cwd=tmp_path)
    assert res.returncode in (0, 1), res.stderr
    for name in ("agents.nc", "agents_fields.nc", "continuum.nc", "observables_agents_fields.nc",
                 "observables_continuum.nc", "mismatch.nc", "report.html"):
        assert (out / name).stat().st_size > 0, name
    mismatch = read_dataset(out / "mismatch.nc", kind="mismatch")
    verdict = mismatch.attrs["verdict"]
    assert verdict in ("holds", "fails", "not resolved")
    assert (res.returncode == 1) == (verdict == "fails")
    assert "overall:" in res.stdout
    html = (out / "report.html").read_text()
    assert html.count("data:image/png;base64,") >= 3
    # the same command again reuses the runs (same config) and gives the same verdict
    again = cli("compare", cfg, "-o", out, cwd=tmp_path)
    assert again.stderr.count("reusing") == 3, again.stderr
    assert read_dataset(out / "mismatch.nc").attrs["verdict"] == verdict


def test_compare_with_a_coefficient_file(cli, tmp_path):
    cfg = _tiny(tmp_path)
    res = cli("coefficients", cfg, cwd=tmp_path)
    table = tomllib.loads(res.stdout)["continuum"]["coefficients"]
    table["alpha"] *= 1.2
    table["D_rho"] = 0.1  # constant coefficients steepen density fronts; keep them smooth
    coeffs = tmp_path / "coeffs.toml"
    coeffs.write_text(tomli_w.dumps({"continuum": {"coefficients": table}}))
    out = tmp_path / "cmp"
    res = cli("compare", cfg, "-o", out, "--coefficients", coeffs, "--set", "continuum.dt=0.01",
              cwd=tmp_path)
    assert res.returncode in (0, 1), res.stderr
    assert (out / "continuum_calibrated.nc").exists()
    assert (out / "mismatch_calibrated.nc").exists()
    html = (out / "report.html").read_text()
    assert "Mismatch with the calibrated coefficients" in html
    assert (out / "observables_continuum_calibrated.nc").exists()  # plotted beside kinetic
    bad = tmp_path / "bad.toml"
    bad.write_text("[continuum]\ngrid = [8, 8]\n")
    res = cli("compare", cfg, "-o", out, "--coefficients", bad, cwd=tmp_path)
    assert res.returncode == 2 and "no [continuum.coefficients] table" in res.stderr


def _check_cfg(tmp_path):
    # small and short: a 10 x 10 box, 100 particles, 60 time units
    return _tiny(tmp_path, domain={"size": [10.0, 10.0]}, continuum={"grid": [20, 20]},
                 run={"duration": 60.0, "sample_every": 1.0},
                 agents={"dt": 0.5}, check={"ensemble": 6})


def test_check_update_pass_refuse_and_detect(cli, tmp_path):
    cfg = _check_cfg(tmp_path)
    ref = tmp_path / "ref.nc"
    res = cli("check", cfg, "--reference", ref, cwd=tmp_path)
    assert res.returncode == 2 and "create it with --update" in res.stderr
    res = cli("check", cfg, "--reference", ref, "--update", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    r = read_dataset(ref, kind="reference")
    assert r.sizes["member"] == 6 and "agents_order_mean" in r
    # same code, new seeds: passes
    res = cli("check", cfg, "--reference", ref, cwd=tmp_path)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "check: pass" in res.stdout
    # other physics: refused, naming the key
    res = cli("check", cfg, "--reference", ref, "--set", "model.noise=0.6", cwd=tmp_path)
    assert res.returncode == 2 and "model.noise" in res.stderr
    # ...unless allowed: a noise shift the ensemble resolves is a regression in the order
    res = cli("check", cfg, "--reference", ref, "--set", "model.noise=0.6",
              "--allow-config-change", cwd=tmp_path)
    assert res.returncode == 1, res.stdout + res.stderr
    assert "REGRESSION" in res.stdout and "agents_order_mean" in res.stdout.split("REGRESSION")[1]


def test_false_alarm_rate_of_the_real_gate(tmp_path):
    """Repeated checks with fresh seeds fail at about the stated rate, not more.

    Welch + Bonferroni bounds the family-wise rate by alpha (Welch 1947; Bonferroni
    inequality); correlated observables make it smaller, so we test the upper side at the
    binomial 3-sigma level (scipy.stats.binom) and that failures do occur at a large alpha.
    """
    from scipy import stats

    from crossflock import load_config
    from crossflock._check import gate, run_ensemble

    cfg = load_config(_check_cfg(tmp_path), overrides={"run.duration": 30.0})
    alpha, reps, n = 0.3, 40, 3
    fails = 0
    for r in range(reps):
        ref, _ = run_ensemble(cfg, 2 * n * r, n, ("agents",))
        now, _ = run_ensemble(cfg, 2 * n * r + n, n, ("agents",))
        fails += not all(row.passed for row in gate(ref, now, alpha))
    rate = fails / reps
    upper = stats.binom.ppf(0.9987, reps, alpha) / reps
    assert rate <= upper, rate
    assert fails >= 1, "a gate at alpha = 0.3 that never fires cannot detect anything"


def test_compare_rejects_a_directory_clash(cli, tmp_path):
    cfg = _tiny(tmp_path)
    clash = tmp_path / "file"
    clash.write_text("x")
    res = cli("compare", cfg, "-o", clash, cwd=tmp_path)
    assert res.returncode == 2 and "is not a directory" in res.stderr


@pytest.mark.parametrize("cmd", ["analyze", "calibrate"])
def test_foreign_netcdf_is_refused(cli, tmp_path, cmd):
    foreign = tmp_path / "foreign.nc"
    xr.Dataset({"a": ("t", np.arange(3.0))}).to_netcdf(foreign)
    res = cli(cmd, foreign, "-o", tmp_path / "out.x", cwd=tmp_path)
    assert res.returncode == 2 and "was not written by crossflock" in res.stderr


def test_calibrate_cli_writes_a_usable_table(cli, tmp_path):
    # a noisy continuum run with known coefficients, sampled densely enough to fit
    # (settings of the engine recovery test in test_calibrate.py, shortened)
    cfg = _tiny(tmp_path, domain={"size": [64.0, 64.0]}, model={"radius": 2.0},
                run={"duration": 10.0, "sample_every": 0.1, "initial": "ordered",
                     "initial_polarization": 0.3},
                agents={"dt": 0.1},
                continuum={"grid": [32, 32], "dt": 0.002, "initial_noise": 0.2,
                           "coefficients": {"alpha": 1.0, "alpha_rho": 0.3, "beta": 1.0,
                                            "pressure": [0.5], "D_T": 0.8, "lambda1": 0.4,
                                            "D_rho": 0.2, "noise_strength": 0.01}})
    run = tmp_path / "c.nc"
    assert cli("run", cfg, "--engine", "continuum", "-o", run, cwd=tmp_path).returncode == 0
    out = tmp_path / "coeffs.toml"
    res = cli("calibrate", run, "-o", out, cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    table = tomllib.loads(out.read_text())["continuum"]["coefficients"]
    from crossflock import load_config

    fitted = load_config(cfg, overrides={"continuum.coefficients": table})
    # leading terms within 10 % (the recovery test in test_calibrate.py is the strict one)
    assert fitted.continuum.coefficients.alpha == pytest.approx(1.0, rel=0.1)
    assert fitted.continuum.coefficients.D_T == pytest.approx(0.8, rel=0.1)
    particles = tmp_path / "p.nc"
    cli("run", cfg, "--engine", "agents", "-o", particles, cwd=tmp_path)
    res = cli("calibrate", particles, "-o", out, cwd=tmp_path)
    assert res.returncode == 2 and "has no particle snapshots" in res.stderr


def test_diverging_continuum_exits_3_and_keeps_last_good_state(cli, tmp_path):
    # beta = 0 leaves alpha > 0 unsaturated: |w| grows like exp(alpha t) until the
    # blow-up guard stops the run (exact solution of d_t w = alpha w)
    cfg = _tiny(tmp_path, run={"duration": 40.0, "initial": "ordered"},
                continuum={"dt": 0.02, "coefficients": {"alpha": 1.0, "beta": 0.0,
                                                        "D_T": 0.1}})
    out = tmp_path / "c.nc"
    res = cli("run", cfg, "--engine", "continuum", "-o", out, cwd=tmp_path)
    assert res.returncode == 3, res.stderr
    assert "diverged at t =" in res.stderr and "Traceback" not in res.stderr
    assert not out.exists()
    last = read_dataset(tmp_path / "c.last_good.nc", kind="fields")
    assert np.isfinite(last["rho"].values).all() and last.sizes["time"] >= 1


def test_check_refuses_corrupt_and_foreign_references(cli, tmp_path):
    cfg = _check_cfg(tmp_path)
    corrupt = tmp_path / "ref.nc"
    corrupt.write_bytes(b"\x89HDF\r\n\x1a\n" + b"\0" * 64)
    res = cli("check", cfg, "--reference", corrupt, cwd=tmp_path)
    assert res.returncode == 2 and "not a readable netCDF file" in res.stderr
    run = tmp_path / "run.nc"
    cli("run", cfg, "--engine", "agents", "-o", run, cwd=tmp_path)
    res = cli("check", cfg, "--reference", run, cwd=tmp_path)
    assert res.returncode == 2 and "expected 'reference'" in res.stderr
    res = cli("compare", cfg, "-o", tmp_path / "cmp", "--coefficients", run, cwd=tmp_path)
    assert res.returncode == 2 and "is not valid TOML" in res.stderr
