"""The numerical parts of the stratum model's fit: parameter and input checks, starting shares,
Newton's method on the mixture likelihood, and a weighted classifier fit (the EM M-step)."""

from __future__ import annotations

import numpy as np
from sklearn.pipeline import Pipeline
from sklearn.utils.validation import has_fit_parameter

__all__ = ["check_stratum_params", "check_cells", "starting_strata", "newton_maximize",
           "weighted_fit"]  # fmt: skip


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
        values = np.asarray(values, dtype=float).ravel()
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
