"""PrincipalScoreModel: the joint stratum model, its fit, its use by estimators, its sandwich."""

import pickle
import warnings

import numpy as np
import pytest
from scipy.optimize import minimize
from scipy.special import logsumexp
from sklearn.base import clone
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LogisticRegression
from sklearn.neighbors import KNeighborsClassifier

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

ESTIMATORS = [ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust]
MULTI = make_truncation(1500, n_features=2, stratum_model="multinomial", random_state=4)
CELLS = dict(treatment=MULTI.treatment, survival=MULTI.survival)  # keyword-only in fit


def _cells(treatment, survival, increasing=True):
    """Strata (always, helped, doomed) compatible with each observed cell, written out again."""
    mixed = treatment == (1 if increasing else 0)
    table = {
        (True, 1): [1, 1, 0], (True, 0): [0, 0, 1],
        (False, 1): [1, 0, 0], (False, 0): [0, 1, 1],
    }  # fmt: skip
    return np.array([table[(bool(m), int(s))] for m, s in zip(mixed, survival, strict=True)], bool)


def _softmax_scores(theta, Xd):
    """Multinomial logistic stratum probabilities, doomed the reference class."""
    eta = np.column_stack([Xd @ theta.reshape(2, -1).T, np.zeros(len(Xd))])
    return np.exp(eta - logsumexp(eta, axis=1, keepdims=True))


def _independent_mle(X, treatment, survival, increasing=True):
    """Maximum likelihood of prod_i sum_{k in C_i} e_k(X_i) by scipy BFGS (numerical gradient)."""
    Xd = np.column_stack([np.ones(len(X)), X])
    allowed = _cells(treatment, survival, increasing)

    def negative_log_likelihood(theta):
        e = _softmax_scores(theta, Xd)
        return -np.sum(np.log(np.sum(np.where(allowed, e, 0.0), axis=1))) / len(X)

    result = minimize(negative_log_likelihood, np.zeros(2 * Xd.shape[1]), method="BFGS",
                      options={"gtol": 1e-9, "maxiter": 2000})  # fmt: skip
    return result.x, Xd


@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
def test_default_fit_matches_an_independent_maximum_likelihood_fit(monotonicity):
    # Reference: scipy BFGS on the observed-data likelihood written in this test.
    data = make_truncation(1200, n_features=2, stratum_model="multinomial",
                           monotonicity=monotonicity, random_state=7)  # fmt: skip
    increasing = monotonicity == "increasing"
    theta, Xd = _independent_mle(data.X, data.treatment, data.survival, increasing)
    model = ps.PrincipalScoreModel(monotonicity=monotonicity).fit(
        data.X, treatment=data.treatment, survival=data.survival
    )
    assert model.converged_
    reference = _softmax_scores(theta, Xd)
    np.testing.assert_allclose(model.predict_proba(data.X), reference, atol=1e-4)
    allowed = _cells(data.treatment, data.survival, increasing)
    log_likelihood = np.sum(np.log(np.sum(np.where(allowed, reference, 0.0), axis=1)))
    assert model.log_likelihood_ == pytest.approx(log_likelihood, abs=1e-6)
    helped = "protected" if increasing else "harmed"
    assert list(model.classes_) == ["always_survivor", helped, "doomed"]
    # The coefficients are on the original scale: softmax of X coef' + intercept.
    eta = data.X @ model.coef_.T + model.intercept_
    np.testing.assert_allclose(
        np.exp(eta - logsumexp(eta, axis=1, keepdims=True)), model.predict_proba(data.X),
        atol=1e-12,
    )
    assert set(model.predict(data.X)) <= set(model.classes_)


def test_fit_is_invariant_to_the_units_of_the_covariates():
    # Maximum likelihood is invariant to rescaling a covariate (the design is standardized).
    X = MULTI.X * np.array([1e6, 1e-5]) + np.array([3e7, 0.0])
    scaled = ps.PrincipalScoreModel().fit(X, **CELLS)
    plain = ps.PrincipalScoreModel().fit(MULTI.X, **CELLS)
    np.testing.assert_allclose(scaled.predict_proba(X), plain.predict_proba(MULTI.X), atol=1e-8)


