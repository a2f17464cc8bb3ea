"""Monte Carlo checks of missing="at_random" against simulated truth (slow-marked).

Source of every check: the simulator's known SACE (datasets.make_scenario, make_truncation),
with missingness at random given x2 (or, for the shift, not at random with a known shift).
"""

import warnings

import numpy as np
import pytest
from scipy.special import expit

import pscore_strata as ps
from pscore_strata.datasets._missing import apply_missingness, check_missingness, shifted_truth
from pscore_strata.datasets._simulate import _stratum_logits

ESTIMATORS = (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust)


def _complete_cases(data):
    keep = ~np.isnan(data.survival) & ~((data.survival == 1) & np.isnan(data.y))
    return data.X[keep], data.y[keep], data.treatment[keep], data.survival[keep]


def _fits(cls, data):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mar = cls(missing="at_random").fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )
        X, y, t, s = _complete_cases(data)
        complete = cls().fit(X, y, treatment=t, survival=s)
    return mar, complete


@pytest.mark.slow
@pytest.mark.parametrize("scenario", ["lost_to_follow_up", "missing_outcomes"])
def test_truth_recovery_where_complete_cases_are_biased(scenario):
    # Simulated truth over 6 seeds at n = 20,000, for all three estimators. In
    # "lost_to_follow_up" losses concentrate at high x2, where the effect (1 + 0.5 x2) is
    # largest, so complete cases must understate the SACE.
    results = {cls: [] for cls in ESTIMATORS}
    for seed in range(6):
        data = ps.datasets.make_scenario(scenario, 20_000, random_state=seed)
        for cls in ESTIMATORS:
            mar, complete = _fits(cls, data)
            results[cls].append((mar.effect_ - data.true_effect, mar.std_error_,
                                 complete.effect_ - data.true_effect, complete.std_error_))
    for values in results.values():
        bias, se, cc_bias, cc_se = np.array(values).T
        assert abs(bias.mean()) < 3 * se.mean() / np.sqrt(len(bias))
        assert np.all(np.abs(bias) < 4 * se)
        assert abs(cc_bias.mean()) > 2 * cc_se.mean()
        if scenario == "lost_to_follow_up":
            assert np.all(cc_bias < 0)


@pytest.mark.slow
@pytest.mark.parametrize("cls", ESTIMATORS)
def test_coverage_of_95_percent_intervals_over_300_replicates(cls):
    # Simulated truth: 300 datasets of 2,000 rows from "missing_outcomes"; sandwich
    # (weighting, regression) and influence-function (multiply robust) intervals.
    hits, errors, ses = [], [], []
    for seed in range(300):
        data = ps.datasets.make_scenario("missing_outcomes", 2000, random_state=1000 + seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est = cls(missing="at_random").fit(
                data.X, data.y, treatment=data.treatment, survival=data.survival
            )
        low, high = est.conf_int()
        hits.append(low <= data.true_effect <= high)
        errors.append(est.effect_ - data.true_effect)
        ses.append(est.std_error_)
    assert 0.92 <= np.mean(hits) <= 0.98
    # Inverse-probability weights give the estimates heavy tails at n = 2000, so the spread is
    # measured robustly (interquartile range / 1.349, the normal's SD).
    spread = np.subtract(*np.percentile(errors, [75, 25])) / 1.349
    assert 0.8 < np.median(ses) / spread < 1.25


def _mnar_data(n, seed, shift, response):
    data = ps.datasets.make_truncation(n, n_features=3, effect_heterogeneity=0.5,
                                       random_state=seed)  # fmt: skip
    rng = np.random.default_rng(10_000 + seed)
    return apply_missingness(data, None, check_missingness(response, "response"), rng,
                             nonresponse_shift=shift)  # fmt: skip


@pytest.mark.slow
@pytest.mark.parametrize("cls", ESTIMATORS)
def test_outcome_shift_recovers_a_known_departure_from_missing_at_random(cls):
    # Simulated truth: non-responding survivors' outcomes sit 1.5 above responders' with the
    # same X and arm, and treated survivors respond less, so the SACE under the shift is
    # truth + 1.5 (E[e_a (1 - r_1)] - E[e_a (1 - r_0)]) / E[e_a] (Monte Carlo over X).
    shift = 1.5
    response = {"treated": (0.55, -0.8), "control": (0.85, 0.8)}
    spec = check_missingness(response, "response")
    X_mc = np.random.default_rng(7).standard_normal((1_000_000, 3))
    always = expit(_stratum_logits(X_mc, "linear")[0])
    estimates, ses, mar_errors = [], [], []
    for seed in range(4):
        data = _mnar_data(20_000, seed, shift, response)
        truth = shifted_truth(data.true_effect, spec, shift, always, X_mc)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est = cls(missing="at_random").fit(
                data.X, data.y, treatment=data.treatment, survival=data.survival
            )
        grid = ps.sensitivity_grid(est, outcome_shift=[0.0, shift])
        assert grid["effect"].iloc[0] == est.effect_
        assert grid["std_error"].iloc[0] == est.std_error_
        estimates.append(grid["effect"].iloc[1] - truth)
        ses.append(grid["std_error"].iloc[1])
        mar_errors.append(est.effect_ - truth)
    estimates, ses = np.array(estimates), np.array(ses)
    assert abs(estimates.mean()) < 3 * ses.mean() / 2
    assert np.all(np.abs(estimates) < 4 * ses)
    assert np.mean(mar_errors) < -4 * ses.mean()  # assuming MAR understates the SACE here


@pytest.mark.slow
def test_multiply_robust_survives_a_wrong_response_model():
    # Simulated truth. With correct survival and outcome models the multiply robust terms keep
    # mean zero whatever r_t is (docs/guide/derivations/missing-data.md, section 2), so an
    # intercept-only response model (DummyClassifier: the arm's response share) leaves it
    # unbiased, while weighting, which rests on r_t alone, is biased.
    from sklearn.dummy import DummyClassifier

    wrong = DummyClassifier(strategy="prior")
    robust, weighting = [], []
    for seed in range(3):
        data = ps.datasets.make_scenario("missing_outcomes", 20_000, random_state=seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fit = dict(treatment=data.treatment, survival=data.survival)
            mr = ps.MultiplyRobust(missing="at_random", response_model=wrong).fit(
                data.X, data.y, **fit)
            psw = ps.PrincipalScoreWeighting(missing="at_random", response_model=wrong,
                                             n_bootstrap=0).fit(data.X, data.y, **fit)
        robust.append((mr.effect_ - data.true_effect) / mr.std_error_)
        weighting.append((psw.effect_ - data.true_effect) / psw.std_error_)
    assert np.all(np.abs(robust) < 3)
    assert abs(np.mean(weighting)) > 3
