"""Principal score weighting: truth recovery, reference computations and identities."""

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import approx_fprime
from scipy.special import expit

import pscore_strata as ps
from pscore_strata.datasets import make_truncation


def _fit(data, **params):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        return ps.PrincipalScoreWeighting(**params).fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )


@pytest.mark.parametrize(
    "settings",
    [
        dict(design="observational"),
        dict(design="randomized"),
        dict(design="observational", n_features=2, effect=-0.5),
        dict(design="observational", outcome="binary", effect=0.8),
        dict(design="randomized", monotonicity="decreasing"),
    ],
)
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_recovers_simulated_truth(settings, seed):
    # Source: simulated truth from make_truncation (exact, or a documented Monte Carlo).
    data = make_truncation(4000, random_state=seed, **settings)
    est = _fit(data, monotonicity=settings.get("monotonicity", "increasing"))
    assert est.std_error_method_ == "sandwich"
    assert abs(est.effect_ - data.true_effect) < 4 * est.std_error_
    low, high = est.conf_int(0.99)
    assert low < est.effect_ < high


def test_naive_contrast_biased_where_treatment_saves_high_outcome_units():
    # Common practice: conditioning on post-treatment survival biases the survivor comparison.
    # In make_truncation the protected stratum grows with x1 and so does the outcome, so treated
    # survivors carry extra high-outcome units: the naive contrast is biased upward.
    data = make_truncation(80000, design="randomized", random_state=3)
    est = _fit(data)
    table = est.summary()
    naive = table.loc["naive survivor contrast (biased)", "estimate"]
    naive_se = table.loc["naive survivor contrast (biased)", "std_error"]
    assert naive - data.true_effect > 4 * naive_se
    assert abs(est.effect_ - data.true_effect) < 4 * est.std_error_


def _statsmodels_logit(X, target):
    design = sm.add_constant(X, has_constant="add")
    fit = sm.GLM(target, design, family=sm.families.Binomial()).fit(tol=1e-12)
    return fit.params


def test_matches_statsmodels_glm_fits_and_independent_formula():
    # Reference library: statsmodels GLM Binomial (unpenalized maximum likelihood).
    data = make_truncation(3000, design="observational", random_state=11)
    X, T, S, Y = data.X, data.treatment, data.survival, data.y
    est = _fit(data)
    design = sm.add_constant(X, has_constant="add")
    pi = expit(design @ _statsmodels_logit(X, T))
    p1 = expit(design @ _statsmodels_logit(X[T == 1], S[T == 1]))
    p0 = expit(design @ _statsmodels_logit(X[T == 0], S[T == 0]))
    nuisance = est.nuisance_
    np.testing.assert_allclose(nuisance.treatment_probability, pi, atol=1e-5)
    np.testing.assert_allclose(nuisance.survival[1], p1, atol=1e-5)
    np.testing.assert_allclose(nuisance.survival[0], p0, atol=1e-5)
    # Normalized weighting estimator (Ding & Lu 2017), written out independently.
    y = np.nan_to_num(Y)
    w1 = T * S * p0 / (pi * p1)
    w0 = (1 - T) * S / (1 - pi)
    expected = np.sum(w1 * y) / np.sum(w1) - np.sum(w0 * y) / np.sum(w0)
    assert est.effect_ == pytest.approx(expected, abs=1e-6)


def test_sandwich_equals_numerical_stacked_m_estimation():
    # Reference: the M-estimation sandwich A^-1 B A^-T / n (Stefanski & Boos 2002) of the stacked
    # logistic score equations and the two weighting equations, with A from scipy's numerical
    # derivative of the stacked estimating functions.
    data = make_truncation(1500, n_features=2, random_state=5)
    X, T, S = data.X, data.treatment, data.survival
    y = np.nan_to_num(data.y)
    est = _fit(data)
    design = sm.add_constant(X, has_constant="add")
    k = design.shape[1]
    theta = np.concatenate(
        [
            _statsmodels_logit(X, T),
            _statsmodels_logit(X[T == 1], S[T == 1]),
            _statsmodels_logit(X[T == 0], S[T == 0]),
            [est.mean_treated_, est.mean_control_],
        ]
    )

    def stacked(theta):
        g, b1, b0 = theta[:k], theta[k : 2 * k], theta[2 * k : 3 * k]
        mu1, mu0 = theta[3 * k], theta[3 * k + 1]
        pi, p1, p0 = expit(design @ g), expit(design @ b1), expit(design @ b0)
        return np.column_stack(
            [
                (T - pi)[:, None] * design,
                (T * (S - p1))[:, None] * design,
                ((1 - T) * (S - p0))[:, None] * design,
                T * S * p0 / (pi * p1) * (y - mu1),
                (1 - T) * S / (1 - pi) * (y - mu0),
            ]
        )

    n = len(T)
    rows = stacked(theta)
    bread = np.array(
        [
            approx_fprime(theta, lambda t, j=j: stacked(t)[:, j].mean(), 1e-7)
            for j in range(theta.size)
        ]
    )
    meat = rows.T @ rows / n
    bread_inv = np.linalg.inv(bread)
    covariance = bread_inv @ meat @ bread_inv.T / n
    contrast = np.zeros(theta.size)
    contrast[-2:] = [1, -1]
    reference_se = np.sqrt(contrast @ covariance @ contrast)
    # Ours carries the small-sample factor n/(n-1) (see inference.influence_std_error).
    assert est.std_error_ == pytest.approx(reference_se * np.sqrt(n / (n - 1)), rel=1e-4)


