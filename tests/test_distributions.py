"""Always-survivor distributions, quantile effects and ordinal comparisons.

External references: simulated truth (quantiles and CDF values of the always-survivors'
potential outcomes in a large simulation of the same setting), an independent weighted ECDF and
weighted quantile (statsmodels DescrStatsW), the Mann-Whitney statistic (scipy) and a brute-force
weighted pair count, the refitting bootstrap, and a numerical stacked M-estimation sandwich
(statsmodels logistic fits, finite-difference bread).
"""

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.special import expit
from statsmodels.stats.weightstats import DescrStatsW

import pscore_strata as ps
from pscore_strata.assumptions import imbens_manski_interval
from pscore_strata.datasets import make_truncation
from pscore_strata.inference._standard_errors import influence_std_error


def skewed(y):
    # A monotone transform of the simulated outcome: log-normal given X, right-skewed. Principal
    # ignorability holds in distribution in make_truncation (pi_difference=0), so it holds for
    # any transform of the outcome too.
    return np.exp(0.5 * y)


@pytest.fixture(scope="module")
def truth():
    """Always-survivor quantiles and CDF values of Y(1), Y(0) from 1,000,000 simulated units."""
    big = make_truncation(1_000_000, n_features=3, random_state=12345)
    always = big.stratum == "always_survivor"
    y1, y0 = skewed(big.y1[always]), skewed(big.y0[always])
    u = np.array([0.25, 0.5, 0.75])
    values = np.array([1.0, 1.5, 2.5])
    return {
        "quantiles": u,
        "treated": np.quantile(y1, u),
        "control": np.quantile(y0, u),
        "values": values,
        "cdf_treated": np.array([np.mean(y1 <= v) for v in values]),
        "cdf_control": np.array([np.mean(y0 <= v) for v in values]),
    }


def fit(cls, data, y=None, fit_params=None, **params):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return cls(**params).fit(data.X, skewed(data.y) if y is None else y,
                                 treatment=data.treatment, survival=data.survival,
                                 **(fit_params or {}))  # fmt: skip


@pytest.fixture(scope="module")
def sample():
    return make_truncation(3000, n_features=3, random_state=7)


def principal_score_weights(est):
    """The weighting estimator's weights, rebuilt from its stored nuisance predictions."""
    n = est.nuisance_
    pi, p1, p0 = n.treatment_probability, n.survival[1], n.survival[0]
    return p0 / (pi * p1), 1 / (1 - pi)


def test_weighted_cdf_equals_independent_weighted_ecdf(sample):
    est = fit(ps.PrincipalScoreWeighting, sample)
    y = skewed(sample.y)
    dist = ps.survivor_distribution(est, values=[0.5, 1.0, 2.0, 4.0])
    w1, w0 = principal_score_weights(est)
    treated = (sample.treatment == 1) & (sample.survival == 1)
    control = (sample.treatment == 0) & (sample.survival == 1)
    for rows, weights, estimate in ((treated, w1, dist.treated), (control, w0, dist.control)):
        # Source: hand-written weighted ECDF with numpy.
        expected = [np.sum(weights[rows] * (y[rows] <= v)) / weights[rows].sum()
                    for v in dist.values]  # fmt: skip
        np.testing.assert_allclose(estimate, expected, rtol=1e-12)
    # Source: statsmodels DescrStatsW weighted quantiles (inverse-CDF definition).
    table = ps.quantile_effects(est, quantiles=(0.3, 0.5, 0.8))
    for rows, weights, arm in ((treated, w1, "treated"), (control, w0, "control")):
        reference = DescrStatsW(y[rows], weights=weights[rows]).quantile(
            [0.3, 0.5, 0.8], return_pandas=False
        )
        np.testing.assert_allclose(table[arm], reference, rtol=1e-12)


def test_naive_cdf_is_the_unweighted_survivor_ecdf(sample):
    est = fit(ps.PrincipalScoreWeighting, sample)
    dist = ps.survivor_distribution(est, values=[1.0, 2.0])
    y = skewed(sample.y)
    rows = (sample.treatment == 1) & (sample.survival == 1)
    # Source: numpy ECDF of the treated survivors.
    np.testing.assert_allclose(dist.naive_treated, [np.mean(y[rows] <= 1), np.mean(y[rows] <= 2)])


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.OutcomeRegression,
                                 ps.MultiplyRobust])  # fmt: skip
