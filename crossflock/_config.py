"""The one config schema shared by both engines and the comparison layer.

A config is a tree of frozen, keyword-only dataclasses built from TOML by
:func:`load_config`. Sections: ``domain``, ``model``, ``run``, ``agents``,
``continuum``, ``compare``, ``check``. Each field documents its default and constraint;
``crossflock validate --explain`` lists them all.
"""

from __future__ import annotations

import copy
import dataclasses
import math
import os
import tomllib
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import tomli_w

from ._errors import ConfigError, InputError
from ._schema import build, field, fmt_value, to_mapping, unknown_key_error

__all__ = [
    "Config",
    "DomainConfig",
    "Obstacle",
    "ModelConfig",
    "RunConfig",
    "AgentsConfig",
    "ContinuumConfig",
    "Coefficients",
    "CompareConfig",
    "Tolerances",
    "CheckConfig",
    "load_config",
    "config_to_toml",
    "config_from_toml",
    "parse_override",
    "apply_overrides",
    "physics_mapping",
    "ConsistencyWarning",
]


class ConsistencyWarning(UserWarning):
    """A config is legal but physically questionable (printed by ``validate``)."""


def _positive(v):
    return v > 0


def _nonneg(v):
    return v >= 0


def _all_positive(v):
    return all(x > 0 for x in v)


def _one_of(*choices):
    def check(v):
        return v in choices

    return check, "must be one of " + ", ".join(f'"{c}"' for c in choices)


# --------------------------------------------------------------------------- domain
@dataclass(frozen=True, kw_only=True)
class Obstacle:
    """A disc obstacle."""

    center: tuple[float, float] = field((0.0, 0.0), ("floats", 2), "disc centre [x, y]")
    radius: float = field(1.0, "float", "disc radius", _positive, "must be positive")


_BOUNDARY = _one_of("periodic", "channel")


@dataclass(frozen=True, kw_only=True)
class DomainConfig:
    """Box, boundary kind and obstacles (lengths in units of the interaction radius)."""

    size: tuple[float, float] = field(
        (64.0, 64.0), ("floats", 2), "box size [Lx, Ly]", _all_positive,
        "must have two positive entries",
    )
    boundary: str = field(
        "periodic", "str",
        'periodic box, or "channel": walls at y = 0 and y = Ly, periodic in x',
        *_BOUNDARY,
    )
    obstacles: tuple[Obstacle, ...] = field(
        (), ("tables", Obstacle), "disc obstacles [{center = [x, y], radius = r}, ...]"
    )

    def _validate(self, key):
        lx, ly = self.size
        for i, ob in enumerate(self.obstacles):
            cx, cy = ob.center
            k = f"{key}.obstacles[{i}]"
            if not (0.0 <= cx <= lx and 0.0 <= cy <= ly):
                raise ConfigError(
                    f"`{k}.center` must lie inside the domain [0, {lx:g}] x [0, {ly:g}] "
                    f"(got {fmt_value(list(ob.center))})"
                )
            if self.boundary == "channel" and (cy - ob.radius <= 0 or cy + ob.radius >= ly):
                raise ConfigError(
                    f"`{k}` must not touch the channel walls: need radius < "
                    f"min(y, Ly - y) = {min(cy, ly - cy):g} (got radius {ob.radius:g})"
                )
            if 2 * ob.radius >= min(lx, ly):
                raise ConfigError(
                    f"`{k}.radius` must be smaller than half the smaller box side "
                    f"{min(lx, ly) / 2:g} (got {ob.radius:g})"
                )
        for i, a in enumerate(self.obstacles):
            for j in range(i + 1, len(self.obstacles)):
                b = self.obstacles[j]
                if _disc_distance(a, b, self.size, self.boundary) < a.radius + b.radius:
                    raise ConfigError(
                        f"`{key}.obstacles[{i}]` and `{key}.obstacles[{j}]` overlap "
                        "(obstacles must be disjoint discs)"
                    )


def _disc_distance(a, b, size, boundary):
    dx = a.center[0] - b.center[0]
    dy = a.center[1] - b.center[1]
    dx -= size[0] * round(dx / size[0])
    if boundary == "periodic":
        dy -= size[1] * round(dy / size[1])
    return math.hypot(dx, dy)


# --------------------------------------------------------------------------- model
_NOISE_KIND = _one_of("angular", "vectorial", "gaussian")


