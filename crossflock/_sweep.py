"""Sweep files: schema, expansion into (point, seed) tasks, and task identity.

A sweep file (TOML)::

    base = "default.toml"        # scenario path relative to this file, or a [base] table
    seeds = 2                    # seeds per point, derived deterministically from run.seed
    engines = ["agents", "continuum"]
    [axes]                       # any config keys; lists or {start, stop, num}
    "model.density" = [1.0, 2.0]
    "model.noise" = { start = 0.1, stop = 0.5, num = 3 }
    [set]                        # overrides applied to every point
    "run.duration" = 100.0
    [resources]                  # per task
    threads = 1                  # numba threads per task
    retries = 2                  # re-runs of a task whose worker died

Seeds: seed index s of every point runs with ``run.seed`` replaced by
``SeedSequence(run.seed, spawn_key=(1000, s))``'s first 31-bit word, so all points share
the same seed list (common random numbers across the phase diagram) and the list does not
depend on how many seeds are asked for.
"""

from __future__ import annotations

import hashlib
import itertools
import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._config import Config, apply_overrides, config_to_toml, load_config
from ._errors import ConfigError, InputError
from ._schema import fmt_value, unknown_key_error
from ._version import __version__

__all__ = ["Sweep", "Task", "load_sweep", "seed_value", "axis_names"]

_TOP_KEYS = {"base", "seeds", "engines", "axes", "set", "resources"}
_RESOURCE_KEYS = {"threads", "retries"}


@dataclass(frozen=True)
class Task:
    """One (point, seed) of a sweep."""

    index: tuple[int, ...]
    seed_index: int
    config: Config
    engines: tuple[str, ...]

    @property
    def name(self) -> str:
        return "p" + "-".join(str(i) for i in self.index) + f"_s{self.seed_index}"

    @property
    def key(self) -> str:
        """Hash of everything that determines the task's result."""
        text = config_to_toml(self.config) + "|" + ",".join(self.engines) + "|" + __version__
        return hashlib.sha256(text.encode()).hexdigest()[:20]


@dataclass(frozen=True)
class Sweep:
    """An expanded sweep."""

    path: Path
    base: Config
    axes: dict  # dotted key -> tuple of values (in order)
    seeds: int
    engines: tuple[str, ...]
    threads: int
    retries: int

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(len(v) for v in self.axes.values())

    def tasks(self) -> list[Task]:
        """Every (point, seed) task in a fixed order."""
        out = []
        keys = list(self.axes)
        ranges = [range(n) for n in self.shape]
        base_map = self.base
        for index in itertools.product(*ranges):
            overrides = {k: self.axes[k][i] for k, i in zip(keys, index, strict=True)}
            for s in range(self.seeds):
                ov = dict(overrides)
                ov["run.seed"] = seed_value(self.base.run.seed, s)
                try:
                    cfg = load_config(base_map, overrides=ov)
                except ConfigError as exc:
                    where = ", ".join(f"{k} = {v!r}" for k, v in overrides.items())
                    raise ConfigError(f"sweep point ({where}): {exc}") from None
                out.append(Task(tuple(index), s, cfg, self.engines))
        return out


def seed_value(base_seed: int, seed_index: int) -> int:
    """The ``run.seed`` of seed index ``seed_index`` (see module docstring)."""
    ss = np.random.SeedSequence(int(base_seed), spawn_key=(1000, int(seed_index)))
    return int(ss.generate_state(1, dtype=np.uint32)[0] >> 1)


def axis_names(keys) -> list[str]:
    """Dimension names: the key's last part, or the full key when two would clash."""
    last = [k.split(".")[-1] for k in keys]
    return [k if last.count(n) > 1 else n for k, n in zip(keys, last, strict=True)]


