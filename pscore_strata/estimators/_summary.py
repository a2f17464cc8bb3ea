"""The summary table of a fitted SACE estimator: estimates, standard errors, intervals, notes."""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._vectors import MISSING_AT_RANDOM_ASSUMPTION
from ..diagnostics._tables import diagnostic_warnings
from ..estimands._strata import arm_cells, ignorability_statement, stratum_words
from ..inference._standard_errors import (
    estimator_dof,
    influence_std_error,
    normal_interval,
    reference_quantile,
)
from ..nuisance._missing import missingness_counts
from ..tables import SummaryTable
from ._repeats import median_aggregate

__all__ = ["summary_table", "share_interval", "SCALE_LABELS", "CAUTIONS", "SHARE_INTERVAL_NOTE"]

SCALE_LABELS = {"difference": "difference", "ratio": "ratio", "odds_ratio": "odds ratio"}

CAUTIONS = (
    "The always-survivor stratum is latent: nobody can be identified as an always-survivor, and "
    "the SACE rests on untestable assumptions (monotonicity, principal ignorability). See the "
    "bounds and sensitivity analyses. These are population-level estimates: do not use them for "
    "decisions about individual patients. Interpret them under the study's protocol and local "
    "regulation, with a qualified statistician."
)

STRATUM_CAUTIONS = (
    "Principal strata are latent: nobody can be identified as a member of the {words} stratum, "
    "and its effect rests on untestable assumptions (monotonicity, principal ignorability). "
    "These are population-level estimates: do not use them for decisions about individual "
    "patients. Interpret them under the study's protocol and local regulation, with a qualified "
    "statistician."
)


def _stratum_of(estimator):
    return getattr(estimator, "stratum_", "always_survivor")


def effect_label(estimator):
    """The first row's name: ``"SACE (difference)"``, ``"protected effect (difference)"``."""
    stratum = _stratum_of(estimator)
    name = "SACE" if stratum == "always_survivor" else f"{stratum_words(stratum)} effect"
    return f"{name} ({SCALE_LABELS[estimator.scale]})"


SHARE_INTERVAL_NOTE = (
    "Intervals of the stratum shares are computed on the logit scale (delta method) and "
    "transformed back, so they stay inside [0, 1]."
)


def share_interval(share, std_error, level=0.95, dof=None):
    """Interval for a share in [0, 1]: Wald on the logit scale, transformed back.

    ``logit(share) +- z se / (share (1 - share))`` (delta method), so both ends stay inside
    (0, 1). A share estimated at 0 or 1 (or beyond, when the fitted arms cross) has no logit; its
    Wald interval is then clipped to [0, 1].
    """
    z = reference_quantile(level, dof)
    if not (np.isfinite(share) and np.isfinite(std_error)):
        return (float("nan"), float("nan"))
    if 0 < share < 1:
        logit = np.log(share / (1 - share))
        half = z * std_error / (share * (1 - share))
        return (float(1 / (1 + np.exp(-(logit - half)))), float(1 / (1 + np.exp(-(logit + half)))))
    low, high = share - z * std_error, share + z * std_error
    return (float(np.clip(low, 0, 1)), float(np.clip(high, 0, 1)))