def test_em_with_a_logistic_base_reaches_the_same_optimum():
    # EM's fixed point is the maximum of the observed-data likelihood (Dempster et al. 1977).
    data = make_truncation(500, n_features=2, stratum_model="multinomial", random_state=11)
    direct = ps.PrincipalScoreModel().fit(data.X, treatment=data.treatment, survival=data.survival)
    base = LogisticRegression(C=np.inf, solver="newton-cg", tol=1e-10, max_iter=500)
    em = ps.PrincipalScoreModel(base, max_iter=1000, tol=1e-11).fit(
        data.X, treatment=data.treatment, survival=data.survival
    )
    assert em.converged_ and em.n_iter_ > 1
    np.testing.assert_allclose(em.predict_proba(data.X), direct.predict_proba(data.X), atol=1e-4)
    assert em.log_likelihood_ == pytest.approx(direct.log_likelihood_, abs=1e-5)


def test_em_with_an_exact_m_step_never_lowers_the_log_likelihood():
    # Dempster, Laird & Rubin (1977), theorem 1: an exact M-step cannot lower the observed-data
    # likelihood. Started from the stratum shares, far from the maximum, so EM climbs a lot;
    # the slack covers the logistic solver's own tolerance (tol=1e-10 on its gradient).
    data = make_truncation(500, n_features=2, stratum_model="multinomial", random_state=12)
    base = LogisticRegression(C=np.inf, solver="newton-cg", tol=1e-10, max_iter=500)
    em = ps.PrincipalScoreModel(base, init="shares", max_iter=400, tol=1e-10).fit(
        data.X, treatment=data.treatment, survival=data.survival
    )
    path = em.log_likelihood_path_
    assert em.converged_ and path.size == em.n_iter_ > 20
    assert path[-1] - path[0] > 1.0  # it did climb
    assert np.all(np.diff(path) >= -1e-8 * np.abs(path[1:]))
    direct = ps.PrincipalScoreModel().fit(data.X, treatment=data.treatment, survival=data.survival)
    assert em.log_likelihood_ == pytest.approx(direct.log_likelihood_, abs=1e-4)


def _boosting(**params):
    # Small regularized boosting (depth-2 trees, 50 rows per leaf): a flexible learner for
    # which each M-step is not an exact maximization.
    return HistGradientBoostingClassifier(max_iter=50, learning_rate=0.1, max_depth=2,
                                          min_samples_leaf=50, **params)  # fmt: skip


def test_em_with_boosting_settles_and_recovers_the_simulated_strata():
    data = make_truncation(2000, stratum_model="multinomial", random_state=1)
    truth = data.principal_scores[:, [0, 1, 3]]  # always, protected, doomed (simulated truth)
    model = ps.PrincipalScoreModel(_boosting(random_state=0), max_iter=40).fit(
        data.X, treatment=data.treatment, survival=data.survival
    )
    assert model.converged_ and model.n_iter_ < 40
    assert model.log_likelihood_ == pytest.approx(model.log_likelihood_path_.max())
    scores = model.predict_proba(data.X)
    error = np.abs(scores - truth).mean()
    unadjusted = np.abs(
        ps.PrincipalScoreModel()
        .fit(None, treatment=data.treatment, survival=data.survival)
        .predict_proba(None)
        - truth
    ).mean()
    # Tolerance 0.08: under half the error of the covariate-free model (0.17 here), which a
    # learner that found the strata's dependence on X must beat; the correctly specified
    # multinomial model reaches 0.03 and boosting 0.053-0.055 (seeds 1-3, measured), the
    # price of a non-parametric fit to latent labels at n = 2000.
    assert error < 0.08 and error < unadjusted / 2
    # The scores are a monotone model: each arm's survival is a sum of strata probabilities.
    p0, p1 = model.survival_probability(data.X)
    assert np.all(p1 >= p0)


