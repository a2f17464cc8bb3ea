"""Diagnostics of a fitted SACE analysis: covariate balance, weights, overlap and monotonicity.

Everything here is a function of the per-row nuisance predictions stored by a fitted estimator
(``nuisance_`` and ``training_data_``), so no model is refitted (DESIGN.md sections 4 and 6).

Balancing property (Ding & Lu 2017, JRSSB): under monotonicity
"increasing" and correct models, for any covariate function ``h(X)`` the always-survivor mean
``E[h(X) | always-survivor]`` is the weighted mean of ``h`` among treated survivors with weights
``p0 / (pi p1)``, among control survivors with weights ``1 / (1 - pi)``, and among everyone with
weights ``p0``. Under "decreasing" the arms swap roles. Disagreement between the three
reconstructions points at a misspecified treatment or survival model.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ._arrays import (
    PROBABILITY_BOUNDS,
    ROW_SHARE_TOLERANCE,
    SCORE_FLOOR,
    SMD_THRESHOLD,
    VIOLATION_TOLERANCE,
    balancing_weights,
    effective_sample_size,
    fitted_scores,
    oriented_predictions,
    survivor_weights,
    treated_indicator,
)
from ._cache import always, cached_diagnostic
from ._covariates import covariate_matrix, moments
from ._missing import missing_data_warnings
from ._monotonicity import monotonicity_check

__all__ = [
    "balance_table",
    "weight_summary",
    "overlap_summary",
    "monotonicity_check",
    "diagnostic_warnings",
    "effective_sample_size",
]

_GROUPS = ("treated_survivors", "control_survivors", "everyone")
_PAIRS = (("treated", "control"), ("treated", "everyone"), ("control", "everyone"))


NO_COVARIATES_NOTE = (
    "The analysis has no covariates, so there is no covariate balance to check (pass `X` to "
    "check covariates the models did not use)."
)


@cached_diagnostic(always)
def balance_table(estimator, X):
    """Covariate balance of the always-survivor reconstructions (the balancing property).

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
        Any fitted estimator exposing ``nuisance_`` and ``training_data_``.
    X : DataFrame or array-like of shape (n_samples, n_covariates)
        Covariates of the fitted rows in the fitted order (they may include covariates the
        models did not use). Text, boolean and categorical columns are expanded into one
        indicator row per level. Numeric missing values get a ``"<name> (missing)"`` indicator
        row and the column's means use its observed rows. ``X`` is not modified.

    Returns
    -------
    table : DataFrame, one row per covariate (or indicator)
        ``mean_treated_survivors``, ``mean_control_survivors``, ``mean_everyone``: the three
        reconstructions of the always-survivor mean; ``smd_<a>_vs_<b>``: weighted standardized
        mean differences between them; ``variance_ratio_<a>_vs_<b>``: ratios of their weighted
        variances; ``raw_mean_*``, ``raw_smd_treated_vs_control`` and
        ``raw_variance_ratio_treated_vs_control``: the survivor-only comparison without
        balancing weights (what a naive survivor analysis compares); ``pooled_sd``.
        ``attrs["effective_sample_size"]`` holds the Kish effective sample size of each weight
        set. For an estimator fitted without covariates and ``X=None`` the table has no rows
        and ``attrs["notes"]`` says so.

    Notes
    -----
    Every SMD is divided by the same pooled standard deviation ``sqrt((s1^2 + s0^2) / 2)`` of
    the *unweighted* treated and control survivors (common practice for weighted comparisons:
    the yardstick must not move with the weights). Where it is zero the whole-sample standard
    deviation is used. Sample weights of the fit multiply every weight. A weighted ``|SMD|`` above
    0.1 is the common-practice signal of imbalance.
    """
    o = oriented_predictions(estimator)
    unadjusted = X is None and getattr(estimator, "n_features_in_", None) == 0
    if unadjusted:
        # No covariates: no row to balance; an empty table says so instead of failing.
        names, Z = [], np.zeros((0, o.weight.shape[0]))
    else:
        names, Z = covariate_matrix(X, o.weight.shape[0])
    missing = np.isnan(Z)
    observed = (~missing).astype(float)
    Z[missing] = 0.0  # Z is a fresh matrix built from X, never the caller's array
    center = Z.sum(axis=1) / np.maximum(observed.sum(axis=1), 1)
    Z -= center[:, None]
    Z[missing] = 0.0
    weights = balancing_weights(o)
    raw = survivor_weights(o)
    mean, variance = {}, {}
    for group, w in weights.items():
        mean[group], variance[group] = moments(Z, observed, w)
    raw_mean, raw_variance = {}, {}
    for group, w in raw.items():
        raw_mean[group], raw_variance[group] = moments(Z, observed, w)
    pooled = np.sqrt((raw_variance["treated_survivors"] + raw_variance["control_survivors"]) / 2)
    overall = np.sqrt(moments(Z, observed, o.weight)[1])
    pooled = np.where(pooled > 0, pooled, overall)
    table = pd.DataFrame(index=pd.Index(names, name="covariate"))
    for group in _GROUPS:
        table[f"mean_{group}"] = mean[group] + center
    key = {"treated": "treated_survivors", "control": "control_survivors", "everyone": "everyone"}
    with np.errstate(divide="ignore", invalid="ignore"):
        for a, b in _PAIRS:
            gap = mean[key[a]] - mean[key[b]]
            table[f"smd_{a}_vs_{b}"] = np.where(pooled > 0, gap / pooled, 0.0)
        for a, b in _PAIRS:
            table[f"variance_ratio_{a}_vs_{b}"] = variance[key[a]] / variance[key[b]]
        for group in ("treated_survivors", "control_survivors"):
            table[f"raw_mean_{group}"] = raw_mean[group] + center
        raw_gap = raw_mean["treated_survivors"] - raw_mean["control_survivors"]
        table["raw_smd_treated_vs_control"] = np.where(pooled > 0, raw_gap / pooled, 0.0)
        table["raw_variance_ratio_treated_vs_control"] = (
            raw_variance["treated_survivors"] / raw_variance["control_survivors"]
        )
    table["pooled_sd"] = pooled
    table.attrs["effective_sample_size"] = {
        **{group: effective_sample_size(w) for group, w in weights.items()},
        **{f"raw_{group}": effective_sample_size(w) for group, w in raw.items()},
    }
    table.attrs["smd_threshold"] = SMD_THRESHOLD
    table.attrs["notes"] = [NO_COVARIATES_NOTE] if unadjusted else []
    return table


@cached_diagnostic(always, takes_x=False)
def weight_summary(estimator):
    """Distribution of the balancing weights of each reconstruction.

    Parameters
    ----------
    estimator : PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
        A fitted estimator; its stored nuisance predictions are read, nothing is refitted.

    Returns
    -------
    table : DataFrame indexed by weight set (``treated_survivors``, ``control_survivors``,
        ``everyone``)
        Over the rows with positive weight (balancing weight times sample weight, as the
        estimator uses them): ``n_rows``, quantiles ``min`` ... ``max``, ``max_over_median``,
        ``top1pct_share`` (share of the total weight carried by the largest 1% of rows),
        ``effective_sample_size`` (Kish 1965: ``(sum w)^2 / sum w^2``) and ``ess_share``
        (effective over actual rows).
    """
    o = oriented_predictions(estimator)
    rows = {}
    for group, w in balancing_weights(o).items():
        w = w[w > 0]
        ordered = np.sort(w)[::-1]
        top = max(1, int(np.ceil(0.01 * w.size)))
        quantiles = np.quantile(w, [0.0, 0.25, 0.5, 0.75, 0.9, 0.99, 1.0])
        ess = effective_sample_size(w)
        rows[group] = {
            "n_rows": w.size,
            **dict(
                zip(("min", "q25", "median", "q75", "q90", "q99", "max"), quantiles, strict=True)
            ),
            "max_over_median": quantiles[-1] / quantiles[2],
            "top1pct_share": ordered[:top].sum() / w.sum(),
            "effective_sample_size": ess,
            "ess_share": ess / w.size,
        }
    return pd.DataFrame.from_dict(rows, orient="index").rename_axis("weights")


@cached_diagnostic(always, takes_x=False)
def overlap_summary(estimator):
    """Distribution of the treatment probability and the principal scores in each arm.

    Parameters
    ----------
    estimator : PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
        A fitted estimator; its stored nuisance predictions are read, nothing is refitted.

    Returns
    -------
    table : DataFrame indexed by (score, arm)
        Row quantiles (unweighted: overlap concerns the rows the models saw), and
        ``share_below_0.05`` / ``share_above_0.95``: the share of the arm's rows beyond the
        common-practice bounds. ``attrs`` holds the shares over all rows of treatment
        probabilities outside [0.05, 0.95] and of always-survivor scores below 0.05.
    """
    o = oriented_predictions(estimator)
    T = treated_indicator(o)
    low, high = PROBABILITY_BOUNDS
    levels = [0.0, 0.01, 0.05, 0.25, 0.5, 0.75, 0.95, 0.99, 1.0]
    labels = ["min", "q01", "q05", "q25", "median", "q75", "q95", "q99", "max"]
    rows = {}
    scores = fitted_scores(o)
    for score, values in scores.items():
        for arm, in_arm in (("treated", T == 1), ("control", T == 0)):
            v = values[in_arm]
            rows[(score, arm)] = {
                "n_rows": v.size,
                **dict(zip(labels, np.quantile(v, levels), strict=True)),
                f"share_below_{low:g}": np.mean(v < low),
                f"share_above_{high:g}": np.mean(v > high),
            }
    table = pd.DataFrame.from_dict(rows, orient="index")
    table.index = pd.MultiIndex.from_tuples(table.index, names=["score", "arm"])
    pi = scores["treatment"]
    table.attrs["share_treatment_outside_bounds"] = float(np.mean((pi < low) | (pi > high)))
    table.attrs["share_always_survivor_below_floor"] = float(
        np.mean(scores["always_survivor"] < SCORE_FLOOR)
    )
    return table


#: Below this many rows a more flexible learner is not the advice (common practice: flexible
#: learners with cross-fitting need thousands of rows).
FLEXIBLE_ROWS = 2000


@cached_diagnostic(always)
def diagnostic_warnings(estimator, X=None):
    """Plain-language warnings about balance, overlap and monotonicity (empty when none apply).

    Thresholds are common practice, not theory: weighted ``|SMD|`` above 0.1; treatment
    probabilities outside [0.05, 0.95], or always-survivor scores below 0.05, for more than 5%
    of rows; fitted survival probabilities reversed by more than 0.05 against the assumed
    monotonicity direction for more than 5% of rows, or an
    adjusted survival comparison on the wrong side of zero (Bonferroni over the strata). Balance
    is checked only when ``X`` (the covariates of the fitted rows) is given.

    Parameters
    ----------
    estimator : PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
        A fitted estimator; its stored nuisance predictions are read, nothing is refitted.

    X : array-like of shape (n_samples, n_features), optional
        The covariates the estimator was fitted with, for the balance checks.

    Returns
    -------
    list of str
        One sentence per problem found, saying what to check or change; empty when none.
    """
    o = oriented_predictions(estimator)
    target = getattr(estimator, "stratum_", "always_survivor")
    words = target.replace("_", "-")
    messages = []
    n_rows = len(o.p_pure)
    if X is not None:
        smd = balance_table(estimator, X).filter(regex="^smd_").abs().max(axis=1)
        flagged = smd[smd > SMD_THRESHOLD].sort_values(ascending=False)
        if len(flagged):
            listed = ", ".join(f"{name} ({value:.2f})" for name, value in flagged.head(5).items())
            messages.append(
                f"Covariate balance: {len(flagged)} covariate(s) have a weighted |SMD| above "
                f"{SMD_THRESHOLD} (common rule of thumb): {listed}. The reconstructions of the "
                f"{words} stratum disagree, so the treatment or survival model is probably "
                "misspecified; "
                + ("try interactions, transformations or a more flexible learner."
                   if n_rows >= FLEXIBLE_ROWS else
                   f"with {n_rows} rows, prefer fewer covariates or merged levels to a more "
                   "flexible model, and read the bounds, which do not need the outcome "
                   "model.")  # fmt: skip
            )
    low, high = PROBABILITY_BOUNDS
    scores = fitted_scores(o)
    outside = float(np.mean((scores["treatment"] < low) | (scores["treatment"] > high)))
    if outside > ROW_SHARE_TOLERANCE:
        messages.append(
            f"Overlap: {outside:.1%} of rows have a fitted treatment probability outside "
            f"[{low}, {high}] (common practice allows about {ROW_SHARE_TOLERANCE:.0%}). Their "
            "weights are large and unstable; consider restricting the population to the region "
            "where both arms occur. With weights like these the estimate has heavy tails, and "
            "standard errors understate its spread (in the weak-overlap simulation scenario, "
            "mean SE / SD was about 0.8 for weighting and multiply robust, and the same with the "
            "refitting bootstrap)."
        )
    rare = float(np.mean(scores[target] < SCORE_FLOOR))
    if rare > ROW_SHARE_TOLERANCE:
        messages.append(
            f"Overlap: {rare:.1%} of rows have a fitted {words} score below "
            f"{SCORE_FLOOR} (common practice allows about {ROW_SHARE_TOLERANCE:.0%}). The "
            f"{words} stratum is nearly absent there, so the estimate rests on few rows."
        )
    # Small fitted reversals arise from estimation noise where the arms' survival is close, so
    # only reversals larger than the probability floor count.
    marked = int(np.sum(o.p_pure - o.p_mixed > SCORE_FLOOR))
    check = monotonicity_check(estimator)
    if marked > ROW_SHARE_TOLERANCE * n_rows:
        helped, other = ("treatment", "control") if o.increasing else ("control", "treatment")
        # The same two counts as the estimator's MonotonicityWarning and the report.
        messages.append(
            f"Monotonicity: for {marked} of {n_rows} rows ({marked / n_rows:.1%}) the fitted "
            f"survival probability under {helped} is more than {SCORE_FLOOR} below that under "
            f"{other} ({int(np.sum(o.p_pure - o.p_mixed > VIOLATION_TOLERANCE))} rows are "
            "reversed by any amount), "
            f"contradicting monotonicity ('{check.attrs['monotonicity']}'). Check the survival "
            "model and run the sensitivity analysis for monotonicity."
        )
    # The table's own flag: Bonferroni-adjusted 95% intervals over its rows.
    wrong = check.index[check["contradicts_monotonicity"]].tolist()
    if wrong:
        messages.append(
            f"Monotonicity: survival differs between arms in the direction the assumption "
            f"forbids in {', '.join(map(str, wrong))} (95% intervals, Bonferroni-adjusted). "
            "Reconsider the monotonicity direction or use the sensitivity analysis."
        )
    return messages + missing_data_warnings(estimator, o, X)
