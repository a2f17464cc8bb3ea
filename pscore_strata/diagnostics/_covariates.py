"""The covariate matrix of the balance tables (one-hot indicators for categorical columns) and
weighted means and variances of its columns."""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["covariate_matrix", "moments"]


def _categorical_indicators(name, column):
    levels = pd.Categorical(column)
    names, values = [], []
    for code, level in enumerate(levels.categories):
        names.append(f"{name}={level}")
        values.append((levels.codes == code).astype(float))
    if (levels.codes < 0).any():
        names.append(f"{name}=(missing)")
        values.append((levels.codes < 0).astype(float))
    return names, values


def covariate_matrix(X, n_rows):
    """Expand covariates into balance rows: (names, covariates x rows matrix, NaN if missing)."""
    if X is None:
        raise ValueError(
            "`X` is required for covariate balance: pass the covariates of the fitted rows "
            "(the estimator does not keep them)."
        )
    if isinstance(X, pd.Series):
        X = X.to_frame()
    if isinstance(X, pd.DataFrame) and X.columns.duplicated().any():
        raise ValueError(
            f"`X` has duplicated column name(s) "
            f"{sorted({str(c) for c in X.columns[X.columns.duplicated()]})}; each balance row "
            "needs its own name. Rename or drop the copies."
        )
    if not isinstance(X, pd.DataFrame):
        array = np.asarray(X)
        if array.ndim != 2:
            raise ValueError(
                f"`X` must be two-dimensional (rows x covariates); got shape {array.shape}."
            )
        X = pd.DataFrame(array, columns=[f"x{j}" for j in range(array.shape[1])], copy=False)
    if len(X) != n_rows:
        raise ValueError(
            f"`X` has {len(X)} rows but the estimator was fitted on {n_rows}; pass the "
            "covariates of the fitted rows, in the same order."
        )
    if X.shape[1] == 0:
        raise ValueError("`X` has no columns; pass at least one covariate.")
    names, values = [], []
    for label in X.columns:
        column, name = X[label], str(label)
        if column.dtype == object:
            converted = pd.to_numeric(column, errors="coerce")
            if converted.notna().sum() == column.notna().sum():
                column = converted
        numeric = pd.api.types.is_numeric_dtype(column) or pd.api.types.is_bool_dtype(column)
        if not numeric or isinstance(column.dtype, pd.CategoricalDtype):
            more_names, more_values = _categorical_indicators(name, column)
            names += more_names
            values += more_values
            continue
        array = column.to_numpy(dtype=float, na_value=np.nan)
        if np.isinf(array).any():
            raise ValueError(
                f"`X` column {name!r} has infinite values; replace them before checking balance."
            )
        names.append(name)
        values.append(array)
        missing = np.isnan(array)
        if missing.any():
            # Means use the rows where the covariate is observed; the missingness indicator gets
            # its own balance row so the dropped rows stay visible.
            names.append(f"{name} (missing)")
            values.append(missing.astype(float))
    # Covariates x rows: each covariate is one contiguous row, cheap to stack and to reduce.
    return names, np.vstack(values)


def moments(Z, observed, weights):
    """Weighted means and variances per covariate (rows of ``Z``) over the observed entries.

    ``Z`` is centered beforehand and zero where missing, so ``E[Z^2] - E[Z]^2`` loses no
    precision; einsum avoids a covariates-by-rows temporary.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        total = observed @ weights
        mean = (Z @ weights) / total
        variance = np.einsum("ji,ji,i->j", Z, Z, weights) / total - mean**2
    return mean, np.maximum(variance, 0.0)
