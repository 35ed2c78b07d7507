"""Sweep files: validation, expansion, seeds and dimension names."""

from __future__ import annotations

import pytest

from crossflock import ConfigError, InputError
from crossflock._sweep import axis_names, load_sweep, seed_value
from tests.conftest import CONFIGS


def _write(tmp_path, text):
    path = tmp_path / "sweep.toml"
    path.write_text(text)
    return path


GOOD = f'''
base = "{CONFIGS / 'default.toml'}"
seeds = 2
engines = ["agents"]
[axes]
"model.density" = [1.0, 2.0]
"model.noise" = {{ start = 0.1, stop = 0.5, num = 3 }}
[set]
"run.duration" = 20.0
'''


def test_expansion_shape_seeds_and_overrides(tmp_path):
    sweep = load_sweep(_write(tmp_path, GOOD))
    assert sweep.shape == (2, 3)
    tasks = sweep.tasks()
    assert len(tasks) == 12
    assert sweep.axes["model.noise"] == pytest.approx((0.1, 0.3, 0.5))
    t = tasks[5]  # index (0, 2), seed 1
    assert t.index == (0, 2) and t.seed_index == 1
    assert t.config.model.density == 1.0 and t.config.model.noise == pytest.approx(0.5)
    assert t.config.run.duration == 20.0
    assert t.config.run.seed == seed_value(1, 1)
    # common random numbers: every point uses the same seed list
    assert {x.config.run.seed for x in tasks if x.seed_index == 0} == {seed_value(1, 0)}
    assert seed_value(1, 0) != seed_value(1, 1)
    assert len({x.key for x in tasks}) == 12


def test_inline_base_and_name_clash(tmp_path):
    text = '''
seeds = 1
[base.model]
density = 1.0
[base.domain]
size = [16.0, 16.0]
[base.continuum]
grid = [32, 32]
dt = 0.025
[axes]
"model.speed" = [0.4, 0.5]
'''
    sweep = load_sweep(_write(tmp_path, text))
    assert sweep.shape == (2,)
    assert axis_names(["model.radius", "obstacle.radius", "model.noise"]) == [
        "model.radius", "obstacle.radius", "noise"]


@pytest.mark.parametrize("text, match", [
    ('seeds = 2\n[axes]\n"model.noise" = [0.1]\n', "`base` is required"),
    (f'base = "{CONFIGS / "default.toml"}"\nsede = 2\n[axes]\n"model.noise" = [0.1]\n',
     r"unknown key `sede` \(did you mean `seeds`\?\)"),
    (f'base = "{CONFIGS / "default.toml"}"\n[axes]\n"model.nosie" = [0.1]\n',
     r"unknown key `model.nosie`"),
    (f'base = "{CONFIGS / "default.toml"}"\n[axes]\n"model.noise" = [0.1, 2.0]\n',
     r"sweep point \(model.noise = 2.0\): `model.noise` must be in \[0, 1\]"),
    (f'base = "{CONFIGS / "default.toml"}"\nseeds = 0\n[axes]\n"model.noise" = [0.1]\n',
     "`seeds` must be a positive integer"),
    (f'base = "{CONFIGS / "default.toml"}"\nengines = ["gpu"]\n[axes]\n"model.noise" = [0.1]\n',
     "`engines` must be a non-empty list"),
    (f'base = "{CONFIGS / "default.toml"}"\n[axes]\n"model.noise" = {{start = 0.1}}\n',
     "range needs start, stop and num"),
    (f'base = "{CONFIGS / "default.toml"}"\n[axes]\n', "must name at least one config key"),
    (f'base = "{CONFIGS / "default.toml"}"\n[resources]\nthreads = 0\n'
     '[axes]\n"model.noise" = [0.1]\n', r"`resources.threads` must be an integer >= 1"),
    ('base = "nowhere.toml"\n[axes]\n"model.noise" = [0.1]\n', "does not exist"),
    ("[axes\n", "is not valid TOML"),
])
def test_bad_sweep_files(tmp_path, text, match):
    with pytest.raises((ConfigError, InputError), match=match):
        load_sweep(_write(tmp_path, text))
