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
