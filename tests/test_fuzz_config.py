"""Property-based fuzzing of `crossflock validate`: valid config or one-line exit 2."""

from __future__ import annotations

import contextlib
import io
import math
import tempfile
import tomllib
from pathlib import Path

import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from crossflock import Config, load_config
from crossflock._cli import main
from crossflock._schema import describe

KEYS = [k for k, _, _ in describe(Config)]

scalars = st.one_of(
    st.booleans(),
    st.integers(min_value=-(10**12), max_value=10**12),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, 1, -1, 0.5, 1e308, -1e-308, 2**63 - 1]),
    st.text(max_size=12),
    st.sampled_from(["periodic", "channel", "angular", "vectorial", "gaussian", "kinetic",
                     "ordered", "disordered", "spectral", "auto", "é∂ƒ", ""]),
)
values = st.one_of(
    scalars,
    st.lists(scalars, max_size=4),
    st.dictionaries(st.text(max_size=8), scalars, max_size=3),
    st.just([{"center": [1.0, 1.0], "radius": 0.5}]),
    st.just({}),
)


def _set(mapping, dotted, value):
    node = mapping
    parts = dotted.split(".")
    for p in parts[:-1]:
        nxt = node.get(p)
        if not isinstance(nxt, dict):
            nxt = {}
            node[p] = nxt
        node = nxt
    node[parts[-1]] = value


@st.composite
def mutated_configs(draw):
    mapping = {}
    for _ in range(draw(st.integers(0, 4))):
        key = draw(st.one_of(st.sampled_from(KEYS),
                             st.text(min_size=1, max_size=10).map(lambda s: "model." + s),
                             st.text(min_size=1, max_size=10)))
        if any(not part for part in key.split(".")):
            continue
        _set(mapping, key, draw(values))
    if draw(st.booleans()):
        mapping[draw(st.sampled_from(["domain", "model", "run", "continuum"]))] = {}
    return mapping


def _run(path):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["validate", str(path)])
    return code, out.getvalue(), err.getvalue()


def _check_outcome(path, code, out, err):
    if code == 0:
        resolved = load_config(tomllib.loads(out))  # the printed config is valid
        assert resolved == load_config(path)
        assert all(ln.startswith("crossflock: warning:") for ln in err.splitlines())
    else:
        assert code == 2, (code, err)
        assert out == ""
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("crossflock: error: "), err


@settings(max_examples=150, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(mutated_configs())
def test_mutated_configs_are_valid_or_exit_2(mapping):
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "c.toml"
        try:
            path.write_text(tomli_w.dumps(mapping), encoding="utf-8")
        except (TypeError, ValueError):
            return  # not representable in TOML (e.g. surrogate characters)
        before = set(Path(d).iterdir())
        code, out, err = _run(path)
        _check_outcome(path, code, out, err)
        assert set(Path(d).iterdir()) == before


@settings(max_examples=100, deadline=None)
@given(st.text(max_size=80))
def test_random_text_is_rejected_in_one_line(text):
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "c.toml"
        try:
            path.write_text(text, encoding="utf-8")
        except UnicodeEncodeError:
            return
        code, out, err = _run(path)
        _check_outcome(path, code, out, err)


def test_nan_and_huge_values_are_refused():
    with tempfile.TemporaryDirectory() as d:
        for value in (math.nan, math.inf, 1e308):
            path = Path(d) / "c.toml"
            path.write_text(tomli_w.dumps({"model": {"density": value}}))
            code, _, err = _run(path)
            assert code == 2 and "`model.density`" in err, err