def test_cdf_and_quantile_effects_recover_simulated_truth(cls, sample, truth):
    # Source: simulated truth from the potential outcomes of 10^6 units; within 4 SE.
    est = fit(cls, sample)
    dist = ps.survivor_distribution(est, values=truth["values"], X=sample.X)
    for arm in ("treated", "control"):
        error = getattr(dist, arm) - truth[f"cdf_{arm}"]
        assert np.all(np.abs(error) < 4 * getattr(dist, f"std_error_{arm}")), (arm, error)
    table = ps.quantile_effects(est, X=sample.X)
    true_effect = truth["treated"] - truth["control"]
    assert np.all(np.abs(table["effect"] - true_effect) < 4 * table["std_error"])
    for arm in ("treated", "control"):
        assert np.all(np.abs(table[arm] - truth[arm]) < 4 * table[f"std_error_{arm}"])


@pytest.fixture(scope="module")
def decreasing():
    """Treatment that can only harm survival: a sample and the truth from 500,000 units."""
    big = make_truncation(500_000, n_features=3, monotonicity="decreasing", random_state=8)
    always = big.stratum == "always_survivor"
    u = np.array([0.25, 0.5, 0.75])
    true = np.quantile(skewed(big.y1[always]), u) - np.quantile(skewed(big.y0[always]), u)
    return make_truncation(3000, n_features=3, monotonicity="decreasing", random_state=9), u, true


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.MultiplyRobust])
def test_decreasing_monotonicity_recovers_the_truth(cls, decreasing):
    # Source: simulated truth (potential outcomes of the always-survivors); within 4 SE.
    data, u, true = decreasing
    est = fit(cls, data, monotonicity="decreasing")
    table = ps.quantile_effects(est, u, X=data.X)
    assert np.all(np.abs(table["effect"] - true) < 4 * table["std_error"]), (table, true)


def test_simultaneous_band_is_wider_than_pointwise(sample):
    est = fit(ps.PrincipalScoreWeighting, sample)
    dist = ps.survivor_distribution(est)
    frame = dist.to_frame()
    z = stats.norm.ppf(0.975)
    # A sup-t critical value over many correlated points lies between the pointwise z and the
    # Bonferroni value for that many points (union bound).
    bonferroni = stats.norm.ppf(1 - 0.025 / dist.values.size)
    assert z < dist.band_critical_treated < bonferroni
    assert np.all(frame["treated_band_low"] <= frame["treated_ci_low"] + 1e-12)
    assert np.all(np.diff(dist.treated) >= 0) and np.all(np.diff(dist.control) >= 0)


def test_ordinal_probability_matches_independent_computations(sample):
    y = np.clip(np.round(sample.y), -1, 3)
    est = fit(ps.PrincipalScoreWeighting, sample, y=y)
    result = ps.ordinal_comparison(est)
    w1, w0 = principal_score_weights(est)
    treated = (sample.treatment == 1) & (sample.survival == 1)
    control = (sample.treatment == 0) & (sample.survival == 1)
    # Source: brute-force weighted count over every (treated, control) survivor pair.
    a, b = y[treated][:, None], y[control][None, :]
    score = (a > b) + 0.5 * (a == b)
    pair_weights = w1[treated][:, None] * w0[control][None, :]
    expected = np.sum(pair_weights * score) / pair_weights.sum()
    assert result.probability == pytest.approx(expected, rel=1e-12)
    # Level probabilities: weighted shares of each level (hand computation).
    share = np.sum(w1[treated] * (y[treated] == 1)) / w1[treated].sum()
    assert result.levels.set_index("level").loc[1.0, "treated"] == pytest.approx(share)
    lower = ps.ordinal_comparison(est, better="lower")
    assert lower.probability == pytest.approx(1 - result.probability)


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.MultiplyRobust])
def test_binary_probability_is_half_plus_half_the_risk_difference(cls):
    # Source: a closed form. For 0/1 levels, p1 (1 - p0) + (p1 p0 + (1 - p1)(1 - p0)) / 2 =
    # 1/2 + (p1 - p0)/2, so the probability and its standard error follow from the estimator's
    # own SACE (risk difference) and standard error.
    data = make_truncation(3000, n_features=3, outcome="binary", random_state=2)
    est = fit(cls, data, y=data.y)
    result = ps.ordinal_comparison(est, X=data.X)
    assert result.probability == pytest.approx(0.5 + est.effect_ / 2, rel=1e-9)
    assert result.std_error == pytest.approx(est.std_error_ / 2, rel=1e-6)


