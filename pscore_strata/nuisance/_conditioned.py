"""The default GLMs, fitted on standardized columns and mapped back to the original scale.

The unpenalized maximum-likelihood fit is invariant to rescaling a covariate, but a solver's
stopping rule and the conditioning of its Newton system are not: with columns multiplied by
1e8 or 1e-8 the fitted probabilities moved by several percent. Fitting on columns centered and
divided by their standard deviation, then mapping the coefficients back
(``b_j = b*_j / s_j``, ``b_0 = b*_0 - sum_j b_j c_j``), gives the same fit in exact arithmetic
and the same fit in floating point whatever the units of the covariates.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.linear_model import LinearRegression, LogisticRegression

__all__ = ["StandardizedLogisticRegression", "StandardizedLinearRegression"]


def _standardize(X):
    values = np.asarray(X, dtype=float)
    center = values.mean(axis=0) if values.shape[0] else np.zeros(values.shape[1])
    spread = values.std(axis=0) if values.shape[0] else np.ones(values.shape[1])
    spread = np.where(np.isfinite(spread) & (spread > 0), spread, 1.0)
    Z = (values - center) / spread
    if isinstance(X, pd.DataFrame):
        Z = pd.DataFrame(Z, columns=X.columns, index=X.index, copy=False)
    return Z, center, spread


def _map_back(model, center, spread):
    coef = np.atleast_2d(model.coef_) / spread
    model.coef_ = coef if np.ndim(model.coef_) == 2 else coef.ravel()
    model.intercept_ = model.intercept_ - np.atleast_2d(model.coef_) @ center
    if np.ndim(model.intercept_) and np.ndim(model.coef_) == 1:
        model.intercept_ = float(model.intercept_[0])
    return model


class StandardizedLogisticRegression(LogisticRegression):
    """``LogisticRegression`` fitted on standardized columns; coefficients on the original scale."""

    def fit(self, X, y, sample_weight=None):
        Z, center, spread = _standardize(X)
        super().fit(Z, y, sample_weight=sample_weight)
        return _map_back(self, center, spread)


class StandardizedLinearRegression(LinearRegression):
    """``LinearRegression`` fitted on standardized columns; coefficients on the original scale."""

    def fit(self, X, y, sample_weight=None):
        Z, center, spread = _standardize(X)
        super().fit(Z, y, sample_weight=sample_weight)
        return _map_back(self, center, spread)
