"""Goodness of fit of the survival side (``ps.survival_fit_check``).

External references: statsmodels GLM (binomial family) for the fitted survival probabilities and
their log-likelihood, pandas ``qcut`` for the quantile groups, scikit-learn's
``calibration_curve`` for the group shares, scipy's chi-square distribution for the p-values,
and simulated data whose survival models are known to be logistic (size of the test).
"""

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.special import expit
from sklearn.calibration import calibration_curve
from sklearn.exceptions import NotFittedError

import pscore_strata as ps


def _draw(n, rng, bend=0.0):
    """Survival logistic in each arm (same slopes, larger intercept when treated: monotone);
    ``bend`` adds a quadratic term that main-effects logistic models miss."""
    X = rng.normal(size=(n, 3))
    T = rng.binomial(1, expit(0.3 * X[:, 0]))
    logit = 0.2 + 0.8 * X[:, 0] - 0.5 * X[:, 1] + 0.3 * X[:, 2] + bend * (X[:, 0] ** 2 - 1)
    S = rng.binomial(1, expit(logit + 0.7 * T))
    Y = np.where(S == 1, X[:, 0] + T + rng.normal(size=n), np.nan)
    return X, Y, T, S


def _fit(X, Y, T, S, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ps.PrincipalScoreWeighting(n_bootstrap=0, **kwargs).fit(
            X, Y, treatment=T, survival=S
        )


@pytest.fixture(scope="module")
def sample():
    return _draw(3000, np.random.default_rng(5))


def _hand_statistic(S, p, groups, w=None):
    """(O - E)^2 / V summed over groups, written out without the library."""
    w = np.ones_like(p) if w is None else w
    frame = pd.DataFrame({"g": groups, "o": w * S, "e": w * p, "v": w**2 * p * (1 - p)})
    sums = frame.groupby("g").sum()
    return float(np.sum((sums["o"] - sums["e"]) ** 2 / sums["v"]))


def test_statistic_matches_a_statsmodels_computation(sample):
    X, Y, T, S = sample
    est = _fit(X, Y, T, S)
    table = ps.survival_fit_check(est)
    tests = table.attrs["tests"]
    log_likelihood, n_parameters = 0.0, 0
    for arm, name in ((1, "treated"), (0, "control")):
        rows = T == arm
        # statsmodels GLM (binomial, logit link) fitted on the arm's rows.
        glm = sm.GLM(S[rows], sm.add_constant(X[rows]), family=sm.families.Binomial()).fit()
        p = glm.fittedvalues
        groups = pd.qcut(p, 10, labels=False)  # pandas' quantile groups, as the docstring says
        statistic = _hand_statistic(S[rows], p, groups)
        assert tests[name]["statistic"] == pytest.approx(statistic, rel=1e-6)
        assert tests[name]["df"] == 8  # Hosmer & Lemeshow (1980): G - 2
        # scipy's chi-square survival function.
        assert tests[name]["p_value"] == pytest.approx(stats.chi2.sf(statistic, 8), rel=1e-5)
        # Group shares as scikit-learn's calibration curve bins them.
        observed, predicted = calibration_curve(S[rows], p, n_bins=10, strategy="quantile")
        np.testing.assert_allclose(table.loc[name, "observed"], observed, atol=1e-12)
        np.testing.assert_allclose(table.loc[name, "predicted"], predicted, atol=1e-7)
        assert table.loc[name, "n_rows"].sum() == rows.sum()
        log_likelihood += glm.llf
        n_parameters += X.shape[1] + 1
    both = tests["treated"]["statistic"] + tests["control"]["statistic"]
    assert tests["both arms"]["statistic"] == pytest.approx(both)
    assert tests["both arms"]["p_value"] == pytest.approx(stats.chi2.sf(both, 16), rel=1e-5)
    assert table.attrs["survival_model"] == "arm-wise"
    assert table.attrs["log_likelihood"] == pytest.approx(log_likelihood, rel=1e-8)
    assert table.attrs["n_parameters"] == n_parameters
    assert table.attrs["aic"] == pytest.approx(2 * n_parameters - 2 * log_likelihood, rel=1e-8)
    # The binomial standard error of each group's share under the fitted model.
    z = (table["observed"] - table["predicted"]) / table["std_error"]
    np.testing.assert_allclose(table["z"], z, rtol=1e-9)


def test_weighted_and_user_groups_against_a_hand_computation(sample):
    X, Y, T, S = sample
    w = np.random.default_rng(0).uniform(0.5, 2.0, len(T))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = ps.PrincipalScoreWeighting(n_bootstrap=0).fit(
            pd.DataFrame(X, columns=["a", "b", "c"]), Y, treatment=T, survival=S,
            sample_weight=w,
        )  # fmt: skip
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    labels = np.where(X[:, 1] > 0, "high b", "low b")
    table = ps.survival_fit_check(est, strata=labels)
    by_column = ps.survival_fit_check(est, frame, strata="a")
    for arm, name in ((1, "treated"), (0, "control")):
        rows = T == arm
        # statsmodels GLM with the same weights (var_weights give the weighted score equations).
        glm = sm.GLM(S[rows], sm.add_constant(X[rows]), family=sm.families.Binomial(),
                     var_weights=w[rows]).fit()  # fmt: skip
        statistic = _hand_statistic(S[rows], glm.fittedvalues, labels[rows], w[rows])
        assert table.attrs["tests"][name]["statistic"] == pytest.approx(statistic, rel=1e-5)
        assert table.attrs["tests"][name]["df"] == 1  # caller's groups: G - 1
        quintiles = pd.qcut(frame["a"], 5).to_numpy()[rows]
        statistic = _hand_statistic(S[rows], glm.fittedvalues, quintiles.astype(str), w[rows])
        assert by_column.attrs["tests"][name]["statistic"] == pytest.approx(statistic, rel=1e-5)
    assert list(table.loc["treated"].index) == ["high b", "low b"]
    assert "column 'a'" in by_column.attrs["grouping"]


def test_misspecified_survival_model_is_rejected():
    # Simulated truth: a quadratic term the main-effects logistic models omit.
    est = _fit(*_draw(4000, np.random.default_rng(3), bend=0.8))
    tests = ps.survival_fit_check(est).attrs["tests"]
    assert tests["treated"]["p_value"] < 1e-3 and tests["control"]["p_value"] < 1e-3


def test_cross_fitted_predictions_are_checked(sample):
    X, Y, T, S = sample
    est = _fit(X, Y, T, S, n_folds=3, random_state=0)
    table = ps.survival_fit_check(est)
    assert table.attrs["out_of_fold"] and table.attrs["n_parameters"] is None
    assert table.attrs["aic"] is None
    assert table.attrs["tests"]["treated"]["df"] == 8
    for arm, name in ((1, "treated"), (0, "control")):
        rows = T == arm
        p = est.nuisance_.survival[arm][rows]
        statistic = _hand_statistic(S[rows], p, pd.qcut(p, 10, labels=False))
        assert table.attrs["tests"][name]["statistic"] == pytest.approx(statistic, rel=1e-9)


def test_stratum_model_survival_side():
    data = ps.datasets.make_truncation(3000, stratum_model="multinomial", random_state=4)
    model = ps.PrincipalScoreModel()
    est = _fit(data.X, data.y, data.treatment, data.survival, survival_model=model)
    table = ps.survival_fit_check(est)
    strata = est.nuisance_.models[("survival", 1)][0].strata
    # The stratum model's own observed-data likelihood (its log_likelihood_ at the fit).
    assert table.attrs["log_likelihood"] == pytest.approx(strata.log_likelihood_, rel=1e-9)
    assert table.attrs["survival_model"] == "strata"
    # Multinomial logistic, doomed the reference: (3 - 1) x (intercept + 5 covariates).
    assert table.attrs["n_parameters"] == 12
    # A model refitted outside the estimator: p1 = e_always + e_protected, p0 = e_always.
    scores = ps.PrincipalScoreModel().fit(data.X, treatment=data.treatment, survival=data.survival)
    scores = scores.predict_proba(data.X)
    T, S = data.treatment, data.survival
    for arm, name, p in ((1, "treated", scores[:, 0] + scores[:, 1]), (0, "control", scores[:, 0])):
        rows = T == arm
        statistic = _hand_statistic(S[rows], p[rows], pd.qcut(p[rows], 10, labels=False))
        assert table.attrs["tests"][name]["statistic"] == pytest.approx(statistic, rel=1e-4)


def test_without_covariates_there_is_nothing_to_test(sample):
    _, Y, T, S = sample
    table = ps.survival_fit_check(_fit(None, Y, T, S))
    # One fitted probability per arm: the arm's survival share, matched exactly.
    for arm, name in ((1, "treated"), (0, "control")):
        assert table.loc[name, "observed"].item() == pytest.approx(S[T == arm].mean())
        assert table.attrs["tests"][name]["df"] == 0
        assert np.isnan(table.attrs["tests"][name]["p_value"])
    assert np.isnan(table.attrs["tests"]["both arms"]["p_value"])
    assert table.attrs["n_parameters"] == 2 and "no p-value" in table.attrs["notes"][0]


def test_errors_name_the_argument(sample):
    X, Y, T, S = sample
    with pytest.raises(NotFittedError, match="not fitted"):
        ps.survival_fit_check(ps.MultiplyRobust())
    est = _fit(X, Y, T, S)
    for bad in (2, 2.5, True, "10"):
        with pytest.raises(ValueError, match="`n_groups` must be an integer of at least 3"):
            ps.survival_fit_check(est, n_groups=bad)
    with pytest.raises(ValueError, match="`strata` must hold one label per fitted row"):
        ps.survival_fit_check(est, strata=np.zeros(5))


@pytest.mark.slow
def test_size_under_correct_logistic_models():
    # Simulated truth: the survival models are logistic in each arm, so the null hypothesis
    # holds; 300 replicates of 1000 rows.
    rng = np.random.default_rng(1)
    p_values = {"quantile": [], "caller": []}
    for _ in range(300):
        X, Y, T, S = _draw(1000, rng)
        est = _fit(X, Y, T, S)
        quantile = ps.survival_fit_check(est).attrs["tests"]["both arms"]
        p_values["quantile"].append(quantile["p_value"])
        groups = (X[:, 1] > 0).astype(int) + 2 * (X[:, 2] > 0.5)
        caller = ps.survival_fit_check(est, strata=groups).attrs["tests"]["both arms"]
        p_values["caller"].append(caller["p_value"])
    quantile = np.asarray(p_values["quantile"])
    # Rejection at 5% within about 2.5 Monte Carlo SEs (sqrt(0.05 * 0.95 / 300) = 0.0126).
    assert 0.02 <= np.mean(quantile < 0.05) <= 0.085
    # Roughly uniform: the deciles of the p-values near 0.1, ..., 0.9 (Kolmogorov-Smirnov).
    assert stats.kstest(quantile, "uniform").pvalue > 0.01
    # Groups of the caller's covariates: the G - 1 reference is conservative.
    assert np.mean(np.asarray(p_values["caller"]) < 0.05) <= 0.05


@pytest.mark.slow
def test_size_under_a_correct_stratum_model():
    # Simulated truth: strata drawn from a multinomial logistic model, the stratum model's form;
    # 300 replicates of 1000 rows.
    p_values = []
    for replicate in range(300):
        data = ps.datasets.make_truncation(
            1000, stratum_model="multinomial", random_state=1000 + replicate
        )
        est = _fit(data.X, data.y, data.treatment, data.survival,
                   survival_model=ps.PrincipalScoreModel())  # fmt: skip
        p_values.append(ps.survival_fit_check(est).attrs["tests"]["both arms"]["p_value"])
    assert 0.02 <= np.mean(np.asarray(p_values) < 0.05) <= 0.085
    assert stats.kstest(p_values, "uniform").pvalue > 0.01