def test_ordinal_probability_is_mann_whitney_in_a_randomized_trial():
    # Source: scipy.stats.mannwhitneyu; without covariates and with a constant randomization
    # probability the principal score weights are constant within each arm, so the probability
    # is U / (n1 n0) of the treated and control survivors (ties counted half by scipy too).
    data = make_truncation(1500, design="randomized", random_state=3)
    y = np.clip(np.round(data.y), -1, 3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = ps.PrincipalScoreWeighting(treatment_model=0.5).fit(
            None, y, treatment=data.treatment, survival=data.survival
        )
    result = ps.ordinal_comparison(est)
    a = y[(data.treatment == 1) & (data.survival == 1)]
    b = y[(data.treatment == 0) & (data.survival == 1)]
    u = stats.mannwhitneyu(a, b, alternative="two-sided").statistic
    assert result.probability == pytest.approx(u / (a.size * b.size), rel=1e-12)
    assert 0 < result.std_error < 0.05


def test_ordinal_with_multiply_robust_is_close_to_weighting(sample):
    y = np.clip(np.round(sample.y), -1, 3)
    robust = ps.ordinal_comparison(fit(ps.MultiplyRobust, sample, y=y), X=sample.X)
    weighting = ps.ordinal_comparison(fit(ps.PrincipalScoreWeighting, sample, y=y))
    assert abs(robust.probability - weighting.probability) < 2 * weighting.std_error
    np.testing.assert_allclose(robust.levels[["treated", "control"]].sum(), 1.0)


def test_errors_name_the_argument(sample):
    robust = fit(ps.MultiplyRobust, sample)
    with pytest.raises(ValueError, match="pass `X`"):
        ps.survivor_distribution(robust)
    with pytest.raises(ValueError, match="features"):
        ps.survivor_distribution(robust, X=sample.X[:, :2])
    weighting = fit(ps.PrincipalScoreWeighting, sample)
    with pytest.raises(ValueError, match="`quantiles`"):
        ps.quantile_effects(weighting, quantiles=(0.5, 1.0))
    with pytest.raises(ValueError, match="`values`"):
        ps.survivor_distribution(weighting, values=[np.nan])
    with pytest.raises(ValueError, match="`values`"):
        ps.survivor_distribution(weighting, values=["low"])
    with pytest.raises(ValueError, match="`n_draws`"):
        ps.survivor_distribution(weighting, n_draws=10)
    with pytest.raises(ValueError, match="integer levels"):
        ps.ordinal_comparison(weighting)
    with pytest.raises(ValueError, match="`n_bootstrap`"):
        ps.quantile_effects(weighting, n_bootstrap=1)
    with pytest.raises(ValueError, match="pass the"):
        ps.quantile_effects(weighting, n_bootstrap=5)
    with pytest.raises(TypeError, match="`estimator`"):
        ps.survivor_distribution(ps.TrimmingBounds())
    binary = fit(ps.PrincipalScoreWeighting, sample, y=(sample.y > 1).astype(float))
    with pytest.raises(ValueError, match="ordinal_comparison"):
        ps.quantile_effects(binary)


def test_estimator_and_inputs_are_not_mutated(sample):
    est = fit(ps.OutcomeRegression, sample)
    X = sample.X.copy()
    before = (est.effect_, est.nuisance_.survival[1].copy(), est.training_data_.outcome.copy())
    ps.quantile_effects(est, X=X)
    ps.survivor_distribution(est, X=X)
    np.testing.assert_array_equal(X, sample.X)
    assert est.effect_ == before[0]
    np.testing.assert_array_equal(est.nuisance_.survival[1], before[1])
    np.testing.assert_array_equal(est.training_data_.outcome, before[2])


# -- trimming bounds on quantile effects ---------------------------------------------------------
@pytest.fixture(scope="module")
def no_pi():
    """A sample without principal ignorability and the true quantile effects (10^6 units)."""
    data = make_truncation(5000, n_features=3, pi_difference=1.0, random_state=1)
    big = make_truncation(1_000_000, n_features=3, pi_difference=1.0, random_state=99)
    always = big.stratum == "always_survivor"
    u = np.array([0.25, 0.5, 0.75])
    true = np.quantile(skewed(big.y1[always]), u) - np.quantile(skewed(big.y0[always]), u)
    return data, u, true


@pytest.mark.parametrize("strata", ["none", "score"])
def test_quantile_bounds_contain_the_truth(no_pi, strata):
    # Source: simulated truth; principal ignorability fails (pi_difference = 1), so the
    # point estimators are biased but the bounds must contain the true quantile effects.
    data, u, true = no_pi
    bounds = fit(ps.TrimmingBounds, data, quantiles=u, strata=strata)
    table = bounds.quantile_bounds_
    assert np.all((table["lower"] < true) & (true < table["upper"])), (table, true)
    assert np.all(table["ci_low"] < table["lower"]) and np.all(table["ci_high"] > table["upper"])


def test_quantile_bounds_reduce_to_the_mean_bounds_construction(no_pi):
    # Source: the construction documented in assumptions/_quantile_bounds.py, checked by hand.
    from pscore_strata.assumptions._quantile_bounds import trimmed_mixtures
    from pscore_strata.estimands import _view
    from pscore_strata.nuisance._fit import fit_nuisance

    data, u, _ = no_pi
    y = skewed(data.y)
    cells = (data.X[:, 0] > 0).astype(int) + (data.X[:, 1] > 0.5)
    bounds = fit(ps.TrimmingBounds, data, quantiles=u, fit_params={"cells": cells})
    checked = ps._validation.check_truncation_data(data.X, y, data.treatment, data.survival)
    o = _view.orient(checked, fit_nuisance(checked), "increasing")
    masses = trimmed_mixtures(o, cells)
    ys = np.nan_to_num(y)
    # 1. The means of the trimmed mixtures minus the pure-arm mean are the mean bounds.
    pure_mean = np.sum(masses["pure"] * ys)
    assert np.sum(masses["lower"] * ys) - pure_mean == pytest.approx(bounds.lower_, rel=1e-10)
    assert np.sum(masses["upper"] * ys) - pure_mean == pytest.approx(bounds.upper_, rel=1e-10)
    # 2. The quantile bounds are the quantiles of the same mixtures (statsmodels DescrStatsW).
    def quantile(mass):
        keep = mass > 0
        return DescrStatsW(ys[keep], weights=mass[keep]).quantile(u, return_pandas=False)

    table = bounds.quantile_bounds_
    np.testing.assert_allclose(table["lower"], quantile(masses["lower"]) - quantile(masses["pure"]))
    np.testing.assert_allclose(table["upper"], quantile(masses["upper"]) - quantile(masses["pure"]))


def test_single_cell_quantile_bounds_are_shifted_quantiles_of_the_survivors():
    # Source: Lee (2009) / Imai (2008) closed form in a randomized trial without covariates:
    # the lower bound on the treated always-survivor u-quantile is the (u q)-quantile of the
    # treated survivors, the upper bound their (1 - q + u q)-quantile (numpy inverted_cdf).
    data = make_truncation(3000, design="randomized", random_state=4)
    y = skewed(data.y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        bounds = ps.TrimmingBounds(quantiles=[0.5], treatment_model=0.5).fit(
            None, y, treatment=data.treatment, survival=data.survival
        )
    t, s = data.treatment, data.survival
    q = s[t == 0].mean() / s[t == 1].mean()
    treated = y[(t == 1) & (s == 1)]
    control_median = np.quantile(y[(t == 0) & (s == 1)], 0.5, method="inverted_cdf")
    expected_low = np.quantile(treated, 0.5 * q, method="inverted_cdf") - control_median
    expected_high = np.quantile(treated, 1 - q + 0.5 * q, method="inverted_cdf") - control_median
    row = bounds.quantile_bounds_.iloc[0]
    assert row["lower"] == pytest.approx(expected_low, rel=1e-12)
    assert row["upper"] == pytest.approx(expected_high, rel=1e-12)


def test_quantile_bounds_refuse_a_discrete_outcome(sample):
    with pytest.raises(ValueError, match="`quantiles`"):
        fit(ps.TrimmingBounds, sample, y=np.round(sample.y).clip(0, 3), quantiles=[0.5])
    assert fit(ps.TrimmingBounds, sample).quantile_bounds_ is None


def test_few_clusters_give_t_intervals_with_g_minus_1_degrees_of_freedom():
    # Reference: Student's t quantile with G - 1 degrees of freedom (scipy.stats.t), the rule
    # the estimators' own intervals follow under fewer than 30 clusters (common practice).
    data = make_truncation(600, random_state=0)
    groups = np.arange(600) % 12
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = ps.PrincipalScoreWeighting().fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival, groups=groups
        )
        quantiles = ps.quantile_effects(est, quantiles=(0.5,))
        cdf = ps.survivor_distribution(est, values=[0.0, 1.0]).to_frame()
        ordinal = ps.ordinal_comparison(
            ps.PrincipalScoreWeighting().fit(
                data.X, (data.y > 1).astype(float), treatment=data.treatment,
                survival=data.survival, groups=groups,
            )
        )
    t = stats.t(11).ppf(0.975)
    row = quantiles.iloc[0]
    assert row["ci_high"] - row["effect"] == pytest.approx(t * row["std_error"], rel=1e-10)
    half = (cdf["treated_ci_high"] - cdf["treated_ci_low"]) / 2
    inside = (cdf["treated_ci_low"] > 0) & (cdf["treated_ci_high"] < 1)
    np.testing.assert_allclose(half[inside], t * cdf["treated_std_error"][inside], rtol=1e-10)
    assert 0 < ordinal.ci_low and ordinal.ci_high < 1
    assert ordinal.ci_high - ordinal.probability == pytest.approx(t * ordinal.std_error, rel=1e-10)


def test_quantile_bounds_with_few_clusters_use_the_t_reference():
    # The same Imbens-Manski construction with Student's t (G - 1 = 11 degrees of freedom) in
    # place of the normal: the interval must equal imbens_manski_interval called with dof=11.
    data = make_truncation(600, random_state=1)
    groups = np.arange(600) % 12
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        bounds = ps.TrimmingBounds(quantiles=(0.5,)).fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival, groups=groups
        )
    row = bounds.quantile_bounds_.iloc[0]
    expected = imbens_manski_interval(
        row["lower"], row["upper"], row["std_error_lower"], row["std_error_upper"], 0.95, dof=11
    )
    assert (row["ci_low"], row["ci_high"]) == pytest.approx(expected, rel=1e-12)
    normal = imbens_manski_interval(
        row["lower"], row["upper"], row["std_error_lower"], row["std_error_upper"], 0.95
    )
    assert row["ci_high"] - row["ci_low"] > normal[1] - normal[0]


