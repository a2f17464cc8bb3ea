"""missing="at_random": unknown survival status and missing outcomes among survivors.

Sources: statsmodels GLM fits and the issue's formulas written out independently here; a
numerical stacked M-estimation (Stefanski & Boos 2002) with scipy; simulated truth; identities
(nothing missing gives today's results exactly).
"""

import warnings
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import approx_fprime
from scipy.special import expit

import pscore_strata as ps
from pscore_strata.assumptions._trimming import trimming_bounds
from pscore_strata.datasets import make_truncation
from pscore_strata.estimands import _formulas, _view
from pscore_strata.nuisance import fit_nuisance

ESTIMATORS = (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust)
RESPONSE = {"treated": (0.7, -1.0), "control": (0.8, 1.0)}


def _mar_data(n, seed, **kwargs):
    settings = dict(n_features=2, effect_heterogeneity=0.5, follow_up=(0.8, -1.0),
                    response=RESPONSE)  # fmt: skip
    return make_truncation(n, **{**settings, **kwargs}, random_state=seed)


def _fit(cls, data, **params):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return cls(missing="at_random", **params).fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )


def _glm(target, design, rows):
    return sm.GLM(target[rows], design[rows], family=sm.families.Binomial()).fit(tol=1e-12)


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_estimates_match_statsmodels_fits_and_the_written_out_formulas(cls):
    # Reference: statsmodels GLMs of the seven models on the rows the issue names, and the
    # issue's formulas (weighting p0 / (pi c1 p1 r1), 1 / ((1 - pi) c0 r0); regression
    # E[p0 m_t] / E[p0]; multiply robust phi_e, phi_1, phi_0), computed here independently.
    data = _mar_data(3000, 1)
    est = _fit(cls, data)
    X, T = data.X, data.treatment
    C = data.status_known
    S = np.nan_to_num(data.survival)
    R = data.outcome_observed
    Y = np.nan_to_num(data.y)
    D = sm.add_constant(X)
    pi = _glm(T, D, np.ones_like(T, bool)).predict(D)
    p = {t: _glm(S, D, (T == t) & (C == 1)).predict(D) for t in (0, 1)}
    c = {t: _glm(C, D, T == t).predict(D) for t in (0, 1)}
    r = {t: _glm(R, D, (T == t) & (C == 1) & (S == 1)).predict(D) for t in (0, 1)}
    m = {t: sm.OLS(Y[(T == t) & (R == 1)], D[(T == t) & (R == 1)]).fit().predict(D)
         for t in (0, 1)}  # fmt: skip
    if cls is ps.PrincipalScoreWeighting:
        w1 = T * C * S * R * p[0] / (pi * c[1] * p[1] * r[1])
        w0 = (1 - T) * C * S * R / ((1 - pi) * c[0] * r[0])
        expected = np.sum(w1 * Y) / w1.sum() - np.sum(w0 * Y) / w0.sum()
    elif cls is ps.OutcomeRegression:
        expected = np.sum(p[0] * (m[1] - m[0])) / p[0].sum()
    else:
        a0 = (1 - T) * C / ((1 - pi) * c[0])
        phi_e = a0 * (S - p[0]) + p[0]
        phi_1 = (a0 * (S - p[0]) * m[1] + p[0] * T * C * S * R * (Y - m[1])
                 / (pi * c[1] * p[1] * r[1]) + p[0] * m[1])  # fmt: skip
        phi_0 = a0 * (S * R * (Y - m[0]) / r[0] + (S - p[0]) * m[0]) + p[0] * m[0]
        expected = (phi_1.mean() - phi_0.mean()) / phi_e.mean()
    assert est.effect_ == pytest.approx(expected, abs=1e-6)
    for t in (0, 1):
        assert est.nuisance_.missingness["follow_up"][t] == pytest.approx(c[t], abs=1e-6)
        assert est.nuisance_.missingness["response"][t] == pytest.approx(r[t], abs=1e-6)


