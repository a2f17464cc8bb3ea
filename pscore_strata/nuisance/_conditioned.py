"""The default GLMs, fitted on standardized columns and mapped back to the original scale.

The unpenalized maximum-likelihood fit is invariant to rescaling a covariate, but a solver's
stopping rule and the conditioning of its Newton system are not: with columns multiplied by
1e8 or 1e-8 the fitted probabilities moved by several percent. Badly scaled columns are
therefore centered and divided by their standard deviation before the fit, and the coefficients
mapped back (``b_j = b*_j / s_j``, ``b_0 = b*_0 - sum_j b_j c_j``): the same fit in exact
arithmetic, and in floating point whatever the units of the covariates. Well-scaled columns are
fitted as given, so the common case makes no copy of X.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.linear_model import LinearRegression, LogisticRegression

__all__ = ["StandardizedLogisticRegression", "StandardizedLinearRegression"]


# Columns whose standard deviation lies in this range, and whose mean is within this many
# standard deviations of zero, are fitted as given (no copy of X): the Newton solver's stopping
# rule is then within a factor of 100 of its intended tolerance. Others are standardized.
_WELL_SCALED = (1e-2, 1e2)
_WELL_CENTERED = 1e3
_CHUNK = 65_536


def _column_moments(values):
    """Column means and standard deviations in row chunks (no n x k temporary)."""
    n = values.shape[0]
    center = values.mean(axis=0)
    square = np.zeros(values.shape[1])
    for start in range(0, n, _CHUNK):
        block = values[start : start + _CHUNK] - center
        square += np.einsum("ij,ij->j", block, block)
    return center, np.sqrt(square / n)


def _standardize(X):
    values = np.asarray(X, dtype=float)
    if values.ndim != 2 or values.shape[0] == 0:
        return X, None, None
    center, spread = _column_moments(values)
    spread = np.where(np.isfinite(spread) & (spread > 0), spread, 1.0)
    low, high = _WELL_SCALED
    if np.all((spread >= low) & (spread <= high) & (np.abs(center) <= _WELL_CENTERED * spread)):
        return X, None, None
    Z = (values - center) / spread
    if isinstance(X, pd.DataFrame):
        Z = pd.DataFrame(Z, columns=X.columns, index=X.index, copy=False)
    return Z, center, spread


def _map_back(model, center, spread):
    if center is None:
        return model
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
