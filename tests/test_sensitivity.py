"""Sensitivity grids and tipping points: null values reproduce the estimators, true parameter
values recover simulated truth, and the influence functions match Monte Carlo spread."""

import warnings

import numpy as np
import pytest
from scipy.special import expit

import pscore_strata as ps
from pscore_strata.assumptions._sensitivity import adjusted_effect
from pscore_strata.estimands._setting import Scores, Setting
from pscore_strata.inference import influence_std_error

ESTIMATORS = {
    "weighting": lambda **kw: ps.PrincipalScoreWeighting(n_bootstrap=0, **kw),
    "regression": lambda **kw: ps.OutcomeRegression(**kw),
    "robust": lambda **kw: ps.MultiplyRobust(**kw),
}


def _fit(name, data, X=None, **params):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ESTIMATORS[name](**params).fit(
            data.X if X is None else X, data.y, treatment=data.treatment, survival=data.survival
        )


@pytest.fixture(scope="module")
def plain():
    return ps.datasets.make_truncation(2000, random_state=0)


@pytest.mark.parametrize("name", list(ESTIMATORS))
@pytest.mark.parametrize("params", [{}, {"monotonicity": "decreasing"}, {"scale": "ratio"}])
def test_null_values_reproduce_the_estimator(plain, name, params):
    data = plain
    if params.get("scale") == "ratio":
        data = ps.datasets.make_truncation(2000, random_state=0)
        data.y = data.y + 10.0  # a positive outcome for the ratio scale
    est = _fit(name, data, **params)
    grid = ps.sensitivity_grid(est, pi_difference=0.0, harmed_ratio=0.0)
    ratio_grid = ps.sensitivity_grid(est, pi_ratio=1.0)
    for table in (grid, ratio_grid):
        assert table["effect"].iloc[0] == pytest.approx(est.effect_, rel=1e-12, abs=1e-12)
        assert table["std_error"].iloc[0] == pytest.approx(est.std_error_, rel=1e-9)
        assert (table["ci_low"].iloc[0], table["ci_high"].iloc[0]) == pytest.approx(
            est.conf_int(), rel=1e-9
        )


def test_null_values_reproduce_repeated_cross_fitting(plain):
    # Identity: with two cross-fitting repeats the estimator reports the median (the mean of
    # the two) and a variance that adds their spread; the null row must be the same numbers.
    est = ps.MultiplyRobust(n_folds=3, n_repeats=2, random_state=0).fit(
        plain.X, plain.y, treatment=plain.treatment, survival=plain.survival
    )
    row = ps.sensitivity_grid(est, pi_difference=0.0)
    assert row["effect"].iloc[0] == pytest.approx(est.effect_, rel=1e-12)
    assert row["std_error"].iloc[0] == pytest.approx(est.std_error_, rel=1e-9)


@pytest.fixture(scope="module")
def violated():
    # Simulated truth: principal ignorability fails by +0.8 in the protected stratum and 30% as
    # many harmed as protected units exist; the effect varies with x2 so the stratum weights
    # matter.
    return ps.datasets.make_truncation(
        6000, pi_difference=0.8, harmed_ratio=0.3, effect_heterogeneity=1.0, random_state=1
    )


@pytest.mark.parametrize("name", list(ESTIMATORS))
def test_true_parameters_recover_truth(violated, name):
    est = _fit(name, violated)
    grid = ps.sensitivity_grid(est, pi_difference=[0.0, 0.8], harmed_ratio=[0.0, 0.3])
    at_truth = grid.query("pi_difference == 0.8 and harmed_ratio == 0.3").iloc[0]
    assert abs(at_truth["effect"] - violated.true_effect) < 4 * at_truth["std_error"]
    # The assumed-away departures matter here: the estimate under both assumptions is off.
    at_null = grid.query("pi_difference == 0 and harmed_ratio == 0").iloc[0]
    assert abs(at_null["effect"] - violated.true_effect) > abs(
        at_truth["effect"] - violated.true_effect
    )


@pytest.mark.parametrize("name", list(ESTIMATORS))
def test_true_parameters_recover_truth_when_treatment_harms_survival(name):
    # Mirror image: the helped stratum survives only under control and its Y(0) is shifted.
    data = ps.datasets.make_truncation(
        6000, monotonicity="decreasing", pi_difference=0.8, harmed_ratio=0.3,
        effect_heterogeneity=1.0, random_state=5,
    )  # fmt: skip
    est = _fit(name, data, monotonicity="decreasing")
    row = ps.sensitivity_grid(est, pi_difference=0.8, harmed_ratio=0.3).iloc[0]
    assert abs(row["effect"] - data.true_effect) < 4 * row["std_error"]


