"""Sensitivity analysis for the effects in every principal stratum (outcome measured for all).

Sources: simulated truth (``make_intermediate`` with principal ignorability broken in each mixed
cell by a known amount); an independent computation of the adjusted outcome-regression formula
from statsmodels fits, written out in the test from docs/guide/derivations/strata.md section 7;
finite differences for the functionals' partial derivatives; Monte Carlo spread for the
standard errors at a non-null setting.
"""

import warnings
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm

import pscore_strata as ps
from pscore_strata.datasets import make_intermediate
from pscore_strata.estimands import Setting
from pscore_strata.estimands._setting import Scores
from pscore_strata.estimands._view import orient

CLASSES = (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust)


def _fit(cls, data, stratum, monotonicity="increasing", **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return cls(stratum=stratum, monotonicity=monotonicity, **kwargs).fit(
            data.X, data.y, treatment=data.treatment, intermediate=data.intermediate
        )


@pytest.mark.parametrize("cls", CLASSES)
@pytest.mark.parametrize(("monotonicity", "stratum"), [
    ("increasing", "protected"), ("increasing", "doomed"), ("decreasing", "harmed"),
    ("decreasing", "doomed"),
])  # fmt: skip
def test_true_violations_recover_the_simulated_truth(cls, monotonicity, stratum):
    # Source: simulated truth; both mixed cells violate principal ignorability by known amounts.
    data = make_intermediate(20000, stratum=stratum, monotonicity=monotonicity, pi_difference=0.5,
                             pi_difference_doomed=0.7, random_state=2)  # fmt: skip
    est = _fit(cls, data, stratum, monotonicity)
    setting = {"pi_difference_doomed": [0.0, 0.7]}
    if stratum != "doomed":
        setting["pi_difference"] = [0.5]
    grid = ps.sensitivity_grid(est, **setting)
    row = grid.iloc[-1]
    assert abs(row["effect"] - data.true_effect) < 4 * row["std_error"]


@pytest.mark.parametrize("cls", CLASSES)
@pytest.mark.parametrize("stratum", ["protected", "doomed", "always_survivor"])
def test_the_null_setting_is_the_estimator(cls, stratum):
    data = make_intermediate(3000, stratum=stratum, random_state=5)
    est = _fit(cls, data, stratum)
    name = "pi_difference_doomed" if stratum != "always_survivor" else "pi_difference"
    grid = ps.sensitivity_grid(est, **{name: [0.0]}, harmed_ratio=[0.0])
    assert grid["effect"].iloc[0] == est.effect_
    assert grid["std_error"].iloc[0] == pytest.approx(est.std_error_, rel=1e-10)


def test_outcome_regression_adjustment_matches_an_independent_computation():
    # Source: docs/guide/derivations/strata.md section 7 written out with statsmodels fits:
    # protected (compliers) under increasing monotonicity with harmed_ratio xi,
    # e_a = (p0 - xi p1)/(1 - xi), e_h = p1 - e_a, e_d = 1 - p0 - e_h; treated mean
    # E[e_h (m11 + delta e_a / p1)] / E[e_h], control mean
    # E[e_h (m00 + delta0 e_d / (1 - p0))] / E[e_h].
    data = make_intermediate(4000, stratum="protected", random_state=8)
    est = _fit(ps.OutcomeRegression, data, "protected")
    delta, delta0, xi = 0.4, -0.6, 0.15
    grid = ps.sensitivity_grid(est, pi_difference=[delta], pi_difference_doomed=[delta0],
                               harmed_ratio=[xi])  # fmt: skip
    design = sm.add_constant(data.X)
    T, S, y = data.treatment, data.intermediate, data.y

    def logit(rows):
        return sm.Logit(S[rows], design[rows]).fit(disp=0).predict(design)

    def ols(rows):
        return sm.OLS(y[rows], design[rows]).fit().predict(design)

    p1, p0 = logit(T == 1), logit(T == 0)
    m11, m00 = ols((T == 1) & (S == 1)), ols((T == 0) & (S == 0))
    e_a = (p0 - xi * p1) / (1 - xi)
    e_h = p1 - e_a
    e_d = 1 - p0 - e_h
    treated = np.mean(e_h * (m11 + delta * e_a / p1)) / np.mean(e_h)
    control = np.mean(e_h * (m00 + delta0 * e_d / (1 - p0))) / np.mean(e_h)
    assert grid["effect"].iloc[0] == pytest.approx(treated - control, abs=1e-6)


@pytest.mark.parametrize("stratum", ["protected", "doomed"])
@pytest.mark.parametrize("role", ["mixed", "pure"])
@pytest.mark.parametrize("setting", [Setting(0.4, None, 0.2, -0.5), Setting(0.0, 1.3, 0.1, 0.8)])
def test_functional_partials_match_finite_differences(stratum, role, setting):
    # Source: central finite differences of the functional G in each prediction.
    data = make_intermediate(1500, stratum=stratum, random_state=3)
    est = _fit(ps.OutcomeRegression, data, stratum)
    o = orient(est.training_data_, est.nuisance_, "increasing", stratum)
    m = o.m_mixed if role == "mixed" else o.m_pure
    _, g_pp, g_pm, g_m = Scores(o, setting).g(role, m)
    h = 1e-6
    for field, analytic in (("p_pure", g_pp), ("p_mixed", g_pm)):
        up = Scores(replace(o, **{field: getattr(o, field) + h}), setting).g(role, m)[0]
        down = Scores(replace(o, **{field: getattr(o, field) - h}), setting).g(role, m)[0]
        np.testing.assert_allclose(analytic, (up - down) / (2 * h), rtol=1e-5, atol=1e-7)
    numeric = Scores(o, setting).g(role, m + h)[0] - Scores(o, setting).g(role, m - h)[0]
    np.testing.assert_allclose(g_m, numeric / (2 * h), rtol=1e-6, atol=1e-9)


def test_parameters_the_effect_does_not_depend_on_are_refused():
    data = make_intermediate(1500, stratum="doomed", random_state=1)
    doomed = _fit(ps.MultiplyRobust, data, "doomed")
    with pytest.raises(ValueError, match="does not change the doomed effect"):
        ps.sensitivity_grid(doomed, pi_difference=[0.5])
    with pytest.raises(ValueError, match="does not change the doomed effect"):
        ps.tipping_point(doomed, "pi_ratio")
    always = _fit(ps.MultiplyRobust, data, "always_survivor")
    with pytest.raises(ValueError, match="does not change the always-survivor effect"):
        ps.sensitivity_grid(always, pi_difference_doomed=[0.5])


def test_tipping_point_for_the_doomed_effect_is_a_root():
    data = make_intermediate(4000, stratum="doomed", random_state=6)
    est = _fit(ps.MultiplyRobust, data, "doomed")
    root = ps.tipping_point(est, "pi_difference_doomed", criterion="estimate")
    row = ps.sensitivity_grid(est, pi_difference_doomed=[root])
    assert row["effect"].iloc[0] == pytest.approx(0.0, abs=1e-6)


@pytest.mark.slow
@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.MultiplyRobust])
def test_standard_errors_at_a_violation_match_monte_carlo_spread(cls):
    # Source: Monte Carlo over 60 simulated data sets with known violations.
    effects, errors = [], []
    for seed in range(60):
        data = make_intermediate(2000, stratum="protected", pi_difference=0.5,
                                 pi_difference_doomed=0.7, random_state=100 + seed)  # fmt: skip
        est = _fit(cls, data, "protected")
        row = ps.sensitivity_grid(est, pi_difference=[0.5], pi_difference_doomed=[0.7])
        effects.append(row["effect"].iloc[0] - data.true_effect)
        errors.append(row["std_error"].iloc[0])
    assert np.mean(errors) == pytest.approx(np.std(effects, ddof=1), rel=0.25)
    assert abs(np.mean(effects)) < 4 * np.std(effects) / np.sqrt(60)