def _stacked_cdf_errors(data, values, monotonicity):
    """Sandwich SEs of both arms' weighted CDFs at ``values`` from the stacked equations.

    Equations per row: the three logistic scores (treatment; survival in each arm, fitted by
    statsmodels) and, per value and arm, ``w_t (1{Y <= v} - F_t)`` with the estimator's weights.
    The bread ``A`` is a central finite-difference Jacobian, so no analytic derivative of the
    package is reused (Stefanski & Boos 2002, The calculus of M-estimation).
    """
    T, S = data.treatment.astype(float), data.survival.astype(float)
    y = np.where(S == 1, skewed(np.nan_to_num(data.y)), 0.0)
    D = sm.add_constant(data.X)
    n, k = D.shape
    cells = (np.ones(n, bool), T), (T == 1, S), (T == 0, S)
    coefficients = [sm.GLM(target[rows], D[rows], family=sm.families.Binomial()).fit().params
                    for rows, target in cells]  # fmt: skip
    below = (y[:, None] <= values).astype(float)

    def weights(theta):
        pi, p1, p0 = (expit(D @ theta[j * k:(j + 1) * k]) for j in range(3))
        w1, w0 = T * S / pi, (1 - T) * S / (1 - pi)
        # The arm whose survivors mix strata gets the always-survivor odds p_pure / p_mixed.
        return (w1 * p0 / p1, w0) if monotonicity == "increasing" else (w1, w0 * p1 / p0)

    def stacked(theta):
        pi, p1, p0 = (expit(D @ theta[j * k:(j + 1) * k]) for j in range(3))
        w1, w0 = weights(theta)
        F1, F0 = np.split(theta[3 * k:], 2)
        scores = [(rows * (target - p))[:, None] * D
                  for (rows, target), p in zip(cells, (pi, p1, p0), strict=True)]  # fmt: skip
        return np.column_stack(scores + [w1[:, None] * (below - F1), w0[:, None] * (below - F0)])

    w1, w0 = weights(np.concatenate(coefficients))
    theta = np.concatenate(coefficients + [w1 @ below / w1.sum(), w0 @ below / w0.sum()])
    rows = stacked(theta)
    assert np.abs(rows.mean(axis=0)).max() < 1e-8  # every equation is solved
    step = 1e-6
    bread = np.column_stack([(stacked(theta + step * e).mean(0) - stacked(theta - step * e).mean(0))
                             / (2 * step) for e in np.eye(theta.size)])  # fmt: skip
    bread_inv = np.linalg.inv(bread)
    covariance = bread_inv @ (rows.T @ rows / n) @ bread_inv.T / (n - 1)
    m = values.size
    se = np.sqrt(np.diag(covariance)[3 * k:])
    return theta[3 * k:3 * k + m], theta[3 * k + m:], se[:m], se[m:]


