"""Outcome distributions and quantile effects in every principal stratum.

Sources named in each test: the weighted empirical CDF of each arm's cell written out with numpy
(weights ``e / (P(arm|X) P(S=s|arm,X))``, docs/guide/derivations/strata.md section 4) from the
estimator's stored predictions and from statsmodels fits; the mean estimator fitted to the
outcome ``1{Y <= v}`` (DESIGN.md section 5b); the formula layer at every grid value; and the
potential outcomes simulated by ``make_intermediate``.
"""

from __future__ import annotations

import functools
import warnings

import numpy as np
import pytest
import statsmodels.api as sm

import pscore_strata as ps
from pscore_strata.datasets import make_intermediate
from pscore_strata.distributions._cdf import default_values
from pscore_strata.distributions._paths import cdf_path, formula_cdf, outcome_rows, prepare

CASES = [("increasing", "protected"), ("increasing", "doomed"), ("decreasing", "harmed"),
         ("decreasing", "doomed")]  # fmt: skip


def _fit(data, stratum, monotonicity="increasing", y=None, cls=ps.PrincipalScoreWeighting,
         **params):  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return cls(stratum=stratum, monotonicity=monotonicity, **params).fit(
            data.X, data.y if y is None else y, treatment=data.treatment,
            intermediate=data.intermediate)  # fmt: skip


def _weighted_ecdf(y, weights, values):
    # The normalized weighted empirical CDF written out: sum w 1{y <= v} / sum w.
    return np.array([np.sum(weights * (y <= v)) / np.sum(weights) for v in values])


def _complier_weights(T, S, pi, p1, p0):
    # Compliers (docs/guide/derivations/strata.md section 4): treated with S=1 weighted by
    # (p1 - p0) / (pi p1), control with S=0 by (p1 - p0) / ((1 - pi)(1 - p0)).
    w1 = np.where((T == 1) & (S == 1), (p1 - p0) / (pi * p1), 0.0)
    w0 = np.where((T == 0) & (S == 0), (p1 - p0) / ((1 - pi) * (1 - p0)), 0.0)
    return w1, w0


def test_complier_cdf_is_the_weighted_ecdf_of_its_cells():
    # Source: numpy weighted ECDFs of the two cells with the estimator's stored predictions.
    data = make_intermediate(2500, random_state=3)
    est = _fit(data, "complier")
    values = np.quantile(data.y, [0.1, 0.3, 0.5, 0.7, 0.9])
    dist = ps.survivor_distribution(est, values=values)
    nuisance = est.nuisance_
    w1, w0 = _complier_weights(data.treatment, data.intermediate, nuisance.treatment_probability,
                               nuisance.survival[1], nuisance.survival[0])  # fmt: skip
    np.testing.assert_allclose(dist.treated, _weighted_ecdf(data.y, w1, values), atol=1e-8)
    np.testing.assert_allclose(dist.control, _weighted_ecdf(data.y, w0, values), atol=1e-8)
    # The naive curves: unweighted ECDFs of the same cells.
    cell1 = (data.treatment == 1) & (data.intermediate == 1)
    unweighted = _weighted_ecdf(data.y[cell1], np.ones(cell1.sum()), values)
    np.testing.assert_allclose(dist.naive_treated, unweighted)


def test_complier_cdf_matches_statsmodels_fits():
    # Source: statsmodels GLMs (binomial, logit) of T on X, S on X within each arm, fitted here;
    # the library's unpenalized logistic fits reach the same maximum to about 1e-7.
    data = make_intermediate(2500, random_state=4)
    est = _fit(data, "complier")
    design = sm.add_constant(data.X)
    T, S = data.treatment, data.intermediate

    def logit(target, rows):
        fit = sm.GLM(target[rows], design[rows], family=sm.families.Binomial()).fit(tol=1e-13)
        return fit.predict(design)

    pi, p1, p0 = logit(T, np.ones(T.size, bool)), logit(S, T == 1), logit(S, T == 0)
    w1, w0 = _complier_weights(T, S, pi, p1, p0)
    values = np.quantile(data.y, [0.2, 0.5, 0.8])
    dist = ps.survivor_distribution(est, values=values)
    np.testing.assert_allclose(dist.treated, _weighted_ecdf(data.y, w1, values), atol=1e-6)
    np.testing.assert_allclose(dist.control, _weighted_ecdf(data.y, w0, values), atol=1e-6)


