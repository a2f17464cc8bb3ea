"""Standard errors and intervals from per-unit influence values.

One mechanism serves every estimator (DESIGN.md section 3): an estimator hands over its influence
values ``IF_i`` (scaled so that ``estimate - truth ~ sum_i w_i IF_i / sum_i w_i``) and the
standard error follows, with optional sample weights and clusters.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from ._validation import check_level

__all__ = ["influence_std_error", "normal_interval", "spawn_seeds"]


def influence_std_error(influence, sample_weight=None, groups=None):
    """Standard error of an estimate from its influence values.

    ``SE^2 = G/(G-1) * sum_g (sum_{i in g} w_i IF_i)^2 / (sum_i w_i)^2`` where each row is its
    own cluster unless ``groups`` is given (the linearization variance of a weighted estimator
    with a with-replacement cluster sample). The small-sample factor ``G/(G-1)`` makes singleton
    clusters give exactly the ordinary standard error, and with unit weights the ordinary SE
    equals ``sd(IF, ddof=1) / sqrt(n)`` when the influence values average zero.

    Parameters
    ----------
    influence : array-like of shape (n,) or (n, k)
    sample_weight : array-like of shape (n,), optional
    groups : array-like of shape (n,), optional
        Cluster labels.

    Returns
    -------
    float or ndarray of shape (k,)
    """
    influence = np.asarray(influence, dtype=float)
    n = influence.shape[0]
    weights = np.ones(n) if sample_weight is None else np.asarray(sample_weight, dtype=float)
    contributions = influence * (weights if influence.ndim == 1 else weights[:, None])
    if groups is not None:
        codes, _ = pd.factorize(np.asarray(groups))
        totals = np.zeros((codes.max() + 1,) + influence.shape[1:])
        np.add.at(totals, codes, contributions)
        contributions = totals
    n_clusters = contributions.shape[0]
    if n_clusters < 2:
        return np.full(influence.shape[1:], np.nan) if influence.ndim > 1 else float("nan")
    centered = contributions - contributions.mean(axis=0)
    variance = n_clusters / (n_clusters - 1) * np.sum(centered**2, axis=0) / weights.sum() ** 2
    result = np.sqrt(variance)
    return float(result) if influence.ndim == 1 else result


def normal_interval(estimate, std_error, level=0.95, log_scale=False):
    """Wald interval; on the log scale (then exponentiated) for ratio effects."""
    level = check_level(level)
    z = stats.norm.ppf(0.5 + level / 2)
    if log_scale:
        if estimate <= 0:
            return (float("nan"), float("nan"))
        log_se = std_error / estimate
        return (float(estimate * np.exp(-z * log_se)), float(estimate * np.exp(z * log_se)))
    return (float(estimate - z * std_error), float(estimate + z * std_error))


def spawn_seeds(random_state, n):
    """Independent child seeds, one per replicate, so results do not depend on scheduling."""
    if isinstance(random_state, np.random.SeedSequence):
        root = random_state
    elif isinstance(random_state, np.random.Generator):
        root = np.random.SeedSequence(random_state.integers(0, 2**63))
    elif isinstance(random_state, np.random.RandomState):
        root = np.random.SeedSequence(random_state.randint(0, 2**31))
    else:
        root = np.random.SeedSequence(random_state)
    return root.spawn(n)


def stratified_resample(treatment, seed, groups=None):
    """Row positions of one bootstrap resample, drawn within each arm (or clusters, if given)."""
    rng = np.random.default_rng(seed)
    if groups is not None:
        codes, _ = pd.factorize(np.asarray(groups))
        order = np.argsort(codes, kind="stable")
        boundaries = np.flatnonzero(np.diff(codes[order])) + 1
        members = np.split(order, boundaries)
        chosen = rng.integers(0, len(members), len(members))
        return np.concatenate([members[c] for c in chosen])
    rows = []
    for arm in (0, 1):
        arm_rows = np.flatnonzero(treatment == arm)
        rows.append(arm_rows[rng.integers(0, arm_rows.size, arm_rows.size)])
    return np.sort(np.concatenate(rows))
