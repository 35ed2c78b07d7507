"""Comparison layer: coarse-graining, observables, mismatch verdicts and reports.

Data flow: particle or field run -> :func:`observe` -> observables ->
:func:`compare` (two of them) -> mismatch -> :func:`verdict_table` / :func:`write_report`.
This package never imports an engine. Rules (transient, error estimates, verdicts) are
documented in the private modules' docstrings.
"""

from ._bands import detect_band
from ._calibrate import CalibrationResult, CalibrationWarning, calibrate
from ._coarse import cell_counts, coarse_grain, deposit, smooth
from ._fluctuations import fit_exponent, gnf_box_sizes, gnf_exponent, number_fluctuations
from ._mismatch import compare, verdict, verdict_table
from ._observe import observe
from ._report import write_report
from ._stats import (
    analysis_window,
    autocorrelation_time,
    binder_cumulant,
    binder_with_error,
    blocked_jackknife,
    blocking,
    blocking_sem,
    mean_sem,
)
from ._structure import (
    correlation_length,
    polarization_correlation,
    structure_factor,
    structure_factor_series,
)

__all__ = [
    "calibrate",
    "CalibrationResult",
    "CalibrationWarning",
    "coarse_grain",
    "observe",
    "compare",
    "verdict",
    "verdict_table",
    "write_report",
    "deposit",
    "cell_counts",
    "smooth",
    "analysis_window",
    "mean_sem",
    "blocking",
    "blocking_sem",
    "autocorrelation_time",
    "blocked_jackknife",
    "binder_cumulant",
    "binder_with_error",
    "structure_factor",
    "structure_factor_series",
    "polarization_correlation",
    "correlation_length",
    "number_fluctuations",
    "gnf_box_sizes",
    "gnf_exponent",
    "fit_exponent",
    "detect_band",
]
