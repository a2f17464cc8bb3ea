"""Standard errors from per-unit influence values, and the intervals' reference distribution.

One mechanism serves every estimator (DESIGN.md section 3): an estimator hands over its influence
values ``IF_i`` (scaled so that ``estimate - truth ~ sum_i w_i IF_i / sum_i w_i``) and the
standard error follows, with optional sample weights and clusters. With few clusters the
intervals use a t reference with ``G - 1`` degrees of freedom.
"""

from __future__ import annotations

import functools

import numpy as np
import pandas as pd
from scipy import optimize, stats

from .._validation import check_level
from .._warnings import warn_at_caller
from ..exceptions import FewClustersWarning

__all__ = [
    "FewClustersWarning",
    "FEW_CLUSTERS",
    "count_clusters",
    "reference_dof",
    "estimator_dof",
    "influence_std_error",
    "reference_distribution",
    "reference_quantile",
    "normal_interval",
    "imbens_manski_critical_value",
]


# Below this many clusters a cluster-robust standard error is itself noisy and the normal
# reference too narrow; a t reference with G - 1 degrees of freedom is common practice.
FEW_CLUSTERS = 30


def count_clusters(groups, stacklevel=3):
    """Number of clusters (``None`` without ``groups``); warns when there are few."""
    if groups is None:
        return None
    n_clusters = int(pd.unique(np.asarray(groups)).size)
    if n_clusters < FEW_CLUSTERS:
        warn_at_caller(
            f"Only {n_clusters} clusters in `groups` (fewer than {FEW_CLUSTERS}): the "
            "cluster-robust standard error is imprecise, so confidence intervals use a t "
            f"reference with {n_clusters - 1} degrees of freedom (G - 1) instead of the normal. "
            "Even so they may undercover with very few clusters; treat them with caution.",
            FewClustersWarning)
    return n_clusters


def reference_dof(n_clusters):
    """Degrees of freedom of the interval's t reference: ``G - 1`` with few clusters, else
    ``None`` (normal reference)."""
    if n_clusters is None or n_clusters >= FEW_CLUSTERS:
        return None
    return n_clusters - 1


def estimator_dof(estimator):
    """:func:`reference_dof` of a fitted estimator (its ``n_clusters_``)."""
    return reference_dof(getattr(estimator, "n_clusters_", None))


def influence_std_error(influence, sample_weight=None, groups=None):
    """Standard error of an estimate from its influence values.

    ``SE^2 = G/(G-1) * sum_g (U_g - mean(U))^2 / (sum_i w_i)^2`` with cluster totals
    ``U_g = sum_{i in g} w_i IF_i``, where each row is its own cluster unless ``groups`` is given
    (the linearization variance of a weighted estimator with a with-replacement cluster sample).
    The totals are centered at their mean, so influence values that do not average zero (a
    subgroup's, a sensitivity formula's) do not inflate the variance. The small-sample factor
    ``G/(G-1)`` makes singleton clusters give exactly the ordinary standard error: with unit
    weights, ``sd(IF, ddof=1) / sqrt(n)``.

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


def reference_distribution(dof=None):
    """The intervals' reference: the normal, or Student's t with ``dof`` degrees of freedom
    (few clusters: see :func:`reference_dof`)."""
    return stats.norm if dof is None else stats.t(dof)


def reference_quantile(level, dof=None):
    """Two-sided quantile of :func:`reference_distribution` at ``level``."""
    return _quantile(float(level), None if dof is None else float(dof))


@functools.lru_cache(maxsize=256)
def _quantile(level, dof):
    # A grid or a tipping-point search asks for the same few quantiles hundreds of times, and
    # each scipy ppf call costs about 0.1 ms.
    return float(reference_distribution(dof).ppf(0.5 + level / 2))


def normal_interval(estimate, std_error, level=0.95, log_scale=False, dof=None):
    """Wald interval; on the log scale (then exponentiated) for ratio effects.

    With ``dof`` (few clusters: see :func:`reference_dof`) the quantile is Student's t with
    ``dof`` degrees of freedom instead of the normal one.

    Parameters
    ----------
    estimate, std_error : float
    level : float, default=0.95
        Confidence level, strictly between 0 and 1.
    log_scale : bool, default=False
        Build the interval for ``log(estimate)`` (standard error ``std_error / estimate``) and
        exponentiate its ends; NaN ends for a non-positive estimate.
    dof : int or None, default=None
        Degrees of freedom of Student's t reference; ``None`` is the normal.

    Returns
    -------
    (low, high) : tuple of float
    """
    level = check_level(level)
    z = reference_quantile(level, dof)
    if log_scale:
        if estimate <= 0:
            return (float("nan"), float("nan"))
        log_se = std_error / estimate
        return (float(estimate * np.exp(-z * log_se)), float(estimate * np.exp(z * log_se)))
    return (float(estimate - z * std_error), float(estimate + z * std_error))


def imbens_manski_critical_value(width, se_lower, se_upper, level=0.95, dof=None):
    """The ``c`` of the Imbens-Manski interval ``(lower - c se_lower, upper + c se_upper)``.

    Solves ``Phi(c + width / max(se)) - Phi(-c) = level`` (Imbens & Manski 2004, Econometrica
    72): ``c`` runs from the one-sided quantile (wide bounds: only one end can be missed) to the
    two-sided one (``width = 0``: a point). Without a positive finite scale, the two-sided
    quantile. ``Phi`` is Student's t with ``dof`` degrees of freedom when given.
    """
    reference = reference_distribution(dof)
    width = max(width, 0.0)
    scale = max(se_lower, se_upper)
    z_two_sided = reference.ppf(0.5 + level / 2)
    if not np.isfinite(scale) or scale <= 0:
        return z_two_sided

    def gap(c):
        return reference.cdf(c + width / scale) - reference.cdf(-c) - level

    return 0.0 if gap(0.0) >= 0 else optimize.brentq(gap, 0.0, z_two_sided + 1.0, xtol=1e-12)