def test_em_is_reproducible_and_seeds_an_unset_random_state():
    # Early stopping draws a validation split: with random_state=None each M-step would draw
    # a new one. The model seeds it once per fit from its own random_state.
    data = make_truncation(800, stratum_model="multinomial", random_state=2)
    base = _boosting(early_stopping=True, validation_fraction=0.2, n_iter_no_change=3)
    fits = [
        ps.PrincipalScoreModel(base, random_state=7, max_iter=40).fit(
            data.X, treatment=data.treatment, survival=data.survival
        )
        for _ in range(2)
    ]
    np.testing.assert_array_equal(fits[0].predict_proba(data.X), fits[1].predict_proba(data.X))
    np.testing.assert_array_equal(fits[0].log_likelihood_path_, fits[1].log_likelihood_path_)
    assert fits[0].converged_
    assert base.random_state is None  # the caller's classifier is left alone
    seed = fits[0].estimator_.random_state
    assert isinstance(seed, int) and seed == fits[1].estimator_.random_state


def test_classifier_without_sample_weight_gets_a_clear_error():
    with pytest.raises(TypeError, match="`estimator` \\(KNeighborsClassifier\\).*sample_weight"):
        ps.PrincipalScoreModel(KNeighborsClassifier()).fit(
            MULTI.X, treatment=MULTI.treatment, survival=MULTI.survival
        )


@pytest.mark.parametrize(
    ("params", "match"),
    [({"monotonicity": "up"}, "`monotonicity`"), ({"max_iter": 0}, "`max_iter`"),
     ({"tol": -1.0}, "`tol`"), ({"tol": "loose"}, "`tol`"), ({"init": "zero"}, "`init`")],
)  # fmt: skip
def test_bad_parameters_are_named(params, match):
    with pytest.raises(ValueError, match=match):
        ps.PrincipalScoreModel(**params).fit(MULTI.X, **CELLS)


def test_bad_indicators_are_named():
    with pytest.raises(ValueError, match="`survival` must hold only 0 and 1"):
        ps.PrincipalScoreModel().fit(
            MULTI.X, treatment=MULTI.treatment, survival=MULTI.survival * 2
        )


def test_non_convergence_warns_with_advice():
    with pytest.warns(ConvergenceWarning, match="Increase `max_iter`"):
        ps.PrincipalScoreModel(max_iter=1).fit(MULTI.X, **CELLS)


def test_em_non_convergence_warns_with_advice_and_keeps_the_best_iteration():
    base = LogisticRegression(C=np.inf, solver="newton-cg", max_iter=500)
    advice = "did not settle in max_iter=2.*Increase `max_iter`"
    with pytest.warns(ConvergenceWarning, match=advice):
        em = ps.PrincipalScoreModel(base, init="shares", max_iter=2).fit(
            MULTI.X, treatment=MULTI.treatment, survival=MULTI.survival
        )
    assert not em.converged_ and em.log_likelihood_ == em.log_likelihood_path_.max()


def test_monotonicity_must_match_the_estimator():
    est = ps.PrincipalScoreWeighting(
        survival_model=ps.PrincipalScoreModel(monotonicity="decreasing")
    )
    with pytest.raises(ValueError, match="monotonicity='decreasing'.*monotonicity='increasing'"):
        est.fit(MULTI.X, MULTI.y, treatment=MULTI.treatment, survival=MULTI.survival)


def _settings():
    yield "multinomial", make_truncation(1500, n_features=3, stratum_model="multinomial",
                                         random_state=5), "increasing"  # fmt: skip
    yield "logistic", make_truncation(1500, n_features=3, random_state=5), "increasing"
    yield "decreasing", make_truncation(1500, n_features=3, monotonicity="decreasing",
                                        random_state=5), "decreasing"  # fmt: skip


@pytest.mark.parametrize("cls", ESTIMATORS)
@pytest.mark.parametrize("n_folds", [None, 3])
def test_zero_violations_and_the_models_scores_in_every_setting(cls, n_folds):
    for _, data, monotonicity in _settings():
        strata = ps.PrincipalScoreModel(monotonicity=monotonicity)
        params = dict(survival_model=strata, monotonicity=monotonicity, n_folds=n_folds,
                      random_state=0)  # fmt: skip
        if cls is not ps.MultiplyRobust:
            params["n_bootstrap"] = 0
        with warnings.catch_warnings():
            warnings.simplefilter("error", ps.MonotonicityWarning)
            est = cls(**params).fit(data.X, data.y, treatment=data.treatment,
                                    survival=data.survival)  # fmt: skip
        assert est.n_monotonicity_violations_ == 0
        models = [arm.strata for arm in est.nuisance_.models[("survival", 0)]]
        assert len(models) == (1 if n_folds is None else 3)
        expected = np.mean([m.predict_proba(data.X) for m in models], axis=0)
        np.testing.assert_allclose(est.predict_proba(data.X), expected, atol=0)
        np.testing.assert_allclose(est.principal_scores_.sum(axis=1), 1.0)
        if n_folds is None:
            # The estimator's survival predictions are the stratum model's sums of strata.
            helped = 1 if monotonicity == "increasing" else 0
            np.testing.assert_allclose(est.nuisance_.survival[helped],
                                       expected[:, 0] + expected[:, 1])  # fmt: skip
            np.testing.assert_allclose(est.nuisance_.survival[1 - helped], expected[:, 0])