def _stacked_reference(data, target, monotonicity="increasing"):
    """Sandwich SE of the SACE from all stacked equations, A from scipy's numerical derivative."""
    X, T = data.X, data.treatment
    C, R = data.status_known, data.outcome_observed
    S, Y = np.nan_to_num(data.survival), np.nan_to_num(data.y)
    D = sm.add_constant(X)
    k = D.shape[1]
    cells = {
        "pi": (np.ones_like(T, bool), T),
        "p1": ((T == 1) & (C == 1), S), "p0": ((T == 0) & (C == 1), S),
        "c1": (T == 1, C), "c0": (T == 0, C),
        "r1": ((T == 1) & (C == 1) & (S == 1), R), "r0": ((T == 0) & (C == 1) & (S == 1), R),
        "m1": ((T == 1) & (R == 1), Y), "m0": ((T == 0) & (R == 1), Y),
    }  # fmt: skip
    names = ["p0", "m1", "m0"] if target == "regression" else list(cells)[:7]
    coefficients = []
    for name in names:
        rows, y = cells[name]
        if name.startswith("m"):
            coefficients.append(sm.OLS(y[rows], D[rows]).fit().params)
        else:
            coefficients.append(_glm(y, D, rows).params)

    def means(theta):
        fitted = {
            name: (D @ theta[j * k:(j + 1) * k] if name.startswith("m")
                   else expit(D @ theta[j * k:(j + 1) * k]))
            for j, name in enumerate(names)
        }  # fmt: skip
        if target == "regression":
            return fitted, (fitted["p0"] * fitted["m1"], fitted["p0"] * fitted["m0"]), fitted["p0"]
        w1 = T * C * S * R / (fitted["pi"] * fitted["c1"] * fitted["r1"])
        w0 = (1 - T) * C * S * R / ((1 - fitted["pi"]) * fitted["c0"] * fitted["r0"])
        # The arm whose survivors mix strata gets the always-survivor odds p_pure / p_mixed.
        if monotonicity == "increasing":
            w1 = w1 * fitted["p0"] / fitted["p1"]
        else:
            w0 = w0 * fitted["p1"] / fitted["p0"]
        return fitted, (w1 * Y, w0 * Y), (w1, w0)

    def stacked(theta):
        fitted, (num1, num0), den = means(theta)
        mu1, mu0 = theta[-2], theta[-1]
        den1, den0 = den if isinstance(den, tuple) else (den, den)
        columns = []
        for name in names:
            rows, y = cells[name]
            columns.append((rows * (y - fitted[name]))[:, None] * D)
        return np.column_stack(columns + [num1 - mu1 * den1, num0 - mu0 * den0])

    _, (num1, num0), den = means(np.concatenate(coefficients + [np.zeros(2)]))
    den1, den0 = den if isinstance(den, tuple) else (den, den)
    theta = np.concatenate(coefficients + [[num1.sum() / den1.sum(), num0.sum() / den0.sum()]])
    rows = stacked(theta)
    assert np.abs(rows.mean(axis=0)).max() < 1e-6  # the fits solve their equations
    bread = np.array([approx_fprime(theta, lambda t, j=j: stacked(t)[:, j].mean(), 1e-7)
                      for j in range(theta.size)])  # fmt: skip
    n = len(T)
    bread_inv = np.linalg.inv(bread)
    covariance = bread_inv @ (rows.T @ rows / n) @ bread_inv.T / n
    contrast = np.zeros(theta.size)
    contrast[-2:] = [1, -1]
    return theta[-2] - theta[-1], np.sqrt(contrast @ covariance @ contrast) * np.sqrt(n / (n - 1))


