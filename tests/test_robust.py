"""Multiply robust and outcome regression estimators, cross-fitting, scales and heterogeneity.

Every check compares with something computed outside the library: statsmodels fits combined
with the efficient-influence-function terms of Jiang, Yang & Ding (2022, JRSSB), simulated truth
from ``ps.datasets.make_truncation``, a direct nonparametric bootstrap, or row duplication.
"""

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import PolynomialFeatures
from threadpoolctl import threadpool_limits

import pscore_strata as ps

ESTIMATORS = [ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust]


@pytest.fixture(autouse=True)
def _quiet_and_single_threaded():
    # Monotonicity warnings are expected: the generator's treated-arm survival probability is
    # not exactly logistic, so fitted curves cross in places. One thread keeps OpenMP learners
    # fast on a shared machine.
    with warnings.catch_warnings(), threadpool_limits(1):
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        yield


def _fit(estimator, data, **kw):
    return estimator.fit(data.X, data.y, treatment=data.treatment, survival=data.survival, **kw)


# -- independent computation with statsmodels ----------------------------------------------------


def _wmean(w, values):
    return np.sum(w * values) / np.sum(w)


def _linearized_se(w, influence):
    # With-replacement Taylor linearization of a weighted estimator (Wolter 2007, Introduction
    # to Variance Estimation, ch. 6; recalled from memory): z_i = w_i IF_i / sum(w),
    # var = n/(n-1) sum (z_i - mean z)^2. With unit weights this is sd(IF, ddof=1) / sqrt(n).
    z = w * influence / w.sum()
    n = z.size
    return np.sqrt(n / (n - 1) * np.sum((z - z.mean()) ** 2))


def _reference(data, monotonicity, w):
    """Nuisance fits by statsmodels (GLM Binomial / WLS per arm), then the paper's formulas."""
    design = sm.add_constant(data.X)
    T, S = data.treatment, data.survival
    Y = np.where(S == 1, data.y, 0.0)

    def logistic(target, rows):
        fit = sm.GLM(
            target[rows], design[rows], family=sm.families.Binomial(), freq_weights=w[rows]
        ).fit(tol=1e-12)
        return fit.predict(design)

    def linear(rows):
        return sm.WLS(Y[rows], design[rows], weights=w[rows]).fit().predict(design)

    pi = logistic(T, np.ones_like(T, bool))
    p = {t: logistic(S, T == t) for t in (0, 1)}
    m = {t: linear((T == t) & (S == 1)) for t in (0, 1)}
    if monotonicity == "increasing":
        # Jiang, Yang & Ding (2022), efficient influence function; control survivors are all
        # always-survivors, so p0 is the always-survivor principal score.
        e = p[0]
        phi_e = (1 - T) * (S - e) / (1 - pi) + e
        phi_1 = (1 - T) * (S - e) * m[1] / (1 - pi) + e * T * S * (Y - m[1]) / (pi * p[1])
        phi_1 = phi_1 + e * m[1]
        phi_0 = (1 - T) * (S * Y - e * m[0]) / (1 - pi) + e * m[0]
        weight_1 = T * S * e / (pi * p[1])
        weight_0 = (1 - T) * S / (1 - pi)
    else:
        # The mirror image: treated survivors are all always-survivors.
        e = p[1]
        phi_e = T * (S - e) / pi + e
        phi_1 = T * (S * Y - e * m[1]) / pi + e * m[1]
        phi_0 = T * (S - e) * m[0] / pi + e * (1 - T) * S * (Y - m[0]) / ((1 - pi) * p[0])
        phi_0 = phi_0 + e * m[0]
        weight_1 = T * S / pi
        weight_0 = (1 - T) * S * e / ((1 - pi) * p[0])
    return dict(
        e=e,
        m=m,
        phi_e=phi_e,
        phi_1=phi_1,
        phi_0=phi_0,
        weight_1=weight_1,
        weight_0=weight_0,
        Y=Y,
    )


def _robust_reference(ref, w, subset=None):
    g = np.ones_like(w) if subset is None else subset.astype(float)
    share = _wmean(w, g * ref["phi_e"])
    mu1 = _wmean(w, g * ref["phi_1"]) / share
    mu0 = _wmean(w, g * ref["phi_0"]) / share
    influence = g * (ref["phi_1"] - ref["phi_0"] - (mu1 - mu0) * ref["phi_e"]) / share
    return mu1, mu0, _linearized_se(w, influence)