@dataclass(frozen=True, kw_only=True)
class ModelConfig:
    """Physics shared by both descriptions."""

    density: float = field(2.0, "float", "mean number density rho0", _positive,
                           "must be positive")
    speed: float = field(0.5, "float", "self-propulsion speed v0", _positive,
                         "must be positive")
    radius: float = field(1.0, "float", "interaction (alignment) radius R", _positive,
                          "must be positive")
    noise: float = field(0.2, "float", "noise amplitude eta", lambda v: 0 <= v <= 1,
                         "must be in [0, 1]")
    noise_kind: str = field(
        "angular", "str",
        '"angular": xi uniform in [-pi eta, pi eta]; "vectorial": Gregoire-Chate; '
        '"gaussian": wrapped Gaussian xi of s.d. pi eta',
        *_NOISE_KIND,
    )


# --------------------------------------------------------------------------- run
_INITIAL = _one_of("disordered", "ordered")


@dataclass(frozen=True, kw_only=True)
class RunConfig:
    """Duration, sampling, seed and initial state (shared by both engines)."""

    duration: float = field(500.0, "float", "simulated time", _positive, "must be positive")
    sample_every: float = field(5.0, "float", "output interval", _positive,
                                "must be positive")
    seed: int = field(1, "int", "random seed (non-negative integer)", _nonneg,
                      "must be a non-negative integer")
    initial: str = field("disordered", "str",
                         '"disordered" or "ordered" (polarized along +x)', *_INITIAL)
    initial_polarization: float = field(
        1.0, "float", '|P| of the "ordered" start', lambda v: 0 <= v <= 1,
        "must be in [0, 1]",
    )

    def _validate(self, key):
        if self.sample_every > self.duration:
            raise ConfigError(
                f"`{key}.sample_every` must not exceed `{key}.duration` = {self.duration:g} "
                f"(got {self.sample_every:g})"
            )


# --------------------------------------------------------------------------- agents
_UPDATE = _one_of("align_then_move", "move_then_align")


@dataclass(frozen=True, kw_only=True)
class AgentsConfig:
    """Particle engine settings."""

    dt: float = field(1.0, "float", "time step", _positive, "must be positive")
    snapshots: bool = field(False, "bool", "keep x, y, theta at every sample")
    update: str = field(
        "align_then_move", "str",
        '"align_then_move": the new heading is used for the move (Vicsek 1995); '
        '"move_then_align": move with the old heading, then align',
        *_UPDATE,
    )
    order_every: str = field("sample", "str", 'record `order` every "step" or "sample"',
                             *_one_of("step", "sample"))
    checkpoint_every: float = field(
        0.0, "float", "simulated time between checkpoints (0 = none)", _nonneg,
        "must be non-negative",
    )


# --------------------------------------------------------------------------- continuum
@dataclass(frozen=True, kw_only=True)
class Coefficients:
    """Toner-Tu coefficients of GUIDE section 3 (physical units of [model])."""

    alpha: float = field(1.0, "float", "linear growth rate alpha at rho0")
    alpha_rho: float = field(0.0, "float", "density slope of alpha")
    beta: float = field(1.0, "float", "cubic saturation beta", _nonneg, "must be >= 0")
    pressure: tuple[float, ...] = field(
        (0.5,), "floats", "P(rho) = sum_k pressure[k-1] (rho - rho0)^k"
    )
    D_T: float = field(1.0, "float", "transverse (Laplacian) diffusion", _nonneg,
                       "must be >= 0")
    D_B: float = field(0.0, "float", "bulk diffusion grad(div w)", _nonneg, "must be >= 0")
    D_2: float = field(0.0, "float", "anisotropic diffusion (w.grad)^2 w", _nonneg,
                       "must be >= 0")
    lambda1: float = field(0.0, "float", "advection (w.grad) w")
    lambda2: float = field(0.0, "float", "(div w) w")
    lambda3: float = field(0.0, "float", "grad |w|^2")
    D_rho: float = field(0.0, "float", "density diffusion", _nonneg, "must be >= 0")
    noise_strength: float = field(0.0, "float", "additive white noise amplitude",
                                  _nonneg, "must be >= 0")


def _coefficients_kind(key, value):
    if isinstance(value, str):
        if value != "kinetic":
            raise ConfigError(
                f'`{key}` must be "kinetic" or a table of coefficients (got {fmt_value(value)})'
            )
        return value
    if isinstance(value, Coefficients):
        return value
    return build(Coefficients, value, key)


_METHOD = _one_of("auto", "spectral", "finite_difference")


