"""Goodness of fit of the survival side: fitted against observed survival, per arm and group.

Whatever produced the principal scores (two survival models fitted arm by arm, or one model of
stratum membership), what the data can check is the same: among rows of arm ``t``, the fitted
``P(S=1 | T=t, X)`` must match how many survived. The strata themselves are latent, so this is
the only part of a principal score model the observed data test directly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from ..nuisance._models import ConstantModel
from ..nuisance._stratum_arms import StratumArm
from ._arrays import oriented_predictions
from ._cache import cached_diagnostic, without_strata
from ._monotonicity import _strata_labels

__all__ = ["survival_fit_check", "survival_log_likelihood", "survival_parameter_count"]

ARMS = ((1, "treated"), (0, "control"))


def _arm_rows(data, arm):
    rows = data.treatment == arm
    if data.status_known is not None:
        rows &= data.status_known == 1  # missing="at_random": status unknown for the others
    return rows


def _quantile_groups(predicted, n_groups):
    """Group ids by quantiles of the prediction, exactly as scikit-learn's
    ``calibration_curve(strategy="quantile")`` bins rows (the test checks the two agree)."""
    edges = np.percentile(predicted, np.linspace(0, 100, n_groups + 1))
    ids = np.searchsorted(edges[1:-1], predicted)
    labels = [f"{edges[g]:.3f}-{edges[g + 1]:.3f}" for g in range(n_groups)]
    return ids, labels


def _stratum_model(estimator):
    """The fitted PrincipalScoreModel behind the survival side, or None when it is arm-wise."""
    first = estimator.nuisance_.models[("survival", 1)][0]
    return first.strata if isinstance(first, StratumArm) else None


def survival_log_likelihood(estimator):
    """Observed-data log-likelihood of the survival statuses under the fitted survival side.

    Both survival models, arm-wise logistic or the stratum model, give the observed statuses
    the same Bernoulli likelihood: a row of arm ``t`` survives with probability
    ``P(S=1 | T=t, X)`` (for the stratum model under ``"increasing"``: ``e_always +
    e_protected`` when treated, ``e_always`` under control). Weighted by the sample weights;
    rows of unknown status (``missing="at_random"``) do not enter.
    """
    oriented_predictions(estimator)  # the clear error for an unfitted estimator
    data, nuisance = estimator.training_data_, estimator.nuisance_
    total = 0.0
    for arm, _ in ARMS:
        rows = _arm_rows(data, arm)
        p = np.clip(nuisance.survival[arm][rows], 1e-300, 1 - 1e-16)
        s = data.survival[rows]
        total += float(np.sum(data.sample_weight[rows] * (s * np.log(p) + (1 - s) * np.log1p(-p))))
    return total


def _coefficient_count(model):
    if hasattr(model, "steps"):  # a Pipeline: the parameters sit in its last step
        model = model.steps[-1][1]
    if hasattr(model, "coef_") and hasattr(model, "intercept_"):
        return int(np.size(model.coef_) + np.size(model.intercept_))
    if isinstance(model, ConstantModel):
        return 1
    return None


def survival_parameter_count(estimator):
    """Free parameters of the fitted survival side, or ``None`` when they cannot be counted.

    Arm-wise: the coefficients and intercepts of the two survival models. Default stratum
    model (multinomial logistic, doomed the reference): an intercept and a coefficient per
    covariate for each of the two other strata. Models without coefficients (boosting,
    forests, a stratum model fitted by EM) and cross-fitted models (one fit per fold) give
    ``None``.
    """
    nuisance = estimator.nuisance_
    if nuisance.cross_fitted:
        return None
    strata = _stratum_model(estimator)
    if strata is not None:
        if strata.estimator is not None:
            return None
        # coef_ and intercept_ carry a row of zeros for the reference stratum.
        return int((len(strata.classes_) - 1) * (strata.n_features_in_ + 1))
    counts = [_coefficient_count(nuisance.models[("survival", arm)][0]) for arm, _ in ARMS]
    return None if None in counts else int(sum(counts))


# A fitted probability this close to 0 or 1 is a perfect prediction (separation).
CERTAIN = 1e-6


def _arm_parameters(estimator):
    """Coefficients of one arm's survival model with the default logistic model (intercept
    included): at most this many distinct fitted values are reproduced exactly."""
    return int(estimator.n_features_in_) + 1


def _reference_df(n_groups, quantile_groups):
    """Degrees of freedom of the chi-square reference (see survival_fit_check)."""
    return n_groups - 2 if quantile_groups else n_groups - 1


@cached_diagnostic(without_strata)
def survival_fit_check(estimator, X=None, strata=None, *, n_groups=10):
    """Compare fitted and observed survival per arm within groups of rows, with a test.

    In each arm, rows of known survival status are grouped (by default into ``n_groups``
    groups of about equal size by their fitted survival probability in that arm). Per group,
    the observed number of survivors ``O`` is set against the expected number ``E``, the sum
    of the fitted probabilities, and its binomial variance ``V`` under the fitted model, the
    sum of ``p (1 - p)`` (with sample weights ``w``: ``O = sum w S``, ``E = sum w p``,
    ``V = sum w^2 p (1 - p)``). The statistic of an arm is the Hosmer-Lemeshow-type
    chi-square ``sum over groups of (O - E)^2 / V``.

    Works for any fitted estimator: its two arm-wise survival models, or a stratum model
    (``survival_model=PrincipalScoreModel()``), whose fitted survival shares are
    ``P(S=1 | T=t, X)`` built from the principal scores.

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
    X : DataFrame, optional
        Needed only when ``strata`` names one of its columns.
    strata : None, str or array-like of shape (n_samples,)
        ``None``: groups by quantiles of the fitted survival probability within each arm. A
        column name of ``X`` (numeric columns with more than 10 values are cut into quintiles)
        or one label per fitted row: the same labels in both arms.
    n_groups : int, default=10
        Number of quantile groups when ``strata`` is ``None`` (tied predictions can leave
        fewer; empty groups are not counted).

    Returns
    -------
    table : DataFrame indexed by (``arm``, ``group``)
        ``n_rows``, ``predicted`` (weighted mean fitted survival, ``E / sum w``),
        ``observed`` (weighted survival share, ``O / sum w``), ``std_error`` (binomial standard
        error of the observed share under the fitted model, ``sqrt(V) / sum w``) and ``z``
        (``(O - E) / sqrt(V)``). ``table.attrs["tests"]`` holds, for ``"treated"``,
        ``"control"`` and ``"both arms"`` (the sum of the assessable arms), the
        ``statistic``, its ``df``, ``p_value``, ``assessable`` and ``reason`` (why not: rows
        predicted within ``1e-6`` of 0 or 1, as under separation, or no more distinct fitted
        values than coefficients; the ``p_value`` is then NaN); ``attrs`` also gives
        ``survival_model`` (``"arm-wise"`` or ``"strata"``: a stratum model), ``grouping``,
        ``reference``, ``log_likelihood`` (see :func:`survival_log_likelihood`),
        ``n_parameters``, ``aic`` and ``notes``.

    Notes
    -----
    Reference distribution. With groups formed from the fitted probabilities, the statistic
    of an arm is referred to a chi-square with ``G - 2`` degrees of freedom (``G`` groups
    entering the statistic): Hosmer & Lemeshow (1980) showed by simulation that this
    approximates its null distribution for a logistic model with an intercept, the estimated
    coefficients taking up about two degrees of freedom (their theory: a weighted sum of
    chi-square(1) variables, ``G`` minus the number of parameters of them with weight 1 and the
    rest with weights between 0 and 1). Out-of-fold predictions (``n_folds``) keep nearly the
    same constraint (each row's outcome enters the models that predict the other rows; with an
    intercept-only model and one row per fold the deviations sum to zero exactly), and the
    same reference holds: in a simulation with correct logistic models and 5 folds the
    statistic of both arms averaged 16.9 against the 16 of ``2 (G - 2)``, rejecting at 5% in
    6% and 8% of 300 replicates in two runs (slightly liberal). With groups given by
    the caller, ``G - 1`` is used. This is conservative: under a correct model fitted by
    maximum likelihood the covariance of the deviations is their binomial variance minus a
    positive semi-definite part due to the fit, so the statistic is a weighted sum of
    chi-square(1) variables with weights in [0, 1], one of them 0 (the intercept makes the
    deviations of an arm sum to zero); groups defined by model covariates push more weights
    towards 0. The two arms' survival models are fitted on disjoint rows, so their statistics
    are added with their degrees of freedom. A stratum model shares its parameters between
    the arms; the same references are used, and the size of the test under a correct model is
    checked by simulation in the test suite, as for the arm-wise models.

    Rows are treated as independent: clusters (``groups`` in ``fit``) are ignored, which
    makes the test liberal when survival is correlated within clusters. A small p-value says
    the fitted survival probabilities disagree with the data somewhere; a large one does not
    show that the model is right (the test has little power in small samples), and says
    nothing about the latent strata beyond the two observed survival shares.

    References
    ----------
    Hosmer, D. W. & Lemeshow, S. (1980). Goodness of fit tests for the multiple logistic
    regression model. Communications in Statistics - Theory and Methods, 9, 1043-1069.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> est = ps.PrincipalScoreWeighting(n_bootstrap=0).fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> table = ps.survival_fit_check(est)
    >>> sorted(table.attrs["tests"])
    ['both arms', 'control', 'treated']
    >>> table.attrs["tests"]["treated"]["df"]
    8
    """
    o = oriented_predictions(estimator)
    if isinstance(n_groups, bool) or not isinstance(n_groups, int | np.integer) or n_groups < 3:
        raise ValueError(f"`n_groups` must be an integer of at least 3; got {n_groups!r}.")
    data, nuisance = estimator.training_data_, estimator.nuisance_
    masks = order = None
    if strata is not None:
        masks, order, description = _strata_labels(o, X, strata)
    else:
        description = f"{n_groups} groups by quantiles of the fitted survival probability"
    records, tests = [], {}
    for arm, arm_name in ARMS:
        rows = _arm_rows(data, arm)
        predicted = np.clip(nuisance.survival[arm][rows], 0.0, 1.0)
        survived = data.survival[rows].astype(float)
        w = data.sample_weight[rows]
        if masks is None:
            ids, labels = _quantile_groups(predicted, int(n_groups))
        else:
            labels = order
            ids = np.empty(rows.sum(), dtype=int)
            for g, label in enumerate(order):
                ids[masks[label][rows]] = g
        size = len(labels)
        total = np.bincount(ids, weights=w, minlength=size)
        count = np.bincount(ids, minlength=size)
        observed = np.bincount(ids, weights=w * survived, minlength=size)
        expected = np.bincount(ids, weights=w * predicted, minlength=size)
        variance = np.bincount(ids, weights=w**2 * predicted * (1 - predicted), minlength=size)
        statistic, used = 0.0, 0
        # Rows predicted (almost) perfectly, as a separated covariate level makes them, have
        # (almost) no binomial variance: their groups cannot show a misfit.
        certain = (predicted < CERTAIN) | (predicted > 1 - CERTAIN)
        n_certain = int(certain.sum())
        for g in np.flatnonzero(count > 0):
            with np.errstate(divide="ignore", invalid="ignore"):
                z = (observed[g] - expected[g]) / np.sqrt(variance[g])
            in_group = ids == g
            if variance[g] > 0 and not certain[in_group].all():
                statistic += z**2
                used += 1
            records.append({
                "arm": arm_name, "group": labels[g], "n_rows": int(count[g]),
                "predicted": expected[g] / total[g], "observed": observed[g] / total[g],
                "std_error": np.sqrt(variance[g]) / total[g],
                "z": z if variance[g] > 0 else np.nan,
            })  # fmt: skip
        df = max(0, _reference_df(used, masks is None))
        reason = None
        distinct = np.unique(np.round(predicted, 10)).size
        if n_certain:
            reason = (f"{n_certain} of {rows.sum()} rows have a fitted survival probability "
                      f"within {CERTAIN:g} of 0 or 1 (a covariate level predicts survival "
                      "perfectly: separation)")  # fmt: skip
        elif masks is None and distinct <= _arm_parameters(estimator):
            reason = (f"the fitted survival probabilities take only {distinct} values, no more "
                      "than the model has coefficients, so every group reproduces its observed "
                      "share by construction")  # fmt: skip
        assessable = reason is None and df > 0
        tests[arm_name] = {
            "statistic": float(statistic),
            "df": int(df),
            "p_value": float(stats.chi2.sf(statistic, df)) if assessable else np.nan,
            "n_groups": int(used),
            "assessable": bool(assessable),
            "reason": reason,
        }
    testable = [tests[name] for _, name in ARMS if tests[name]["assessable"]]
    both = sum(test["statistic"] for test in testable)
    both_df = sum(test["df"] for test in testable)
    tests["both arms"] = {
        "statistic": float(both),
        "df": int(both_df),
        "p_value": float(stats.chi2.sf(both, both_df)) if both_df > 0 else np.nan,
        "n_groups": int(sum(test["n_groups"] for test in testable)),
        "assessable": bool(both_df > 0),
        "reason": None if both_df > 0 else "no arm's fit can be assessed",
    }
    table = pd.DataFrame.from_records(records).set_index(["arm", "group"])
    log_likelihood = survival_log_likelihood(estimator)
    n_parameters = survival_parameter_count(estimator)
    notes = []
    empty = sum(tests[name]["n_groups"] for _, name in ARMS) < len(table)
    if empty:
        notes.append("Groups whose fitted probabilities are all 0 or 1 have no binomial "
                     "variance; they are shown but do not enter the statistic.")  # fmt: skip
    if any(tests[name]["df"] <= 0 for _, name in ARMS):
        notes.append("Too few groups with distinct fitted probabilities for a test in some arm "
                     "(as without covariates): that arm has no p-value and is left out of the "
                     "test of both arms.")  # fmt: skip
    for _, name in ARMS:
        if tests[name]["reason"]:
            notes.append(f"The test cannot assess the fit in the {name} arm: "
                         f"{tests[name]['reason']}. No p-value is given there (a p-value near "
                         "1 would look like a perfect fit), and that arm is left out of the "
                         "test of both arms.")  # fmt: skip
    if data.groups is not None:
        notes.append("Rows are treated as independent; the clusters are ignored, so the test "
                     "is liberal if survival is correlated within clusters.")  # fmt: skip
    if masks is None:
        reference = "chi-square with G - 2 degrees of freedom (Hosmer-Lemeshow)"
    else:
        reference = (
            "chi-square with G - 1 degrees of freedom (conservative, more so for "
            "groups defined by model covariates)"
        )
    table.attrs.update(
        tests=tests,
        survival_model="arm-wise" if _stratum_model(estimator) is None else "strata",
        grouping=description,
        reference=reference,
        out_of_fold=bool(nuisance.cross_fitted),
        log_likelihood=log_likelihood,
        n_parameters=n_parameters,
        aic=None if n_parameters is None else 2 * n_parameters - 2 * log_likelihood,
        notes=notes,
    )
    return table