def test_shared_nuisance_bounds_and_missing_at_random_keep_working():
    strata = ps.PrincipalScoreModel()
    fit = dict(treatment=MULTI.treatment, survival=MULTI.survival)
    regression = ps.OutcomeRegression(survival_model=strata).fit(MULTI.X, MULTI.y, **fit)
    shared = ps.PrincipalScoreWeighting(survival_model=strata).fit(
        MULTI.X, MULTI.y, nuisance=regression.nuisance_, **fit
    )
    alone = ps.PrincipalScoreWeighting(survival_model=strata).fit(MULTI.X, MULTI.y, **fit)
    assert (shared.effect_, shared.std_error_) == (alone.effect_, alone.std_error_)
    with pytest.raises(ValueError, match="survival_model="):
        ps.PrincipalScoreWeighting().fit(MULTI.X, MULTI.y, nuisance=regression.nuisance_, **fit)
    bounds = ps.TrimmingBounds(survival_model=strata, strata="score").fit(MULTI.X, MULTI.y, **fit)
    assert bounds.lower_ <= bounds.upper_
    together = ps.fit_estimators(MULTI.X, MULTI.y, survival_model=strata, n_bootstrap=0, **fit)
    assert len(together) == 3
    # Missing at random: the stratum model is fitted on the rows of known status (the observed
    # cells keep their distribution given X and arm), as the arm-wise models are.
    lossy = make_truncation(3000, n_features=2, stratum_model="multinomial",
                            follow_up=(0.8, 0.5), random_state=8)  # fmt: skip
    est = ps.PrincipalScoreWeighting(survival_model=strata, missing="at_random").fit(
        lossy.X, lossy.y, treatment=lossy.treatment, survival=lossy.survival
    )
    known = lossy.status_known == 1
    direct = ps.PrincipalScoreModel().fit(
        lossy.X[known], treatment=lossy.treatment[known], survival=lossy.survival[known]
    )
    np.testing.assert_allclose(est.predict_proba(lossy.X), direct.predict_proba(lossy.X))
    assert est.std_error_method_ == "sandwich" and est.n_monotonicity_violations_ == 0


def test_other_classifiers_fall_back_to_the_bootstrap():
    data = make_truncation(400, n_features=2, stratum_model="multinomial", random_state=9)
    base = LogisticRegression(C=np.inf, solver="newton-cholesky", max_iter=100)
    est = ps.PrincipalScoreWeighting(
        survival_model=ps.PrincipalScoreModel(base, tol=1e-5), n_bootstrap=3, random_state=0
    ).fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
    assert est.std_error_method_ == "bootstrap" and est.n_monotonicity_violations_ == 0
    assert len(est.bootstrap_replicates_) == 3
    assert "PrincipalScoreModel fitted by EM" in " ".join(est.summary().attrs["notes"])
    again = pickle.loads(pickle.dumps(est))
    np.testing.assert_array_equal(again.predict_proba(data.X), est.predict_proba(data.X))
    assert clone(est).get_params()["survival_model__estimator__C"] == np.inf


# -- the sandwich against a numerical stacked M-estimation ---------------------------------


def _logistic_design(model):
    return np.concatenate([np.ravel(model.intercept_), np.ravel(model.coef_)])