@pytest.mark.parametrize("treatment_model", [None, 0.5])
def test_unadjusted_randomized_equals_difference_of_survivor_means(treatment_model):
    # Identity: with no covariates every model is an arm share, the weights are constant within
    # arm, and the estimate is the difference of the survivor means.
    data = make_truncation(2000, design="randomized", random_state=4)
    est = ps.PrincipalScoreWeighting(treatment_model=treatment_model).fit(
        None, data.y, treatment=data.treatment, survival=data.survival
    )
    T, S, Y = data.treatment, data.survival, data.y
    expected = Y[(T == 1) & (S == 1)].mean() - Y[(T == 0) & (S == 1)].mean()
    assert est.effect_ == pytest.approx(expected, abs=1e-10)
    empty = np.empty((len(T), 0))
    same = ps.PrincipalScoreWeighting(treatment_model=treatment_model).fit(
        empty, data.y, treatment=T, survival=S
    )
    assert same.effect_ == pytest.approx(expected, abs=1e-10)


def test_decreasing_monotonicity_mirrors_increasing():
    # Identity: relabelling the arms turns "increasing" into "decreasing" and flips the sign.
    data = make_truncation(3000, random_state=8)
    up = _fit(data)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        down = ps.PrincipalScoreWeighting(monotonicity="decreasing").fit(
            data.X, data.y, treatment=1 - data.treatment, survival=data.survival
        )
    assert down.effect_ == pytest.approx(-up.effect_, abs=1e-8)
    assert down.std_error_ == pytest.approx(up.std_error_, rel=1e-6)
    assert list(down.classes_) == ["always_survivor", "harmed", "doomed"]


def test_principal_scores_and_predict():
    data = make_truncation(3000, random_state=2)
    est = _fit(data)
    scores = est.predict_proba(data.X)
    assert scores.shape == (3000, 3)
    np.testing.assert_allclose(scores.sum(axis=1), 1.0)
    assert (scores >= 0).all()
    # Source: simulated truth — the fitted always-survivor share is close to the true one.
    true_always = data.principal_scores[:, list(data.stratum_labels).index("always_survivor")]
    assert abs(scores[:, 0].mean() - true_always.mean()) < 0.03
    assert set(est.predict(data.X)) <= set(est.classes_)


def test_summary_reports_every_quantity():
    data = make_truncation(2000, random_state=6)
    table = _fit(data).summary(level=0.9)
    assert list(table.columns) == ["estimate", "std_error", "ci_low", "ci_high", "std_error_method"]
    assert table.shape[0] == 7
    shares = table.loc[["share always-survivor", "share protected", "share doomed"], "estimate"]
    assert shares.sum() == pytest.approx(1.0)
    assert (table["ci_low"] < table["estimate"]).all()
    assert any("latent" in note for note in table.attrs["notes"])


def test_non_default_learner_falls_back_to_bootstrap():
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    data = make_truncation(1500, random_state=9)
    # A nearly unpenalized but penalized model: no sandwich, so the refitting bootstrap.
    model = make_pipeline(StandardScaler(), LogisticRegression(C=1e6))
    est = _fit(data, survival_model=model, n_bootstrap=60, random_state=0)
    assert est.std_error_method_ == "bootstrap"
    assert len(est.bootstrap_replicates_) == 60
    notes = est.summary().attrs["notes"]
    assert any("bootstrap" in note and "penalized" in note for note in notes)
    sandwich = _fit(data)
    # Nearly the same model: the two SEs agree roughly.
    assert est.effect_ == pytest.approx(sandwich.effect_, abs=1e-3)
    assert 0.6 < est.std_error_ / sandwich.std_error_ < 1.6


class _DegenerateOnRefits:
    """Survival classifier whose refits predict probability 0 everywhere (after the first two)."""

    fits = 0

    def __init__(self):
        pass

    def get_params(self, deep=True):
        return {}

    def set_params(self, **params):
        return self

    def fit(self, X, y, sample_weight=None):
        type(self).fits += 1
        self.classes_ = np.array([0, 1])
        self.share_ = 0.0 if type(self).fits > 2 else float(np.mean(y))
        return self

    def predict_proba(self, X):
        return np.column_stack([np.full(len(X), 1 - self.share_), np.full(len(X), self.share_)])


def test_bootstrap_fallback_counts_non_finite_refits_as_failures():
    # Every refit gives 0/0 always-survivor means; the error says what to do instead.
    _DegenerateOnRefits.fits = 0
    data = make_truncation(300, random_state=1)
    message = r"Fewer than two of the `n_bootstrap`=5 .* n_bootstrap=0"
    with pytest.raises(RuntimeError, match=message):
        _fit(data, survival_model=_DegenerateOnRefits(), n_bootstrap=5, random_state=0)


def test_bootstrap_fallback_is_reproducible_with_random_learners():
    from sklearn.ensemble import RandomForestClassifier

    data = make_truncation(600, random_state=1)
    forest = RandomForestClassifier(n_estimators=10, min_samples_leaf=20)  # random_state=None
    errors = [
        _fit(data, survival_model=forest, n_bootstrap=10, random_state=3).std_error_
        for _ in range(2)
    ]
    assert errors[0] == errors[1]