@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
def test_weighted_cdf_errors_match_a_numerical_stacked_sandwich(monotonicity):
    # Reference 1: the numerical stacked M-estimation sandwich above (statsmodels logistic fits,
    # finite-difference bread). Reference 2: the weighting estimator fitted directly with the
    # outcome 1{Y <= v}: the CDF at v is that estimator's always-survivor mean, so its estimate
    # and standard error must be the CDF path's exactly (same nuisance models, same formula).
    data = make_truncation(2000, n_features=3, monotonicity=monotonicity, random_state=3)
    values = np.array([0.6, 1.0, 1.5, 2.5, 4.0])
    est = fit(ps.PrincipalScoreWeighting, data, monotonicity=monotonicity)
    dist = ps.survivor_distribution(est, values=values, n_draws=100)
    F1, F0, se1, se0 = _stacked_cdf_errors(data, values, monotonicity)
    np.testing.assert_allclose(dist.treated, F1, rtol=1e-8)
    np.testing.assert_allclose(dist.control, F0, rtol=1e-8)
    np.testing.assert_allclose(dist.std_error_treated, se1, rtol=1e-4)
    np.testing.assert_allclose(dist.std_error_control, se0, rtol=1e-4)
    y = skewed(data.y)
    for j, v in enumerate(values):
        indicator = np.where(data.survival == 1, (y <= v).astype(float), np.nan)
        direct = fit(ps.PrincipalScoreWeighting, data, y=indicator, monotonicity=monotonicity)
        difference = dist.influence_treated[:, j] - dist.influence_control[:, j]
        assert direct.std_error_method_ == "sandwich"
        assert direct.mean_treated_ == pytest.approx(dist.treated[j], rel=1e-12)
        assert direct.mean_control_ == pytest.approx(dist.control[j], rel=1e-12)
        np.testing.assert_allclose(direct.influence_, difference, rtol=1e-10, atol=1e-12)
        assert direct.std_error_ == pytest.approx(influence_std_error(difference), rel=1e-10)
