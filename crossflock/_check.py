"""Statistical regression gate (``crossflock check``).

An ensemble of independent seeds is run and each gated observable's ensemble is compared
with the reference ensemble by Welch's unequal-variance t-test (observables defined only
in some members, such as the speed of a band, by Fisher's exact test on how often they
are defined). The family-wise false-alarm rate ``check.false_alarm`` (default 1e-3) is
split over the K observables tested (Bonferroni), so a correct model fails a check less
often than ``false_alarm`` when the per-seed observables are close to normal (the
t-test's assumption; means over long stationary runs are, by the central limit theorem).

The reference ensemble uses seed indices 0..n-1 (``crossflock._sweep.seed_value``); a
check uses the next n indices, so it always tests *new* seeds against the reference while
staying deterministic from run to run.

References
----------
.. [1] B. L. Welch, Biometrika 34, 28 (1947): the unequal-variance t-test.
.. [2] R. A. Fisher, J. R. Stat. Soc. 85, 87 (1922): the exact test of a 2 x 2 table.
"""

from __future__ import annotations

import math
import sys
from dataclasses import dataclass

import numpy as np
import xarray as xr
from scipy import stats

from ._build import annotate, global_attrs
from ._config import Config, load_config, physics_mapping
from ._errors import InputError
from ._sweep import seed_value
from ._version import __version__

__all__ = ["GateRow", "gate", "format_table", "run_ensemble", "reference_dataset",
           "config_differences", "version_compatible", "GATED_SUFFIXES_EXCLUDED"]

# uncertainty estimates and bookkeeping are not physics: not gated
GATED_SUFFIXES_EXCLUDED = ("_sem", "_err", "_tau", "n_effective", "_samples", "_z",
                           "_tol", "_code", "_std")


@dataclass
class GateRow:
    """One observable's comparison."""

    name: str
    ref_mean: float
    ref_sd: float
    now_mean: float
    now_sd: float
    z: float
    p: float
    threshold: float
    passed: bool
    note: str = ""


def _welch(a: np.ndarray, b: np.ndarray) -> tuple[float, float]:
    """(t, two-sided p) of Welch's test; exact zero variance handled explicitly."""
    na, nb = len(a), len(b)
    va, vb = a.var(ddof=1), b.var(ddof=1)
    diff = b.mean() - a.mean()
    se2 = va / na + vb / nb
    if se2 == 0.0:
        return (0.0, 1.0) if diff == 0.0 else (math.copysign(math.inf, diff), 0.0)
    t = diff / math.sqrt(se2)
    df = se2**2 / ((va / na) ** 2 / (na - 1) + (vb / nb) ** 2 / (nb - 1))
    return float(t), float(2.0 * stats.t.sf(abs(t), df))


def gated(name: str) -> bool:
    """Whether an observable name is gated (not an uncertainty or bookkeeping)."""
    return not (name.startswith("mismatch_") or name == "verdict_code"
                or name.endswith(GATED_SUFFIXES_EXCLUDED))


def gate(reference: dict, current: dict, false_alarm: float) -> list[GateRow]:
    """Compare two ensembles observable by observable.

    Parameters
    ----------
    reference, current : dict of str -> (n,) ndarray
    false_alarm : float
        Family-wise false-alarm rate, split evenly over the observables tested.
    """
    names = [n for n in reference if n in current and gated(n)]
    rows, tested = [], []
    for name in names:
        a = np.asarray(reference[name], float)
        b = np.asarray(current[name], float)
        fa, fb = np.isfinite(a), np.isfinite(b)
        if not fa.any() and not fb.any():
            continue  # undefined in both (e.g. no bands): nothing to compare
        if fa.all() and fb.all():
            tested.append((name, "welch", a, b))
        elif fa.sum() >= 2 and fb.sum() >= 2 and fa.mean() == fb.mean():
            tested.append((name, "welch", a[fa], b[fb]))
        else:
            # conditional observables (e.g. band speed, defined only when a band forms):
            # whether they are defined is itself tested, with Fisher's exact test
            tested.append((name, "fisher", fa, fb))
    k = max(len(tested), 1)
    threshold = false_alarm / k
    for name, kind, a, b in tested:
        if kind == "welch":
            t, p = _welch(a, b)
            rows.append(GateRow(name, float(a.mean()), float(a.std(ddof=1)), float(b.mean()),
                                float(b.std(ddof=1)), t, p, threshold, p >= threshold))
        else:
            table = [[int(a.sum()), int((~a).sum())], [int(b.sum()), int((~b).sum())]]
            p = float(stats.fisher_exact(table).pvalue)
            rows.append(GateRow(name, float(a.mean()), math.nan, float(b.mean()), math.nan,
                                math.nan, p, threshold, p >= threshold,
                                "fraction of members where defined"))
    return rows


