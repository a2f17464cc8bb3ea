"""Input checking: user data in, a small immutable container out.

Every error message a user can meet while handing data to the library is written here, so the
wording stays consistent: the message names the argument, says what was expected, shows what was
found and says what to do.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.compose import ColumnTransformer
from sklearn.pipeline import Pipeline

try:
    from sklearn.utils import get_tags
except ImportError:  # scikit-learn < 1.6 (the declared minimum is 1.4): legacy tag dictionaries
    get_tags = None

__all__ = ["TruncationData", "check_truncation_data", "check_level", "check_features"]

# Probabilities this close to 0 or 1 make weights explode; the threshold is common practice.
EXTREME_PROBABILITY = 0.01


@dataclass(frozen=True)
class TruncationData:
    """Validated analysis data.

    Attributes
    ----------
    X : ndarray or DataFrame or None
        Covariates exactly as handed to the nuisance models (never modified). ``None`` when the
        analysis is unadjusted.
    n_features : int
    outcome : ndarray of float
        A copy of ``y`` with ``NaN`` wherever ``survival == 0``.
    treatment, survival : ndarray of int8
    sample_weight : ndarray of float
        All ones when the caller gave none.
    groups : ndarray or None
        Cluster labels for cluster-robust standard errors.
    weighted : bool
        Whether the caller supplied ``sample_weight``.
    binary_outcome : bool
        Whether every observed outcome is 0 or 1.
    status_known, outcome_observed : ndarray of int8 or None
        With ``missing="at_random"`` and something missing: ``C`` (survival status known) and
        ``R`` (outcome observed: a survivor with known status and a value); ``survival`` is 0
        where the status is unknown. ``None`` when nothing is missing.
    """

    X: object
    n_features: int
    outcome: np.ndarray
    treatment: np.ndarray
    survival: np.ndarray
    sample_weight: np.ndarray
    groups: np.ndarray | None
    weighted: bool
    binary_outcome: bool
    feature_names: tuple = field(default=())
    status_known: np.ndarray | None = None
    outcome_observed: np.ndarray | None = None

    @property
    def n_samples(self):
        return self.treatment.shape[0]

    def take(self, rows):
        """A new container holding the given row positions (used by resampling)."""
        X = self.X
        if X is not None:
            X = X.iloc[rows] if isinstance(X, pd.DataFrame) else X[rows]
        return TruncationData(
            X=X,
            n_features=self.n_features,
            outcome=self.outcome[rows],
            treatment=self.treatment[rows],
            survival=self.survival[rows],
            sample_weight=self.sample_weight[rows],
            groups=None if self.groups is None else self.groups[rows],
            weighted=self.weighted,
            binary_outcome=self.binary_outcome,
            feature_names=self.feature_names,
            status_known=None if self.status_known is None else self.status_known[rows],
            outcome_observed=None if self.outcome_observed is None else self.outcome_observed[rows],
        )

    def with_weights(self, sample_weight):
        """A new container with other row weights (used by weight-perturbing bootstraps)."""
        return TruncationData(
            X=self.X,
            n_features=self.n_features,
            outcome=self.outcome,
            treatment=self.treatment,
            survival=self.survival,
            sample_weight=np.asarray(sample_weight, dtype=float),
            groups=self.groups,
            weighted=True,
            binary_outcome=self.binary_outcome,
            feature_names=self.feature_names,
            status_known=self.status_known,
            outcome_observed=self.outcome_observed,
        )


def _one_dimensional(values, name):
    if values is None:
        raise ValueError(f"`{name}` is required: pass one value per row of X.")
    if isinstance(values, pd.DataFrame):
        if values.shape[1] != 1:
            raise ValueError(
                f"`{name}` must be one-dimensional; got a DataFrame with {values.shape[1]} "
                "columns. Pass a single column (a Series)."
            )
        values = values.iloc[:, 0]
    if isinstance(values, pd.Series):
        values = values.to_numpy()
    array = np.asarray(values)
    if array.ndim == 2 and 1 in array.shape:
        array = array.ravel()
    if array.ndim != 1:
        raise ValueError(f"`{name}` must be one-dimensional; got an array of shape {array.shape}.")
    return array


MISSING_AT_RANDOM_ASSUMPTION = (
    "missing at random given X within each arm: whether the survival status is known does not "
    "depend on survival or the outcome, and whether a survivor's outcome is observed does not "
    "depend on the outcome, once X and the arm are fixed"
)


def _binary_indicator(values, name, allow_missing=False):
    array = _one_dimensional(values, name)
    if array.dtype.kind in "OUS" or isinstance(array.dtype, pd.CategoricalDtype):
        found = pd.unique(array)[:10]
        raise TypeError(
            f"`{name}` must be numeric 0/1 (or boolean); found values {list(found)}. "
            "Recode it as 1/0 before fitting."
        )
    if array.dtype.kind == "f" and np.isnan(array).any():
        count = int(np.isnan(array).sum())
        if allow_missing:
            found = np.unique(array[~np.isnan(array)])
            if not np.all(np.isin(found, [0, 1])):
                raise ValueError(
                    f"`{name}` must contain only 0, 1 and NaN (unknown); found values "
                    f"{found[:10].tolist()}. Recode it as 1/0."
                )
            return array
        if name == "survival":
            raise ValueError(
                f"`survival` has {count} missing value(s) (NaN): survival status unknown "
                "(lost to follow-up). Pass missing=\"at_random\" to the estimator to model "
                f"follow-up, which assumes {MISSING_AT_RANDOM_ASSUMPTION}; otherwise resolve "
                "those rows first."
            )
        raise ValueError(
            f"`{name}` has {count} missing value(s) (NaN). Every row needs a known 0/1 {name}; "
            "drop or resolve those rows first."
        )
    found = np.unique(array)
    if not np.all(np.isin(found, [0, 1])):
        raise ValueError(
            f"`{name}` must contain only 0 and 1; found values {found[:10].tolist()}"
            f"{' ...' if found.size > 10 else ''}. Recode it as 1/0."
        )
    return array.astype(np.int8)


def _accepts_missing(model):
    """Whether a model can take NaN in X (a pipeline may impute; some learners handle NaN)."""
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
    return isinstance(model, Pipeline | ColumnTransformer)


def check_features(X, models, n_rows=None):
    """Validate covariates; return (X for the models, n_features, feature names)."""
    if X is None:
        return None, 0, ()
    if isinstance(X, pd.Series):
        X = X.to_frame()
    if isinstance(X, pd.DataFrame):
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


def check_truncation_data(
    X, y, treatment, survival, sample_weight=None, groups=None, models=(None, None, None),
    missing="error",
):  # fmt: skip
    """Validate the inputs of every ``fit`` and return a :class:`TruncationData`.

    ``missing="at_random"`` accepts NaN survival (status unknown) and NaN outcomes of survivors
    (not observed); ``"error"`` refuses them with a message naming the option.
    """
    check_choice(missing, "missing", ("error", "at_random"))
    treatment = _binary_indicator(treatment, "treatment")
    survival = _binary_indicator(survival, "survival", allow_missing=missing == "at_random")
    status_known = None
    if survival.dtype.kind == "f":
        status_known = (~np.isnan(survival)).astype(np.int8)
        survival = np.nan_to_num(survival).astype(np.int8)
    n = treatment.shape[0]
    if survival.shape[0] != n:
        raise ValueError(
            f"`treatment` has {n} rows but `survival` has {survival.shape[0]}; they must match."
        )
    outcome = _one_dimensional(y, "y")
    if outcome.shape[0] != n:
        raise ValueError(
            f"`y` has {outcome.shape[0]} rows but `treatment` has {n}; they must match."
        )
    if outcome.dtype.kind == "b":
        outcome = outcome.astype(float)
    if outcome.dtype.kind not in "iuf":
        try:
            outcome = outcome.astype(float)
        except (TypeError, ValueError):
            raise TypeError(
                f"`y` must be numeric; got dtype {outcome.dtype} with values such as "
                f"{list(pd.unique(outcome[survival == 1])[:5])}. Convert the outcome to numbers."
            ) from None
    outcome = np.where(survival == 1, outcome.astype(float), np.nan)
    unobserved = np.flatnonzero(np.isnan(outcome) & (survival == 1))
    outcome_observed = None
    if unobserved.size and missing == "at_random":
        outcome_observed = ((survival == 1) & ~np.isnan(outcome)).astype(np.int8)
    elif unobserved.size:
        raise ValueError(
            f"`y` is missing (NaN) for {unobserved.size} survivor(s) (survival == 1), at row "
            f"positions {unobserved[:5].tolist()}{' ...' if unobserved.size > 5 else ''}. Pass "
            "missing=\"at_random\" to the estimator to model response, which assumes "
            f"{MISSING_AT_RANDOM_ASSUMPTION}; otherwise impute the outcome or remove those rows "
            "deliberately."
        )
    if status_known is not None and outcome_observed is None:
        outcome_observed = (survival == 1).astype(np.int8)
    if outcome_observed is not None and status_known is None:
        status_known = np.ones(n, dtype=np.int8)
    if np.isinf(outcome).any():
        raise ValueError("`y` contains infinite values among survivors; fix them before fitting.")

    if X is not None and len(X) != n:
        raise ValueError(f"`X` has {len(X)} rows but `treatment` has {n}; they must match.")
    X, n_features, names = check_features(X, models)

    if sample_weight is None:
        weights = np.ones(n)
        weighted = False
    else:
        weights = _one_dimensional(sample_weight, "sample_weight").astype(float)
        if weights.shape[0] != n:
            raise ValueError(
                f"`sample_weight` has {weights.shape[0]} rows but `treatment` has {n}."
            )
        if not np.isfinite(weights).all() or (weights < 0).any():
            bad = np.flatnonzero(~np.isfinite(weights) | (weights < 0))
            raise ValueError(
                f"`sample_weight` must be finite and non-negative; {bad.size} value(s) are not, "
                f"at row positions {bad[:5].tolist()}."
            )
        if weights.sum() <= 0:
            raise ValueError("`sample_weight` sums to zero; at least one row needs weight > 0.")
        weighted = True

    if groups is not None:
        groups = _one_dimensional(groups, "groups")
        if groups.shape[0] != n:
            raise ValueError(f"`groups` has {groups.shape[0]} rows but `treatment` has {n}.")
        if pd.isna(groups).any():
            raise ValueError(
                f"`groups` has {int(pd.isna(groups).sum())} missing cluster label(s); give every "
                "row a cluster."
            )

    known = np.ones(n, dtype=bool) if status_known is None else status_known == 1
    for arm, label in ((1, "treated"), (0, "control")):
        in_arm = (treatment == arm) & (weights > 0)
        if not in_arm.any():
            raise ValueError(
                f"The {label} arm (treatment == {arm}) has no units; the effect needs both arms."
            )
        if outcome_observed is not None:
            _check_observed_arm(in_arm, known, survival, outcome_observed, label)
        in_arm = in_arm & known
        survivors = int(survival[in_arm].sum())
        if survivors == 0:
            raise ValueError(
                f"The {label} arm has no survivors (survival == 1); the survivor average causal "
                "effect is not estimable without outcomes in both arms."
            )
        if survivors == in_arm.sum():
            raise ValueError(
                f"The {label} arm has no deaths (every survival == 1); the survival model cannot "
                "be fitted in that arm. If nobody can die, estimate an ordinary average effect "
                "instead."
            )

    observed = outcome[(survival == 1) & ~np.isnan(outcome)]
    binary = bool(np.all((observed == 0) | (observed == 1)))
    return TruncationData(
        X=X,
        n_features=n_features,
        outcome=outcome,
        treatment=treatment,
        survival=survival,
        sample_weight=weights,
        groups=groups,
        weighted=weighted,
        binary_outcome=binary,
        feature_names=names,
        status_known=status_known,
        outcome_observed=outcome_observed,
    )


def _check_observed_arm(in_arm, known, survival, outcome_observed, label):
    if not (in_arm & known).any():
        raise ValueError(
            f"No unit of the {label} arm has a known survival status; survival cannot be "
            "modelled in that arm."
        )
    if not (in_arm & (outcome_observed == 1)).any():
        raise ValueError(
            f"No survivor of the {label} arm has an observed outcome; the outcome cannot be "
            "modelled in that arm."
        )


def check_level(level):
    """Validate a confidence level."""
    if not isinstance(level, int | float) or not 0 < level < 1:
        raise ValueError(f"`level` must be a number strictly between 0 and 1; got {level!r}.")
    return float(level)


def check_choice(value, name, allowed):
    if value not in allowed:
        raise ValueError(f"`{name}` must be one of {list(allowed)}; got {value!r}.")
    return value