def _ratio_data(n, eps, rng):
    """Invented scenario with a known ratio: E[Y(1)|protected,X] = eps E[Y(1)|always,X].

    Always-survivor effect 1 for every X, so the true SACE is exactly 1.
    """
    X = rng.standard_normal((n, 2))
    e_always = expit(0.3 + 0.5 * X[:, 0])
    e_protected = (1 - e_always) * expit(-0.3 + 0.8 * X[:, 1])
    u = rng.random(n)
    always = u < e_always
    protected = (u >= e_always) & (u < e_always + e_protected)
    t = (rng.random(n) < expit(0.4 * X[:, 0] - 0.3 * X[:, 1])).astype(int)
    base = 2 + X[:, 0] + 0.5 * X[:, 1]
    y1 = np.where(protected, eps * (base + 1), base + 1) + rng.standard_normal(n)
    y0 = base + rng.standard_normal(n)
    s = np.where(t == 1, always | protected, always).astype(int)
    y = np.where(s == 1, np.where(t == 1, y1, y0), np.nan)
    return X, y, t, s


@pytest.mark.parametrize("name", list(ESTIMATORS))
def test_true_ratio_recovers_truth(name):
    X, y, t, s = _ratio_data(6000, 1.5, np.random.default_rng(2))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = ESTIMATORS[name]().fit(X, y, treatment=t, survival=s)
    row = ps.sensitivity_grid(est, pi_ratio=[1.0, 1.5]).iloc[1]
    assert abs(row["effect"] - 1.0) < 4 * row["std_error"]
    assert abs(est.effect_ - 1.0) > abs(row["effect"] - 1.0)


def test_robust_influence_function_matches_monte_carlo_spread():
    # Monte Carlo check of the derived adjusted efficient influence function
    # (docs/guide/derivations/bounds-sensitivity.md): mean standard error against the spread of
    # the estimates.
    effects, errors = [], []
    for seed in range(60):
        data = ps.datasets.make_truncation(
            2000, pi_difference=0.5, harmed_ratio=0.3, random_state=100 + seed
        )
        est = _fit("robust", data)
        effect, influence, _ = adjusted_effect(est, pi_difference=0.5, harmed_ratio=0.3)
        effects.append(effect)
        errors.append(influence_std_error(influence))
    assert np.mean(errors) == pytest.approx(np.std(effects, ddof=1), rel=0.25)
    assert abs(np.mean(effects) - 1.0) < 4 * np.std(effects) / np.sqrt(60)


@pytest.mark.parametrize("kind", ["difference", "ratio"])
def test_functional_partials_match_finite_differences(plain, kind):
    est = _fit("robust", plain)
    from dataclasses import replace

    from pscore_strata.estimands import _view

    o = _view.orient(est.training_data_, est.nuisance_, "increasing")
    setting = Setting(0.4, None, 0.2) if kind == "difference" else Setting(0.0, 1.3, 0.2)
    _, g_pp, g_pm, g_m = Scores(o, setting).g("mixed", o.m_mixed)
    h = 1e-6
    for field, analytic in (("p_pure", g_pp), ("p_mixed", g_pm)):
        up = replace(o, **{field: getattr(o, field) + h})
        down = replace(o, **{field: getattr(o, field) - h})
        high = Scores(up, setting).g("mixed", o.m_mixed)[0]
        numeric = (high - Scores(down, setting).g("mixed", o.m_mixed)[0]) / (2 * h)
        np.testing.assert_allclose(analytic, numeric, rtol=1e-5, atol=1e-7)
    scores = Scores(o, setting)
    numeric = scores.g("mixed", o.m_mixed + h)[0] - scores.g("mixed", o.m_mixed - h)[0]
    np.testing.assert_allclose(g_m, numeric / (2 * h), rtol=1e-6)


def test_regression_tipping_point_matches_closed_form(plain):
    # Outcome regression is linear in delta: effect(delta) = effect(0) - delta E[e_a e_h/p1]/E[e_a]
    est = _fit("regression", plain)
    nuisance = est.nuisance_
    p1, p0 = nuisance.survival[1], nuisance.survival[0]
    slope = np.mean(p0 * (p1 - p0) / p1) / np.mean(p0)
    assert ps.tipping_point(est, criterion="estimate") == pytest.approx(est.effect_ / slope)
    delta = ps.tipping_point(est)
    row = ps.sensitivity_grid(est, pi_difference=delta).iloc[0]
    assert row["ci_low"] == pytest.approx(0.0, abs=1e-8)
    assert 0 < delta < est.effect_ / slope


