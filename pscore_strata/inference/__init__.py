"""Inference: standard errors from influence values, intervals, seeds and the bootstrap.

One mechanism serves every estimator: per-unit influence values give the standard error (with
sample weights and clusters) and the multiplier bootstrap; the refitting bootstrap resamples
units (or clusters) and refits, in parallel through joblib.
"""

from ._bootstrap import BootstrapResult, bootstrap
from ._intervals import bca_interval, percentile_interval
from ._resampling import (
    jackknife_blocks,
    multiplier_contributions,
    multiplier_draws,
    resample_rows,
    spawn_seeds,
    stratified_resample,
)
from ._standard_errors import FewClustersWarning, influence_std_error, normal_interval

__all__ = [
    "bootstrap",
    "FewClustersWarning",
    "BootstrapResult",
    "influence_std_error",
    "normal_interval",
    "spawn_seeds",
    "stratified_resample",
    "resample_rows",
    "jackknife_blocks",
    "percentile_interval",
    "bca_interval",
    "multiplier_contributions",
    "multiplier_draws",
]
