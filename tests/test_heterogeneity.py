"""Effect heterogeneity: conditional effects on new rows and subgroup SACEs without refitting.

Checked against the generating model of ``ps.datasets.make_truncation`` (conditional effect
``1 + 0.5 x2`` given X among always-survivors) and a large simulated population for the subgroup
truths.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit
from sklearn.linear_model import LogisticRegression

import pscore_strata as ps

ESTIMATORS = [ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust]


@pytest.fixture(autouse=True)
def _quiet():
    # Expected: the generator's treated-arm survival probability is not exactly logistic.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        yield


def _fit(estimator, data, **kw):
    return estimator.fit(data.X, data.y, treatment=data.treatment, survival=data.survival, **kw)


def _logistic():
    return LogisticRegression(C=np.inf, max_iter=1000)


@pytest.fixture(scope="module")
def heterogeneous():
    return ps.datasets.make_truncation(20_000, effect_heterogeneity=0.5, random_state=13)


@pytest.mark.parametrize("estimator", [ps.OutcomeRegression, ps.MultiplyRobust])
@pytest.mark.parametrize("n_folds", [None, 3])
def test_predict_effect_recovers_conditional_effect(heterogeneous, estimator, n_folds):
    # Generating model (make_truncation): E[Y(1) - Y(0) | always-survivor, X] = 1 + 0.5 x2.
    # No bootstrap: this test reads only the fitted outcome models.
    extra = {"n_bootstrap": 0} if estimator is ps.OutcomeRegression else {}
    est = _fit(estimator(n_folds=n_folds, random_state=0, **extra), heterogeneous)
    X_new = np.random.default_rng(0).standard_normal((200, 5))
    predicted = est.predict_effect(X_new)
    assert predicted.shape == (200,)
    assert np.max(np.abs(predicted - (1 + 0.5 * X_new[:, 1]))) < 0.15
    if n_folds:
        models = est.nuisance_.models
        manual = np.mean([m.predict(X_new) for m in models[("outcome", 1)]], axis=0) - np.mean(
            [m.predict(X_new) for m in models[("outcome", 0)]], axis=0
        )
        assert predicted == pytest.approx(manual)


def test_predict_effect_with_classifier_gives_risk_differences():
    # Generating model: logit P(Y(0)=1 | always, X) = -0.2 + 0.8 x1 + 0.4 x2 - 0.4 x3 and the
    # treatment adds 1 on the logit scale.
    data = ps.datasets.make_truncation(20_000, outcome="binary", random_state=14)
    est = _fit(ps.MultiplyRobust(outcome_model=_logistic()), data)
    X_new = np.random.default_rng(1).standard_normal((200, 5))
    index = -0.2 + 0.8 * X_new[:, 0] + 0.4 * X_new[:, 1] - 0.4 * X_new[:, 2]
    truth = expit(index + 1.0) - expit(index)
    assert np.max(np.abs(est.predict_effect(X_new) - truth)) < 0.06


def test_predict_effect_rejects_wrong_width(heterogeneous):
    est = _fit(ps.OutcomeRegression(), heterogeneous)
    with pytest.raises(ValueError, match="`X` has 4 features but the estimator was fitted with 5"):
        est.predict_effect(heterogeneous.X[:, :4])


@pytest.fixture(scope="module")
def subgroup_truth():
    # Population subgroup SACE E[e_a (1 + 0.5 x2) | g] / E[e_a | g] with the generator's true
    # always-survivor probabilities, on a large simulated sample.
    big = ps.datasets.make_truncation(1_000_000, effect_heterogeneity=0.5, random_state=99)
    always = big.principal_scores[:, 0]
    effect = 1 + 0.5 * big.X[:, 1]
    group = big.X[:, 0] > 0
    return {
        label: np.sum(always[group == label] * effect[group == label])
        / np.sum(always[group == label])
        for label in (False, True)
    }


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_effect_by_recovers_subgroup_truth(heterogeneous, subgroup_truth, estimator):
    est = _fit(estimator(), heterogeneous)
    table = est.effect_by(heterogeneous.X[:, 0] > 0)
    assert list(table.columns) == ["label", "n", "effect", "std_error", "ci_low", "ci_high"]
    assert table["n"].sum() == heterogeneous.y.size
    for _, row in table.iterrows():
        truth = subgroup_truth[row["label"]]
        tolerance = 4 * row["std_error"]
        if estimator is ps.PrincipalScoreWeighting:
            # The generator's treated-arm survival curve is only approximately logistic,
            # which biases weighting by about 0.035 (measured at n = 400,000).
            tolerance += 0.05
        assert abs(row["effect"] - truth) < tolerance
    assert any("protocol" in note for note in table.attrs["notes"])


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_effect_by_single_group_equals_overall(estimator):
    data = ps.datasets.make_truncation(1000, random_state=15)
    est = _fit(estimator(), data, groups=np.arange(1000) // 10)
    table = est.effect_by(pd.Series(["all"] * 1000))
    assert table["effect"].iloc[0] == pytest.approx(est.effect_, abs=1e-12)
    if est.std_error_method_ != "bootstrap":
        assert table["std_error"].iloc[0] == pytest.approx(est.std_error_, rel=1e-10)


def test_effect_by_bad_labels_raise():
    data = ps.datasets.make_truncation(500, random_state=16)
    est = _fit(ps.MultiplyRobust(), data)
    with pytest.raises(ValueError, match="`labels` has 499 rows but the estimator was fitted on"):
        est.effect_by(np.zeros(499))
    labels = np.zeros(500, dtype=object)
    labels[3] = None
    with pytest.raises(ValueError, match="`labels` has 1 missing value"):
        est.effect_by(labels)
    with pytest.raises(ValueError, match="`labels` must be one-dimensional"):
        est.effect_by(np.zeros((500, 2)))
    lonely = np.zeros(500, dtype=int)
    lonely[np.flatnonzero((data.treatment == 1) & (data.survival == 0))[:5]] = 1
    with pytest.raises(ValueError, match="Subgroup 1 of `labels` has no survivors in the treated"):
        est.effect_by(lonely)
    with pytest.raises(ValueError, match="`level` must be a number strictly between 0 and 1"):
        est.effect_by(np.zeros(500), level=95)
