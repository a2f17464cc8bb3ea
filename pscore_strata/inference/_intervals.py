"""Bootstrap intervals: percentile and bias-corrected accelerated (BCa), with the acceleration
from a jackknife or from influence values."""

from __future__ import annotations

import numpy as np
from scipy import stats

from .._validation import check_level

__all__ = [
    "percentile_interval", "jackknife_acceleration", "influence_acceleration", "bca_interval"
]  # fmt: skip


def percentile_interval(replicates, level=0.95):
    """Percentile interval: the ``(1 -/+ level)/2`` quantiles of the replicates (per column).

    Parameters
    ----------
    replicates : array-like of shape (n_replicates,) or (n_replicates, n_statistics)
    level : float, default=0.95
        Confidence level, strictly between 0 and 1.

    Returns
    -------
    low, high : float or ndarray of shape (n_statistics,)
    """
    level = check_level(level)
    alpha = (1 - level) / 2
    values = np.asarray(replicates, dtype=float)
    return np.quantile(values, alpha, axis=0), np.quantile(values, 1 - alpha, axis=0)


def jackknife_acceleration(leave_out, block_stratum=None):
    """BCa acceleration from leave-one-block-out estimates (Efron & Tibshirani 1993, chapter 14).

    With ``G_s`` blocks in stratum ``s`` and ``U = (G_s - 1)(mean_s - theta_(j))``,
    ``a = sum_s sum_j U^3 / G_s^3 / (6 (sum_s sum_j U^2 / G_s^2)^(3/2))``: each stratum is
    jackknifed separately, the same stratified form that :func:`scipy.stats.bootstrap` uses for
    several independent samples.
    """
    values = np.asarray(leave_out, dtype=float)
    values = values.reshape(values.shape[0], -1)
    strata = np.zeros(values.shape[0]) if block_stratum is None else np.asarray(block_stratum)
    cubes = np.zeros(values.shape[1])
    squares = np.zeros(values.shape[1])
    for stratum in np.unique(strata):
        part = values[strata == stratum]
        g = part.shape[0]
        if g < 2:
            continue
        u = (g - 1) * (part.mean(axis=0) - part)
        cubes += np.sum(u**3, axis=0) / g**3
        squares += np.sum(u**2, axis=0) / g**2
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(squares > 0, cubes / (6 * squares**1.5), 0.0)


def influence_acceleration(contributions):
    """BCa acceleration from influence contributions: ``sum c^3 / (6 (sum c^2)^(3/2))``.

    The jackknife's ``U`` values are first-order the centered influence contributions, so this is
    the limit of :func:`jackknife_acceleration` without refits.
    """
    c = np.asarray(contributions, dtype=float)
    c = c.reshape(c.shape[0], -1)
    c = c - c.mean(axis=0)
    squares = np.sum(c**2, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(squares > 0, np.sum(c**3, axis=0) / (6 * squares**1.5), 0.0)


def bca_interval(replicates, estimate, acceleration, level=0.95):
    """Bias-corrected and accelerated interval (Efron 1987, JASA 82; per column).

    The bias correction ``z0`` counts ties as half (as :func:`scipy.stats.bootstrap` does); the
    adjusted levels are ``Phi(z0 + (z0 + z) / (1 - a (z0 + z)))``.

    Parameters
    ----------
    replicates : array-like of shape (n_replicates, n_statistics)
        Bootstrap replicates, one column per statistic.
    estimate : array-like of shape (n_statistics,)
        The full-data estimates.
    acceleration : array-like of shape (n_statistics,)
        The acceleration ``a`` of each statistic (jackknife or influence values).
    level : float, default=0.95
        Confidence level, strictly between 0 and 1.

    Returns
    -------
    low, high : ndarray of shape (n_statistics,)
    """
    level = check_level(level)
    values = np.asarray(replicates, dtype=float)
    values = values.reshape(values.shape[0], -1)
    estimate = np.atleast_1d(np.asarray(estimate, dtype=float))
    acceleration = np.broadcast_to(np.asarray(acceleration, dtype=float), estimate.shape)
    below = np.sum(values < estimate, axis=0) + np.sum(values <= estimate, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        z0 = stats.norm.ppf(below / (2 * values.shape[0]))
        low, high = np.full(estimate.shape, np.nan), np.full(estimate.shape, np.nan)
        for j in range(estimate.size):
            levels = []
            for z in stats.norm.ppf([(1 - level) / 2, (1 + level) / 2]):
                shifted = z0[j] + z
                levels.append(stats.norm.cdf(z0[j] + shifted / (1 - acceleration[j] * shifted)))
            if np.all(np.isfinite(levels)):
                low[j], high[j] = np.quantile(values[:, j], levels)
    return low, high