def summary_table(estimator, level):
    """Rows: the SACE, the always-survivor means, the stratum shares and the naive contrast."""
    method = estimator.std_error_method_
    boot = estimator.bootstrap_replicates_
    repeats = estimator.repeat_estimates_
    stratum = _stratum_of(estimator)
    words = stratum_words(stratum)
    rows = [
        (
            effect_label(estimator),
            estimator.effect_,
            estimator.std_error_,
            method,
        )
    ]
    for name, value, column in (
        (f"{words} mean, treated", estimator.mean_treated_, "mean_treated"),
        (f"{words} mean, control", estimator.mean_control_, "mean_control"),
    ):
        if boot is not None:
            se = float(boot[column].std(ddof=1))
        else:
            se = float(median_aggregate(repeats[column], repeats[f"std_error_{column}"])[1])
        rows.append((name, value, se, method))
    rows += _data_rows(estimator, stratum)
    table = pd.DataFrame(rows, columns=["quantity", "estimate", "std_error", "std_error_method"])
    log_first = estimator.scale != "difference"
    dof = estimator_dof(estimator)
    intervals = [
        share_interval(est, se, level, dof=dof)
        if name.startswith("share ")
        else normal_interval(est, se, level, i == 0 and log_first, dof=dof)
        for i, (name, est, se) in enumerate(
            zip(table["quantity"], table["estimate"], table["std_error"], strict=True)
        )
    ]
    table.insert(3, "ci_low", [low for low, _ in intervals])
    table.insert(4, "ci_high", [high for _, high in intervals])
    table = table.set_index("quantity")
    table.attrs["scale"] = estimator.scale
    table.attrs["notes"] = _notes(estimator) + diagnostic_warnings(estimator)
    title = f"{type(estimator).__name__}: survivor average causal effect"
    return SummaryTable(table, title=title, level=level)


def _data_rows(estimator, stratum):
    """The stratum shares' and the naive contrast's rows: functions of the nuisance fit and the
    rows alone, so kept in the fit's ``derived`` store and shared by the estimators that share
    the fit (the same rows, checked when shared; the clusters are part of the key)."""
    data = estimator.training_data_
    store = getattr(estimator.nuisance_, "derived", None)
    key = ("summary rows", id(data.groups), estimator.monotonicity, stratum)
    if store is not None and key in store:
        return list(store[key][0])
    w, groups = data.sample_weight, data.groups
    rows = [(name, value, influence_std_error(infl, w, groups), "influence function")
            for name, value, infl in _stratum_shares(estimator)]  # fmt: skip
    cells = arm_cells(stratum, estimator.monotonicity)
    naive, naive_influence = _naive_contrast(data, cells)
    rows.append(
        (
            "naive survivor contrast (biased)" if stratum == "always_survivor" else
            f"naive contrast, treated with intermediate {cells[1]} against control with "
            f"intermediate {cells[0]} (biased)",
            naive,
            influence_std_error(naive_influence, w, groups),
            "influence function",
        )
    )
    if store is not None:
        store[key] = (tuple(rows), data.groups)  # the groups held, so that their id stays theirs
    return rows


def _stratum_shares(estimator):
    """Stratum shares from doubly robust means of the arm survival probabilities.

    ``E[p_t(X)]`` is estimated by ``mean(1{T=t}(S - p_t)/P(T=t|X) + p_t)``; its influence values
    are the centered terms.
    """
    data, nuisance = estimator.training_data_, estimator.nuisance_
    w = data.sample_weight
    pi = nuisance.treatment_probability
    T, S = data.treatment, data.survival
    shares, influence = {}, {}
    for arm, arm_prob in ((1, pi), (0, 1 - pi)):
        p = nuisance.survival[arm]
        in_arm = (T == arm).astype(float)
        if nuisance.missingness is not None:
            # Rows of unknown status drop out, the known ones carry 1 / c_t (missing at random).
            in_arm = in_arm * data.status_known / nuisance.missingness["follow_up"][arm]
        terms = np.divide(in_arm * (S - p), arm_prob, out=np.zeros_like(p), where=in_arm > 0) + p
        shares[arm] = float(np.sum(w * terms) / w.sum())
        influence[arm] = terms - shares[arm]
    mixed, pure = (1, 0) if estimator.monotonicity == "increasing" else (0, 1)
    helped = "protected" if mixed == 1 else "harmed"
    return [
        ("share always-survivor", shares[pure], influence[pure]),
        (f"share {helped}", shares[mixed] - shares[pure], influence[mixed] - influence[pure]),
        ("share doomed", 1 - shares[mixed], -influence[mixed]),
    ]


