"""Survival compared between arms, overall and within strata: a check of monotonicity."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from .._validation import check_level
from ._arrays import (
    VIOLATION_TOLERANCE,
    effective_sample_size,
    fitted_scores,
    oriented_predictions,
    treated_indicator,
)
from ._cache import cached_diagnostic, without_strata

__all__ = ["monotonicity_check"]


def _score_bin_labels(bins):
    """Labels of the score bins, with as many decimals as it takes to tell them apart."""
    for decimals in range(2, 9):
        labels = [
            f"always-survivor score {b.left:.{decimals}f}-{b.right:.{decimals}f}" for b in bins
        ]
        if len(set(labels)) == len(labels):
            return labels
    return [f"always-survivor score bin {k + 1}" for k in range(len(bins))]


def _strata_labels(o, X, strata):
    """Row masks per stratum label, the labels in display order, and a description."""
    n = o.weight.shape[0]
    if strata is None and np.ptp(np.minimum(o.p_pure, o.p_mixed)) <= VIOLATION_TOLERANCE:
        # No covariates (or none that moves the score): every row shares one score, so the
        # overall comparison is the only one there is.
        return {}, [], "none (the always-survivor score is the same for every row)"
    if strata is None:
        # Quintiles of the fitted always-survivor score: rows alike in the latent stratum share.
        strata = pd.qcut(np.minimum(o.p_pure, o.p_mixed), 5, duplicates="drop")
        strata = strata.rename_categories(_score_bin_labels(strata.categories))
        description = "quintiles of the fitted always-survivor score"
    elif isinstance(strata, str):
        if not isinstance(X, pd.DataFrame) or strata not in X.columns:
            raise ValueError(
                f"`strata`={strata!r} names a column, so `X` must be a DataFrame holding it; "
                "otherwise pass one stratum label per row."
            )
        column, description = X[strata], f"column {strata!r} of X"
        if pd.api.types.is_numeric_dtype(column) and column.nunique() > 10:
            column = pd.qcut(column, 5, duplicates="drop")
        strata = column
    else:
        description = "strata given by the caller"
    if isinstance(strata, pd.Series):
        strata = strata.array
    if np.ndim(strata) != 1 or len(strata) != n:
        raise ValueError(
            f"`strata` must hold one label per fitted row ({n}); got shape {np.shape(strata)}."
        )
    if isinstance(strata, pd.Categorical):
        missing = int((strata.codes < 0).sum())  # no per-row object array at a million rows
    else:
        missing = int(pd.isna(np.asarray(strata, dtype=object)).sum())
    if missing:
        raise ValueError(f"`strata` has {missing} missing label(s); give every row one.")
    categories = pd.Categorical(strata)
    names = np.asarray(categories.categories.astype(str))
    codes = categories.codes
    present = np.bincount(codes, minlength=names.size) > 0
    order = list(dict.fromkeys(str(name) for name, seen in zip(names, present, strict=True)
                               if seen))  # fmt: skip
    # Row masks per label (categories whose text coincides share one label, as before).
    masks = {}
    for label in order:
        which = np.flatnonzero(names == label)
        masks[label] = codes == which[0] if which.size == 1 else np.isin(codes, which)
    return masks, order, description


def _two_proportions(S, T, w, z_crit):
    """Survival shares per arm, their difference, Wald interval and pooled two-sided z-test.

    With unit weights this is the textbook test (pooled variance under equal proportions) and
    Wald interval; with weights the shares are weighted and each arm's size is its Kish
    effective sample size.
    """
    rates, sizes = [], []
    for arm in (1, 0):
        w_arm = w[T == arm]
        rates.append(np.sum(w_arm * S[T == arm]) / w_arm.sum() if w_arm.sum() > 0 else np.nan)
        sizes.append(effective_sample_size(w_arm))
    # numpy floats, so that an empty or weightless arm gives NaN rather than ZeroDivisionError.
    (r1, r0), (n1, n0) = np.asarray(rates, float), np.asarray(sizes, float)
    diff = r1 - r0
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(r1 * (1 - r1) / n1 + r0 * (1 - r0) / n0)
        pooled = (r1 * n1 + r0 * n0) / (n1 + n0)
        z = diff / np.sqrt(pooled * (1 - pooled) * (1 / n1 + 1 / n0))
    return {
        "n_treated": int(np.sum(T == 1)),
        "n_control": int(np.sum(T == 0)),
        "survival_treated": r1,
        "survival_control": r0,
        "difference": diff,
        "ci_low": diff - z_crit * se,
        "ci_high": diff + z_crit * se,
        "z": z,
        "p_value": 2 * stats.norm.sf(abs(z)) if np.isfinite(z) else np.nan,
    }


@cached_diagnostic(without_strata)
def monotonicity_check(estimator, X=None, strata=None, *, adjust=True, level=0.95):
    """Compare survival between arms overall and within covariate strata.

    Monotonicity "increasing" (``S(1) >= S(0)`` for every unit) implies
    ``P(S=1 | T=1, X) >= P(S=1 | T=0, X)``; "decreasing" implies the reverse. A difference
    significantly in the wrong direction contradicts the assumption; agreement cannot confirm
    it (the assumption concerns individuals and is untestable).

    Parameters
    ----------
    estimator : fitted estimator exposing ``nuisance_`` and ``training_data_``
    X : DataFrame, optional
        Needed only when ``strata`` names one of its columns.
    strata : None, str or array-like of shape (n_samples,)
        ``None``: quintiles of the fitted always-survivor score. A column name of ``X``
        (numeric columns with more than 10 values are cut into quintiles). Or one label per row.
    adjust : bool, default=True
        Weight rows by ``1/pi`` (treated) and ``1/(1-pi)`` (control) so each arm stands for the
        stratum's population (needed in observational data); ``False`` compares crude shares.
    level : float, default=0.95
        Confidence level of the intervals. The flag ``contradicts_monotonicity`` uses the
        Bonferroni-adjusted level ``1 - (1 - level) / k`` over the ``k`` rows of the table.

    Returns
    -------
    table : DataFrame indexed by stratum (first row ``"overall"``)
        Arm sizes and survival shares, ``difference`` (treated - control) with a Wald interval,
        the pooled two-proportion ``z`` and two-sided ``p_value``, ``n_fitted_violations``
        (rows whose fitted survival models contradict monotonicity by more than
        ``VIOLATION_TOLERANCE``, 1e-8: rounding noise is no contradiction) and
        ``contradicts_monotonicity``: the Bonferroni-adjusted interval (level in
        ``attrs["flag_level"]``) lies entirely on the wrong side of zero. The table makes one
        comparison per row, so unadjusted flags would fire by chance in up to one table in seven
        of a correct model with the default six rows;
        :func:`~pscore_strata.diagnostic_warnings` warns about exactly the flagged rows.
    """
    o = oriented_predictions(estimator)
    z_crit = stats.norm.ppf(0.5 + check_level(level) / 2)
    if not isinstance(adjust, bool):
        raise TypeError(f"`adjust` must be True or False; got {adjust!r}.")
    masks, order, description = _strata_labels(o, X, strata)
    T = treated_indicator(o)
    w = o.weight
    if adjust:
        pi = fitted_scores(o)["treatment"]
        w = w * np.where(T == 1, 1 / pi, 1 / (1 - pi))
    if o.coarsening is not None:
        # Unknown survival status (missing at random): known rows carry 1 / c of their arm.
        w = w * (o.coarsening.known_mixed + o.coarsening.known_pure)
    violations = o.p_pure - o.p_mixed > VIOLATION_TOLERANCE
    rows = {"overall": (np.ones(o.weight.shape[0], bool))}
    rows.update(masks)
    table = pd.DataFrame.from_dict(
        {
            name: {
                **_two_proportions(o.survival[rows_in], T[rows_in], w[rows_in], z_crit),
                "n_fitted_violations": int(violations[rows_in].sum()),
            }
            for name, rows_in in rows.items()
        },
        orient="index",
    ).rename_axis("stratum")
    # Bonferroni over the table's rows (the overall comparison and one per stratum), the rule of
    # diagnostic_warnings: the row's Wald interval at level 1 - (1 - level) / k.
    flag_level = 1 - (1 - level) / len(table)
    std_error = (table["ci_high"] - table["ci_low"]) / (2 * z_crit)
    half_width = stats.norm.ppf(0.5 + flag_level / 2) * std_error
    if o.increasing:
        wrong_side = table["difference"] + half_width < 0
    else:
        wrong_side = table["difference"] - half_width > 0
    table["contradicts_monotonicity"] = wrong_side.to_numpy()
    table.attrs.update(
        strata=description,
        adjusted=adjust,
        level=level,
        flag_level=flag_level,
        monotonicity="increasing" if o.increasing else "decreasing",
        n_fitted_violations=int(violations.sum()),
        notes=[
            "Survival differing in the forbidden direction contradicts monotonicity; agreement "
            "cannot confirm it, because the assumption concerns each unit's two potential "
            "survival outcomes and is untestable.",
            "Shares are weighted by the inverse treatment probability."
            if adjust
            else "Crude shares: confounded in observational data; prefer adjust=True.",
        ],
    )
    return table
