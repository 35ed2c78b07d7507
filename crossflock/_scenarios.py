"""The scenario files shipped in ``configs/`` (installed as ``crossflock.configs``)."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from ._errors import InputError

__all__ = ["scenario_names", "scenario_path"]


def _root():
    return resources.files("crossflock.configs")


def scenario_names() -> list[str]:
    """Names of the shipped scenarios (file stems)."""
    return sorted(p.name[:-5] for p in _root().iterdir() if p.name.endswith(".toml"))


def scenario_path(name: str) -> Path:
    """Path of the shipped scenario ``name`` (e.g. "default")."""
    path = _root() / f"{name}.toml"
    if not path.is_file():
        raise InputError(f"no shipped scenario {name!r}; have: {', '.join(scenario_names())}")
    return Path(str(path))
