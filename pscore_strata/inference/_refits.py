"""Refitting an estimator on row subsets: the workers of the resample bootstrap and jackknife.

Workers take the caller's arrays as separate arguments so that joblib can memory-map them (process
backends) or scatter them once to a ``dask.distributed`` cluster.
"""

from __future__ import annotations

import inspect
import os
import warnings
from contextlib import nullcontext

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from sklearn.base import clone

from .._results import BOUNDS, POINT, identification_of
from ._intervals import jackknife_acceleration
from ._resampling import jackknife_blocks, resample_rows, seed_models

REFIT_ERRORS = (ValueError, np.linalg.LinAlgError)


def statistics(fitted):
    """Names and values of the statistics that a fitted estimator exposes.

    Bounds (``identification`` ``"bounds"``: ``lower_``, ``upper_``) give two statistics; a point
    estimate (``"point"``: ``effect_``) gives one.
    """
    kind = identification_of(fitted)
    if kind == BOUNDS:
        return ("lower", "upper"), np.array([fitted.lower_, fitted.upper_], dtype=float)
    if kind == POINT:
        return ("effect",), np.array([fitted.effect_], dtype=float)
    raise TypeError(
        f"`estimator` ({type(fitted).__name__}) exposes neither `effect_` nor `lower_` and "
        "`upper_` after fit; the bootstrap needs one of them."
    )


class Inputs:
    """The caller's data, indexed by row position without copying or converting it."""

    def __init__(self, X, y, treatment, survival, sample_weight, groups):
        self.X = X if X is None or isinstance(X, pd.DataFrame | pd.Series) else np.asarray(X)
        self.y, self.treatment, self.survival = (_array(v) for v in (y, treatment, survival))
        self.sample_weight = _array(sample_weight)
        self.n = self.treatment.shape[0]
        self.groups = _array(groups)
        if self.groups is not None:
            if self.groups.shape[0] != self.n:
                raise ValueError(
                    f"`groups` has {self.groups.shape[0]} rows but `treatment` has {self.n}; "
                    "give one cluster label per row."
                )
            if pd.isna(self.groups).any():
                raise ValueError("`groups` has missing cluster labels; give every row a cluster.")

    @property
    def arrays(self):
        return (self.X, self.y, self.treatment, self.survival, self.sample_weight, self.groups)

    def fit(self, estimator, point=False):
        return _fit_rows(estimator, *self.arrays, None, point)


def _array(values):
    if values is None:
        return None
    array = (
        values.to_numpy() if isinstance(values, pd.Series | pd.DataFrame) else np.asarray(values)
    )
    return array.ravel() if array.ndim == 2 and 1 in array.shape else array


def _fit_rows(estimator, X, y, treatment, survival, sample_weight, groups, rows, point=False):
    def take(values):
        if values is None or rows is None:
            return values
        return values.iloc[rows] if isinstance(values, pd.DataFrame | pd.Series) else values[rows]

    kwargs = {"treatment": take(treatment), "survival": take(survival)}
    if sample_weight is not None:
        kwargs["sample_weight"] = take(sample_weight)
    if point and groups is not None and "groups" in inspect.signature(estimator.fit).parameters:
        kwargs["groups"] = groups  # only the point fit's own standard error uses clusters
    return estimator.fit(take(X), take(y), **kwargs)


def _refit(template, arrays, rows, seed):
    estimator = seed_models(clone(template), seed)
    if hasattr(estimator, "_fit_statistic"):
        # A replicate needs only its statistic: no standard errors, sandwich or diagnostics.
        estimator._statistic_only = True
    try:
        fitted = _fit_rows(estimator, *arrays, rows)
    except REFIT_ERRORS as exc:
        return None, f"{type(exc).__name__}: {exc}"
    values = statistics(fitted)[1]
    if not np.all(np.isfinite(values)):
        return None, f"non-finite statistic {values.tolist()}"
    return values, None


def refit_block(
    template, X, y, treatment, survival, sample_weight, groups, seeds, stratify, parent_pid
):
    arrays = (X, y, treatment, survival, sample_weight, groups)
    # Worker processes do not inherit the caller's warning filters; threads share them, and
    # changing them from several threads at once would corrupt them.
    guard = warnings.catch_warnings() if os.getpid() != parent_pid else nullcontext()
    with guard:
        if os.getpid() != parent_pid:
            warnings.simplefilter("ignore")
        return [
            _refit(template, arrays, resample_rows(treatment, seed, groups, stratify), seed)
            for seed in seeds
        ]


def _leave_out(template, X, y, treatment, survival, sample_weight, groups, block, label, seed):
    with warnings.catch_warnings() if seed is not None else nullcontext():
        warnings.simplefilter("ignore")
        return _refit(
            template,
            (X, y, treatment, survival, sample_weight, groups),
            np.flatnonzero(block != label),
            seed,
        )


def refit_jackknife_acceleration(template, inputs, seed, stratify, n_groups, n_jobs):
    block, block_stratum = jackknife_blocks(
        inputs.treatment, seed, inputs.groups, stratify, n_groups
    )
    seeds = [
        np.random.SeedSequence(seed.entropy, spawn_key=(*seed.spawn_key, j + 1))
        for j in range(block_stratum.size)
    ]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        results = Parallel(n_jobs=n_jobs)(
            delayed(_leave_out)(template, *inputs.arrays, block, j, s) for j, s in enumerate(seeds)
        )
    failed = [message for _, message in results if message is not None]
    if failed:
        raise RuntimeError(
            f"{len(failed)} of {len(results)} jackknife fits for the BCa acceleration failed "
            f"(first: {failed[0]}). Use kind='percentile', or fewer `n_jackknife_groups`."
        )
    return jackknife_acceleration(np.vstack([v for v, _ in results]), block_stratum)


def influence_matrix(fitted, names, n):
    """Per-row influence values, one column per statistic.

    Read from ``influence_<name>_`` for each statistic (bounds: ``influence_lower_`` and
    ``influence_upper_``), or else from ``influence_`` with one column per statistic.
    """
    per_name = [getattr(fitted, f"influence_{name}_", None) for name in names]
    if all(v is not None for v in per_name):
        influence = np.column_stack([np.asarray(v, dtype=float) for v in per_name])
    else:
        influence = getattr(fitted, "influence_", None)
        if influence is not None:
            influence = np.asarray(influence, dtype=float)
            influence = influence.reshape(influence.shape[0], -1)
    if influence is not None and influence.shape == (n, len(names)):
        return influence
    expected = " and ".join(f"`influence_{name}_`" for name in names)
    raise TypeError(
        f"method='multiplier' needs per-row influence values ({expected}, or `influence_` of "
        f"shape ({n}, {len(names)})); {type(fitted).__name__} has "
        f"{'none' if influence is None else f'shape {influence.shape}'}. "
        "Use method='resample'."
    )
