"""The threshold fits against scikit-learn, and the grid path's check against the formula layer.

Source of the threshold check: scikit-learn's own unpenalized logistic regression (Newton-
Cholesky, iterated to a 1e-12 tolerance) on the same rows and 0/1 targets.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from sklearn.linear_model import LogisticRegression

import pscore_strata as ps
from pscore_strata.distributions import _paths
from pscore_strata.distributions._conditional import threshold_grid
from pscore_strata.distributions._threshold_fits import fit_thresholds


def test_threshold_fits_equal_scikit_learn():
    data = ps.datasets.make_truncation(4000, n_features=4, random_state=3)
    y = np.nan_to_num(data.y)
    rows = np.flatnonzero((data.treatment == 1) & (data.survival == 1))
    weights = np.random.default_rng(0).uniform(0.5, 2.0, rows.size)
    thresholds, *_ = threshold_grid(y, data.survival, np.ones(y.size))
    out = np.empty((y.size, thresholds.size))
    all_rows = np.arange(y.size)
    converged = fit_thresholds(data.X, rows, y[rows], weights, thresholds, all_rows, out,
                               np.arange(thresholds.size))  # fmt: skip
    assert converged.all()
    for j, threshold in enumerate(thresholds):
        model = LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-12, max_iter=500)
        model.fit(data.X[rows], y[rows] <= threshold, sample_weight=weights)
        np.testing.assert_allclose(out[:, j], model.predict_proba(data.X)[:, 1], rtol=0,
                                   atol=1e-8)  # fmt: skip


@pytest.fixture
def regression():
    data = ps.datasets.make_truncation(1500, n_features=3, random_state=4)
    est = ps.OutcomeRegression().fit(data.X, data.y, treatment=data.treatment,
                                     survival=data.survival)  # fmt: skip
    return est, data.X


def test_formula_check_runs_once_per_conditional_model(regression, monkeypatch):
    est, X = regression
    calls = []
    original = _paths.formula_cdf

    def counting(*args, **kwargs):
        calls.append(kwargs.get("with_influence", args[2] if len(args) > 2 else True))
        return original(*args, **kwargs)

    monkeypatch.setattr(_paths, "formula_cdf", counting)
    first = ps.survivor_distribution(est, X=X)
    assert calls == [True]  # the first call checks the influence values too
    again = ps.survivor_distribution(est, X=X)
    ps.quantile_effects(est, X=X)
    assert calls == [True]  # later calls share the checked models
    np.testing.assert_array_equal(first.treated, again.treated)


def test_formula_check_refuses_a_mismatch(regression, monkeypatch):
    est, X = regression
    original = _paths.formula_cdf

    def shifted(*args, **kwargs):
        exact = original(*args, **kwargs)
        return dataclasses.replace(exact, mean_treated=exact.mean_treated + 1e-3)

    monkeypatch.setattr(_paths, "formula_cdf", shifted)
    with pytest.raises(RuntimeError, match="Internal check failed"):
        ps.survivor_distribution(est, X=X)


def test_regression_influence_folds_the_prediction_into_its_correction(regression):
    # The prediction's block (score x threshold grid) and the threshold fits' M-estimation
    # term share their coefficients, so the influence carries one rows x thresholds base; the
    # values themselves are checked against the per-value path in test_distribution_reference.
    est, X = regression
    prepared = _paths.prepare(est, X)
    width = prepared.conditional.thresholds.size
    path = _paths.cdf_path(prepared, prepared.conditional.thresholds)
    for influence in (path.influence_treated, path.influence_control):
        assert [B.shape[1] for _, B, _ in influence.blocks].count(width) == 1
    again = _paths.cdf_path(prepared, prepared.conditional.thresholds)
    np.testing.assert_array_equal(np.asarray(again.influence_treated),
                                  np.asarray(path.influence_treated))  # fmt: skip
