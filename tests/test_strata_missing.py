"""Missing data at random for the effects in every principal stratum (outcome exists for all).

Sources: statsmodels GLMs of every model on the rows docs/guide/derivations/missing-data.md
section 5 names, with the stratum formulas written out here independently; the identity that
probabilities of one give the full-data formulas; simulated truth (``make_intermediate`` with
loss to follow-up and non-response missing at random given X) for bias and coverage.
"""

import warnings
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm

import pscore_strata as ps
from pscore_strata.datasets import make_intermediate
from pscore_strata.estimands import METHODS
from pscore_strata.estimands._view import orient

CLASSES = (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust)
MISSING = dict(follow_up=(0.85, 0.6), response=(0.8, -0.7))


def _fit(cls, data, stratum, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return cls(stratum=stratum, missing="at_random", **kwargs).fit(
            data.X, data.y, treatment=data.treatment, intermediate=data.intermediate
        )


def _glm(y, design, rows):
    return sm.GLM(y[rows], design[rows], family=sm.families.Binomial()).fit()


@pytest.mark.parametrize("cls", CLASSES)
@pytest.mark.parametrize("stratum", ["protected", "doomed"])
def test_estimates_match_statsmodels_fits_and_the_written_out_formulas(cls, stratum):
    # Reference: statsmodels fits of pi, p_t (known status), c_t, r_t1 (known units with S=1),
    # r_t0 (known units with S=0), m_t1, m_t0 (responders of each cell), and the formulas of
    # docs/guide/derivations/strata.md sections 4-6 with each observed indicator over its
    # observation probability (missing-data.md section 5), computed here.
    data = make_intermediate(3000, stratum=stratum, random_state=11, **MISSING)
    est = _fit(cls, data, stratum)
    X, T = data.X, data.treatment
    C, R = data.status_known, data.outcome_observed
    S, Y = np.nan_to_num(data.intermediate), np.nan_to_num(data.y)
    D = sm.add_constant(X)
    pi = _glm(T, D, np.ones_like(T, bool)).predict(D)
    p = {t: _glm(S, D, (T == t) & (C == 1)).predict(D) for t in (0, 1)}
    c = {t: _glm(C, D, T == t).predict(D) for t in (0, 1)}
    r = {(t, s): _glm(R, D, (T == t) & (C == 1) & (S == s)).predict(D)
         for t in (0, 1) for s in (0, 1)}  # fmt: skip
    m = {(t, s): sm.OLS(Y[(T == t) & (S == s) & (R == 1)],
                        D[(T == t) & (S == s) & (R == 1)]).fit().predict(D)
         for t in (0, 1) for s in (0, 1)}  # fmt: skip
    # Increasing monotonicity: protected e = p1 - p0, cells (1, 1) and (0, 0); doomed
    # e = 1 - p1, cells (1, 0) and (0, 0).
    if stratum == "protected":
        e, cells, a, b = p[1] - p[0], {1: 1, 0: 0}, 1.0, -1.0
    else:
        e, cells, a, b = 1 - p[1], {1: 0, 0: 0}, -1.0, 0.0
    arm_p = {1: pi, 0: 1 - pi}

    def q(t):
        return p[t] if cells[t] == 1 else 1 - p[t]

    def observed(t):
        s = cells[t]
        in_cell = (T == t) * C * (S == s) * R
        return in_cell / (c[t] * r[(t, s)])

    if cls is ps.PrincipalScoreWeighting:
        means = {}
        for t in (0, 1):
            w = e * observed(t) / (arm_p[t] * q(t))
            means[t] = np.sum(w * Y) / w.sum()
        expected = means[1] - means[0]
    elif cls is ps.OutcomeRegression:
        expected = np.sum(e * (m[(1, cells[1])] - m[(0, cells[0])])) / e.sum()
    else:
        residual = (a * T * C * (S - p[1]) / (pi * c[1])
                    + b * (1 - T) * C * (S - p[0]) / ((1 - pi) * c[0]))  # fmt: skip
        phi_e = e + residual
        phi = {}
        for t in (0, 1):
            mt = m[(t, cells[t])]
            phi[t] = e * mt + residual * mt + e * observed(t) * (Y - mt) / (arm_p[t] * q(t))
        expected = (phi[1].mean() - phi[0].mean()) / phi_e.mean()
    assert est.effect_ == pytest.approx(expected, abs=1e-6)
    for t in (0, 1):
        assert est.nuisance_.missingness["response"][(t, 0)] == pytest.approx(r[(t, 0)],
                                                                             abs=1e-6)


@pytest.mark.parametrize("method", list(METHODS))
@pytest.mark.parametrize(("monotonicity", "stratum"), [
    ("increasing", "protected"), ("increasing", "doomed"), ("decreasing", "harmed")])
def test_coarsened_formulas_with_probabilities_one_are_the_full_data_formulas(
    method, monotonicity, stratum
):
    # Identity (docs/guide/derivations/missing-data.md): C = R = 1 and c = r = 1 turn every
    # coarsened term into the full-data term.
    from pscore_strata._validation import check_truncation_data
    from pscore_strata.nuisance import fit_nuisance

    data = make_intermediate(1000, stratum=stratum, monotonicity=monotonicity, random_state=4)
    full = check_truncation_data(data.X, data.y, data.treatment, data.intermediate,
                                 stratum=stratum)  # fmt: skip
    ones = np.ones(full.n_samples, dtype=np.int8)
    coarsened = replace(full, status_known=ones, outcome_observed=ones)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        nuisance = fit_nuisance(coarsened, fit_outcome=True, zero_cells=True,
                                monotonicity=monotonicity)  # fmt: skip
    assert np.all(nuisance.missingness["response"][(0, 0)] == 1.0)
    today = METHODS[method].means(orient(full, replace(nuisance, missingness=None),
                                         monotonicity, stratum))  # fmt: skip
    new = METHODS[method].means(orient(coarsened, nuisance, monotonicity, stratum))
    assert new.mean_treated == pytest.approx(today.mean_treated, abs=1e-12)
    assert new.mean_control == pytest.approx(today.mean_control, abs=1e-12)
    np.testing.assert_allclose(new.influence_treated, today.influence_treated, atol=1e-10)


def test_a_nuisance_fitted_for_the_always_survivors_is_refused():
    # The always-survivor fit ignores the outcomes of units with intermediate 0 (and fits no
    # response model among them): sharing it with another stratum's estimator is refused.
    data = make_intermediate(1500, stratum="protected", random_state=2, **MISSING)
    always = _fit(ps.MultiplyRobust, data, "always_survivor")
    with pytest.raises(ValueError, match="`nuisance` was fitted on other data"):
        ps.PrincipalScoreWeighting(stratum="complier", missing="at_random").fit(
            data.X, data.y, treatment=data.treatment, intermediate=data.intermediate,
            nuisance=always.nuisance_)


def test_fit_estimators_shares_the_missing_data_models_for_a_stratum():
    data = make_intermediate(2000, stratum="doomed", random_state=9, **MISSING)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fits = ps.fit_estimators(data.X, data.y, treatment=data.treatment,
                                 intermediate=data.intermediate, stratum="never_taker",
                                 missing="at_random")  # fmt: skip
    for name, cls in (("weighting", ps.PrincipalScoreWeighting),
                      ("regression", ps.OutcomeRegression)):  # fmt: skip
        alone = _fit(cls, data, "never_taker")
        assert fits[name].effect_ == pytest.approx(alone.effect_, abs=1e-12)
        assert fits[name].std_error_ == pytest.approx(alone.std_error_, rel=1e-9)


@pytest.mark.slow
@pytest.mark.parametrize("cls", CLASSES)
def test_intervals_cover_the_truth_under_missing_data(cls):
    # Source: simulated truth; 120 replicates (a lean version of the benchmark's 300), nominal
    # 95%: the Monte Carlo standard error of the coverage is about 2 points.
    covered, estimates = [], []
    for seed in range(120):
        data = make_intermediate(1500, stratum="protected", random_state=500 + seed, **MISSING)
        est = _fit(cls, data, "protected")
        low, high = est.conf_int()
        covered.append(low <= data.true_effect <= high)
        estimates.append(est.effect_ - data.true_effect)
    assert 0.89 <= np.mean(covered) <= 0.995
    assert abs(np.mean(estimates)) < 4 * np.std(estimates) / np.sqrt(120)
