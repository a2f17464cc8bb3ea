"""Every principal stratum against simulated truth: triple robustness and interval coverage.

The full 300-replicate study is benchmarks/strata_coverage.py (table in benchmarks/README.md);
the checks here are lean. Derivations in docs/guide/derivations/strata.md.
"""

import warnings

import numpy as np
import pytest
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer

import pscore_strata as ps
from pscore_strata.datasets import make_intermediate

CASES = [("increasing", "always_survivor"), ("increasing", "protected"),
         ("increasing", "doomed"), ("decreasing", "harmed")]  # fmt: skip


def _noise_columns(X):
    # x4, x5 do not enter any true model: a model that sees only them is wrong.
    return np.asarray(X)[:, 3:]


def _wrong(role):
    learner = LinearRegression() if role == "outcome" else LogisticRegression(C=np.inf)
    return make_pipeline(FunctionTransformer(_noise_columns), learner)


@pytest.mark.parametrize("monotonicity, stratum", CASES)
@pytest.mark.parametrize("wrong", ["treatment", "survival", "outcome"])
def test_multiply_robust_survives_each_wrong_model(monotonicity, stratum, wrong):
    # Source: simulated truth (make_intermediate: exact stratum effects). Consistency when any
    # two of the three models are right (derivation section 6; Jiang, Yang & Ding 2022).
    data = make_intermediate(20000, stratum=stratum, monotonicity=monotonicity, random_state=1)
    models = {f"{wrong}_model": _wrong(wrong)}
    fit = dict(treatment=data.treatment, intermediate=data.intermediate)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        robust = ps.MultiplyRobust(stratum=stratum, monotonicity=monotonicity, **models).fit(
            data.X, data.y, **fit)  # fmt: skip
        assert abs(robust.effect_ - data.true_effect) < 4 * robust.std_error_
        if wrong == "survival":
            return  # this misspecification biases weighting only mildly in some strata
        # The estimator that relies on the wrong model is visibly biased: the model is wrong
        # in a way that matters.
        single = ps.PrincipalScoreWeighting if wrong == "treatment" else ps.OutcomeRegression
        other = single(stratum=stratum, monotonicity=monotonicity, n_bootstrap=0,
                       **models).fit(data.X, data.y, **fit)  # fmt: skip
    assert abs(other.effect_ - data.true_effect) > 4 * other.std_error_


@pytest.mark.slow
@pytest.mark.parametrize("monotonicity, stratum", CASES)
def test_coverage_for_each_stratum_and_estimator(monotonicity, stratum):
    # Source: simulated truth over 60 replicates (lean; benchmarks/strata_coverage.py runs
    # 300). With 60 replicates the Monte Carlo SD of a 95% coverage is about 2.8 points.
    estimators = {
        "weighting": ps.PrincipalScoreWeighting(stratum=stratum, monotonicity=monotonicity),
        "regression": ps.OutcomeRegression(stratum=stratum, monotonicity=monotonicity),
        "robust": ps.MultiplyRobust(stratum=stratum, monotonicity=monotonicity),
    }
    results = ps.simulation.run_study(estimators, [f"intermediate_{stratum}"], 800, n_reps=60,
                                      random_state=25, n_jobs=1)  # fmt: skip
    assert not results["failed"].any()
    for name, rows in results.groupby("estimator"):
        covered = (rows["ci_low"] <= rows["truth"]) & (rows["truth"] <= rows["ci_high"])
        error = rows["estimate"] - rows["truth"]
        assert 0.85 <= covered.mean() <= 1.0, (name, covered.mean())
        assert abs(error.mean()) < 3 * error.std() / np.sqrt(len(rows)) + 0.01, name
        # The standard errors track the Monte Carlo spread (within 25%).
        assert 0.75 < rows["std_error"].mean() / rows["estimate"].std() < 1.25, name
