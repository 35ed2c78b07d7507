"""compare(), verdict rule, verdict table and the HTML report."""

import base64
import html.parser
import re

import numpy as np
import pytest
from test_compare_synth import gaussian_field_run, ideal_gas_run, small_config

import crossflock as cf
from crossflock._build import particle_dataset
from crossflock._config import Tolerances
from crossflock.compare import compare, observe, verdict, verdict_table, write_report


@pytest.fixture(scope="module")
def cfg():
    return small_config()


@pytest.fixture(scope="module")
def ordered(cfg):
    return gaussian_field_run(cfg, np.random.default_rng(40), polarization=0.8,
                              n_samples=101)


@pytest.fixture(scope="module")
def ordered_obs(ordered):
    return observe(ordered)


@pytest.fixture(scope="module")
def disordered_obs(cfg):
    return observe(gaussian_field_run(cfg, np.random.default_rng(41), polarization=0.0,
                                      n_samples=101))


def test_verdict_rule():
    assert verdict(0.0, 0.01, 0.05, 3.0) == "holds"
    assert verdict(0.02, 0.01, 0.05, 3.0) == "holds"       # 0.02 + 0.03 <= 0.05
    assert verdict(0.03, 0.01, 0.05, 3.0) == "not resolved"
    assert verdict(0.09, 0.01, 0.05, 3.0) == "fails"       # 0.09 - 0.03 > 0.05
    assert verdict(-0.09, 0.01, 0.05, 3.0) == "fails"
    assert verdict(0.0, np.nan, 0.05, 3.0) == "not resolved"
    assert verdict(np.nan, 0.01, 0.05, 3.0) == "not resolved"


def test_run_with_itself_holds(ordered_obs):
    mm = compare(ordered_obs, ordered_obs)
    assert mm.attrs["crossflock_kind"] == "mismatch"
    assert mm.attrs["verdict"] == "holds" and str(mm.verdict_overall.values) == "holds"
    assert mm.attrs["reason"].startswith("holds")
    overall = mm.in_overall.values.astype(bool)
    assert set(mm.verdict.values[overall]) == {"holds"}
    np.testing.assert_array_equal(mm.difference.values[overall], 0.0)
    assert list(mm.observable.values[overall]) == ["order_mean", "binder",
                                                   "structure_factor_long", "gnf_exponent"]


def test_ordered_vs_disordered_fails(ordered_obs, disordered_obs):
    mm = compare(ordered_obs, disordered_obs)
    assert mm.attrs["verdict"] == "fails"
    v = dict(zip(mm.observable.values, mm.verdict.values, strict=True))
    assert v["order_mean"] == "fails" and v["binder"] == "fails"
    assert "order_mean" in mm.attrs["reason"] and "binder" in mm.attrs["reason"]
    z = float(mm.z.sel(observable="order_mean"))
    assert z > 100


def test_too_short_runs_are_not_resolved(cfg):
    # 12 samples: 10 after the transient, fewer than the 20 an error estimate needs.
    rng = np.random.default_rng(42)
    a = observe(gaussian_field_run(cfg, rng, polarization=0.8, n_samples=12))
    b = observe(gaussian_field_run(cfg, rng, polarization=0.8, n_samples=12))
    mm = compare(a, b)
    assert mm.attrs["verdict"] == "not resolved"
    assert "run too short" in mm.attrs["reason"]
    assert set(mm.verdict.values) == {"not resolved"}


def test_missing_observables_are_not_resolved(cfg, ordered, ordered_obs):
    ds = particle_dataset(small_config(**{"agents.snapshots": False}),
                          ordered["time"].values, ordered["order"].values)
    mm = compare(observe(ds), ordered_obs)
    assert mm.attrs["verdict"] == "not resolved"
    assert "structure_factor_long (not available" in mm.attrs["reason"]
    assert str(mm.verdict.sel(observable="order_mean").values) == "holds"


def test_tolerances_override_and_errors(ordered_obs, ordered):
    tight = Tolerances(order=1e-9, binder=1e-9, structure_factor=1e-9, gnf_exponent=1e-9,
                       significance=3.0)
    mm = compare(ordered_obs, ordered_obs, tolerances=tight)
    assert mm.attrs["verdict"] == "not resolved"  # zero difference, error bars > 1e-9
    assert float(mm.tolerance.sel(observable="binder")) == 1e-9
    with pytest.raises(cf.InputError, match="observe"):
        compare(ordered, ordered_obs)
    with pytest.raises(cf.InputError, match="Tolerances"):
        compare(ordered_obs, ordered_obs, tolerances={"order": 0.1})


def test_sk_bands_use_log_ratio(cfg, ordered_obs):
    # Doubling the density noise quadruples S(k): ln ratio = ln 4 in every band.
    b = observe(gaussian_field_run(cfg, np.random.default_rng(40), polarization=0.8,
                                   n_samples=101, noise=0.1))
    mm = compare(b, ordered_obs)
    for band in ("long", "mid", "short"):
        row = mm.sel(observable=f"structure_factor_{band}")
        assert abs(float(row.difference) - np.log(4)) < 4 * float(row.difference_err)
        assert float(row.k_low) < float(row.k_high)
    assert str(mm.verdict.sel(observable="structure_factor_long").values) == "fails"


def test_verdict_table_and_netcdf(tmp_path, ordered_obs, disordered_obs):
    mm = compare(ordered_obs, disordered_obs)
    text = verdict_table(mm)
    for name in mm.observable.values:
        assert str(name) in text
    assert "overall: fails" in text and "(info)" in text
    back = cf.read_dataset(cf.write_dataset(mm, tmp_path / "mm.nc"), kind="mismatch")
    assert list(back.verdict.values) == list(mm.verdict.values)
    assert back.attrs["verdict"] == "fails"


class _Checker(html.parser.HTMLParser):
    VOID = {"meta", "img", "br", "hr", "link", "input"}

    def __init__(self):
        super().__init__()
        self.stack = []

    def handle_starttag(self, tag, attrs):
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"unbalanced </{tag}>"
        self.stack.pop()


def test_report_is_self_contained_html(tmp_path, cfg, ordered, ordered_obs, disordered_obs):
    gas = ideal_gas_run(cfg, 500, np.random.default_rng(43), n_samples=20)
    runs = {"agents": gas, "continuum": ordered}
    obs = {"agents": observe(gas), "continuum": ordered_obs}
    mm = compare(obs["agents"], obs["continuum"])
    path = write_report(tmp_path / "report.html", runs=runs, observables=obs, mismatch=mm,
                        extra_sections={"Notes": "a < b & c"})
    text = path.read_text()
    assert text.startswith("<!DOCTYPE html>")
    checker = _Checker()
    checker.feed(text)
    assert checker.stack == []
    images = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', text)
    assert len(images) == 4  # snapshots, order, S(k), number fluctuations
    for img in images:
        assert base64.b64decode(img)[:8] == b"\x89PNG\r\n\x1a\n"
    assert "a &lt; b &amp; c" in text
    assert "[domain]" in text  # the resolved config
    assert "http" not in text.replace("http-equiv", "")  # nothing fetched from outside
    assert not list(tmp_path.glob(".report.html.*"))  # atomic write left no temp file