@pytest.mark.parametrize(
    "cls, target, monotonicity",
    [(ps.PrincipalScoreWeighting, "weighting", "increasing"),
     (ps.PrincipalScoreWeighting, "weighting", "decreasing"),
     (ps.OutcomeRegression, "regression", "increasing")],
)  # fmt: skip
def test_sandwich_includes_follow_up_and_response_models(cls, target, monotonicity):
    # Reference: A^-1 B A^-T / n for the stacked logistic / least-squares equations of every
    # model (follow-up and response included) and the estimator's two mean equations.
    data = _mar_data(1500, 2)
    est = _fit(cls, data, monotonicity=monotonicity)
    effect, reference_se = _stacked_reference(data, target, monotonicity)
    assert est.std_error_method_ == "sandwich"
    assert est.effect_ == pytest.approx(effect, abs=1e-6)
    assert est.std_error_ == pytest.approx(reference_se, rel=1e-6)


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_nothing_missing_gives_todays_results_exactly(cls):
    # Identity: with nothing missing, missing="at_random" is today's analysis bit for bit.
    data = make_truncation(1500, random_state=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        today = cls().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
    new = _fit(cls, data)
    assert new.effect_ == today.effect_
    assert new.std_error_ == today.std_error_
    assert new.nuisance_.missingness is None


@pytest.mark.parametrize("formula", [_formulas.weighting_means, _formulas.regression_means,
                                     _formulas.robust_means])  # fmt: skip
@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
def test_coarsened_formulas_with_probabilities_one_are_the_full_data_formulas(formula,
                                                                              monotonicity):
    # Identity (docs/guide/derivations/missing-data.md): C = R = 1 and c = r = 1 turn every
    # coarsened term into the full-data term of the estimator without missing data.
    from pscore_strata._validation import check_truncation_data

    data = make_truncation(1000, random_state=4)
    full = check_truncation_data(data.X, data.y, data.treatment, data.survival)
    ones = np.ones(full.n_samples, dtype=np.int8)
    coarsened = replace(full, status_known=ones, outcome_observed=full.survival.copy())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        nuisance = fit_nuisance(coarsened, fit_outcome=True)
    assert nuisance.missingness["follow_up"][0] is not None
    assert not nuisance.models.get(("follow_up", 0))  # nothing missing: not fitted
    for key in ("follow_up", "response"):
        for arm in (0, 1):
            assert np.all(nuisance.missingness[key][arm] == 1.0)
    today = formula(_view.orient(full, replace(nuisance, missingness=None), monotonicity))
    new = formula(_view.orient(coarsened, nuisance, monotonicity))
    assert new.mean_treated == pytest.approx(today.mean_treated, abs=1e-12)
    assert new.mean_control == pytest.approx(today.mean_control, abs=1e-12)
    np.testing.assert_allclose(new.influence_treated, today.influence_treated, atol=1e-10)
    np.testing.assert_allclose(new.influence_control, today.influence_control, atol=1e-10)


def test_an_arm_with_nothing_missing_gets_no_model():
    # Specification: where every known survivor of an arm has an outcome, r_t is exactly 1.
    data = _mar_data(2000, 5, follow_up=None, response={"treated": 0.7, "control": 1.0})
    est = _fit(ps.MultiplyRobust, data)
    missingness = est.nuisance_.missingness
    assert np.all(missingness["response"][0] == 1.0)
    assert np.all(missingness["follow_up"][0] == 1.0)
    assert np.all(missingness["follow_up"][1] == 1.0)
    assert ("response", 1) in est.nuisance_.models
    assert ("response", 0) not in est.nuisance_.models
    assert ("follow_up", 1) not in est.nuisance_.models


@pytest.mark.parametrize("cls", [*ESTIMATORS, ps.TrimmingBounds])
@pytest.mark.parametrize("blank", ["survival", "y"])
def test_default_refuses_missing_values_and_names_the_option(cls, blank):
    data = _mar_data(600, 6, follow_up=(0.8, 0.0) if blank == "survival" else None,
                     response=0.8 if blank == "y" else None)  # fmt: skip
    with pytest.raises(ValueError, match='missing="at_random"') as error:
        cls().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
    assert "missing at random given X" in str(error.value)


def test_bad_missing_value_names_the_argument():
    data = _mar_data(300, 7)
    with pytest.raises(ValueError, match="`missing` must be one of"):
        ps.MultiplyRobust(missing="drop").fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )


def test_caller_arrays_are_not_modified():
    data = _mar_data(800, 8)
    survival, y = data.survival.copy(), data.y.copy()
    _fit(ps.MultiplyRobust, data)
    np.testing.assert_array_equal(data.survival, survival)
    np.testing.assert_array_equal(data.y, y)