def _stacked_functions(params, X, T, S, Y, kind, k):
    """Per-row stacked estimating functions (treatment or outcome models, stratum model,
    always-survivor means), written out from the definitions."""
    Xd = np.column_stack([np.ones(len(X)), X])
    gamma, theta, rest = params[:k], params[k : 3 * k], params[3 * k :]
    e = _softmax_scores(theta, Xd)
    allowed = _cells(T, S)
    cell = np.sum(np.where(allowed, e, 0.0), axis=1)
    post = np.where(allowed, e, 0.0) / cell[:, None]
    stratum_score = np.hstack([(post - e)[:, [j]] * Xd for j in (0, 1)])
    p0, p1 = e[:, 0], e[:, 0] + e[:, 1]
    Y0 = np.nan_to_num(Y)
    if kind == "weighting":
        pi = 1 / (1 + np.exp(-(Xd @ gamma)))
        mu1, mu0 = rest
        first = (T - pi)[:, None] * Xd
        means = np.column_stack([T * S * p0 / (pi * p1) * (Y0 - mu1),
                                 (1 - T) * S / (1 - pi) * (Y0 - mu0)])  # fmt: skip
    else:
        beta1, beta0, (mu1, mu0) = gamma, rest[:k], rest[k:]
        m1, m0 = Xd @ beta1, Xd @ beta0
        first = np.hstack([(T * S * (Y0 - m1))[:, None] * Xd,
                           ((1 - T) * S * (Y0 - m0))[:, None] * Xd])  # fmt: skip
        means = np.column_stack([p0 * (m1 - mu1), p0 * (m0 - mu0)])
    return np.hstack([first, stratum_score, means])


@pytest.mark.parametrize("weighted", [False, True])
@pytest.mark.parametrize("kind", ["weighting", "regression"])
def test_sandwich_matches_a_numerical_stacked_m_estimation(kind, weighted):
    # Reference: Stefanski & Boos (2002) sandwich A^-1 B A^-T with A the finite-difference
    # Jacobian of the stacked estimating functions written above; with survey weights w,
    # A = sum w dpsi / sum w and B = sum w^2 psi psi' / (sum w)^2 (linearization variance).
    data = make_truncation(1500, n_features=2, stratum_model="multinomial", random_state=13)
    X, T, S, Y = data.X, data.treatment, data.survival, data.y
    w = np.random.default_rng(2).uniform(0.5, 2.0, len(X)) if weighted else np.ones(len(X))
    cls = ps.PrincipalScoreWeighting if kind == "weighting" else ps.OutcomeRegression
    est = cls(survival_model=ps.PrincipalScoreModel()).fit(
        X, Y, treatment=T, survival=S, sample_weight=w if weighted else None
    )
    assert est.std_error_method_ == "sandwich"
    strata = est.nuisance_.models[("survival", 0)][0].strata
    theta = np.column_stack([strata.intercept_[:2], strata.coef_[:2]]).ravel()
    k = X.shape[1] + 1
    if kind == "weighting":
        first = _logistic_design(est.nuisance_.models["treatment"][0])
        params = np.concatenate([first, theta, [est.mean_treated_, est.mean_control_]])
    else:
        beta1 = _logistic_design(est.nuisance_.models[("outcome", 1)][0])
        beta0 = _logistic_design(est.nuisance_.models[("outcome", 0)][0])
        params = np.concatenate([beta1, theta, beta0, [est.mean_treated_, est.mean_control_]])

    def mean_functions(p):
        return w @ _stacked_functions(p, X, T, S, Y, kind, k) / w.sum()

    psi = _stacked_functions(params, X, T, S, Y, kind, k)
    np.testing.assert_allclose(mean_functions(params), 0.0, atol=1e-6)  # the fit solves them
    step = 1e-6
    jacobian = np.column_stack([
        (mean_functions(params + step * unit) - mean_functions(params - step * unit))
        / (2 * step)
        for unit in np.eye(params.size)
    ])  # fmt: skip
    bread = np.linalg.inv(jacobian)
    meat = (psi * w[:, None]).T @ (psi * w[:, None]) / w.sum() ** 2
    covariance = bread @ meat @ bread.T
    contrast = np.zeros(params.size)
    contrast[-2:] = [1.0, -1.0]
    # The library's influence-value SE carries the factor n / (n - 1)
    # (inference/_standard_errors.py).
    reference = np.sqrt(contrast @ covariance @ contrast * len(X) / (len(X) - 1))
    assert est.std_error_ == pytest.approx(reference, rel=1e-4)


