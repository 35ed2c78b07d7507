"""Command line: validate, bad input (exit 2, one line, no traceback, nothing written)."""

from __future__ import annotations

import pytest

from tests.conftest import CONFIGS

SCENARIOS = ["default", "channel", "obstacles"]


@pytest.mark.parametrize("name", SCENARIOS)
def test_validate_prints_resolved_config(cli, name, tmp_path):
    res = cli("validate", CONFIGS / f"{name}.toml", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    import tomllib

    resolved = tomllib.loads(res.stdout)
    assert set(resolved) >= {"domain", "model", "run", "agents", "continuum"}
    assert resolved["agents"]["update"] == "align_then_move"  # defaults filled in
    assert list(tmp_path.iterdir()) == []


BAD = [
    ("negative density", ["--set", "model.density=-2"], None, "`model.density`"),
    ("noise outside [0, 1]", ["--set", "model.noise=1.2"], None, "`model.noise`"),
    ("unknown key", ["--set", "model.colour=3"], None, "unknown key `model.colour`"),
    ("typo'd section", [], "[modle]\ndensity = 2.0\n", "did you mean `model`"),
    ("wrong type", ["--set", "run.duration=\"long\""], None, "`run.duration` must be a number"),
    ("obstacle outside", ["--set", "domain.obstacles=[{center=[99.0,1.0],radius=2.0}]"], None,
     "`domain.obstacles[0].center` must lie inside"),
    ("zero grid", ["--set", "continuum.grid=[0,0]"], None, "`continuum.grid`"),
    ("non-positive dt", ["--set", "agents.dt=0"], None, "`agents.dt` must be positive"),
    ("malformed TOML", [], "[model\ndensity = \n", "is not valid TOML"),
    ("missing file", [], "MISSING", "does not exist"),
]


@pytest.mark.parametrize("label, extra, text, needle", BAD, ids=[b[0] for b in BAD])
def test_bad_config_exit_2_one_line(cli, tmp_path, label, extra, text, needle):
    work = tmp_path / "work"
    work.mkdir()
    if text is None:
        path = CONFIGS / "default.toml"
    elif text == "MISSING":
        path = work / "missing.toml"
    else:
        path = tmp_path / "bad.toml"
        path.write_text(text)
    before = set(work.iterdir())
    res = cli("validate", path, *extra, cwd=work)
    assert res.returncode == 2, (res.stdout, res.stderr)
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1, res.stderr
    assert "Traceback" not in res.stderr
    assert needle in lines[0]
    assert res.stdout == ""
    assert set(work.iterdir()) == before  # nothing written


def test_bad_input_to_run_writes_nothing(cli, tmp_path):
    res = cli("run", CONFIGS / "default.toml", "--engine", "agents", "-o", tmp_path / "o.nc",
              "--set", "model.noise=2", cwd=tmp_path)
    assert res.returncode == 2 and "`model.noise`" in res.stderr
    assert list(tmp_path.iterdir()) == []


def test_usage_errors_exit_2(cli, tmp_path):
    res = cli("run", CONFIGS / "default.toml", cwd=tmp_path)
    assert res.returncode == 2 and "Traceback" not in res.stderr
    res = cli("frobnicate", cwd=tmp_path)
    assert res.returncode == 2


def test_coefficients_prints_a_usable_table(cli, tmp_path):
    import tomllib

    res = cli("coefficients", CONFIGS / "default.toml", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    table = tomllib.loads(res.stdout)["continuum"]["coefficients"]
    assert set(table) >= {"alpha", "alpha_rho", "beta", "pressure", "D_T", "lambda1"}
    # the printed table is accepted as config input as is
    from crossflock import load_config

    cfg = load_config(CONFIGS / "default.toml", overrides={"continuum.coefficients": table,
                                                           "continuum.dt": 0.025})
    assert cfg.continuum.coefficients.alpha == pytest.approx(table["alpha"])


def test_threads_option(cli, tmp_path):
    res = cli("--threads", "1", "validate", CONFIGS / "default.toml", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    res = cli("--threads", "999", "validate", CONFIGS / "default.toml", cwd=tmp_path)
    assert res.returncode == 2 and "--threads must be between 1 and" in res.stderr