def test_cross_fitting_and_refitting_bootstrap_cover_the_new_models():
    from sklearn.linear_model import LogisticRegression

    data = _mar_data(1500, 9)
    est = _fit(ps.MultiplyRobust, data, n_folds=3, random_state=0)
    assert len(est.nuisance_.models[("response", 1)]) == 3
    # A user response model rules out the sandwich: the refitting bootstrap resamples units
    # together with their missingness.
    boot = _fit(ps.PrincipalScoreWeighting, data, n_bootstrap=20, random_state=0,
                response_model=LogisticRegression(C=1e6, max_iter=500))  # fmt: skip
    assert boot.std_error_method_ == "bootstrap"
    assert boot.bootstrap_replicates_.shape[0] == 20
    sandwich = _fit(ps.PrincipalScoreWeighting, data)
    assert boot.effect_ == pytest.approx(sandwich.effect_, abs=1e-3)
    assert 0.6 < boot.std_error_ / sandwich.std_error_ < 1.6
    result = ps.bootstrap(ps.MultiplyRobust(missing="at_random"), data.X, data.y,
                          treatment=data.treatment, survival=data.survival, n_resamples=10,
                          random_state=0)  # fmt: skip
    assert np.isfinite(result.std_error)


def test_simulator_missingness_follows_the_requested_probabilities():
    # Source: the simulator's own probabilities (law of large numbers) and its known truth.
    plain = make_truncation(50_000, random_state=11)
    data = make_truncation(50_000, follow_up=(0.8, 1.0), response={"treated": 0.6,
                           "control": (0.9, -0.5)}, random_state=11)  # fmt: skip
    np.testing.assert_array_equal(data.survival_full, plain.survival)  # same draws before
    assert data.true_effect == plain.true_effect
    assert np.mean(data.status_known) == pytest.approx(np.mean(data.follow_up_probability),
                                                       abs=0.01)  # fmt: skip
    treated_known_survivors = (data.treatment == 1) & (data.status_known == 1) & (
        data.survival_full == 1)
    assert np.mean(data.outcome_observed[treated_known_survivors]) == pytest.approx(0.6, abs=0.01)
    assert np.all(np.isnan(data.survival) == (data.status_known == 0))
    assert np.all(np.isnan(data.y) == (data.outcome_observed == 0))
    with pytest.raises(ValueError, match="follow_up probability must be above 0"):
        make_truncation(100, follow_up=0.0)
    with pytest.raises(TypeError, match="response must be None"):
        make_truncation(100, response="high")
    with pytest.raises(ValueError, match="'treated' and 'control'"):
        make_truncation(100, response={"treated": 0.5})


def test_outcome_shift_interface():
    data = _mar_data(1500, 12)
    est = _fit(ps.OutcomeRegression, data)
    both = ps.sensitivity_grid(est, outcome_shift=0.5)
    per_arm = ps.sensitivity_grid(est, outcome_shift={"treated": [0.5], "control": [0.5]})
    # Identity: the same shift in both arms, given either way, is the same analysis.
    assert both["effect"].iloc[0] == pytest.approx(per_arm["effect"].iloc[0], abs=1e-12)
    assert list(per_arm.columns[:2]) == ["outcome_shift_treated", "outcome_shift_control"]
    with pytest.raises(ValueError, match="on its own"):
        ps.sensitivity_grid(est, outcome_shift=[0.0], pi_difference=[0.0])
    with pytest.raises(ValueError, match="'treated' and 'control'"):
        ps.sensitivity_grid(est, outcome_shift={"treated": [1.0]})
    complete = make_truncation(500, random_state=1)
    plain = ps.OutcomeRegression().fit(complete.X, complete.y, treatment=complete.treatment,
                                       survival=complete.survival)  # fmt: skip
    with pytest.raises(ValueError, match="without missing outcomes"):
        ps.sensitivity_grid(plain, outcome_shift=[0.0])