@pytest.mark.slow
def test_truth_recovery_and_coverage_in_the_multinomial_setting():
    # Simulated truth: the SACE of make_truncation is `effect` exactly (continuous outcome,
    # no effect heterogeneity). 300 replicates; 95% intervals should cover 92-98% of the time
    # (binomial sd of the rate about 1.3 points).
    covered = {cls: 0 for cls in ESTIMATORS}
    estimates = {cls: [] for cls in ESTIMATORS}
    n_replicates = 300
    for seed in range(n_replicates):
        data = make_truncation(600, n_features=2, stratum_model="multinomial",
                               random_state=1000 + seed)  # fmt: skip
        fit = dict(treatment=data.treatment, survival=data.survival)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            robust = ps.MultiplyRobust(survival_model=ps.PrincipalScoreModel()).fit(
                data.X, data.y, **fit
            )
            fits = {ps.MultiplyRobust: robust}
            for cls in (ps.PrincipalScoreWeighting, ps.OutcomeRegression):
                fits[cls] = cls(survival_model=ps.PrincipalScoreModel()).fit(
                    data.X, data.y, nuisance=robust.nuisance_, **fit
                )
        for cls, est in fits.items():
            assert est.n_monotonicity_violations_ == 0
            low, high = est.conf_int()
            covered[cls] += low <= data.true_effect <= high
            estimates[cls].append(est.effect_)
    for cls in ESTIMATORS:
        rate = covered[cls] / n_replicates
        assert 0.92 <= rate <= 0.98, (cls.__name__, rate)
        values = np.asarray(estimates[cls])
        # Mean within 4 Monte Carlo standard errors of the truth.
        assert abs(values.mean() - 1.0) < 4 * values.std(ddof=1) / np.sqrt(n_replicates)


def test_integer_weights_equal_repeated_rows():
    # A frequency weight enters the likelihood as that many copies of the row.
    weights = np.random.default_rng(0).integers(1, 4, size=len(MULTI.X))
    rows = np.repeat(np.arange(len(MULTI.X)), weights)
    weighted = ps.PrincipalScoreModel().fit(
        MULTI.X, **CELLS, sample_weight=weights
    )
    repeated = ps.PrincipalScoreModel().fit(MULTI.X[rows], treatment=MULTI.treatment[rows],
                                            survival=MULTI.survival[rows])  # fmt: skip
    np.testing.assert_allclose(weighted.predict_proba(MULTI.X), repeated.predict_proba(MULTI.X),
                               atol=1e-9)  # fmt: skip
    assert weighted.log_likelihood_ == pytest.approx(repeated.log_likelihood_, rel=1e-10)


def test_unadjusted_model_gives_the_arms_survival_shares():
    # Without covariates the maximum-likelihood strata are the moment estimates:
    # e_always = control survival share, e_protected = difference of the arms' shares.
    model = ps.PrincipalScoreModel().fit(None, **CELLS)
    shares = model.predict_proba(None)[0]
    treated = MULTI.survival[MULTI.treatment == 1].mean()
    control = MULTI.survival[MULTI.treatment == 0].mean()
    np.testing.assert_allclose(shares, [control, treated - control, 1 - treated], atol=1e-7)
    est = ps.PrincipalScoreWeighting(survival_model=ps.PrincipalScoreModel()).fit(
        None, MULTI.y, treatment=MULTI.treatment, survival=MULTI.survival
    )
    plain = ps.PrincipalScoreWeighting().fit(
        None, MULTI.y, treatment=MULTI.treatment, survival=MULTI.survival
    )
    assert est.effect_ == pytest.approx(plain.effect_, abs=1e-7)
    assert est.std_error_ == pytest.approx(plain.std_error_, rel=1e-5)


