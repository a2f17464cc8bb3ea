"""Covariate checks (the part of :mod:`pscore_strata._validation` that reads ``X``).

Every message names ``X``, says what was expected and what to do.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.compose import ColumnTransformer
from sklearn.pipeline import Pipeline

from ._checked_once import once

try:
    from sklearn.utils.validation import _check_feature_names
except ImportError:  # scikit-learn < 1.6: a method of BaseEstimator

    def _check_feature_names(estimator, X, *, reset):
        return estimator._check_feature_names(X, reset=reset)


try:
    from sklearn.utils import get_tags
except ImportError:  # scikit-learn < 1.6 (the declared minimum is 1.4): legacy tag dictionaries
    get_tags = None

__all__ = ["check_feature_names", "check_features", "feature_fingerprint", "reject_sparse"]


def check_feature_names(estimator, X, *, reset):
    """scikit-learn's feature-name check (``feature_names_in_``), across its versions."""
    return _check_feature_names(estimator, X, reset=reset)


def _inner(model):
    """The classifier inside a PrincipalScoreModel (it sees X), else the model itself."""
    if type(model).__name__ == "PrincipalScoreModel" and hasattr(model, "estimator"):
        return model.estimator
    return model


def _accepts_missing(model):
    """Whether a model can take NaN in X (a pipeline may impute; some learners handle NaN)."""
    model = _inner(model)
    if model is None or isinstance(model, int | float):
        return False
    if isinstance(model, Pipeline | ColumnTransformer):
        return True
    try:
        if get_tags is None:
            return bool(model._get_tags().get("allow_nan", False))
        return bool(get_tags(model).input_tags.allow_nan)
    except Exception:  # third-party estimators without tags: let the model itself decide
        return True


def _encodes_text(model):
    return isinstance(_inner(model), Pipeline | ColumnTransformer)


def check_features(X, models, n_rows=None):
    """Validate covariates; return (X for the models, n_features, feature names)."""
    if X is None:
        return None, 0, ()
    reject_sparse(X)
    if isinstance(X, pd.Series):
        X = X.to_frame()
    if isinstance(X, pd.DataFrame):
        _check_column_names(X.columns)
        names = tuple(str(c) for c in X.columns)
        text_columns = [
            str(c)
            for c in X.columns
            if not (pd.api.types.is_numeric_dtype(X[c]) or pd.api.types.is_bool_dtype(X[c]))
        ]
        if text_columns:
            if any(not _encodes_text(m) for m in models if not isinstance(m, int | float)):
                raise TypeError(
                    f"`X` has non-numeric column(s) {text_columns}. Either encode them first "
                    "(for example with pandas.get_dummies) or pass models that are scikit-learn "
                    "pipelines whose first step encodes them (ColumnTransformer with "
                    "OneHotEncoder)."
                )
        numeric = X.select_dtypes(include=["number", "bool"])
        values = numeric.to_numpy(dtype=float) if numeric.shape[1] else np.empty((len(X), 0))
    else:
        values = np.asarray(X)
        if values.ndim == 1:
            raise ValueError(
                f"`X` must be two-dimensional (rows x covariates); got a 1-d array of length "
                f"{values.shape[0]}. Use X.reshape(-1, 1) for a single covariate."
            )
        if values.ndim != 2:
            raise ValueError(f"`X` must be two-dimensional; got shape {values.shape}.")
        if values.dtype.kind not in "biuf":
            if any(not _encodes_text(m) for m in models if not isinstance(m, int | float)):
                raise TypeError(
                    f"`X` must be numeric; got an array of dtype {values.dtype}. Encode text "
                    "columns first or use pipelines that encode them."
                )
            X = values
            values = np.empty((len(values), 0))
        else:
            X = values
        names = tuple(f"x{j}" for j in range(values.shape[1]))
    if values.size:
        if np.isinf(values).any():
            count = int(np.isinf(values).sum())
            raise ValueError(
                f"`X` contains {count} infinite value(s). Replace them (they are usually a "
                "division by zero upstream) before fitting."
            )
        missing = np.isnan(values)
        if missing.any() and not all(_accepts_missing(m) for m in models):
            per_column = missing.sum(axis=0)
            numeric_names = (
                [str(c) for c in X.select_dtypes(include=["number", "bool"]).columns]
                if isinstance(X, pd.DataFrame)
                else list(names)
            )
            listed = {numeric_names[j]: int(c) for j, c in enumerate(per_column) if c}
            raise ValueError(
                f"`X` has missing values (NaN) in {len(listed)} column(s): {listed}. Impute them "
                "in a scikit-learn pipeline (for example SimpleImputer + the model) and pass the "
                "pipeline as the model, or drop the incomplete rows yourself."
            )
    n_features = X.shape[1]
    if n_rows is not None and X.shape[0] != n_rows:
        raise ValueError(f"`X` has {X.shape[0]} rows but the model was fitted on {n_rows}.")
    return (None if n_features == 0 else X), n_features, names


def _check_column_names(columns):
    duplicated = sorted({str(c) for c in columns[columns.duplicated()]})
    if duplicated:
        raise ValueError(
            f"`X` has duplicated column name(s) {duplicated}; every covariate needs its own "
            "name. Rename or drop the copies (for example X.loc[:, ~X.columns.duplicated()])."
        )
    kinds = sorted({type(c).__name__ for c in columns})
    if len(kinds) > 1 and "str" in kinds:
        raise TypeError(
            f"`X` has column names of mixed types {kinds}; scikit-learn models need all of them "
            "strings (or none). Convert them, for example X.columns = X.columns.astype(str)."
        )


def reject_sparse(X):
    """Sparse ``X`` is refused with the remedy (dense models, sandwich and diagnostics)."""
    if hasattr(X, "tocsr") or isinstance(X, pd.DataFrame) and any(
        isinstance(t, pd.SparseDtype) for t in X.dtypes
    ):
        # Sparse input would need sparse-aware paths in every model, the sandwich and the
        # diagnostics; a dense copy is what the library works with, so ask for it explicitly.
        raise TypeError(
            f"`X` is sparse ({type(X).__name__}); pass a dense array or DataFrame instead "
            "(X.toarray(), or DataFrame.sparse.to_dense()); with very many sparse columns, "
            "reduce them first (for example with TruncatedSVD)."
        )


def feature_fingerprint(X):
    """A digest of ``X``'s values (and column names): the rows a model was fitted on.

    Functions that take the training covariates again (``quantile_effects(est, X=...)``) compare
    it, so that a shuffled or different table with the right number of rows is refused instead
    of silently pairing rows with other rows' predictions. ``None`` for ``X=None``.
    """
    if X is None:
        return None
    return once("feature fingerprint", (X,), None, lambda: _fingerprint(X))


def _fingerprint(X):
    import hashlib

    digest = hashlib.sha1()
    if isinstance(X, pd.DataFrame):
        digest.update(repr([str(c) for c in X.columns]).encode())
        values = pd.util.hash_pandas_object(X, index=False).to_numpy()
    else:
        array = np.asarray(X)
        if array.dtype == object:
            values = pd.util.hash_pandas_object(pd.DataFrame(array), index=False).to_numpy()
        else:
            values = np.ascontiguousarray(array, dtype=float)
    digest.update(np.ascontiguousarray(values).tobytes())
    digest.update(repr(np.shape(X)).encode())
    return digest.hexdigest()
