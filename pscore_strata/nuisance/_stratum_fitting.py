"""The numerical parts of the stratum model's fit: parameter and input checks, starting shares,
Newton's method on the mixture likelihood, and a weighted classifier fit (the EM M-step)."""

from __future__ import annotations

import numpy as np
from sklearn.pipeline import Pipeline
from sklearn.utils.validation import has_fit_parameter

from .._features import check_feature_names, check_features

__all__ = ["check_stratum_params", "check_cells", "starting_strata", "newton_maximize",
           "weighted_fit", "check_fit_input", "check_prediction_input",
           "not_converged_message"]  # fmt: skip


def check_stratum_params(model):
    """Check a :class:`~._strata.PrincipalScoreModel`'s parameters (at ``fit``)."""
    if model.monotonicity not in ("increasing", "decreasing"):
        raise ValueError(
            "`monotonicity` must be 'increasing' or 'decreasing'; got "
            f"{model.monotonicity!r}."
        )
    if isinstance(model.max_iter, bool) or not isinstance(model.max_iter, int | np.integer) or (
        model.max_iter < 1
    ):
        raise ValueError(f"`max_iter` must be a positive integer; got {model.max_iter!r}.")
    if not (isinstance(model.tol, str) and model.tol == "auto") and (
        isinstance(model.tol, bool) or not isinstance(model.tol, int | float)
        or not (model.tol > 0)
    ):  # fmt: skip
        raise ValueError(f"`tol` must be 'auto' or a positive number; got {model.tol!r}.")
    if model.init not in ("multinomial", "shares"):
        raise ValueError(f"`init` must be 'multinomial' or 'shares'; got {model.init!r}.")
    if model.estimator is not None:
        final = model.estimator.steps[-1][1] if isinstance(model.estimator, Pipeline) else (
            model.estimator
        )
        if not hasattr(final, "predict_proba") or not hasattr(final, "fit"):
            raise TypeError(
                f"`estimator` must be a classifier with `predict_proba`; got "
                f"{type(model.estimator).__name__}."
            )
        if not has_fit_parameter(final, "sample_weight"):
            raise TypeError(
                f"`estimator` ({type(final).__name__}) does not accept `sample_weight` in "
                "fit, which the EM fit needs (each unit is duplicated once per compatible "
                "stratum and weighted by its posterior probability). Pass a classifier that "
                "accepts sample weights (for example LogisticRegression or "
                "HistGradientBoostingClassifier), or estimator=None for the multinomial "
                "logistic model."
            )


def check_cells(X, treatment, survival, sample_weight):
    """0/1 treatment and survival and the weights of a stratum-model fit, checked."""
    n = None if X is None else len(X)
    arrays = {}
    for name, values in (("treatment", treatment), ("survival", survival)):
        try:
            values = np.asarray(values, dtype=float).ravel()
        except (TypeError, ValueError):
            shown = np.asarray(values, dtype=object).ravel()[:1]
            raise ValueError(
                f"`{name}` must hold only 0 and 1 (numbers); got text such as "
                f"{shown[0] if shown.size else ''!r}. Recode it first, for example "
                f"(column == 'treated').astype(int)."
            ) from None
        if n is not None and values.size != n:
            raise ValueError(f"`{name}` has {values.size} values but `X` has {n} rows.")
        bad = ~np.isin(values, (0.0, 1.0))
        if bad.any():
            raise ValueError(
                f"`{name}` must hold only 0 and 1; {int(bad.sum())} value(s) differ "
                f"(first: {values[bad][0]!r})."
            )
        n = values.size
        arrays[name] = values.astype(int)
    if sample_weight is None:
        weights = np.ones(n)
    else:
        weights = np.asarray(sample_weight, dtype=float).ravel()
        if weights.size != n or not np.all(np.isfinite(weights)) or (weights < 0).any() or (
            weights.sum() <= 0
        ):
            raise ValueError(
                f"`sample_weight` must be {n} finite non-negative values with a positive "
                "sum."
            )
    for arm, name in ((1, "treated"), (0, "control")):
        if weights[arrays["treatment"] == arm].sum() <= 0:
            raise ValueError(
                f"`treatment` puts no row (or no weight) in the {name} arm: the strata are "
                "identified only by comparing the two arms' survival, so the model cannot be "
                "fitted. Pass data with units (and positive weights) in both arms."
            )
    return arrays["treatment"], arrays["survival"], weights