@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
@pytest.mark.parametrize("weighted", [False, True])
def test_estimates_match_statsmodels_reference(monotonicity, weighted):
    data = ps.datasets.make_truncation(3000, monotonicity=monotonicity, random_state=11)
    rng = np.random.default_rng(5)
    w = rng.uniform(0.5, 3.0, data.y.size) if weighted else np.ones(data.y.size)
    kw = {"sample_weight": w} if weighted else {}
    ref = _reference(data, monotonicity, w)

    robust = _fit(ps.MultiplyRobust(monotonicity=monotonicity), data, **kw)
    mu1, mu0, se = _robust_reference(ref, w)
    assert robust.mean_treated_ == pytest.approx(mu1, abs=1e-6)
    assert robust.mean_control_ == pytest.approx(mu0, abs=1e-6)
    assert robust.effect_ == pytest.approx(mu1 - mu0, abs=1e-6)
    assert robust.std_error_ == pytest.approx(se, rel=1e-5)

    # Outcome regression: mu_t = E[e m_t] / E[e] (principal ignorability).
    regression = _fit(ps.OutcomeRegression(monotonicity=monotonicity), data, **kw)
    e, m = ref["e"], ref["m"]
    expected = (_wmean(w, e * m[1]) - _wmean(w, e * m[0])) / _wmean(w, e)
    assert regression.effect_ == pytest.approx(expected, abs=1e-6)

    # Normalized principal score weighting (Ding & Lu 2017).
    weighting = _fit(ps.PrincipalScoreWeighting(monotonicity=monotonicity), data, **kw)
    Y, w1, w0 = ref["Y"], ref["weight_1"], ref["weight_0"]
    expected = np.sum(w * w1 * Y) / np.sum(w * w1) - np.sum(w * w0 * Y) / np.sum(w * w0)
    assert weighting.effect_ == pytest.approx(expected, abs=1e-6)

    # Subgroup SACE: mu_t(g) = sum_g phi_t / sum_g phi_e, influence values restricted to g.
    labels = np.where(data.X[:, 0] > 0.3, "high x1", "low x1")
    table = robust.effect_by(labels).set_index("label")
    for label in ("high x1", "low x1"):
        mu1, mu0, se = _robust_reference(ref, w, labels == label)
        assert table.loc[label, "effect"] == pytest.approx(mu1 - mu0, abs=1e-6)
        assert table.loc[label, "std_error"] == pytest.approx(se, rel=1e-5)
        assert table.loc[label, "n"] == np.sum(labels == label)


# -- robustness to one wrong model -------------------------------------------------------------


def _blind(model, dropped, n_features=5):
    """``model`` fitted without covariate ``dropped``: a confounder it cannot see."""
    keep = [j for j in range(n_features) if j != dropped]
    return Pipeline(
        [("drop", ColumnTransformer([("keep", "passthrough", keep)])), ("model", model)]
    )


def _logistic():
    return LogisticRegression(C=np.inf, max_iter=1000)


@pytest.fixture(scope="module")
def large_data():
    return ps.datasets.make_truncation(40_000, random_state=3)


def _z(est, data):
    return (est.effect_ - data.true_effect) / est.std_error_


@pytest.mark.parametrize("wrong", ["treatment_model", "survival_model"])
def test_multiply_robust_survives_a_wrong_weighting_model(large_data, wrong):
    # Simulated truth (make_truncation, SACE = 1 exactly). x1 drives treatment, survival and
    # the outcome; a model that cannot see it is wrong.
    wrong_model = {wrong: _blind(_logistic(), dropped=0)}
    robust = _fit(ps.MultiplyRobust(**wrong_model), large_data)
    weighting = _fit(ps.PrincipalScoreWeighting(n_bootstrap=0, **wrong_model), large_data)
    assert abs(_z(robust, large_data)) < 4
    assert abs(_z(weighting, large_data)) > 4


def test_multiply_robust_survives_a_wrong_outcome_model(large_data):
    # The survival model must then be right. In the generator the treated-arm survival
    # probability is 1 - (1 - e_always)(1 - e_helped), two logistic curves combined, which a
    # main-effects logistic model only approximates; quadratic terms in the two covariates that
    # drive it (x1, x2) make it right to within the noise at this size.
    survival = make_pipeline(
        ColumnTransformer([("drivers", "passthrough", [0, 1])]),
        PolynomialFeatures(degree=2),
        _logistic(),
    )
    wrong_outcome = _blind(LinearRegression(), dropped=0)
    robust = _fit(
        ps.MultiplyRobust(survival_model=survival, outcome_model=wrong_outcome), large_data
    )
    regression = _fit(
        ps.OutcomeRegression(survival_model=survival, outcome_model=wrong_outcome, n_bootstrap=0),
        large_data,
    )
    assert abs(_z(robust, large_data)) < 4
    # The regression SE here ignores nuisance estimation (n_bootstrap=0); the bias is so large
    # that the comparison with the robust estimator's SE also fails.
    assert abs(regression.effect_ - large_data.true_effect) > 4 * robust.std_error_


