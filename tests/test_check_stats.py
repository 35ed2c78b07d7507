"""The regression gate's statistics on synthetic ensembles with known answers."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from crossflock import load_config
from crossflock._check import config_differences, format_table, gate, gated
from tests.conftest import small_mapping


def _ens(rng, n, means):
    return {f"obs{i}": rng.normal(m, 1.0 + 0.5 * i, n) for i, m in enumerate(means)}


def test_false_alarm_rate_matches_stated_rate_under_the_null():
    # Under the null (same distribution, normal members) Welch's test is close to exact
    # (Welch 1947), so the Bonferroni family-wise rate is at most the stated alpha and,
    # for independent observables, close to 1 - (1 - alpha/K)^K.
    rng = np.random.default_rng(11)
    alpha, k, reps = 0.05, 4, 4000
    fails = 0
    for _ in range(reps):
        rows = gate(_ens(rng, 6, [0.0] * k), _ens(rng, 6, [0.0] * k), alpha)
        fails += not all(r.passed for r in rows)
    expected = 1 - (1 - alpha / k) ** k
    # binomial 4-sigma band around the expected rate (scipy.stats.binom as reference)
    lo, hi = stats.binom.ppf([3.2e-5, 1 - 3.2e-5], reps, expected) / reps
    assert lo <= fails / reps <= hi, (fails / reps, expected)


def test_a_resolvable_shift_fails_and_is_named():
    rng = np.random.default_rng(5)
    ref = _ens(rng, 8, [0.0, 0.0, 0.0])
    now = _ens(rng, 8, [0.0, 6.0, 0.0])  # obs1 shifted by 4 of its s.d. (1.5)
    rows = gate(ref, now, 1e-3)
    failed = [r.name for r in rows if not r.passed]
    assert failed == ["obs1"]
    assert "FAIL" in format_table(rows) and "obs1" in format_table(rows)


def test_deterministic_observable_and_undefined_values():
    ref = {"a": np.ones(4), "b": np.full(4, np.nan), "c": np.full(4, np.nan),
           "a_sem": np.ones(4)}
    now = {"a": np.ones(4), "b": np.full(4, np.nan), "c": np.arange(4.0),
           "a_sem": np.full(4, 7.0)}
    rows = {r.name: r for r in gate(ref, now, 1e-3)}
    assert rows["a"].passed and rows["a"].p == 1.0
    assert "b" not in rows  # undefined in both
    # defined in none of the reference and all of the current members: Fisher's exact
    # test of the 2 x 2 table [[0, 4], [4, 0]] gives p = 2/70 (scipy.stats.fisher_exact)
    assert rows["c"].p == pytest.approx(2 / 70) and "where defined" in rows["c"].note
    # at a family-wise 0.1 over the 2 observables tested the threshold is 0.05 > 2/70
    assert not {r.name: r for r in gate(ref, now, 0.1)}["c"].passed
    # one member of four with a band is no evidence of a change
    one = {"b": np.array([1.0, np.nan, np.nan, np.nan])}
    none = {"b": np.full(4, np.nan)}
    assert gate(one, none, 1e-3)[0].passed
    assert "a_sem" not in rows and not gated("a_sem") and gated("agents_order_mean")
    shifted = {r.name: r for r in gate({"a": np.ones(4)}, {"a": np.full(4, 2.0)}, 1e-3)}
    assert not shifted["a"].passed


def test_config_differences_name_the_keys():
    a = load_config(small_mapping())
    b = load_config(small_mapping(), overrides={"model.noise": 0.3, "run.seed": 99,
                                                "continuum.grid": [64, 64]})
    assert config_differences(a, b) == ["continuum.grid", "model.noise"]
    assert config_differences(a, a) == []


@pytest.mark.parametrize("n", [3, 10])
def test_welch_p_value_matches_scipy(n):
    # reference library: scipy.stats.ttest_ind with equal_var=False is Welch's test
    rng = np.random.default_rng(n)
    a, b = rng.normal(0, 1, n), rng.normal(0.5, 2, n + 2)
    row = gate({"x": a}, {"x": b}, 0.5)[0]
    ref = stats.ttest_ind(b, a, equal_var=False)
    assert row.z == pytest.approx(ref.statistic) and row.p == pytest.approx(ref.pvalue)