@pytest.mark.parametrize("monotonicity,stratum", CASES)
def test_cdf_and_standard_error_equal_the_mean_estimator_of_the_indicator(monotonicity, stratum):
    # Source: the weighting estimator of the stratum fitted to the outcome 1{Y <= v}: its two
    # means are the CDFs at v and its standard error (sandwich with the GLMs' terms) that of
    # the CDF difference.
    data = make_intermediate(1500, monotonicity=monotonicity, stratum="doomed", random_state=5)
    est = _fit(data, stratum, monotonicity)
    value = float(np.quantile(data.y, 0.45))
    reference = _fit(data, stratum, monotonicity, y=(data.y <= value).astype(float))
    dist = ps.survivor_distribution(est, values=[value])
    assert dist.treated[0] == pytest.approx(reference.mean_treated_, abs=1e-10)
    assert dist.control[0] == pytest.approx(reference.mean_control_, abs=1e-10)
    difference = np.asarray(dist.influence_treated)[:, 0] - np.asarray(dist.influence_control)[:, 0]
    assert ps.inference.influence_std_error(difference) == pytest.approx(reference.std_error_,
                                                                         rel=1e-8)  # fmt: skip


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.OutcomeRegression,
                                 ps.MultiplyRobust], ids=lambda c: c.__name__)  # fmt: skip
@pytest.mark.parametrize("missing", [False, True])
@pytest.mark.parametrize("monotonicity,stratum", CASES)
def test_grid_equals_the_formula_layer_at_every_value(monotonicity, stratum, missing, cls):
    # Source: the formula layer (METHODS["weighting"].means on a view built for the stratum)
    # with Y -> 1{Y <= v}, value by value, influence values included; with weights and
    # clusters, and with follow-up and response missing at random.
    extra = dict(follow_up=(0.8, 0.4), response=(0.8, -0.4)) if missing else {}
    data = make_intermediate(900, monotonicity=monotonicity, stratum="doomed", random_state=6,
                             **extra)  # fmt: skip
    rng = np.random.default_rng(0)
    params = {"missing": "at_random"} if missing else {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = cls(stratum=stratum, monotonicity=monotonicity, **params).fit(
            data.X, data.y, treatment=data.treatment, intermediate=data.intermediate,
            sample_weight=rng.uniform(0.5, 2.0, data.y.size),
            groups=rng.integers(0, 150, data.y.size))  # fmt: skip
    prepared = prepare(est, None if cls is ps.PrincipalScoreWeighting else data.X)
    assert prepared.oriented.stratum.role != "always"
    values = default_values(prepared.data, limit=25, rows=outcome_rows(prepared))
    path = cdf_path(prepared, values)
    for j, value in enumerate(values):
        exact = formula_cdf(prepared, value)
        arms = (("treated", exact.mean_treated, exact.influence_treated),
                ("control", exact.mean_control, exact.influence_control))  # fmt: skip
        for arm, mean, influence in arms:
            curve = getattr(path, arm)
            k = int(np.flatnonzero(getattr(path, f"influence_{arm}").index == j)[0])
            assert curve[k] == pytest.approx(np.clip(mean, 0, 1), abs=1e-10)
            np.testing.assert_allclose(getattr(path, f"influence_{arm}")[:, k], influence,
                                       atol=1e-10)  # fmt: skip


@functools.cache
def _true_quantiles(stratum, monotonicity, quantiles):
    # Source: the potential outcomes of a large draw of the same scenario.
    big = make_intermediate(400_000, monotonicity=monotonicity, stratum="doomed",
                            random_state=11)  # fmt: skip
    rows = big.stratum == stratum
    return np.quantile(big.y1[rows], quantiles), np.quantile(big.y0[rows], quantiles)


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.OutcomeRegression,
                                 ps.MultiplyRobust], ids=lambda c: c.__name__)  # fmt: skip
@pytest.mark.parametrize("monotonicity,stratum", [("increasing", "protected"),
                                                  ("increasing", "doomed"),
                                                  ("decreasing", "harmed")])  # fmt: skip