def test_bounds_with_missing_data_use_the_weighted_observed_survivors():
    # Source: simulated truth (randomized design, principal ignorability holds, so the truth
    # lies inside the bounds) and the bounds of the full data before blanking.
    data = _mar_data(20_000, 13, design="randomized")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        bounds = ps.TrimmingBounds(missing="at_random").fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival)
        full = ps.TrimmingBounds().fit(data.X, data.y_full, treatment=data.treatment,
                                       survival=data.survival_full)  # fmt: skip
    assert bounds.lower_ < data.true_effect < bounds.upper_
    assert bounds.lower_ == pytest.approx(full.lower_, abs=3 * bounds.std_error_lower_)
    assert bounds.upper_ == pytest.approx(full.upper_, abs=3 * bounds.std_error_upper_)
    assert bounds.std_error_lower_ > full.std_error_lower_  # less information


def test_missing_data_summary_counts_by_arm():
    # Source: counts recomputed directly from the simulated arrays.
    data = _mar_data(2000, 14)
    est = _fit(ps.PrincipalScoreWeighting, data)
    table = ps.diagnostics.missing_data_summary(est)
    for arm, label in ((1, "treated"), (0, "control")):
        rows = data.treatment == arm
        assert table.loc[label, "n_status_unknown"] == np.sum(rows & np.isnan(data.survival))
        missing = rows & (data.survival == 1) & np.isnan(data.y)
        assert table.loc[label, "n_outcome_missing"] == missing.sum()
        assert table.loc[label, "share_status_unknown"] == pytest.approx(
            np.mean(np.isnan(data.survival[rows])))


@pytest.mark.parametrize("key, kind, arm", [("c_mixed", "follow_up", 1), ("c_pure", "follow_up", 0),
                                            ("r_mixed", "response", 1), ("r_pure", "response", 0)])
def test_bounds_terms_of_follow_up_and_response_models_match_numerical_derivatives(key, kind,
                                                                                   arm):
    # Reference: the delta method (Stefanski & Boos 2002). The term a fitted logistic model adds
    # to a bound's influence values must be I_i . d bound / d gamma, with I_i the model's
    # influence rows (from its statsmodels fit) and the derivative by central differences.
    from pscore_strata._validation import check_truncation_data

    data = _mar_data(3000, 15)
    d = check_truncation_data(data.X, data.y, data.treatment, data.survival, missing="at_random")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        nuisance = fit_nuisance(d)
    cells = np.zeros(d.n_samples, dtype=int)

    def compute(nuisance, drop=None):
        o = _view.orient(d, nuisance, "increasing")
        if drop is not None:
            o = replace(o, parametric={k: v for k, v in o.parametric.items() if k != drop})
        fitted = trimming_bounds(o, cells, d)
        bounds = np.array([fitted["lower_"], fitted["upper_"]])
        return bounds, (fitted["influence_lower_"], fitted["influence_upper_"])

    _, full = compute(nuisance)
    _, without = compute(nuisance, drop=key)
    D = sm.add_constant(data.X)
    T, C = d.treatment, d.status_known
    mask = (T == arm) if kind == "follow_up" else (T == arm) & (C == 1) & (d.survival == 1)
    target = C if kind == "follow_up" else d.outcome_observed
    gamma = _glm(target.astype(float), D, mask).params
    probability = expit(D @ gamma)
    np.testing.assert_allclose(probability, nuisance.missingness[kind][arm], atol=1e-6)
    information = (D[mask] * (probability * (1 - probability))[mask, None]).T @ D[mask] / len(T)
    rows = (mask * (target - probability))[:, None] * D @ np.linalg.inv(information)
    gradient = np.empty((2, gamma.size))
    for j in range(gamma.size):
        values = []
        for step in (1e-5, -1e-5):
            shifted = gamma.copy()
            shifted[j] += step
            missingness = {k: dict(v) for k, v in nuisance.missingness.items()}
            missingness[kind][arm] = expit(D @ shifted)
            values.append(compute(replace(nuisance, missingness=missingness))[0])
        gradient[:, j] = (values[0] - values[1]) / 2e-5
    for index in (0, 1):
        term = full[index] - without[index]
        expected = rows @ gradient[index]
        assert np.abs(expected).max() > 1e-3  # the model's estimation matters here
        np.testing.assert_allclose(term, expected, atol=1e-4 * np.abs(expected).max())