def _auto_or_nonneg(key, value):
    if value == "auto":
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not (
        math.isfinite(value) and value >= 0
    ):
        raise ConfigError(
            f'`{key}` must be "auto" or a non-negative number (got {fmt_value(value)})'
        )
    return float(value)


def _auto_or_bool(key, value):
    if value == "auto" or isinstance(value, bool):
        return value
    raise ConfigError(f'`{key}` must be "auto", true or false (got {fmt_value(value)})')


@dataclass(frozen=True, kw_only=True)
class ContinuumConfig:
    """Continuum (Toner-Tu) engine settings."""

    grid: tuple[int, int] = field((128, 128), ("ints", 2), "grid points [nx, ny]",
                                  lambda v: all(n > 0 for n in v),
                                  "must have two positive entries")
    dt: float = field(0.05, "float", "time step", _positive, "must be positive")
    coefficients: Any = field(
        "kinetic", _coefficients_kind,
        '"kinetic" (Bertin-Droz-Gregoire mapping from [model]) or a coefficient table',
    )
    method: str = field(
        "auto", "str",
        '"spectral" (periodic only), "finite_difference", or "auto" (spectral when '
        "periodic without obstacles)",
        *_METHOD,
    )
    kinetic_lambda: Any = field(
        "auto", _auto_or_nonneg,
        'BDG self-diffusion (tumble) rate lambda in 1/time; "auto" = 1 / agents.dt, '
        "since every particle is kicked by the noise once per step",
    )
    kinetic_noise: Any = field(
        0.0, _auto_or_nonneg,
        'noise_strength with "kinetic" coefficients; "auto" = D_r rho0 / 2, the '
        "rotational diffusion D_r of the particle noise (an estimate)",
    )
    kinetic_D_rho: float = field(
        0.0, "float", 'density diffusion D_rho with "kinetic" coefficients (a numerical '
        "regularisation, not part of the kinetic theory)", _nonneg, "must be >= 0",
    )
    realizability: Any = field(
        "auto", _auto_or_bool,
        "after each step set rho >= 0 (mass-conserving) and |w| <= rho, a numerical "
        'safeguard: true, false, or "auto" (on with "kinetic" coefficients, off with a '
        "table, whose homogeneous state may lie outside |w| <= rho)",
    )
    initial_noise: float = field(
        0.01, "float", "amplitude of the random initial perturbation of rho and w",
        _nonneg, "must be >= 0",
    )
    checkpoint_every: float = field(
        0.0, "float", "simulated time between checkpoints (0 = none)", _nonneg,
        "must be non-negative",
    )


# --------------------------------------------------------------------------- compare
@dataclass(frozen=True, kw_only=True)
class Tolerances:
    """How far apart two descriptions may be and still agree."""

    order: float = field(0.05, "float", "absolute difference of mean polar order",
                         _positive, "must be positive")
    binder: float = field(0.1, "float", "absolute difference of the Binder cumulant",
                          _positive, "must be positive")
    structure_factor: float = field(
        0.5, "float", "|ln S_a/S_b| averaged in each k band", _positive, "must be positive"
    )
    gnf_exponent: float = field(0.1, "float", "difference of number-fluctuation exponents",
                                _positive, "must be positive")
    significance: float = field(
        3.0, "float", "standard errors beyond tolerance that count as a failure",
        _positive, "must be positive",
    )


@dataclass(frozen=True, kw_only=True)
class CompareConfig:
    """Coarse-graining, observables and mismatch settings."""

    transient: float = field(
        0.2, "float", "fraction of the run discarded as transient before averaging",
        lambda v: 0 <= v < 1, "must be in [0, 1)",
    )
    smoothing: float = field(0.0, "float", "Gaussian smoothing length of coarse-graining",
                             _nonneg, "must be >= 0")
    gnf_sizes: int = field(10, "int", "number of sub-box sizes for number fluctuations",
                           lambda v: v >= 3, "must be at least 3")
    tolerance: Tolerances = field(None, Tolerances, "per-observable tolerances")


def _engine_list(key, value):
    if (not isinstance(value, (list, tuple)) or not value
            or any(v not in ("agents", "continuum") for v in value)
            or len(set(value)) != len(value)):
        raise ConfigError(
            f'`{key}` must be a non-empty list drawn from "agents", "continuum" '
            f"(got {fmt_value(value)})"
        )
    return tuple(value)