def _naive_contrast(data, cells=None):
    """Difference of the observed cells' means between arms (survivors by default), with its
    influence values; ``cells`` maps each arm to the intermediate value of its cell."""
    w, T, S = data.sample_weight, data.treatment, data.survival
    cells = {1: 1, 0: 1} if cells is None else cells
    Y = np.where((S == 1) | (cells[1] == 0) | (cells[0] == 0), np.nan_to_num(data.outcome), 0.0)
    influence = np.zeros(data.n_samples)
    means = {}
    observed = S == 1 if data.outcome_observed is None else data.outcome_observed == 1
    for arm, sign in ((1, 1.0), (0, -1.0)):
        cell = (T == arm) & (observed if cells[arm] == 1 else S == 0)
        share = np.sum(w * cell) / w.sum()
        means[arm] = np.sum(w * cell * Y) / np.sum(w * cell)
        influence += sign * cell * (Y - means[arm]) / share
    return float(means[1] - means[0]), influence


def _notes(estimator):
    notes = []
    method = estimator.std_error_method_
    if method == "sandwich":
        notes.append(
            "Standard errors stack the logistic-model score equations with the estimating "
            "equations (M-estimation sandwich), so they account for the fitted models."
        )
    elif method == "bootstrap":
        from ..nuisance._sandwich import sandwich_reason

        reason = getattr(estimator, "_fallback_reason", None)
        reason = reason() if reason else (
            "the sandwich formula needs unpenalized logistic/linear models fitted on all rows "
            f"and here {sandwich_reason(estimator)}"
        )  # fmt: skip
        notes.append(
            f"Standard errors of the effect and the stratum means come from "
            f"{len(estimator.bootstrap_replicates_)} bootstrap resamples (within arms) that refit "
            f"every model, because {reason}."
        )
    elif method == "influence function":
        notes.append("Standard errors come from the efficient influence function.")
    else:
        notes.append(
            "Standard errors ignore the estimation of the nuisance models (n_bootstrap=0); they "
            "may be too wide or too narrow."
        )
    n_repeats = len(estimator.repeat_estimates_)
    if n_repeats > 1:
        notes.append(
            f"Cross-fitting was repeated with {n_repeats} random fold splits: the estimates are "
            "medians over the repeats, and the standard errors add the spread between repeats. "
            "Stratum shares and the naive contrast come from the repeat closest to the median."
        )
    if estimator.training_data_.weighted:
        notes.append(
            "Sample weights enter every model fit and every mean; standard errors treat each row "
            "as one sampled unit carrying its weight (survey linearization)."
        )
    if estimator.training_data_.groups is not None:
        notes.append("Standard errors are cluster-robust (influence values summed per cluster).")
    if estimator.nuisance_.missingness is not None:
        notes.append(missing_data_note(estimator))
    notes.append(SHARE_INTERVAL_NOTE)
    if estimator.n_monotonicity_violations_:
        notes.append(
            f"{estimator.n_monotonicity_violations_} rows contradict monotonicity in the fitted "
            "survival models."
        )
    for message in getattr(estimator, "separation_", []):
        notes.append(
            message.split(":", 1)[0] + ": the standard error (sandwich or influence function) "
            "is not to be trusted where a covariate predicts the model's outcome perfectly. "
            "Merge or drop the level, use a penalized model, or run the unadjusted analysis."
        )
    stratum = _stratum_of(estimator)
    if stratum == "always_survivor":
        notes.append(CAUTIONS)
    else:
        notes.append(ignorability_statement(stratum, estimator.monotonicity))
        notes.append(STRATUM_CAUTIONS.format(words=stratum_words(stratum)))
    return notes


def missing_data_note(estimator):
    """The summary's note on missing data: counts by arm and the assumption made."""
    parts = [
        f"{r['arm']}: {r['n_status_unknown']} of {r['n']} with unknown survival status, "
        f"{r['n_outcome_missing']} of {r['n_known_survivors']} known survivors without an outcome"
        for r in missingness_counts(estimator.training_data_)
    ]
    return (
        "Missing data (" + "; ".join(parts) + ") were handled by inverse probability of "
        f"observation weighting under the assumption that they are {MISSING_AT_RANDOM_ASSUMPTION}"
        ". This cannot be checked from the data; see sensitivity_grid(outcome_shift=...)."
    )
