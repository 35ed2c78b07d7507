"""Wiring of engines and analysis (the only place besides the sweep runner that does it).

Engines never import the comparison layer and vice versa; these functions take a config,
run what is asked and hand Datasets from one side to the other.
"""

from __future__ import annotations

import importlib

from ._config import Config, load_config
from ._errors import NotBuiltError

__all__ = ["ENGINES", "engine_module", "run_engine", "analysis", "compare_config",
]

ENGINES = {
    "agents": ("crossflock.agents", "the particle engine"),
    "continuum": ("crossflock.continuum", "the continuum engine"),
}


def _require(module_name: str, attr: str, what: str):
    module = importlib.import_module(module_name)
    func = getattr(module, attr, None)
    if func is None:
        raise NotBuiltError(f"{what} is not built yet in this version of crossflock")
    return func


def engine_module(engine: str):
    """The ``simulate`` function of ``engine`` ("agents" or "continuum")."""
    if engine not in ENGINES:
        raise NotBuiltError(f"unknown engine {engine!r}; choose agents or continuum")
    name, what = ENGINES[engine]
    return _require(name, "simulate", what)


def run_engine(cfg: Config, engine: str, **kwargs):
    """Run one engine on ``cfg`` and return its Dataset."""
    return engine_module(engine)(cfg, **kwargs)


def analysis(attr: str):
    """A function of the comparison layer (``observe``, ``compare``, ...)."""
    return _require("crossflock.compare", attr, f"the comparison layer ({attr})")


def compare_config(cfg: Config) -> Config:
    """The config actually run by ``compare``: particle snapshots are needed."""
    if cfg.agents.snapshots:
        return cfg
    return load_config(cfg, overrides={"agents.snapshots": True})


def scalar_values(ds, prefix: str) -> dict:
    """The 0-d numeric variables of ``ds`` as {prefix + name: float}."""
    import numpy as np

    out = {}
    for name, var in ds.data_vars.items():
        if var.ndim == 0 and np.issubdtype(var.dtype, np.number):
            out[prefix + str(name)] = float(var.values)
    return out


VERDICT_CODES = {"holds": 1.0, "not resolved": 0.0, "fails": -1.0}


def evaluate(cfg: Config, engines, *, progress=False) -> tuple[dict, str, str]:
    """Run ``engines`` on ``cfg`` and return their scalar observables and the verdict.

    Returns
    -------
    values : dict
        ``agents_<obs>``, ``continuum_<obs>``, and with both engines ``mismatch_<var>``
        and ``verdict_code`` (1 holds, 0 not resolved, -1 fails).
    verdict, reason : str
        Empty unless both engines ran.
    """
    observe = analysis("observe")
    obs, values = {}, {}
    if "agents" in engines:
        particles = run_engine(compare_config(cfg), "agents", progress=progress)
        obs["agents"] = observe(analysis("coarse_grain")(particles))
    if "continuum" in engines:
        obs["continuum"] = observe(run_engine(cfg, "continuum", progress=progress))
    for name, o in obs.items():
        values.update(scalar_values(o, f"{name}_"))
    verdict = reason = ""
    if len(obs) == 2:
        mismatch = analysis("compare")(obs["agents"], obs["continuum"])
        values.update(scalar_values(mismatch, "mismatch_"))
        verdict = str(mismatch.attrs.get("verdict", ""))
        reason = str(mismatch.attrs.get("reason", ""))
        values["verdict_code"] = VERDICT_CODES.get(verdict, float("nan"))
    return values, verdict, reason
