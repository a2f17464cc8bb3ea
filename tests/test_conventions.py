"""scikit-learn conventions, run over every estimator by one loop."""

import pickle
import warnings

import numpy as np
import pandas as pd
import pytest
from conftest import ALL_ESTIMATORS, ESTIMATORS, fit_any, fitted_numbers
from sklearn.base import clone
from sklearn.compose import make_column_transformer
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

DATA = make_truncation(1500, n_features=3, random_state=21)


@pytest.fixture(autouse=True)
def _quiet():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        yield


def _fit(est, X=DATA.X, **kw):
    return est.fit(X, DATA.y, treatment=DATA.treatment, survival=DATA.survival, **kw)


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_clone_and_params(cls):
    est = cls(monotonicity="decreasing", random_state=3)
    params = est.get_params()
    assert params["monotonicity"] == "decreasing"
    copy = clone(est)
    assert copy.get_params() == params
    copy.set_params(monotonicity="increasing")
    assert copy.monotonicity == "increasing" and est.monotonicity == "decreasing"
    assert not hasattr(clone(_fit(cls())), "effect_")


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_init_only_stores_parameters(cls):
    # scikit-learn convention: invalid values are reported by fit, not by the constructor.
    est = cls(monotonicity="sideways")
    with pytest.raises(ValueError, match="`monotonicity`"):
        _fit(est)


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_pickle_round_trip(cls):
    est = _fit(cls())
    again = pickle.loads(pickle.dumps(est))
    assert again.effect_ == est.effect_
    np.testing.assert_array_equal(again.predict_proba(DATA.X), est.predict_proba(DATA.X))


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_inputs_are_not_mutated(cls):
    X = pd.DataFrame(DATA.X, columns=["a", "b", "c"])
    y, t, s = pd.Series(DATA.y), DATA.treatment.copy(), list(DATA.survival)
    before = (X.copy(), y.copy(), t.copy(), list(s))
    cls().fit(X, y, treatment=t, survival=s)
    pd.testing.assert_frame_equal(X, before[0])
    pd.testing.assert_series_equal(y, before[1])
    np.testing.assert_array_equal(t, before[2])
    assert s == before[3]


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_scaler_pipeline_gives_the_same_fit_as_the_default(cls):
    # A standardized logistic regression is a reparametrization: identical fitted probabilities.
    scaled = make_pipeline(StandardScaler(), LogisticRegression(C=np.inf, tol=1e-10, max_iter=1000))
    params = dict(treatment_model=scaled, survival_model=scaled)
    if cls is not ps.MultiplyRobust:
        params["n_bootstrap"] = 0
    est = _fit(cls(**params))
    reference = _fit(cls())
    assert est.effect_ == pytest.approx(reference.effect_, abs=1e-4)


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_column_transformer_with_categorical_column(cls):
    X = pd.DataFrame(DATA.X, columns=["a", "b", "c"])
    X["site"] = pd.Categorical(np.where(DATA.X[:, 2] > 0.3, "east", "west"))
    encode = make_column_transformer(
        (OneHotEncoder(drop="first"), ["site"]), remainder="passthrough"
    )
    classifier = make_pipeline(encode, ps.nuisance.default_binary_model())
    params = dict(treatment_model=classifier, survival_model=classifier)
    if cls is not ps.PrincipalScoreWeighting:
        params["outcome_model"] = make_pipeline(clone(encode), LinearRegression())
    if cls is not ps.MultiplyRobust:
        params["n_bootstrap"] = 0
    est = _fit(cls(**params), X=X)
    assert np.isfinite(est.effect_) and np.isfinite(est.std_error_)
    # Reference: the same analysis with the indicator coded by hand and the default models.
    coded = X[["a", "b", "c"]].assign(site_west=(X["site"] == "west").astype(float))
    reference = _fit(cls(), X=coded)
    assert est.effect_ == pytest.approx(reference.effect_, abs=1e-4)
    assert est.predict_proba(X).shape == (len(X), 3)


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_unfitted_estimator_raises(cls):
    from sklearn.exceptions import NotFittedError

    with pytest.raises(NotFittedError):
        cls().summary()


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_conventions_with_a_stratum_model(cls):
    # The joint principal score model as survival model: clone, pickle, inputs left alone.
    est = cls(survival_model=ps.PrincipalScoreModel(max_iter=50))
    assert clone(est).get_params()["survival_model__max_iter"] == 50
    X, t = DATA.X.copy(), DATA.treatment.copy()
    fitted = _fit(est, X=X)
    np.testing.assert_array_equal(X, DATA.X)
    np.testing.assert_array_equal(t, DATA.treatment)
    again = pickle.loads(pickle.dumps(fitted))
    np.testing.assert_array_equal(again.predict_proba(DATA.X), fitted.predict_proba(DATA.X))
    assert not hasattr(clone(fitted).survival_model, "classes_")