def starting_strata(allowed, weights):
    """Stratum shares from the arms' survival shares (the unadjusted moment estimates)."""
    survived = allowed[:, 0]
    # Mixed-arm survivors allow the helped stratum and its deaths do not; the pure arm is
    # the other way round.
    mixed = allowed[:, 1] == survived
    pure = ~mixed
    pure_share = (
        np.average(survived[pure], weights=weights[pure]) if weights[pure].sum() else 0.5
    )
    mixed_share = (
        np.average(survived[mixed], weights=weights[mixed]) if weights[mixed].sum() else 0.5
    )
    always = float(np.clip(pure_share, 0.02, 0.96))
    helped = float(np.clip(mixed_share - pure_share, 0.02, 0.97 - always))
    return np.array([always, helped, 1.0 - always - helped])


def newton_maximize(likelihood, theta, max_iter, tol):
    """Maximize the mean log-likelihood by Newton steps with step halving.

    The observed information need not be positive definite away from the maximum (it is the
    complete-data information minus the missing information), so a ridge is added until its
    Cholesky factorization exists; each step is halved until the log-likelihood rises.
    Returns the parameters and the number of Newton steps taken.
    """
    value, gradient, information = likelihood.evaluate(theta)
    for iteration in range(int(max_iter)):
        if np.max(np.abs(gradient)) <= tol:
            return theta, iteration
        ridge = 0.0
        scale = max(float(np.max(np.abs(np.diag(information)))), 1e-12)
        while True:
            try:
                factor = np.linalg.cholesky(information + ridge * np.eye(theta.size))
                break
            except np.linalg.LinAlgError:
                ridge = max(ridge * 10, 1e-8 * scale)
        step = np.linalg.solve(factor.T, np.linalg.solve(factor, gradient))
        for _ in range(60):
            candidate = theta + step
            new_value = likelihood.log_likelihood(candidate)
            if np.isfinite(new_value) and new_value >= value - 1e-14 * abs(value):
                break
            step = step / 2
        else:
            return theta, iteration + 1  # no ascent direction left: stop (not converged)
        theta = candidate
        value, gradient, information = likelihood.evaluate(theta)
    return theta, int(max_iter)


def weighted_fit(model, X, labels, weights):
    if isinstance(model, Pipeline):
        return model.fit(X, labels, **{f"{model.steps[-1][0]}__sample_weight": weights})
    return model.fit(X, labels, sample_weight=weights)


def check_fit_input(model, X, n_rows):
    """The estimators' checks of ``X`` (NaN or text the classifier cannot take, with their
    messages) and scikit-learn's feature names, recorded for ``predict_proba`` to compare."""
    X, _, _ = check_features(X, (model.estimator,), n_rows=n_rows)
    check_feature_names(model, X, reset=True)
    return X


def check_prediction_input(model, X):
    """Covariates at prediction: none after a fit without them, else the fitted names."""
    if X is not None and model.n_features_in_ == 0:
        raise ValueError(
            "This PrincipalScoreModel was fitted without covariates (X=None), so its "
            "principal scores are the same for every row: call predict_proba(None), or "
            "refit it with the covariates."
        )
    if X is not None:
        check_feature_names(model, X, reset=False)


def not_converged_message(model, patience):
    """What to tell the user when a :class:`PrincipalScoreModel` fit did not converge."""
    if model.estimator is not None:
        return (
            f"PrincipalScoreModel's EM fit did not settle in max_iter={model.max_iter} "
            f"iterations: the observed-data log-likelihood still rose by more than "
            f"tol={model.tol} (relative) within the last {patience} iterations. The "
            "model kept is the iteration with the highest log-likelihood. Increase "
            "`max_iter`, loosen `tol`, or regularize the classifier (fewer or shallower "
            "trees, larger leaves); a learner that keeps fitting the posteriors more "
            "closely overfits them."
        )
    return (
        f"PrincipalScoreModel did not converge in max_iter={model.max_iter} iterations "
        f"(tol={model.tol}). Increase `max_iter`, loosen `tol`, or simplify the covariates; "
        "a stratum with almost no units (for example no helped units anywhere) also "
        "drives its coefficients towards infinity."
    )