def test_an_outcome_with_unknown_survival_is_refused_not_dropped():
    data = _mar_data(600, 16, follow_up=0.8, response=None)
    y = data.y.copy()
    row = np.flatnonzero(np.isnan(data.survival))[0]
    y[row] = 1.0
    with pytest.raises(ValueError, match="whose `survival` is unknown"):
        ps.MultiplyRobust(missing="at_random").fit(
            data.X, y, treatment=data.treatment, survival=data.survival
        )


def test_any_classifier_or_pipeline_as_response_model():
    # Source: simulated truth; a scaled, mildly penalized logistic pipeline is close to the
    # default model, so the estimates agree and both recover the SACE.
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    data = _mar_data(4000, 17)
    pipeline = make_pipeline(StandardScaler(), LogisticRegression(C=100.0))
    custom = _fit(ps.MultiplyRobust, data, response_model=pipeline, n_folds=3, random_state=0)
    default = _fit(ps.MultiplyRobust, data, n_folds=3, random_state=0)
    assert custom.effect_ == pytest.approx(default.effect_, abs=0.2 * default.std_error_)
    assert abs(custom.effect_ - data.true_effect) < 4 * custom.std_error_
    assert len(custom.nuisance_.models[("follow_up", 0)]) == 3


def test_nullable_integer_survival_reads_na_as_unknown():
    # Identity: pandas' nullable Int64 with <NA> is the same data as float NaN.
    import pandas as pd

    data = _mar_data(1500, 18)
    nullable = pd.Series(data.survival).astype("Int64")
    with pytest.raises(ValueError, match='missing="at_random"'):
        ps.OutcomeRegression().fit(data.X, data.y, treatment=data.treatment, survival=nullable)
    a = _fit(ps.OutcomeRegression, data)
    b = ps.OutcomeRegression(missing="at_random").fit(
        data.X, data.y, treatment=data.treatment, survival=nullable)
    assert a.effect_ == b.effect_


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_integer_weights_equal_duplicated_rows_with_missing_data(cls):
    # Identity: integer sample weights enter every fit, the follow-up and response models
    # included, as duplicated rows would.
    data = _mar_data(800, 19)
    weights = np.random.default_rng(1).integers(1, 4, size=800)
    rows = np.repeat(np.arange(800), weights)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        weighted = cls(missing="at_random").fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival,
            sample_weight=weights)  # fmt: skip
        duplicated = cls(missing="at_random").fit(
            data.X[rows], data.y[rows], treatment=data.treatment[rows],
            survival=data.survival[rows])  # fmt: skip
    assert weighted.effect_ == pytest.approx(duplicated.effect_, abs=1e-7)


def test_small_follow_up_or_response_probabilities_warn():
    # Specification: like small treatment or survival probabilities, fitted response
    # probabilities below 0.01 raise an OverlapWarning, and the diagnostics flag them when more
    # than 5% of rows fall below 0.05 (common practice).
    data = _mar_data(4000, 20, follow_up=None, response={"treated": (0.3, -4.0),
                                                         "control": 0.9})  # fmt: skip
    with pytest.warns(ps.OverlapWarning, match="response"):
        est = ps.MultiplyRobust(missing="at_random").fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )
    messages = ps.diagnostic_warnings(est, data.X)
    assert any(m.startswith("Missing data:") and "response" in m for m in messages)


def test_monotonicity_check_counts_only_rows_of_known_status():
    # Identity: unadjusted, the follow-up model is each arm's known share, so the weighted
    # survival share is the share among rows of known status (not counting unknown as deaths).
    data = _mar_data(3000, 21, design="randomized", follow_up=0.7, response=None)
    est = ps.OutcomeRegression(missing="at_random").fit(
        None, data.y, treatment=data.treatment, survival=data.survival
    )
    row = ps.monotonicity_check(est, strata=np.zeros(3000), adjust=False).loc["overall"]
    known = ~np.isnan(data.survival)
    for arm, column in ((1, "survival_treated"), (0, "survival_control")):
        expected = np.mean(data.survival[known & (data.treatment == arm)])
        assert row[column] == pytest.approx(expected, abs=1e-10)
