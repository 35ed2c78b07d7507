"""Config schema: defaults, validation messages, overrides, round trips."""

from __future__ import annotations

import pytest

import crossflock
from crossflock import ConfigError, InputError, load_config
from crossflock._config import config_from_toml, config_to_toml, parse_override
from tests.conftest import CONFIGS, small_mapping


def test_defaults_match_guide_contract():
    cfg = load_config()
    # GUIDE section 2 defaults
    assert cfg.domain.size == (64.0, 64.0)
    assert cfg.domain.boundary == "periodic"
    assert cfg.model.density == 2.0 and cfg.model.speed == 0.5
    assert cfg.model.radius == 1.0 and cfg.model.noise == 0.2
    assert cfg.model.noise_kind == "angular"
    assert cfg.run.duration == 500.0 and cfg.run.sample_every == 5.0
    assert cfg.agents.dt == 1.0 and cfg.agents.snapshots is False
    assert cfg.continuum.grid == (128, 128) and cfg.continuum.dt == 0.05
    assert cfg.continuum.coefficients == "kinetic"


def test_config_is_frozen():
    cfg = load_config()
    with pytest.raises(AttributeError):
        cfg.model.noise = 0.5


@pytest.mark.parametrize("name", ["default", "channel", "obstacles"])
def test_shipped_scenarios_validate(name):
    cfg = load_config(CONFIGS / f"{name}.toml")
    assert config_from_toml(config_to_toml(cfg)) == cfg


@pytest.mark.parametrize(
    "overrides, match",
    [
        ({"model.density": -1.0}, r"`model.density` must be positive \(got -1.0\)"),
        ({"model.noise": 1.5}, r"`model.noise` must be in \[0, 1\] \(got 1.5\)"),
        ({"model.nosie": 0.1}, r"unknown key `model.nosie` \(did you mean `model.noise`\?\)"),
        ({"modle.noise": 0.1}, r"unknown key `modle` \(did you mean `model`\?\)"),
        ({"model.speed": "fast"}, r"`model.speed` must be a number \(got 'fast'\)"),
        ({"model.speed": True}, r"`model.speed` must be a number"),
        ({"domain.obstacles": [{"center": [100.0, 3.0], "radius": 2.0}]},
         r"`domain.obstacles\[0\].center` must lie inside the domain"),
        ({"continuum.grid": [0, 64]}, r"`continuum.grid` must have two positive entries"),
        ({"continuum.dt": -0.1}, r"`continuum.dt` must be positive \(got -0.1\)"),
        ({"agents.dt": 0.0}, r"`agents.dt` must be positive"),
        ({"model.noise_kind": "pink"}, r"`model.noise_kind` must be one of"),
        ({"domain.size": [64.0]}, r"`domain.size` must have exactly 2 entries"),
        ({"continuum.coefficients": "magic"}, r'`continuum.coefficients` must be "kinetic"'),
        ({"continuum.coefficients": {"alpah": 1.0}},
         r"unknown key `continuum.coefficients.alpah` \(did you mean"),
        ({"run.seed": -3}, r"`run.seed` must be a non-negative integer"),
        ({"model.density": float("nan")}, r"`model.density` must be finite"),
    ],
)
def test_bad_values_name_key_constraint_and_value(overrides, match):
    with pytest.raises(ConfigError, match=match):
        load_config(small_mapping(), overrides=overrides)


def test_physical_consistency_checks():
    # grid coarser than the interaction radius
    with pytest.raises(ConfigError, match=r"`continuum.grid` must resolve the interaction radius"):
        load_config(small_mapping(continuum={"grid": [8, 8]}))
    # particle step longer than the radius
    with pytest.raises(ConfigError, match=r"`agents.dt` too large: speed \* dt"):
        load_config(small_mapping(model={"speed": 2.0}, agents={"dt": 1.0}))
    # continuum dt beyond the explicit limit (the message gives the limit)
    with pytest.raises(ConfigError, match=r"`continuum.dt` must be <= [0-9.]+, the explicit"):
        load_config(small_mapping(continuum={"dt": 1.0}, run={"sample_every": 2.0}))
    # sample interval not a multiple of the step
    with pytest.raises(ConfigError, match=r"whole multiple of `continuum.dt`"):
        load_config(small_mapping(continuum={"dt": 0.03}))
    # obstacle touching a channel wall
    with pytest.raises(ConfigError, match=r"must not touch the channel walls"):
        load_config(small_mapping(domain={"boundary": "channel",
                                          "obstacles": [{"center": [8.0, 2.0], "radius": 3.0}]}))
    # overlapping obstacles
    with pytest.raises(ConfigError, match=r"overlap"):
        load_config(small_mapping(domain={"obstacles": [
            {"center": [4.0, 4.0], "radius": 2.0}, {"center": [6.0, 4.0], "radius": 2.0}]}))
    # spectral method needs a periodic domain
    with pytest.raises(ConfigError, match=r'"spectral" needs a periodic domain'):
        load_config(small_mapping(domain={"boundary": "channel"},
                                  continuum={"method": "spectral"}))


def test_half_radius_step_warns():
    with pytest.warns(crossflock.ConsistencyWarning, match="half the interaction radius"):
        load_config(small_mapping(model={"speed": 0.8}, continuum={"dt": 0.02}))


def test_overrides_strings_and_toml_values():
    assert parse_override("model.noise=0.3") == ("model.noise", 0.3)
    assert parse_override("domain.boundary=channel") == ("domain.boundary", "channel")
    assert parse_override('domain.size=[32.0, 16.0]') == ("domain.size", [32.0, 16.0])
    cfg = load_config(small_mapping(), overrides=["model.noise=0.3", "run.seed=9"])
    assert cfg.model.noise == 0.3 and cfg.run.seed == 9
    with pytest.raises(ConfigError, match="must look like section.key=VALUE"):
        parse_override("model.noise")
    with pytest.raises(ConfigError, match=r"unknown key `run.sed`"):
        load_config(small_mapping(), overrides=["run.sed=2"])


def test_coefficient_table_override_and_round_trip():
    cfg = load_config(small_mapping(), overrides={
        "continuum.coefficients": {"alpha": 0.5, "beta": 2.0, "pressure": [0.25, 0.1]}})
    coef = cfg.continuum.coefficients
    assert coef.alpha == 0.5 and coef.pressure == (0.25, 0.1) and coef.D_T == 1.0
    assert config_from_toml(config_to_toml(cfg)) == cfg
    cfg2 = load_config(cfg, overrides={"continuum.coefficients.beta": 3.0})
    assert cfg2.continuum.coefficients.beta == 3.0


def test_file_errors(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        load_config(tmp_path / "missing.toml")
    with pytest.raises(InputError, match="is a directory"):
        load_config(tmp_path)
    bad = tmp_path / "bad.toml"
    bad.write_text("[model\ndensity = 2\n")
    with pytest.raises(ConfigError, match="is not valid TOML"):
        load_config(bad)
    section = tmp_path / "section.toml"
    section.write_text("[modle]\ndensity = 2\n")
    with pytest.raises(ConfigError, match=r"unknown key `modle` \(did you mean `model`\?\)"):
        load_config(section)
