"""Sandwich standard errors of the regression estimator against a numerical M-estimation."""

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import approx_fprime
from scipy.special import expit

import pscore_strata as ps
from pscore_strata.datasets import make_truncation


@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
def test_regression_sandwich_equals_numerical_stacked_m_estimation(monotonicity):
    # Reference: A^-1 B A^-T / n (Stefanski & Boos 2002) for the stacked logistic (survival in the
    # pure arm), least-squares (outcome per arm among survivors) and regression-estimator
    # equations, with A from scipy's numerical derivative; fits from statsmodels.
    data = make_truncation(1500, n_features=2, monotonicity=monotonicity, random_state=12)
    X, T, S = data.X, data.treatment, data.survival
    y = np.nan_to_num(data.y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        est = ps.OutcomeRegression(monotonicity=monotonicity).fit(
            X, data.y, treatment=T, survival=S
        )
    pure = 0 if monotonicity == "increasing" else 1
    design = sm.add_constant(X, has_constant="add")
    k = design.shape[1]
    b = sm.GLM(S[T == pure], design[T == pure], family=sm.families.Binomial()).fit().params
    cells = [(T == arm) & (S == 1) for arm in (1, 0)]
    betas = [sm.OLS(y[c], design[c]).fit().params for c in cells]
    theta = np.concatenate([b, betas[0], betas[1], [est.mean_treated_, est.mean_control_]])

    def stacked(theta):
        b, beta1, beta0 = theta[:k], theta[k : 2 * k], theta[2 * k : 3 * k]
        mu1, mu0 = theta[3 * k], theta[3 * k + 1]
        p = expit(design @ b)
        m1, m0 = design @ beta1, design @ beta0
        return np.column_stack(
            [
                ((T == pure) * (S - p))[:, None] * design,
                (cells[0] * (y - m1))[:, None] * design,
                (cells[1] * (y - m0))[:, None] * design,
                p * (m1 - mu1),
                p * (m0 - mu0),
            ]
        )

    n = len(T)
    rows = stacked(theta)
    assert np.abs(rows.mean(axis=0)).max() < 1e-6  # the fits solve their equations
    bread = np.array(
        [
            approx_fprime(theta, lambda t, j=j: stacked(t)[:, j].mean(), 1e-7)
            for j in range(theta.size)
        ]
    )
    bread_inv = np.linalg.inv(bread)
    covariance = bread_inv @ (rows.T @ rows / n) @ bread_inv.T / n
    contrast = np.zeros(theta.size)
    contrast[-2:] = [1, -1]
    reference_se = np.sqrt(contrast @ covariance @ contrast)
    assert est.std_error_method_ == "sandwich"
    assert est.std_error_ == pytest.approx(reference_se * np.sqrt(n / (n - 1)), rel=1e-4)


def test_weighted_sandwich_with_integer_weights_matches_duplicated_rows_estimate():
    # Identity: integer sample weights give the same point estimate as duplicating rows.
    data = make_truncation(800, n_features=2, random_state=13)
    weights = np.random.default_rng(0).integers(1, 4, size=800)
    rows = np.repeat(np.arange(800), weights)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        weighted = ps.PrincipalScoreWeighting().fit(
            data.X,
            data.y,
            treatment=data.treatment,
            survival=data.survival,
            sample_weight=weights,
        )
        duplicated = ps.PrincipalScoreWeighting().fit(
            data.X[rows],
            data.y[rows],
            treatment=data.treatment[rows],
            survival=data.survival[rows],
        )
    assert weighted.effect_ == pytest.approx(duplicated.effect_, abs=1e-8)


def test_regression_keeps_the_sandwich_with_any_treatment_model():
    # Identity: outcome regression's estimate does not involve the treatment model, so a
    # different treatment model changes neither the estimate nor its sandwich standard error.
    from sklearn.ensemble import HistGradientBoostingClassifier

    data = make_truncation(1500, n_features=2, random_state=14)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fits = [
            ps.OutcomeRegression(treatment_model=model).fit(
                data.X, data.y, treatment=data.treatment, survival=data.survival
            )
            for model in (None, HistGradientBoostingClassifier(max_iter=20))
        ]
    assert fits[1].std_error_method_ == "sandwich"
    assert fits[1].effect_ == pytest.approx(fits[0].effect_, abs=1e-12)
    assert fits[1].std_error_ == pytest.approx(fits[0].std_error_, rel=1e-10)
