"""The refitting bootstrap over visits: one resample of units serves every visit.

Drawing the units once per replicate and refitting each visit's models on that same resample keeps
the dependence between visits (the same people are measured at each), so the replicates give the
joint covariance and the simultaneous band, not only each visit's standard error.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from sklearn.base import clone

from ..inference._resampling import resample_rows, spawn_seeds

__all__ = ["joint_replicates"]

_REFIT_ERRORS = (ValueError, np.linalg.LinAlgError)


def _take(values, rows):
    if values is None:
        return None
    return values.iloc[rows] if isinstance(values, pd.DataFrame | pd.Series) else values[rows]


def _one_replicate(template, X, columns, treatment, sample_weight, groups, seed):
    rows = resample_rows(treatment, seed, groups)
    estimator = clone(template)
    # Learners left at random_state=None are seeded by the estimator from its random_state, so
    # a replicate is reproducible from its seed alone.
    estimator.set_params(random_state=int(seed.generate_state(1)[0]))
    effects = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # each refit repeats the point fits' warnings
        for y, survival in columns:
            try:
                estimator.fit(
                    _take(X, rows), y[rows], treatment=treatment[rows], survival=survival[rows],
                    sample_weight=_take(sample_weight, rows),
                )  # fmt: skip
            except _REFIT_ERRORS:
                return None
            effects.append(estimator.effect_)
    effects = np.asarray(effects, dtype=float)
    return effects if np.all(np.isfinite(effects)) else None


def joint_replicates(template, X, columns, treatment, sample_weight, groups, n_bootstrap,
                     random_state, n_jobs):  # fmt: skip
    """Visit effects refitted on ``n_bootstrap`` resamples of units (within arms; whole
    clusters with ``groups``), each resample shared by every visit.

    Parameters
    ----------
    template : estimator
        Unfitted, with ``n_bootstrap=0`` (no bootstrap inside a replicate).
    columns : list of (y, survival) pairs
        One per visit, as the point fits received them.

    Returns
    -------
    replicates : ndarray of shape (n_succeeded, K)
    n_failed : int
        Resamples that could not be fitted at some visit (dropped for every visit).
    """
    seeds = spawn_seeds(random_state, n_bootstrap)
    results = Parallel(n_jobs=n_jobs)(
        delayed(_one_replicate)(template, X, columns, treatment, sample_weight, groups, seed)
        for seed in seeds
    )
    kept = [r for r in results if r is not None]
    if len(kept) < 2:
        raise RuntimeError(
            f"Fewer than two of the `n_bootstrap`={n_bootstrap} joint resamples could be fitted "
            "at every visit (resamples lost the survivors or deaths of an arm at some visit). "
            "Use the default models (sandwich standard errors), set n_bootstrap=0, or use more "
            "data."
        )
    return np.vstack(kept), len(results) - len(kept)
