"""Inference: standard errors from influence values, intervals, seeds and the bootstrap.

One mechanism serves every estimator: per-unit influence values give the standard error (with
sample weights and clusters) and the multiplier bootstrap; the refitting bootstrap resamples
units (or clusters) and refits, in parallel through joblib.
"""

from .._warnings import warn_at_caller
from . import _resampling
from ._bootstrap import BootstrapResult, bootstrap
from ._intervals import bca_interval, percentile_interval
from ._standard_errors import FewClustersWarning, influence_std_error, normal_interval

__all__ = [
    "bootstrap",
    "FewClustersWarning",
    "BootstrapResult",
    "influence_std_error",
    "normal_interval",
    "percentile_interval",
    "bca_interval",
]

# The resampling machinery the bootstrap runs on: public until this release, internal from now
# on (``pscore_strata.inference._resampling``); importing it from here still works, with a
# DeprecationWarning, for one release.
_INTERNAL = ("spawn_seeds", "stratified_resample", "resample_rows", "jackknife_blocks",
             "multiplier_contributions", "multiplier_draws")  # fmt: skip


def __getattr__(name):
    if name in _INTERNAL:
        warn_at_caller(
            f"pscore_strata.inference.{name} is internal machinery of the bootstrap and will "
            "be removed from pscore_strata.inference in the next release; call "
            "ps.bootstrap(...) instead, or keep a copy of the function.",
            DeprecationWarning,
        )
        return getattr(_resampling, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