def test_tipping_point_other_parameters(plain):
    est = _fit("robust", plain)
    eps = ps.tipping_point(est, "pi_ratio")
    assert eps > 1
    assert ps.sensitivity_grid(est, pi_ratio=eps)["ci_low"].iloc[0] == pytest.approx(0, abs=1e-8)
    with pytest.warns(UserWarning, match="does not reach"):
        assert np.isnan(ps.tipping_point(est, "harmed_ratio", search=(0.0, 0.3)))
    negative = _fit("robust", ps.datasets.make_truncation(2000, effect=-1.0, random_state=0))
    delta = ps.tipping_point(negative)
    row = ps.sensitivity_grid(negative, pi_difference=delta).iloc[0]
    assert delta < 0 and row["ci_high"] == pytest.approx(0, abs=1e-8)


def test_tipping_point_is_null_when_interval_covers_zero():
    data = ps.datasets.make_truncation(300, effect=0.0, random_state=3)
    est = _fit("regression", data)
    assert ps.tipping_point(est) == 0.0


def test_grid_shape_and_clipping(plain):
    est = _fit("weighting", plain)
    grid = ps.sensitivity_grid(est, pi_ratio=[0.8, 1.0, 1.25], harmed_ratio=[0.0, 0.5, 0.95])
    assert len(grid) == 9
    assert list(grid.columns[:2]) == ["pi_ratio", "harmed_ratio"]
    assert {"effect", "std_error", "ci_low", "ci_high"} <= set(grid.columns)
    assert grid.loc[grid["harmed_ratio"] == 0, "n_rows_clipped"].eq(0).all()
    assert grid.loc[grid["harmed_ratio"] == 0.95, "n_rows_clipped"].gt(0).all()
    notes = " ".join(grid.attrs["notes"])
    assert "latent" in notes and "individual" in notes and "statistician" in notes


@pytest.mark.parametrize(
    "kwargs, error, match",
    [
        ({}, ValueError, "at least one of"),
        ({"pi_ratio": 1.0, "pi_difference": 0.0}, ValueError, "not both"),
        ({"harmed_ratio": 1.0}, ValueError, r"`harmed_ratio` values must lie in \[0, 1\)"),
        ({"pi_ratio": [1.0, -2.0]}, ValueError, "`pi_ratio` values must be positive"),
        ({"pi_difference": "large"}, TypeError, "`pi_difference` values must be real"),
        ({"pi_difference": np.inf}, ValueError, "must be finite"),
        ({"pi_difference": []}, ValueError, "non-empty"),
    ],
)
def test_grid_errors(plain, kwargs, error, match):
    est = _fit("regression", plain)
    with pytest.raises(error, match=match):
        ps.sensitivity_grid(est, **kwargs)


def test_estimator_errors(plain):
    with pytest.raises(TypeError, match="`estimator` must be a fitted"):
        ps.sensitivity_grid(ps.TrimmingBounds(), pi_difference=0.0)
    with pytest.raises(Exception, match="not fitted"):
        ps.sensitivity_grid(ps.MultiplyRobust(), pi_difference=0.0)
    est = _fit("regression", plain)
    with pytest.raises(ValueError, match="`parameter` must be one of"):
        ps.tipping_point(est, "xi")
    with pytest.raises(ValueError, match="`criterion`"):
        ps.tipping_point(est, criterion="pvalue")


def test_plots_render(plain, tmp_path):
    matplotlib = pytest.importorskip("matplotlib")
    matplotlib.use("Agg")
    from pscore_strata.plotting import plot_sensitivity, plot_sensitivity_contour

    est = _fit("robust", plain)
    ax = plot_sensitivity(est)
    assert len(ax.lines) >= 3
    ax.figure.savefig(tmp_path / "line.png")
    ax = plot_sensitivity_contour(est, "pi_ratio", np.linspace(0.5, 2, 7), [0.0, 0.2, 0.4])
    ax.figure.savefig(tmp_path / "contour.png")
    with pytest.raises(ValueError, match="`principal_ignorability`"):
        plot_sensitivity_contour(est, "harmed_ratio")
    matplotlib.pyplot.close("all")
