"""Every bad input raises a clear error that names the argument and says what to do."""

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import make_column_transformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

DATA = make_truncation(400, n_features=3, random_state=0)


def _fit(X=DATA.X, y=DATA.y, treatment=DATA.treatment, survival=DATA.survival, est=None, **kw):
    est = est or ps.PrincipalScoreWeighting()
    return est.fit(X, y, treatment=treatment, survival=survival, **kw)


def test_treatment_not_binary_lists_values():
    bad = DATA.treatment.copy() * 2
    with pytest.raises(
        ValueError, match=r"`treatment` must contain only 0 and 1; found values \[0, 2\]"
    ):
        _fit(treatment=bad)


def test_survival_text_values():
    bad = np.where(DATA.survival == 1, "alive", "dead")
    with pytest.raises(TypeError, match="`survival` must be numeric 0/1"):
        _fit(survival=bad)


@pytest.mark.parametrize("name", ["treatment", "survival"])
def test_nan_in_indicator(name):
    bad = getattr(DATA, name).astype(float)
    bad[3] = np.nan
    with pytest.raises(ValueError, match=f"`{name}` has 1 missing value"):
        _fit(**{name: bad})


def test_outcome_missing_for_survivors_counts_and_positions():
    y = DATA.y.copy()
    survivors = np.flatnonzero(DATA.survival == 1)[:3]
    y[survivors] = np.nan
    with pytest.raises(
        ValueError,
        match=r"missing \(NaN\) for 3 survivor\(s\).*positions "
        + str(survivors.tolist()).replace("[", r"\[").replace("]", r"\]"),
    ):
        _fit(y=y)


def test_outcome_of_non_survivors_is_ignored():
    y = DATA.y.copy()
    y[DATA.survival == 0] = 1e6
    a = _fit(y=y)
    b = _fit()
    assert a.effect_ == b.effect_


def test_non_numeric_outcome():
    y = np.array(["high"] * len(DATA.y), dtype=object)
    with pytest.raises(TypeError, match="`y` must be numeric"):
        _fit(y=y)


def test_length_mismatch_gives_both_lengths():
    with pytest.raises(ValueError, match="`y` has 399 rows but `treatment` has 400"):
        _fit(y=DATA.y[:-1])
    with pytest.raises(ValueError, match="`treatment` has 400 rows but `survival` has 399"):
        _fit(survival=DATA.survival[:-1])
    with pytest.raises(ValueError, match="`X` has 399 rows but `treatment` has 400"):
        _fit(X=DATA.X[:-1])


def test_nan_in_X_asks_for_imputation_in_a_pipeline():
    X = DATA.X.copy()
    X[:5, 1] = np.nan
    with pytest.raises(ValueError, match="Impute them in a scikit-learn pipeline"):
        _fit(X=X)
    imputing = make_pipeline(SimpleImputer(), LogisticRegression(C=np.inf))
    est = ps.PrincipalScoreWeighting(
        treatment_model=imputing, survival_model=imputing, n_bootstrap=0
    )
    assert np.isfinite(_fit(X=X, est=est).effect_)


def test_inf_in_X():
    X = DATA.X.copy()
    X[0, 0] = np.inf
    with pytest.raises(ValueError, match="`X` contains 1 infinite value"):
        _fit(X=X)


def test_text_column_needs_an_encoding_pipeline():
    X = pd.DataFrame(DATA.X, columns=["a", "b", "c"])
    X["site"] = np.where(DATA.X[:, 0] > 0, "north", "south")
    with pytest.raises(TypeError, match=r"non-numeric column\(s\) \['site'\]"):
        _fit(X=X)
    encoder = make_column_transformer(
        (OneHotEncoder(drop="first"), ["site"]), remainder="passthrough"
    )
    model = make_pipeline(encoder, LogisticRegression(C=np.inf))
    est = ps.PrincipalScoreWeighting(treatment_model=model, survival_model=model, n_bootstrap=0)
    assert np.isfinite(_fit(X=X, est=est).effect_)


def test_arm_without_units():
    with pytest.raises(ValueError, match=r"treated arm \(treatment == 1\) has no units"):
        _fit(treatment=np.zeros_like(DATA.treatment))