def test_cross_fitted_boosting_recovers_truth_in_nonlinear_setting():
    # Simulated truth: curved stratum, treatment and outcome models, SACE = 1 exactly.
    data = ps.datasets.make_truncation(5000, outcome="nonlinear", random_state=4)
    params = dict(max_iter=60, max_leaf_nodes=15, min_samples_leaf=40)
    est = _fit(
        ps.MultiplyRobust(
            treatment_model=HistGradientBoostingClassifier(**params),
            survival_model=HistGradientBoostingClassifier(**params),
            outcome_model=HistGradientBoostingRegressor(**params),
            n_folds=3,
            n_repeats=2,
            random_state=0,
        ),
        data,
    )
    assert est.nuisance_.cross_fitted
    assert abs(est.effect_ - data.true_effect) < 4 * est.std_error_
    assert len(est.repeat_estimates_) == 2


# -- Monte Carlo: coverage and standard errors ------------------------------------------------


def test_coverage_and_standard_errors_match_monte_carlo():
    # Simulated truth, 300 replicates (DGP of make_truncation, default parametric models).
    # Targets: coverage 92-98% and mean SE / Monte Carlo SD in 0.85-1.15 (common practice).
    n_replicates, n = 300, 1000
    effects, errors, covered = [], [], []
    sub_effects, sub_errors = [], []
    for seed in range(n_replicates):
        data = ps.datasets.make_truncation(n, random_state=1000 + seed)
        est = _fit(ps.MultiplyRobust(), data)
        low, high = est.conf_int()
        effects.append(est.effect_)
        errors.append(est.std_error_)
        covered.append(low <= data.true_effect <= high)
        table = est.effect_by(data.X[:, 1] > 0)
        sub_effects.append(table["effect"].to_numpy())
        sub_errors.append(table["std_error"].to_numpy())
    coverage = np.mean(covered)
    ratio = np.mean(errors) / np.std(effects, ddof=1)
    assert 0.92 <= coverage <= 0.98, coverage
    assert 0.85 <= ratio <= 1.15, ratio
    assert abs(np.mean(effects) - 1.0) < 3 * np.std(effects) / np.sqrt(n_replicates)
    sub_ratio = np.mean(sub_errors, axis=0) / np.std(sub_effects, axis=0, ddof=1)
    assert np.all((sub_ratio > 0.85) & (sub_ratio < 1.15)), sub_ratio


# -- effect scales ---------------------------------------------------------------------------


def _bootstrap_sd(estimator, data, y, n_resamples, seed):
    rng = np.random.default_rng(seed)
    n = y.size
    draws = []
    for _ in range(n_resamples):
        rows = rng.integers(0, n, n)
        est = estimator.fit(
            data.X[rows], y[rows], treatment=data.treatment[rows], survival=data.survival[rows]
        )
        draws.append(est.effect_)
    return np.std(draws, ddof=1)


@pytest.mark.parametrize(
    ("scale", "outcome", "shift"), [("ratio", "linear", 10.0), ("odds_ratio", "binary", 0.0)]
)
def test_ratio_scales_agree_with_direct_bootstrap(scale, outcome, shift):
    data = ps.datasets.make_truncation(1500, outcome=outcome, random_state=21)
    y = data.y + shift
    assert np.nanmin(y) >= 0
    est = ps.MultiplyRobust(scale=scale).fit(
        data.X, y, treatment=data.treatment, survival=data.survival
    )
    mu1, mu0 = est.mean_treated_, est.mean_control_
    expected = mu1 / mu0 if scale == "ratio" else (mu1 / (1 - mu1)) / (mu0 / (1 - mu0))
    assert est.effect_ == pytest.approx(expected, rel=1e-12)
    # Nonparametric bootstrap (Efron & Tibshirani 1993) of the whole procedure, 150 resamples:
    # the delta-method SE should agree to within the bootstrap's own noise (about 6%).
    reference = _bootstrap_sd(ps.MultiplyRobust(scale=scale), data, y, 150, seed=8)
    assert 0.8 < est.std_error_ / reference < 1.25
    label = "SACE (ratio)" if scale == "ratio" else "SACE (odds ratio)"
    table = est.summary()
    assert table.index[0] == label
    assert table.attrs["scale"] == scale
    low, high = est.conf_int()
    assert low < est.effect_ < high
    # Log-scale interval: symmetric around the estimate on the log scale.
    assert np.log(high) - np.log(est.effect_) == pytest.approx(np.log(est.effect_) - np.log(low))