def test_quantile_effects_recover_the_simulated_truth(monotonicity, stratum, cls):
    quantiles = (0.25, 0.5, 0.75)
    data = make_intermediate(5000, monotonicity=monotonicity, stratum="doomed", random_state=12)
    est = _fit(data, stratum, monotonicity, cls=cls)
    table = ps.quantile_effects(est, quantiles, X=data.X)
    q1, q0 = _true_quantiles(stratum, monotonicity, quantiles)
    assert np.all(np.abs(table["effect"] - (q1 - q0)) < 4 * table["std_error"])
    assert np.all(np.abs(table["treated"] - q1) < 4 * table["std_error_treated"])
    assert np.all(np.abs(table["control"] - q0) < 4 * table["std_error_control"])
    assert f"invert the {stratum} CDFs" in " ".join(table.attrs["notes"])


def test_ordinal_comparison_of_compliers():
    # Source: the level shares are the differences of the weighted ECDFs written out above.
    data = make_intermediate(2000, random_state=8)
    levels = np.digitize(data.y, np.quantile(data.y, [0.25, 0.5, 0.75])).astype(float)
    est = _fit(data, "complier", y=levels)
    result = ps.ordinal_comparison(est)
    nuisance = est.nuisance_
    w1, w0 = _complier_weights(data.treatment, data.intermediate, nuisance.treatment_probability,
                               nuisance.survival[1], nuisance.survival[0])  # fmt: skip
    cdf1 = _weighted_ecdf(levels, w1, [0, 1, 2, 3])
    np.testing.assert_allclose(result.levels["treated"], np.diff(np.r_[0, cdf1]), atol=1e-8)
    assert result.probability > 0.5  # the complier effect is +2 on the outcome's scale
    assert "protected unit" in result.notes[0]


@pytest.mark.parametrize("cls", [ps.OutcomeRegression, ps.MultiplyRobust],
                         ids=lambda c: c.__name__)  # fmt: skip
def test_outcome_model_cdf_equals_the_mean_estimator_of_the_indicator(cls):
    # Source: the stratum's mean estimator fitted to the outcome 1{Y <= v} at a threshold v of
    # the conditional CDF model, whose logistic outcome models (scikit-learn, on each arm's
    # cell) are the threshold's fits; the CDF then differs only by the monotone rearrangement
    # of rows whose fitted curves cross (test_distributions_missing.py, same tolerance).
    data = make_intermediate(2000, random_state=9)
    est = _fit(data, "complier", cls=cls)
    conditional = prepare(est, data.X).conditional
    value = float(conditional.thresholds[9])
    reference = _fit(data, "complier", y=(data.y <= value).astype(float), cls=cls)
    for arm, key in ((1, 1), (0, (0, 0))):
        np.testing.assert_allclose(conditional.parametric[arm].predictions[:, 9],
                                   reference.nuisance_.outcome[key], atol=1e-7)  # fmt: skip
    dist = ps.survivor_distribution(est, values=[value], X=data.X)
    # The rearrangement moves the CDF by far less than its standard error (here under 5%).
    for arm in ("treated", "control"):
        gap = getattr(dist, arm)[0] - getattr(reference, f"mean_{arm}_")
        assert abs(gap) < 0.05 * getattr(dist, f"std_error_{arm}")[0]
    if cls is ps.OutcomeRegression:
        # Exactly: sum e F_t(v | X) / sum e with e = p1 - p0 and the rearranged predictions.
        e = est.nuisance_.survival[1] - est.nuisance_.survival[0]
        for arm, name in ((1, "treated"), (0, "control")):
            expected = np.sum(e * conditional.grid[arm][:, 9]) / np.sum(e)
            assert getattr(dist, name)[0] == pytest.approx(expected, abs=1e-10)
    difference = np.asarray(dist.influence_treated)[:, 0] - np.asarray(dist.influence_control)[:, 0]
    assert ps.inference.influence_std_error(difference) == pytest.approx(reference.std_error_,
                                                                         rel=1e-2)  # fmt: skip


def test_conditional_cdf_models_are_fitted_on_each_arms_cell():
    # Source: the weighted share of the cell's outcomes at or below each threshold (no
    # covariates: the conditional CDF model is that share).
    data = make_intermediate(1500, random_state=10)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = ps.OutcomeRegression(stratum="never_taker").fit(
            None, data.y, treatment=data.treatment, intermediate=data.intermediate)
    conditional = prepare(est).conditional
    for arm in (0, 1):
        cell = data.y[(data.treatment == arm) & (data.intermediate == 0)]
        shares = [np.mean(cell <= g) for g in conditional.thresholds]
        np.testing.assert_allclose(conditional.grid[arm][0], shares, atol=1e-12)