@dataclass(frozen=True, kw_only=True)
class CheckConfig:
    """Regression gate settings."""

    engines: tuple[str, ...] = field(
        ("agents",), _engine_list, 'engines whose observables are gated ("agents", "continuum")'
    )

    ensemble: int = field(6, "int", "seeds per ensemble", lambda v: v >= 2,
                          "must be at least 2")
    false_alarm: float = field(
        1e-3, "float", "family-wise false-alarm rate of the gate",
        lambda v: 0 < v < 1, "must be in (0, 1)",
    )


# --------------------------------------------------------------------------- top level
@dataclass(frozen=True, kw_only=True)
class Config:
    """A fully resolved crossflock scenario."""

    domain: DomainConfig = field(None, DomainConfig, "geometry")
    model: ModelConfig = field(None, ModelConfig, "shared physics")
    run: RunConfig = field(None, RunConfig, "duration, sampling, seed, initial state")
    agents: AgentsConfig = field(None, AgentsConfig, "particle engine")
    continuum: ContinuumConfig = field(None, ContinuumConfig, "continuum engine")
    compare: CompareConfig = field(None, CompareConfig, "comparison layer")
    check: CheckConfig = field(None, CheckConfig, "regression gate")

    def _validate(self, key):
        _check_consistency(self)

    def replace(self, **sections) -> Config:
        """New config with whole sections or dotted keys replaced (validated)."""
        return load_config(to_mapping(self), overrides=sections)


def _check_consistency(cfg: Config) -> None:
    """Cross-section physical checks; errors for impossible, warnings for doubtful."""
    lx, ly = cfg.domain.size
    nx, ny = cfg.continuum.grid
    dx, dy = lx / nx, ly / ny
    r = cfg.model.radius
    if r > min(lx, ly):
        raise ConfigError(
            f"`model.radius` must not exceed the smaller box side {min(lx, ly):g} "
            f"(got {r:g})"
        )
    if max(dx, dy) > r:
        raise ConfigError(
            f"`continuum.grid` must resolve the interaction radius: spacing "
            f"{max(dx, dy):g} must be <= model.radius = {r:g} (got {list(cfg.continuum.grid)})"
        )
    if max(nx, ny) > 16384:
        raise ConfigError(
            f"`continuum.grid` must have at most 16384 points per side (got {[nx, ny]})"
        )
    from ._geometry import geometry_from_config

    n_particles = cfg.model.density * geometry_from_config(cfg.domain).fluid_area()
    if not 1 <= n_particles <= 2e8:
        raise ConfigError(
            f"`model.density` times the fluid area gives {n_particles:.3g} particles; "
            "need between 1 and 2e8"
        )
    if min(nx, ny) < 8:
        raise ConfigError(
            f"`continuum.grid` must have at least 8 points per side (got {[nx, ny]})"
        )
    for i, ob in enumerate(cfg.domain.obstacles):
        if ob.radius < 2 * max(dx, dy):
            raise ConfigError(
                f"`domain.obstacles[{i}].radius` must span at least 2 grid spacings "
                f"({2 * max(dx, dy):g}) to be resolved (got {ob.radius:g})"
            )
    step = cfg.model.speed * cfg.agents.dt
    if step >= r:
        raise ConfigError(
            f"`agents.dt` too large: speed * dt = {step:g} must be < model.radius = {r:g} "
            "(particles would jump over neighbours and walls)"
        )
    if step > 0.5 * r:
        warnings.warn(
            f"speed * dt = {step:g} exceeds half the interaction radius; neighbour "
            "sampling becomes coarse", ConsistencyWarning, stacklevel=2,
        )
    if cfg.continuum.method == "spectral" and (
        cfg.domain.boundary != "periodic" or cfg.domain.obstacles
    ):
        raise ConfigError(
            '`continuum.method` = "spectral" needs a periodic domain without obstacles '
            f'(got boundary "{cfg.domain.boundary}" with {len(cfg.domain.obstacles)} obstacles)'
        )
    for name, every in (("agents", cfg.agents.checkpoint_every),
                        ("continuum", cfg.continuum.checkpoint_every)):
        if every and every < cfg.run.sample_every:
            raise ConfigError(
                f"`{name}.checkpoint_every` must be 0 or >= run.sample_every = "
                f"{cfg.run.sample_every:g} (got {every:g})"
            )
    from ._runtime import sample_plan
    from ._stability import check_continuum_dt

    sample_plan(cfg.run, cfg.agents.dt, "agents.dt")
    sample_plan(cfg.run, cfg.continuum.dt, "continuum.dt")
    check_continuum_dt(cfg)