def test_stratum_model_conventions():
    model = ps.PrincipalScoreModel(monotonicity="decreasing", tol=1e-6)
    assert clone(model).get_params() == model.get_params()
    unfitted = ps.PrincipalScoreModel(monotonicity="sideways")  # checked by fit, not __init__
    with pytest.raises(ValueError, match="`monotonicity`"):
        unfitted.fit(DATA.X, treatment=DATA.treatment, survival=DATA.survival)
    X = pd.DataFrame(DATA.X, columns=["a", "b", "c"])
    before = X.copy()
    fitted = model.fit(X, treatment=DATA.treatment, survival=DATA.survival)
    pd.testing.assert_frame_equal(X, before)
    again = pickle.loads(pickle.dumps(fitted))
    np.testing.assert_array_equal(again.predict_proba(X), fitted.predict_proba(X))


# -- the same checks over every estimator class, the bounds and the stratum model included -----
def _fit_any(est, X=DATA.X, y=DATA.y, treatment=DATA.treatment, survival=DATA.survival):
    return fit_any(est, X, y, treatment, survival)


@pytest.mark.parametrize("cls", ALL_ESTIMATORS)
def test_every_estimator_clones_and_sets_params(cls):
    est = cls(monotonicity="decreasing")
    params = est.get_params()
    copy = clone(est)
    assert copy.get_params() == params
    copy.set_params(monotonicity="increasing")
    assert copy.monotonicity == "increasing" and est.monotonicity == "decreasing"
    fitted = _fit_any(cls())
    assert clone(fitted).get_params() == fitted.get_params()
    assert not hasattr(clone(fitted), "n_features_in_")


@pytest.mark.parametrize("cls", ALL_ESTIMATORS)
def test_every_estimator_checks_parameters_in_fit(cls):
    est = cls(monotonicity="sideways")  # stored as given by __init__
    assert est.monotonicity == "sideways"
    with pytest.raises(ValueError, match="`monotonicity`"):
        _fit_any(est)


@pytest.mark.parametrize("cls", ALL_ESTIMATORS)
def test_every_estimator_pickles(cls):
    est = _fit_any(cls())
    again = pickle.loads(pickle.dumps(est))
    np.testing.assert_array_equal(fitted_numbers(again, DATA.X), fitted_numbers(est, DATA.X))


@pytest.mark.parametrize("cls", ALL_ESTIMATORS)
def test_every_estimator_leaves_its_inputs_alone(cls):
    X = pd.DataFrame(DATA.X, columns=["a", "b", "c"])
    y, t, s = pd.Series(DATA.y), DATA.treatment.copy(), list(DATA.survival)
    before = (X.copy(), y.copy(), t.copy(), list(s))
    _fit_any(cls(), X=X, y=y, treatment=t, survival=s)
    pd.testing.assert_frame_equal(X, before[0])
    pd.testing.assert_series_equal(y, before[1])
    np.testing.assert_array_equal(t, before[2])
    assert s == before[3]


def _scaled_logistic():
    return make_pipeline(StandardScaler(), LogisticRegression(C=np.inf, tol=1e-10, max_iter=1000))


@pytest.mark.parametrize("cls", ALL_ESTIMATORS)
def test_every_estimator_takes_pipelines(cls):
    # A standardized unpenalized logistic regression is a reparametrization of the default
    # model: the same fitted probabilities, so the same numbers.
    if cls is ps.PrincipalScoreModel:
        # EM around the pipeline reaches the maximum the default finds directly (Dempster,
        # Laird & Rubin 1977: EM's fixed point maximizes the observed-data likelihood).
        est = _fit_any(cls(_scaled_logistic(), max_iter=400, tol=1e-10, init="shares"))
        reference = _fit_any(cls())
        np.testing.assert_allclose(fitted_numbers(est, DATA.X),
                                   fitted_numbers(reference, DATA.X), atol=2e-3)  # fmt: skip
        return
    params = dict(treatment_model=_scaled_logistic(), survival_model=_scaled_logistic())
    if "n_bootstrap" in cls().get_params():
        params["n_bootstrap"] = 0
    est = _fit_any(cls(**params))
    reference = _fit_any(cls())
    assert fitted_numbers(est, DATA.X)[0] == pytest.approx(fitted_numbers(reference, DATA.X)[0],
                                                           abs=1e-4)  # fmt: skip


@pytest.mark.parametrize("cls", ALL_ESTIMATORS)
def test_every_estimator_records_and_checks_feature_names(cls):
    # Reference: scikit-learn's own convention, shown by a LogisticRegression fitted on the same
    # DataFrame (feature_names_in_ only for string column names; new data with the columns
    # reordered or renamed is refused; an array where a DataFrame was fitted gets a warning).
    X = pd.DataFrame(DATA.X, columns=["a", "b", "c"])
    reference = LogisticRegression().fit(X, DATA.treatment)
    fitted = _fit_any(cls(), X=X)
    np.testing.assert_array_equal(fitted.feature_names_in_, reference.feature_names_in_)
    assert fitted.n_features_in_ == reference.n_features_in_ == 3
    assert not hasattr(_fit_any(cls(), X=DATA.X), "feature_names_in_")
    if not hasattr(fitted, "predict_proba"):
        return  # the bounds predict nothing per row
    for changed in (X[["b", "a", "c"]], X.rename(columns={"a": "z"})):
        with pytest.raises(ValueError, match="feature names"):
            reference.predict_proba(changed)
        with pytest.raises(ValueError, match="feature names"):
            fitted.predict_proba(changed)
    with pytest.warns(UserWarning, match="does not have valid feature names"):
        fitted.predict_proba(DATA.X)
