"""Joint inference over visits: covariance, simultaneous band and Wald test of the visit effects.

The covariance comes from the stacked influence values (``IF' IF / n^2`` with the estimators'
weights and clusters), or from joint refitting-bootstrap replicates; the band's critical value from
multiplier draws of the same rows (Gaussian multipliers, so the draws are exactly normal with that
covariance).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..inference._resampling import multiplier_contributions

__all__ = ["JointInference", "influence_covariance", "band_critical", "wald_test", "N_DRAWS"]

# Multiplier draws for the band's critical value; the draws are fixed by a seed so the band is
# reproducible, and at this many the critical value's Monte Carlo error is below 0.01.
N_DRAWS = 100_000
_BAND_SEED = 20_260_326


@dataclass(frozen=True)
class JointInference:
    """The joint law of the visit estimates on the scale the intervals use.

    Attributes
    ----------
    covariance : ndarray of shape (K, K)
        Of the estimates (log estimates for ratio scales).
    std_error : ndarray of shape (K,)
        Square roots of its diagonal.
    critical : float
        The band's critical value: ``estimate +/- critical * std_error`` covers every visit at once
        with the stated level.
    """

    covariance: np.ndarray
    std_error: np.ndarray
    critical: float


def influence_covariance(influence, sample_weight, groups):
    """``C' C`` with ``C`` the centered per-unit (per-cluster) contributions.

    With unit weights and no clusters this is ``n / (n - 1) * sum_i IF_i IF_i' / n^2`` for
    centered ``IF``; its diagonal is exactly the square of
    :func:`pscore_strata.inference.influence_std_error` (the same weights and ``G / (G - 1)``
    factor), so the joint covariance agrees with each visit's own standard error.
    """
    contributions = multiplier_contributions(influence, sample_weight, groups)
    return contributions.T @ contributions


def rescale(covariance, std_error):
    """Keep the correlation of ``covariance`` and put ``std_error`` on its diagonal.

    Used when a visit's reported standard error is not the influence-value one (cross-fitting
    repeats add the spread between repeats); the correlation still comes from the influence
    values.
    """
    scale = np.sqrt(np.diag(covariance))
    with np.errstate(divide="ignore", invalid="ignore"):
        correlation = covariance / np.outer(scale, scale)
    correlation[~np.isfinite(correlation)] = 0.0
    return correlation * np.outer(std_error, std_error)


def band_critical(covariance, level, dof=None, replicates=None, estimate=None):
    """``level`` quantile of ``max_k |Z_k| / se_k`` (the sup-t statistic over visits).

    ``Z`` is drawn from the multiplier bootstrap (Gaussian multipliers of the rows whose
    cross-product is ``covariance``): exactly ``N(0, covariance)``. With ``dof`` (few clusters)
    each draw is divided by ``sqrt(chi2_dof / dof)``, a multivariate t whose margins are the
    pointwise intervals' t reference. With refitting-bootstrap ``replicates`` the statistic is
    ``max_k |theta*_k - theta_k| / se_k`` over the replicates instead.
    """
    se = np.sqrt(np.diag(covariance))
    keep = se > 0
    if not keep.any():
        return float("nan")
    if replicates is not None:
        deviations = np.abs(replicates[:, keep] - estimate[keep]) / se[keep]
        return float(np.quantile(deviations.max(axis=1), level))
    # Gaussian multipliers of rows C make sum_g xi_g C_g exactly N(0, C'C): with K rows whose
    # cross-product is the covariance (its symmetric square root) the draws have the law of the
    # multiplier bootstrap over all units, at O(K^2) cost per draw.
    rows = _symmetric_root(covariance[np.ix_(keep, keep)]).T
    rng = np.random.default_rng(_BAND_SEED)
    draws = rng.standard_normal((N_DRAWS, rows.shape[0])) @ rows
    if dof is not None:
        draws = draws / np.sqrt(rng.chisquare(dof, size=(N_DRAWS, 1)) / dof)
    return float(np.quantile(np.max(np.abs(draws) / se[keep], axis=1), level))


def _symmetric_root(matrix):
    eigenvalues, eigenvectors = np.linalg.eigh(matrix)
    return eigenvectors * np.sqrt(np.clip(eigenvalues, 0.0, None))


def wald_test(estimate, covariance, null=0.0, dof=None):
    """Wald test of ``estimate == null`` at every visit at once.

    ``W = (theta - null)' V^-1 (theta - null)`` against chi-square with K degrees of freedom. With
    few clusters (``dof = G - 1``) the covariance is itself estimated from G cluster totals, and
    ``W (G - K) / (K (G - 1))`` is referred to F(K, G - K) instead (the Hotelling T-squared
    scaling; common practice for cluster-robust Wald tests). A singular covariance (a visit
    with no variation) uses its pseudo-inverse and the rank as degrees of freedom.

    Returns
    -------
    dict
        ``statistic``, ``df``, ``p_value``, ``reference`` ("chi2" or "F").
    """
    difference = np.asarray(estimate, dtype=float) - null
    rank = int(np.linalg.matrix_rank(covariance))
    statistic = float(difference @ np.linalg.pinv(covariance) @ difference)
    if dof is None:
        p_value = float(stats.chi2.sf(statistic, rank))
        return {"statistic": statistic, "df": rank, "p_value": p_value, "reference": "chi2"}
    n_clusters = dof + 1
    denominator = n_clusters - rank
    if denominator < 1:
        return {"statistic": statistic, "df": rank, "p_value": float("nan"), "reference": "F"}
    scaled = statistic * denominator / (rank * (n_clusters - 1))
    return {"statistic": scaled, "df": (rank, denominator),
            "p_value": float(stats.f.sf(scaled, rank, denominator)), "reference": "F"}  # fmt: skip
