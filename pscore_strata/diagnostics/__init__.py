"""Diagnostics of a fitted SACE analysis: covariate balance, weights, overlap, monotonicity and
the fit of the survival models.

Every table is a function of the per-row nuisance predictions a fitted estimator stored, so no
model is refitted.
"""

from ._arrays import effective_sample_size
from ._fit_check import survival_fit_check
from ._missing import missing_data_balance, missing_data_summary
from ._monotonicity import monotonicity_check
from ._tables import balance_table, diagnostic_warnings, overlap_summary, weight_summary

__all__ = [
    "balance_table",
    "weight_summary",
    "overlap_summary",
    "monotonicity_check",
    "survival_fit_check",
    "diagnostic_warnings",
    "effective_sample_size",
    "missing_data_balance",
    "missing_data_summary",
]