def test_classifier_outcome_model_gives_risks():
    # Simulated truth (binary scenario): the SACE is a risk difference.
    data = ps.datasets.make_truncation(20_000, outcome="binary", random_state=2)
    est = _fit(ps.MultiplyRobust(outcome_model=_logistic()), data)
    assert abs(est.effect_ - data.true_effect) < 4 * est.std_error_
    assert 0 < est.mean_control_ < est.mean_treated_ < 1


# -- clusters and weights --------------------------------------------------------------------


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_singleton_clusters_equal_ordinary_standard_errors(estimator):
    data = ps.datasets.make_truncation(800, random_state=6)
    plain = _fit(
        estimator(n_bootstrap=0) if estimator is not ps.MultiplyRobust else estimator(), data
    )
    labels = np.array([f"unit {i}" for i in range(data.y.size)])
    clustered = _fit(
        estimator(n_bootstrap=0) if estimator is not ps.MultiplyRobust else estimator(),
        data,
        groups=labels,
    )
    assert clustered.std_error_ == pytest.approx(plain.std_error_, rel=1e-12)
    assert clustered.effect_ == plain.effect_


def test_cluster_standard_errors_grow_with_shared_cluster_effects():
    # make_scenario("clustered"): a shared random effect per cluster of about 20 rows moves the
    # always-survivor means together, so their cluster-robust SE must exceed the iid one.
    data = ps.datasets.make_scenario("clustered", 4000, random_state=1)
    iid = _fit(ps.MultiplyRobust(), data).summary()
    clustered = _fit(ps.MultiplyRobust(), data, groups=data.groups).summary()
    row = "always-survivor mean, control"
    assert clustered.loc[row, "std_error"] > 1.5 * iid.loc[row, "std_error"]


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_integer_weights_equal_row_duplication(estimator):
    data = ps.datasets.make_truncation(600, random_state=9)
    counts = np.random.default_rng(1).integers(1, 4, data.y.size)
    weighted = _fit(estimator(), data, sample_weight=counts)
    rows = np.repeat(np.arange(data.y.size), counts)
    duplicated = estimator().fit(
        data.X[rows], data.y[rows], treatment=data.treatment[rows], survival=data.survival[rows]
    )
    assert weighted.effect_ == pytest.approx(duplicated.effect_, abs=1e-7)
    assert weighted.mean_treated_ == pytest.approx(duplicated.mean_treated_, abs=1e-7)


# -- repeated cross-fitting ------------------------------------------------------------------


def test_repeated_cross_fitting_uses_median_rule():
    data = ps.datasets.make_truncation(1500, random_state=12)
    est = _fit(ps.MultiplyRobust(n_folds=3, n_repeats=5, random_state=0), data)
    table = est.repeat_estimates_
    assert len(table) == 5 and table["effect"].nunique() == 5
    # Chernozhukov et al. (2018, Econometrics Journal, section 3.4): median estimate, variance
    # median(SE_r^2 + (est_r - median)^2).
    median = np.median(table["effect"])
    variance = np.median(table["std_error"] ** 2 + (table["effect"] - median) ** 2)
    assert est.effect_ == pytest.approx(median)
    assert est.std_error_ == pytest.approx(np.sqrt(variance))
    assert est.std_error_ >= np.median(table["std_error"]) - 1e-12
    again = _fit(ps.MultiplyRobust(n_folds=3, n_repeats=5, random_state=0), data)
    assert again.effect_ == est.effect_
    single = _fit(ps.MultiplyRobust(n_folds=3, random_state=0), data)
    assert single.repeat_estimates_["effect"].iloc[0] == single.effect_


@pytest.mark.parametrize(
    ("params", "message"),
    [
        ({"n_repeats": 0}, "`n_repeats` must be an integer >= 1"),
        ({"n_repeats": 1.5, "n_folds": 3}, "`n_repeats` must be an integer >= 1"),
        ({"n_repeats": 3}, "`n_repeats=3` repeats the cross-fitting split, but `n_folds`"),
    ],
)
def test_bad_repeats_raise(params, message):
    data = ps.datasets.make_truncation(300, random_state=0)
    with pytest.raises(ValueError, match=message):
        _fit(ps.MultiplyRobust(**params), data)


def test_summary_carries_cautions_and_repeat_note():
    data = ps.datasets.make_truncation(800, random_state=17)
    est = _fit(ps.MultiplyRobust(n_folds=2, n_repeats=3, random_state=1), data)
    notes = " ".join(est.summary().attrs["notes"])
    assert "latent" in notes and "individual patients" in notes and "statistician" in notes
    assert "3 random fold splits" in notes


def test_classifier_on_continuous_outcome_raises():
    data = ps.datasets.make_truncation(300, random_state=18)
    with pytest.raises(ValueError, match="`outcome_model` is a classifier"):
        _fit(ps.MultiplyRobust(outcome_model=_logistic()), data)
