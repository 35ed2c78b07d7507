"""Strict tooling: ruff over the whole repository, and packaging of the subpackages."""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

from tests.conftest import REPO


def test_ruff_clean():
    # ruff is a test dependency (pyproject [test] extra): prefer the one beside python
    local = Path(sys.executable).parent / "ruff"
    ruff = str(local) if local.exists() else shutil.which("ruff")
    assert ruff, "ruff is missing: pip install -e '.[test]'"
    res = subprocess.run([ruff, "check", str(REPO)], capture_output=True, text=True,
                         check=False)
    assert res.returncode == 0, res.stdout + res.stderr


def test_wheel_contains_all_subpackages(tmp_path):
    res = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
         "-w", str(tmp_path), str(REPO)],
        capture_output=True, text=True, check=False)
    assert res.returncode == 0, res.stderr
    wheel = next(tmp_path.glob("crossflock-*.whl"))
    names = set(zipfile.ZipFile(wheel).namelist())
    for sub in ("agents", "continuum", "compare", "configs"):
        assert f"crossflock/{sub}/__init__.py" in names, sub
    assert "crossflock/configs/default.toml" in names


def test_subpackages_import_under_their_names():
    import crossflock.agents
    import crossflock.compare
    import crossflock.continuum

    for mod in (crossflock.agents, crossflock.compare, crossflock.continuum):
        assert mod.__name__.startswith("crossflock.")
