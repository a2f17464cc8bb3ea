"""The estimators' fallbacks: the refitting bootstrap of the standard error (when the sandwich is
unavailable, or asked for), and the alias ``intermediate=`` for ``survival=``."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from sklearn.base import clone

from ..inference._resampling import resample_rows, seed_models, spawn_seeds

__all__ = ["bootstrap_std_errors"]


def bootstrap_std_errors(estimator, data):
    """Resample rows within arms (clusters, if given), refit every model, keep the replicates."""
    seeds = spawn_seeds(estimator.random_state, estimator.n_bootstrap)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        results = Parallel(n_jobs=estimator.n_jobs)(
            delayed(_one_replicate)(estimator, data, seed) for seed in seeds
        )
    table = pd.DataFrame(
        [r for r in results if r is not None],
        columns=["effect", "mean_treated", "mean_control"],
    )
    estimator.bootstrap_replicates_ = table
    estimator.n_bootstrap_failed_ = len(results) - len(table)
    if len(table) < 2:
        raise RuntimeError(
            f"Fewer than two of the `n_bootstrap`={estimator.n_bootstrap} resamples could be "
            "fitted (resamples lost the survivors or deaths of an arm, or the fitted "
            "probabilities reached 0 or 1). Use the default models (sandwich standard "
            "errors), set n_bootstrap=0, or use more data."
        )
    estimator.std_error_ = float(table["effect"].std(ddof=1))


def _one_replicate(estimator, data, seed):
    rows = resample_rows(data.treatment, seed, data.groups)
    # Learners left at random_state=None get a seed from the replicate, so the bootstrap
    # standard error is reproducible with random learners too.
    estimator = seed_models(clone(estimator), seed)
    try:
        values = estimator._refit_means(data.take(rows))
    except (ValueError, np.linalg.LinAlgError):
        return None
    # A resample whose fitted probability hits 0 or 1 where a formula divides gives inf/NaN:
    # count it as a failed fit, as the full-sample fit would refuse it.
    return values if np.all(np.isfinite(values)) else None
