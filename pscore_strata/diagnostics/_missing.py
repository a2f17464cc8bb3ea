"""Diagnostics of the follow-up and response models (``missing="at_random"``).

Balance check of inverse probability weighting for missing data (Rosenbaum & Rubin 1983's
balancing property applied to observation instead of treatment): if ``c_t(X)`` is right, the
rows of arm t with known status, weighted by ``1 / c_t(X)``, have the covariate distribution of
all rows of arm t; if ``r_t(X)`` is right, responders weighted by ``1 / r_t(X)`` have that of all
known survivors of arm t. The unweighted comparison beside it shows how different the observed
rows are (what a complete-case analysis would analyse).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..nuisance._missing import missingness_counts
from ._arrays import PROBABILITY_BOUNDS, ROW_SHARE_TOLERANCE, SMD_THRESHOLD, oriented_predictions
from ._covariates import covariate_matrix, moments

__all__ = ["missing_data_balance", "missing_data_summary", "missing_data_warnings"]


def _groups(estimator):
    """Per (check, arm): (reference row weights, observed row weights, their 1/p weights)."""
    data, nuisance = estimator.training_data_, estimator.nuisance_
    if nuisance.missingness is None:
        raise ValueError(
            "The estimator was fitted without missing data (or without missing=\"at_random\"); "
            "there are no follow-up or response models to check."
        )
    w, T, S = data.sample_weight, data.treatment, data.survival
    C, R = data.status_known.astype(float), data.outcome_observed.astype(float)
    groups = {}
    for arm, label in ((1, "treated"), (0, "control")):
        in_arm = (T == arm).astype(float)
        c, r = nuisance.missingness["follow_up"][arm], nuisance.missingness["response"][arm]
        groups[("follow_up", label)] = (w * in_arm, w * in_arm * C, w * in_arm * C / c)
        survivors = in_arm * C * S
        groups[("response", label)] = (w * survivors, w * survivors * R, w * survivors * R / r)
    return groups


def missing_data_summary(estimator):
    """Counts and shares of unknown survival status and of missing outcomes, by arm.

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust

    Returns
    -------
    DataFrame indexed by arm (``treated``, ``control``)
        ``n``, ``n_status_unknown``, ``share_status_unknown`` (weighted, of the arm),
        ``n_known_survivors``, ``n_outcome_missing``, ``share_outcome_missing`` (weighted, of
        the known survivors). All zero when nothing was missing. With fitted models also
        ``min_follow_up_probability`` and ``min_response_probability`` (over the rows each
        model is fitted on; 1 where the model was not needed), the overlap of the two models.
    """
    oriented_predictions(estimator)  # a clear error for unfitted estimators
    table = pd.DataFrame(missingness_counts(estimator.training_data_)).set_index("arm")
    missingness = estimator.nuisance_.missingness
    if missingness is not None:
        for (kind, label), (reference, _, _) in _groups(estimator).items():
            rows = reference > 0
            values = missingness[kind][1 if label == "treated" else 0][rows]
            table.loc[label, f"min_{kind}_probability"] = values.min() if values.size else 1.0
    return table


def missing_data_balance(estimator, X):
    """Do the observed rows, reweighted, resemble everyone they stand for?

    Parameters
    ----------
    estimator : fitted estimator with ``missing="at_random"`` and missing data
    X : DataFrame or array-like of shape (n_samples, n_covariates)
        Covariates of the fitted rows, in the fitted order.

    Returns
    -------
    DataFrame, one row per covariate
        For each check (``follow_up``: rows with known status against all rows of the arm;
        ``response``: responders against all known survivors of the arm) and arm:
        ``raw_smd_<check>_<arm>`` (unweighted) and ``smd_<check>_<arm>`` (observed rows
        weighted by the inverse of the fitted probability). SMDs use the standard deviation of
        the reference group; ``|SMD|`` above 0.1 is the common-practice signal of imbalance.
    """
    groups = _groups(estimator)
    names, Z = covariate_matrix(X, estimator.training_data_.n_samples)
    missing = np.isnan(Z)
    observed = (~missing).astype(float)
    Z[missing] = 0.0
    table = pd.DataFrame(index=pd.Index(names, name="covariate"))
    for (check, arm), (reference, raw, weighted) in groups.items():
        ref_mean, ref_var = moments(Z, observed, reference)
        sd = np.sqrt(ref_var)
        with np.errstate(divide="ignore", invalid="ignore"):
            for prefix, w in (("raw_smd", raw), ("smd", weighted)):
                mean = moments(Z, observed, w)[0]
                table[f"{prefix}_{check}_{arm}"] = np.where(sd > 0, (mean - ref_mean) / sd, 0.0)
    table.attrs["smd_threshold"] = SMD_THRESHOLD
    return table


def missing_data_warnings(estimator, o=None, X=None):
    """Warnings on small follow-up or response probabilities and, given ``X``, on balance."""
    o = oriented_predictions(estimator) if o is None else o
    if o.coarsening is None:
        return []
    data, missingness = estimator.training_data_, estimator.nuisance_.missingness
    low = PROBABILITY_BOUNDS[0]
    messages = []
    for kind, label, rows in (
        ("follow_up", "follow-up (status known)", lambda arm: data.treatment == arm),
        ("response", "response (outcome observed)",
         lambda arm: (data.treatment == arm) & (data.status_known == 1) & (data.survival == 1)),
    ):  # fmt: skip
        for arm, arm_label in ((1, "treated"), (0, "control")):
            in_rows = rows(arm)
            share = float(np.mean(missingness[kind][arm][in_rows] < low)) if in_rows.any() else 0
            if share > ROW_SHARE_TOLERANCE:
                messages.append(
                    f"Missing data: {share:.1%} of the {arm_label} rows it is fitted on have a "
                    f"fitted {label} probability below {low} (common practice allows about "
                    f"{ROW_SHARE_TOLERANCE:.0%}); their inverse-probability weights are large, "
                    "so the estimate rests on few observed rows there."
                )
    if X is not None:
        smd = missing_data_balance(estimator, X).filter(regex="^smd_").abs().max(axis=1)
        flagged = smd[smd > SMD_THRESHOLD].sort_values(ascending=False)
        if len(flagged):
            listed = ", ".join(f"{name} ({value:.2f})" for name, value in flagged.head(5).items())
            messages.append(
                f"Missing data: after reweighting, observed rows still differ from all rows they "
                f"stand for in {len(flagged)} covariate(s) (|SMD| above {SMD_THRESHOLD}, common "
                f"rule of thumb): {listed}. The follow-up or response model is probably "
                "misspecified; try interactions or a more flexible response_model."
            )
    return messages