def test_make_truncation_default_is_unchanged_and_multinomial_strata_are_as_stated():
    default = make_truncation(300, random_state=3)
    explicit = make_truncation(300, stratum_model="logistic", random_state=3)
    for key in ("X", "treatment", "survival", "principal_scores"):
        np.testing.assert_array_equal(default[key], explicit[key])
    np.testing.assert_array_equal(np.nan_to_num(default.y), np.nan_to_num(explicit.y))
    assert "stratum_model" not in default.params
    data = make_truncation(300, stratum_model="multinomial", random_state=3)
    # The stated multinomial logistic model, recomputed here (doomed the reference).
    x1, x2 = data.X[:, 0], data.X[:, 1]
    eta = np.column_stack([0.6 - 0.9 * x1 + 0.6 * x2, -0.6 + 1.2 * x1 - 0.5 * x2,
                           np.zeros(len(x1))])  # fmt: skip
    e = np.exp(eta - logsumexp(eta, axis=1, keepdims=True))
    np.testing.assert_allclose(data.principal_scores[:, [0, 1, 3]], e, atol=1e-12)
    assert data.true_effect == 1.0 and data.params["stratum_model"] == "multinomial"
    assert "multinomial" in data.DESCR
    with pytest.raises(ValueError, match="stratum_model"):
        make_truncation(10, stratum_model="probit")


def test_observed_information_is_the_derivative_of_the_score(monkeypatch):
    # Reference: central finite differences of the score; small row chunks exercise the
    # chunked accumulation used at large n.
    from pscore_strata.nuisance import _mixture

    monkeypatch.setattr(_mixture, "_CHUNK", 250)
    Xd = np.column_stack([np.ones(len(MULTI.X)), MULTI.X])
    allowed = _cells(MULTI.treatment, MULTI.survival)
    likelihood = _mixture.MixtureLikelihood(Xd, allowed, np.ones(len(Xd)))
    theta = np.array([0.3, -0.5, 0.4, -0.2, 0.8, -0.3])
    numerical = np.column_stack([
        (likelihood.score(theta + 1e-6 * u) - likelihood.score(theta - 1e-6 * u)) / 2e-6
        for u in np.eye(theta.size)
    ])  # fmt: skip
    np.testing.assert_allclose(likelihood.information(theta), -numerical, atol=1e-8)
    gradient = np.array([
        (likelihood.log_likelihood(theta + 1e-6 * u) - likelihood.log_likelihood(theta - 1e-6 * u))
        / 2e-6
        for u in np.eye(theta.size)
    ])  # fmt: skip
    np.testing.assert_allclose(likelihood.score(theta), gradient, atol=1e-8)


def test_docstring_example_runs():
    import doctest

    runner = doctest.DocTestRunner()
    for test in doctest.DocTestFinder().find(ps.PrincipalScoreModel, "PrincipalScoreModel"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            runner.run(test)
    assert runner.tries > 0 and runner.failures == 0


def test_fit_takes_the_indicators_by_keyword_and_still_by_position_with_a_warning():
    import inspect

    signature = inspect.signature(ps.PrincipalScoreModel.fit)
    keyword_only = [p.name for p in signature.parameters.values() if p.kind is p.KEYWORD_ONLY]
    assert keyword_only == ["treatment", "survival", "sample_weight"]
    keyword = ps.PrincipalScoreModel().fit(MULTI.X, **CELLS)
    with pytest.warns(FutureWarning, match=r"by keyword: fit\(X, treatment=\.\.\., survival="):
        positional = ps.PrincipalScoreModel().fit(MULTI.X, MULTI.treatment, MULTI.survival)
    np.testing.assert_array_equal(positional.predict_proba(MULTI.X),
                                  keyword.predict_proba(MULTI.X))  # fmt: skip
    weights = np.linspace(0.5, 1.5, MULTI.treatment.size)
    with pytest.warns(FutureWarning, match="sample_weight"):
        weighted = ps.PrincipalScoreModel().fit(MULTI.X, MULTI.treatment, MULTI.survival, weights)
    again = ps.PrincipalScoreModel().fit(MULTI.X, **CELLS, sample_weight=weights)
    np.testing.assert_array_equal(weighted.coef_, again.coef_)
    with pytest.raises(TypeError, match="both by position and keyword"):
        ps.PrincipalScoreModel().fit(MULTI.X, MULTI.treatment, treatment=MULTI.treatment)
    with pytest.raises(TypeError, match="positional"):
        ps.PrincipalScoreModel().fit(MULTI.X, MULTI.treatment, MULTI.survival, weights, 1)
