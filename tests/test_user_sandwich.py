"""The M-estimation sandwich for unpenalized GLMs users pass, and invariance to covariate units.

Reference: the default models' sandwich, itself checked against statsmodels GLM fits and a
simulation in tests/test_sandwich.py; the unpenalized MLE is invariant to affine maps of the
covariates when the model has an intercept (a textbook property of maximum likelihood).
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

ESTIMATORS = (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust)


def _fit(cls, data, X=None, **params):
    return cls(**params).fit(
        data.X if X is None else X, data.y, treatment=data.treatment, survival=data.survival
    )


@pytest.fixture(scope="module")
def data():
    return make_truncation(1500, random_state=3)


def _tight(solver):
    return LogisticRegression(C=np.inf, solver=solver, tol=1e-12, max_iter=10_000)


@pytest.mark.parametrize("solver", ["lbfgs", "newton-cg", "newton-cholesky"])
@pytest.mark.parametrize("cls", ESTIMATORS[:2])
def test_unpenalized_logistic_gets_the_default_sandwich(data, cls, solver):
    default = _fit(cls, data)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)
        user = _fit(cls, data, treatment_model=_tight(solver), survival_model=_tight(solver))
    assert user.std_error_method_ == "sandwich"
    assert user.effect_ == pytest.approx(default.effect_, abs=1e-6)
    assert user.std_error_ == pytest.approx(default.std_error_, rel=1e-5)


def test_penalty_none_and_linear_regression_and_pipeline(data):
    default = _fit(ps.OutcomeRegression, data)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)  # penalty=None is deprecated upstream
        logit = LogisticRegression(penalty=None, solver="newton-cholesky", tol=1e-12)
        pipe = make_pipeline(StandardScaler(), logit)
        user = _fit(ps.OutcomeRegression, data, survival_model=pipe,
                    outcome_model=make_pipeline(StandardScaler(), LinearRegression()))  # fmt: skip
    assert user.std_error_method_ == "sandwich"
    assert user.effect_ == pytest.approx(default.effect_, abs=1e-8)
    assert user.std_error_ == pytest.approx(default.std_error_, rel=1e-6)


def test_column_transformer_with_one_hot(data):
    frame = pd.DataFrame(data.X, columns=[f"x{j}" for j in range(data.X.shape[1])])
    frame["site"] = np.where(data.X[:, 0] > 0, "north", "south")
    encode = ColumnTransformer(
        [("num", StandardScaler(), [f"x{j}" for j in range(data.X.shape[1])]),
         ("cat", OneHotEncoder(drop="first"), ["site"])]
    )  # fmt: skip
    model = make_pipeline(encode, _tight("newton-cholesky"))
    user = _fit(ps.PrincipalScoreWeighting, data, X=frame, treatment_model=model,
                survival_model=model)  # fmt: skip
    # The same design by hand, numeric, with the default models.
    numeric = np.column_stack([data.X, (frame["site"] == "south").to_numpy(float)])
    default = _fit(ps.PrincipalScoreWeighting, data, X=numeric)
    assert user.std_error_method_ == "sandwich"
    assert user.effect_ == pytest.approx(default.effect_, abs=1e-8)
    assert user.std_error_ == pytest.approx(default.std_error_, rel=1e-6)


def test_loose_tolerance_warns_and_still_uses_the_sandwich(data):
    loose = LogisticRegression(C=np.inf, tol=1e-1, max_iter=3)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        est = _fit(ps.PrincipalScoreWeighting, data, treatment_model=loose)
    assert est.std_error_method_ == "sandwich"
    assert any("root of its score" in str(w.message) for w in caught)


@pytest.mark.parametrize(
    "model", [LogisticRegression(), LogisticRegression(C=np.inf, class_weight="balanced")]
)
def test_penalized_or_reweighted_models_keep_the_bootstrap(data, model):
    est = _fit(ps.PrincipalScoreWeighting, data, survival_model=model, n_bootstrap=5,
               random_state=0)  # fmt: skip
    assert est.std_error_method_ == "bootstrap"
    assert any("not an unpenalized" in n for n in est.summary().attrs["notes"])


@pytest.mark.parametrize("factor", [1e8, 1e-8])
@pytest.mark.parametrize("cls", ESTIMATORS)
def test_rescaled_covariates_give_the_same_answer(data, cls, factor):
    base = _fit(cls, data)
    scaled = _fit(cls, data, X=data.X * factor)
    assert scaled.effect_ == pytest.approx(base.effect_, abs=1e-6)
    assert scaled.std_error_ == pytest.approx(base.std_error_, abs=1e-6)


@pytest.mark.parametrize("factor", [1e8, 1e-8])
def test_rescaled_covariates_bounds(data, factor):
    def fit(X):
        return ps.TrimmingBounds(strata="score").fit(
            X, data.y, treatment=data.treatment, survival=data.survival
        )

    base, scaled = fit(data.X), fit(data.X * factor)
    for name in ("lower_", "upper_", "std_error_lower_", "std_error_upper_"):
        assert getattr(scaled, name) == pytest.approx(getattr(base, name), abs=1e-6)