def test_arm_without_survivors_or_deaths():
    survival = DATA.survival.copy()
    survival[DATA.treatment == 0] = 0
    y = np.where(survival == 1, DATA.y, np.nan)
    with pytest.raises(ValueError, match="control arm has no survivors"):
        _fit(survival=survival, y=y)
    survival = DATA.survival.copy()
    survival[DATA.treatment == 1] = 1
    y = np.where(survival == 1, np.nan_to_num(DATA.y), np.nan)
    with pytest.raises(ValueError, match="treated arm has no deaths"):
        _fit(survival=survival, y=y)


@pytest.mark.parametrize("bad", [-1.0, np.inf, np.nan])
def test_bad_sample_weight(bad):
    w = np.ones(len(DATA.y))
    w[7] = bad
    with pytest.raises(ValueError, match="`sample_weight` must be finite and non-negative"):
        _fit(sample_weight=w)


def test_bad_parameters():
    with pytest.raises(ValueError, match="`monotonicity` must be one of"):
        _fit(est=ps.PrincipalScoreWeighting(monotonicity="up"))
    with pytest.raises(ValueError, match="`scale` must be one of"):
        _fit(est=ps.PrincipalScoreWeighting(scale="log"))
    with pytest.raises(ValueError, match="`treatment_model` given as a number"):
        _fit(est=ps.PrincipalScoreWeighting(treatment_model=1.5))
    with pytest.raises(ValueError, match="`n_folds` must be None or an integer >= 2"):
        _fit(est=ps.PrincipalScoreWeighting(n_folds=1))
    with pytest.raises(ValueError, match="`level` must be a number strictly between 0 and 1"):
        _fit().conf_int(95)
    with pytest.raises(ValueError, match="`scale='odds_ratio'` needs a 0/1 outcome"):
        _fit(est=ps.PrincipalScoreWeighting(scale="odds_ratio"))


def test_two_dimensional_indicator_and_1d_X():
    with pytest.raises(ValueError, match="`X` must be two-dimensional"):
        _fit(X=DATA.X[:, 0])
    with pytest.raises(ValueError, match="`treatment` must be one-dimensional"):
        _fit(treatment=np.column_stack([DATA.treatment, DATA.treatment]))


def test_near_deterministic_probabilities_warn_with_counts():
    X = DATA.X.copy()
    X[:, 0] = DATA.treatment * 4.0 + np.random.default_rng(0).normal(size=len(X))
    with pytest.warns(ps.OverlapWarning, match=r"\d+ row\(s\) have a fitted treatment probability"):
        _fit(X=X)


def test_probabilities_of_exactly_zero_or_one_are_an_error_not_nan():
    from sklearn.base import BaseEstimator, ClassifierMixin

    class Certain(ClassifierMixin, BaseEstimator):
        """Claims every row with x0 > 0 is treated for sure: no overlap there."""

        def fit(self, X, y):
            self.classes_ = np.array([0, 1])
            return self

        def predict_proba(self, X):
            p = (np.asarray(X)[:, 0] > 0).astype(float)
            return np.column_stack([1 - p, p])

    est = ps.PrincipalScoreWeighting(treatment_model=Certain(), n_bootstrap=0)
    with pytest.raises(ValueError, match="exactly 0 or 1 where the formula divides"):
        _fit(est=est)


def test_predict_proba_feature_mismatch():
    est = _fit()
    with pytest.raises(ValueError, match="`X` has 2 features but the estimator was fitted with 3"):
        est.predict_proba(DATA.X[:, :2])


@pytest.mark.parametrize("estimator", [ps.PrincipalScoreWeighting, ps.OutcomeRegression])
def test_zero_survival_predictions_give_a_clear_error(estimator):
    # A model that predicts survival probability 0 for every row leaves no always-survivor
    # weight: the fit must say so, not fail with a bare ZeroDivisionError.
    from sklearn.dummy import DummyClassifier

    model = DummyClassifier(strategy="constant", constant=0)
    with pytest.warns(ps.OverlapWarning), pytest.raises(ValueError, match="not finite"):
        _fit(est=estimator(survival_model=model, n_bootstrap=0))