def _axis_values(key: str, spec) -> tuple:
    where = f"`axes.\"{key}\"`"
    if isinstance(spec, list):
        if not spec:
            raise ConfigError(f"{where} must list at least one value (got [])")
        return tuple(spec)
    if isinstance(spec, dict):
        unknown = set(spec) - {"start", "stop", "num", "log"}
        if unknown:
            raise unknown_key_error(f"axes.\"{key}\"", sorted(unknown)[0],
                                    ["start", "stop", "num", "log"])
        try:
            start, stop, num = float(spec["start"]), float(spec["stop"]), spec["num"]
        except KeyError as exc:
            raise ConfigError(f"{where} range needs start, stop and num (missing {exc})") \
                from None
        except (TypeError, ValueError):
            raise ConfigError(f"{where} start and stop must be numbers (got "
                              f"{fmt_value(spec)})") from None
        if isinstance(num, bool) or not isinstance(num, int) or num < 1:
            raise ConfigError(f"{where}.num must be a positive integer (got {fmt_value(num)})")
        if not (math.isfinite(start) and math.isfinite(stop)):
            raise ConfigError(f"{where} start and stop must be finite (got {fmt_value(spec)})")
        if spec.get("log", False):
            if start <= 0 or stop <= 0:
                raise ConfigError(f"{where} log range needs positive start and stop")
            vals = np.geomspace(start, stop, num)
        else:
            vals = np.linspace(start, stop, num)
        return tuple(float(v) for v in vals)
    raise ConfigError(f"{where} must be a list or {{start, stop, num}} (got {fmt_value(spec)})")


def load_sweep(path) -> Sweep:
    """Read and validate a sweep file (every point's config is validated too)."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"sweep file {str(path)!r} does not exist"
                         if not path.exists() else f"sweep file {str(path)!r} is not a file")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(f"sweep file {str(path)!r} is not valid TOML: {exc}") from None
    for key in data:
        if key not in _TOP_KEYS:
            raise unknown_key_error("", key, _TOP_KEYS)
    base = data.get("base")
    if base is None:
        raise ConfigError("sweep key `base` is required (a scenario path or a [base] table)")
    if isinstance(base, str):
        base_path = (path.parent / base)
        base_map = tomllib.loads(base_path.read_text(encoding="utf-8")) \
            if base_path.is_file() else None
        if base_map is None:
            raise InputError(f"sweep `base` file {str(base_path)!r} does not exist")
    elif isinstance(base, dict):
        base_map = base
    else:
        raise ConfigError(f"sweep key `base` must be a path or a table (got {fmt_value(base)})")
    sets = data.get("set", {})
    if not isinstance(sets, dict):
        raise ConfigError(f"sweep key `set` must be a table (got {fmt_value(sets)})")
    base_cfg = load_config(apply_overrides(base_map, sets))
    seeds = data.get("seeds", 1)
    if isinstance(seeds, bool) or not isinstance(seeds, int) or seeds < 1:
        raise ConfigError(f"sweep key `seeds` must be a positive integer (got {fmt_value(seeds)})")
    engines = data.get("engines", ["agents", "continuum"])
    if (not isinstance(engines, list) or not engines
            or any(e not in ("agents", "continuum") for e in engines)
            or len(set(engines)) != len(engines)):
        raise ConfigError('sweep key `engines` must be a non-empty list drawn from "agents", '
                          f'"continuum" (got {fmt_value(engines)})')
    axes_raw = data.get("axes", {})
    if not isinstance(axes_raw, dict) or not axes_raw:
        raise ConfigError("sweep table `axes` must name at least one config key")
    axes = {}
    for key, spec in axes_raw.items():
        apply_overrides({}, {key: 0})  # checks the key exists in the schema (hint on typo)
        if key == "run.seed":
            raise ConfigError("sweep axis `run.seed` is not allowed; use `seeds`")
        axes[key] = _axis_values(key, spec)
    res = data.get("resources", {})
    if not isinstance(res, dict):
        raise ConfigError(f"sweep key `resources` must be a table (got {fmt_value(res)})")
    for key in res:
        if key not in _RESOURCE_KEYS:
            raise unknown_key_error("resources", key, _RESOURCE_KEYS)
    threads = res.get("threads", 1)
    retries = res.get("retries", 2)
    for name, v in (("threads", threads), ("retries", retries)):
        if isinstance(v, bool) or not isinstance(v, int) or v < (1 if name == "threads" else 0):
            raise ConfigError(f"sweep key `resources.{name}` must be an integer >= "
                              f"{1 if name == 'threads' else 0} (got {fmt_value(v)})")
    sweep = Sweep(path, base_cfg, axes, seeds, tuple(engines), threads, retries)
    sweep.tasks()  # validate every point now, before any work starts
    return sweep
