"""Fitting one nuisance model: sample weights, row subsets, predictions, constant models, and
what the M-estimation sandwich needs from a GLM fit (:class:`ParametricFit`).

The building blocks of :mod:`._fit` (treatment, survival and outcome models per arm),
:mod:`._missing` (follow-up and response models) and the distribution regressions of
:mod:`pscore_strata.distributions`.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from sklearn.base import clone
from sklearn.pipeline import Pipeline
from sklearn.utils.validation import has_fit_parameter

from ._conditioned import StandardizedLinearRegression, StandardizedLogisticRegression

__all__ = [
    "ParametricFit",
    "default_binary_model",
    "default_outcome_model",
    "fit_model",
    "take_rows",
    "predict_model",
    "ConstantModel",
    "fit_predict",
    "numeric_design",
]


def default_binary_model():
    """Unpenalized logistic regression (``C=inf``; exact Newton steps, tight tolerance).

    Fitted on standardized columns and mapped back, so the units of the covariates do not
    change the fit (:mod:`._conditioned`).

    Returns
    -------
    LogisticRegression
        An unfitted classifier (a subclass of scikit-learn's).
    """
    return StandardizedLogisticRegression(
        C=np.inf, solver="newton-cholesky", tol=1e-10, max_iter=200
    )


def default_outcome_model(binary):
    return default_binary_model() if binary else StandardizedLinearRegression()


@dataclass(frozen=True)
class ParametricFit:
    """What the M-estimation sandwich needs from one canonical-link GLM nuisance fit.

    The fit solves ``sum_i w_i mask_i (target_i - prediction_i) Xd_i = 0`` with ``Xd = [1, X]``.
    Its coefficient influence rows are ``I_i = H^{-1} mask_i residual_i Xd_i`` with
    ``H = sum_i w_i mask_i slope_i Xd_i Xd_i' / sum_i w_i`` (Stefanski & Boos 2002), where
    ``slope`` is the derivative of the prediction with respect to the linear predictor
    (``p(1-p)`` for logistic, 1 for linear regression).

    Attributes
    ----------
    design : ndarray of shape (n_rows, n_columns) or None
        ``Xd`` (``None``: an intercept-only model).
    mask : ndarray of shape (n_rows,)
        The rows the model was fitted on.
    residual : ndarray of shape (n_rows,)
        ``target - prediction``.
    slope : ndarray of shape (n_rows,)
    h_inverse : ndarray of shape (n_columns, n_columns)
        ``H^{-1}``.
    """

    design: np.ndarray | None
    mask: np.ndarray
    residual: np.ndarray
    slope: np.ndarray
    h_inverse: np.ndarray

    def correction(self, derivative, weights):
        """Per-row term that carries this model's estimation error into an estimating equation.

        ``derivative`` is d f_i / d prediction_i for the target's estimating function f; the
        returned rows are ``I_i . mean_w(derivative * slope * Xd)``.

        Parameters
        ----------
        derivative : ndarray of shape (n_rows,)
        weights : ndarray of shape (n_rows,) or None
            Sample weights of the mean (``None``: unit weights).

        Returns
        -------
        ndarray of shape (n_rows,)
        """
        gradient = _design_transpose_dot(self.design, weights * derivative * self.slope)
        gradient /= weights.sum()
        direction = self.h_inverse @ gradient
        return self.mask * self.residual * _design_dot(self.design, direction)

    def negated(self):
        """The same fit seen as a model of ``1 - target`` (used when arms are swapped).

        Returns
        -------
        ParametricFit
        """
        return replace(self, residual=-self.residual)


def _design_dot(X, v):
    if X is None:
        return np.full(1, v[0])
    return X @ v[1:] + v[0]


def _design_transpose_dot(X, u):
    if X is None:
        return np.array([u.sum()])
    return np.concatenate([[u.sum()], X.T @ u])


def fit_model(model, X, target, weights):
    if weights is None:
        return model.fit(X, target)
    if isinstance(model, Pipeline):
        last = model.steps[-1][0]
        return model.fit(X, target, **{f"{last}__sample_weight": weights})
    if not has_fit_parameter(model, "sample_weight"):
        raise TypeError(
            f"{type(model).__name__} does not accept `sample_weight`, but weights were given. "
            "Choose a model that supports sample weights, or drop `sample_weight`."
        )
    return model.fit(X, target, sample_weight=weights)


def take_rows(X, rows):
    if rows.size == X.shape[0] and rows[0] == 0 and rows[-1] == rows.size - 1:
        return X  # all rows in order: no copy (matters for memory at a million rows)
    return X.iloc[rows] if isinstance(X, pd.DataFrame) else X[rows]


def predict_model(model, X, binary):
    if binary:
        return model.predict_proba(X)[:, 1]
    return np.asarray(model.predict(X), dtype=float)


class ConstantModel:
    """An intercept-only model: the weighted share (or mean) of the target in the fit rows."""

    def __init__(self, value):
        self.value = float(value)

    def predict_proba(self, X):
        n = 1 if X is None else len(X)
        return np.column_stack([np.full(n, 1 - self.value), np.full(n, self.value)])

    def predict(self, X):
        return np.full(1 if X is None else len(X), self.value)


def fit_predict(model, X, target, fit_rows, predict_rows, weights, weighted, binary):
    """Fit on ``fit_rows``; return (fitted model, predictions on ``predict_rows``)."""
    if X is None:
        w = weights[fit_rows]
        fitted = ConstantModel(np.sum(w * target[fit_rows]) / w.sum())
        return fitted, predict_model(fitted, None, binary).repeat(predict_rows.size)
    fitted = fit_model(
        clone(model), take_rows(X, fit_rows), take_rows(target, fit_rows),
        take_rows(weights, fit_rows) if weighted else None,
    )  # fmt: skip
    try:
        return fitted, predict_model(fitted, take_rows(X, predict_rows), binary)
    except ValueError as error:
        if "unknown categor" not in str(error):
            raise
        # Cross-fitting predicts each fold from models fitted on the others, which may not
        # have seen a rare category at all.
        raise ValueError(
            "A cross-fitting fold holds a category of `X` that the model fitted on the other "
            f"folds never saw ({str(error).splitlines()[0]}). Set handle_unknown='ignore' in "
            "the pipeline's OneHotEncoder, merge the rare category with another, or use fewer "
            "folds (`n_folds`)."
        ) from None


def numeric_design(X):
    if X is None:
        return None
    return np.asarray(X, dtype=float)


def predict_models(fitted_list, X, binary=True):
    """Average the predictions of the fold models on new rows."""
    predictions = [predict_model(model, X, binary) for model in fitted_list]
    return np.mean(predictions, axis=0)