# --------------------------------------------------------------------------- loading
def _read_toml(path: Path) -> dict:
    if not path.exists():
        raise InputError(f"config file {str(path)!r} does not exist")
    if path.is_dir():
        raise InputError(f"config file {str(path)!r} is a directory, not a TOML file")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"config file {str(path)!r} cannot be read: {exc}") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"config file {str(path)!r} is not valid TOML: {exc}") from None


def parse_override(text: str) -> tuple[str, Any]:
    """Parse ``section.key=VALUE`` (VALUE in TOML syntax; bare words taken as strings)."""
    if "=" not in text:
        raise ConfigError(f"override {text!r} must look like section.key=VALUE")
    key, raw = text.split("=", 1)
    key = key.strip()
    if not key or any(not part for part in key.split(".")):
        raise ConfigError(f"override {text!r} has an empty key")
    raw = raw.strip()
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        if raw and all(c.isalnum() or c in "_-" for c in raw):
            value = raw  # bare word: a string such as vectorial or channel
        else:
            raise ConfigError(
                f"override `{key}` value {raw!r} is not a TOML value"
            ) from None
    return key, value


def apply_overrides(mapping: dict, overrides) -> dict:
    """Return a deep copy of ``mapping`` with dotted-key overrides applied.

    ``overrides`` is a mapping {dotted key: value} or an iterable of "key=value" strings.
    Keys are checked against the schema so a typo is reported with a hint.
    """
    out = copy.deepcopy(mapping)
    if overrides is None:
        return out
    if isinstance(overrides, Mapping):
        items = list(overrides.items())
    else:
        items = [parse_override(o) for o in overrides]
    for key, value in items:
        parts = key.split(".")
        node = out
        cls = Config
        prefix = ""
        for depth, part in enumerate(parts):
            fields = {f.name: f for f in dataclasses.fields(cls)} if cls else None
            if fields is not None and part not in fields:
                raise unknown_key_error(prefix, part, fields)
            last = depth == len(parts) - 1
            if last:
                node[part] = value
                break
            nxt = node.get(part)
            if not isinstance(nxt, dict):
                nxt = {} if nxt is None or isinstance(nxt, str) else nxt
                if not isinstance(nxt, dict):
                    raise ConfigError(f"override `{key}`: `{prefix or part}` is not a table")
                node[part] = nxt
            node = nxt
            kind = fields[part].metadata["kind"] if fields else None
            if dataclasses.is_dataclass(kind):
                cls = kind
            elif kind is _coefficients_kind:
                cls = Coefficients
            else:
                cls = None
            prefix = f"{prefix}.{part}" if prefix else part
    return out


def load_config(source=None, overrides=None) -> Config:
    """Load, override and validate a config.

    Parameters
    ----------
    source : str, os.PathLike, mapping, Config or None
        A TOML file path, a parsed mapping, an existing Config, or None for all defaults.
    overrides : mapping or iterable of str, optional
        Dotted-key overrides ``{"model.noise": 0.3}`` or ``["model.noise=0.3"]``.

    Returns
    -------
    Config

    Raises
    ------
    ConfigError, InputError
        With a one-line message naming the key or file, the constraint and the value.
    """
    if source is None:
        mapping = {}
    elif isinstance(source, Config):
        mapping = to_mapping(source)
    elif isinstance(source, Mapping):
        mapping = dict(source)
    elif isinstance(source, (str, os.PathLike)):
        mapping = _read_toml(Path(source))
    else:
        raise InputError(f"cannot load a config from {type(source).__name__}")
    mapping = apply_overrides(mapping, overrides)
    with warnings.catch_warnings():
        warnings.simplefilter("default", ConsistencyWarning)
        return build(Config, mapping)


def config_to_toml(cfg: Config) -> str:
    """The fully resolved config as TOML text (round-trips through :func:`config_from_toml`)."""
    return tomli_w.dumps(to_mapping(cfg))


def config_from_toml(text: str, where: str = "embedded config") -> Config:
    """Parse TOML text (for example a run file's ``config`` attribute) into a Config."""
    try:
        mapping = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{where} is not valid TOML: {exc}") from None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConsistencyWarning)
        return build(Config, mapping)


def physics_mapping(cfg: Config) -> dict:
    """The sections that define the physics (used to refuse mismatched references)."""
    m = to_mapping(cfg)
    return {k: m[k] for k in ("domain", "model", "run", "agents", "continuum")}
