"""The estimators' fallbacks: the refitting bootstrap of the standard error (when the sandwich is
unavailable, or asked for), and the alias ``intermediate=`` for ``survival=``.

Bootstrap resamples that cannot be estimated are counted by reason, and beyond
``MAX_FAILURE_SHARE`` the standard error is refused.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from sklearn.base import clone

from .._warnings import warn_at_caller
from ..inference._failures import MAX_FAILURE_SHARE, describe_failures
from ..inference._resampling import resample_rows, seed_models, spawn_seeds

__all__ = ["bootstrap_std_errors"]


def bootstrap_std_errors(estimator, data):
    """Resample rows within arms (clusters, if given), refit every model, keep the replicates.

    Sets ``bootstrap_replicates_``, ``n_bootstrap_failed_`` and ``std_error_`` (NaN, with a
    warning that counts the failures, when more than ``MAX_FAILURE_SHARE`` fail).
    """
    seeds = spawn_seeds(estimator.random_state, estimator.n_bootstrap)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        results = Parallel(n_jobs=estimator.n_jobs)(
            delayed(_one_replicate)(estimator, data, seed) for seed in seeds
        )
    table = pd.DataFrame(
        [values for values, _ in results if values is not None],
        columns=["effect", "mean_treated", "mean_control"],
    )
    failures = [reason for _, reason in results if reason is not None]
    estimator.bootstrap_replicates_ = table
    estimator.n_bootstrap_failed_ = len(failures)
    if len(table) < 2:
        raise RuntimeError(
            f"Fewer than two of the `n_bootstrap`={estimator.n_bootstrap} resamples could be "
            "fitted (resamples lost the survivors or deaths of an arm, or the fitted "
            "probabilities reached 0 or 1). Use the default models (sandwich standard "
            "errors), set n_bootstrap=0, or use more data."
        )
    estimator.std_error_ = float(table["effect"].std(ddof=1))
    if failures:
        _report_failures(estimator, failures)


def _report_failures(estimator, failures):
    """Count failed resamples; beyond the stated share, refuse the standard error."""
    counted = describe_failures(failures, estimator.n_bootstrap)
    if len(failures) / estimator.n_bootstrap > MAX_FAILURE_SHARE:
        # The remaining replicates describe only resamples that kept deaths and survivors
        # in every arm: their spread is not the estimate's.
        estimator.std_error_ = float("nan")
        warn_at_caller(
            f"{counted}. With more than {MAX_FAILURE_SHARE:.0%} failing, no bootstrap "
            "standard error or interval is given (std_error_ is NaN). Use the default "
            "models (sandwich standard errors), merge sparse covariate levels, or use more "
            "data.",
            UserWarning)  # fmt: skip
    else:
        warn_at_caller(f"{counted}; they are left out of the replicates.", UserWarning)  # fmt: skip


def _one_replicate(estimator, data, seed):
    rows = resample_rows(data.treatment, seed, data.groups)
    # Learners left at random_state=None get a seed from the replicate, so the bootstrap
    # standard error is reproducible with random learners too.
    estimator = seed_models(clone(estimator), seed)
    try:
        values = estimator._refit_means(data.take(rows))
    except (ValueError, np.linalg.LinAlgError) as error:
        return None, f"{type(error).__name__}: {error}"
    # A resample whose fitted probability hits 0 or 1 where a formula divides gives inf/NaN:
    # count it as a failed fit, as the full-sample fit would refuse it.
    if not np.all(np.isfinite(values)):
        return None, "a fitted probability reached 0 or 1 where the formula divides by it"
    return values, None