def format_table(rows: list[GateRow]) -> str:
    """Plain-text table: observable, reference, now, difference in s.e., p, result."""
    head = f"{'observable':<34} {'reference':>22} {'now':>22} {'diff/se':>9} {'p':>9}  result"
    lines = [head, "-" * len(head)]
    for r in rows:
        ref = f"{r.ref_mean:.5g} ± {r.ref_sd:.2g}"
        now = f"{r.now_mean:.5g} ± {r.now_sd:.2g}"
        res = "pass" if r.passed else "FAIL" + (f" ({r.note})" if r.note else "")
        lines.append(f"{r.name:<34} {ref:>22} {now:>22} {r.z:>9.3g} {r.p:>9.2g}  {res}")
    if rows:
        lines.append(f"(per-observable threshold p < {rows[0].threshold:.2g} fails; "
                     f"{len(rows)} observables; ± is the ensemble s.d.)")
    return "\n".join(lines)


def run_ensemble(cfg: Config, first_index: int, n: int, engines, progress=None,
                 log=None) -> tuple[dict, list[int]]:
    """Run ``n`` seeds starting at seed index ``first_index``; returns values and seeds."""
    from ._pipeline import evaluate

    seeds = [seed_value(cfg.run.seed, first_index + i) for i in range(n)]
    values: dict[str, list] = {}
    show = progress or (progress is None and sys.stderr.isatty())
    for i, seed in enumerate(seeds):
        if show and log:
            log(f"ensemble member {i + 1}/{n} (seed {seed})")
        member, _, _ = evaluate(load_config(cfg, overrides={"run.seed": seed}), engines)
        for key in set(values) | set(member):
            values.setdefault(key, [math.nan] * i).append(member.get(key, math.nan))
    return {k: np.asarray(v, float) for k, v in values.items()}, seeds


def reference_dataset(cfg: Config, values: dict, seeds: list[int], engines) -> xr.Dataset:
    """The REF.nc Dataset: every observable's ensemble over ``member``."""
    data = {k: ("member", v) for k, v in sorted(values.items())}
    ds = xr.Dataset(data, coords={"member": np.arange(len(seeds)),
                                  "seed": ("member", np.asarray(seeds, dtype=np.int64))})
    ds["member"].attrs.update(long_name="ensemble member", units="1")
    ds["seed"].attrs.update(long_name="run.seed of the member", units="1")
    ds.attrs = global_attrs(cfg, "reference", "crossflock regression reference",
                            engines=",".join(engines), ensemble=len(seeds))
    return annotate(ds)


def _flatten(mapping, prefix=""):
    out = {}
    for k, v in mapping.items():
        key = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict):
            out.update(_flatten(v, key))
        else:
            out[key] = v
    return out


def config_differences(a: Config, b: Config) -> list[str]:
    """Dotted physics keys whose values differ (``run.seed`` excluded)."""
    fa, fb = _flatten(physics_mapping(a)), _flatten(physics_mapping(b))
    keys = sorted(set(fa) | set(fb))
    return [k for k in keys if k != "run.seed" and fa.get(k) != fb.get(k)]


def version_compatible(version: str) -> bool:
    """Same major.minor version (0.x: the minor version carries breaking changes)."""
    return str(version).split(".")[:2] == __version__.split(".")[:2]


def check_reference_usable(ref: xr.Dataset, cfg: Config, ref_cfg: Config, allow: bool,
                           path) -> list[str]:
    """Refuse a reference from other physics or an incompatible version unless allowed."""
    diffs = config_differences(ref_cfg, cfg)
    problems = []
    if diffs:
        problems.append("physics keys differ: " + ", ".join(diffs))
    version = ref.attrs.get("crossflock_version", "?")
    if not version_compatible(version):
        problems.append(f"made by crossflock {version}, this is {__version__}")
    if problems and not allow:
        raise InputError(f"reference {str(path)!r} does not match: " + "; ".join(problems)
                         + " (use --allow-config-change to compare anyway)")
    return problems
