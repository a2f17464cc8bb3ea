"""Checks of the simulators and the demo registry against truths computed outside them."""

import re

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from numpy.polynomial.hermite_e import hermegauss
from scipy.special import expit

from pscore_strata.datasets import (
    DEMO_ROLES,
    DEMO_TRUE_EFFECT,
    SCENARIOS,
    list_scenarios,
    load_demo,
    make_scenario,
    make_truncation,
)
from pscore_strata.datasets._demo import DEMO_CARD, demo_path
from pscore_strata.datasets._make_demo import generate_demo

LARGE = 400_000

TRUTH_SETTINGS = {
    "linear": {},
    "nonlinear": {"outcome": "nonlinear"},
    "binary": {"outcome": "binary"},
    "heterogeneous": {"effect_heterogeneity": 0.5},
    "decreasing": {"monotonicity": "decreasing"},
    "pi_violated": {"pi_difference": 1.0},
    "monotonicity_violated": {"harmed_ratio": 0.3},
}


@pytest.mark.parametrize("settings", TRUTH_SETTINGS.values(), ids=TRUTH_SETTINGS.keys())
def test_stated_truth_matches_simulated_potential_outcomes(settings):
    # Source: simulated truth. The mean of Y(1) - Y(0) over a large sample of
    # always-survivors converges to the SACE (law of large numbers); allow 4 standard errors
    # of that mean plus the Monte Carlo error of the stated truth.
    data = make_truncation(LARGE, random_state=11, **settings)
    always = data.stratum == "always_survivor"
    difference = data.y1[always] - data.y0[always]
    assert not np.isnan(difference).any()
    std_error = np.hypot(difference.std(ddof=1) / np.sqrt(always.sum()),
                         data.true_effect_mc_error)
    assert abs(difference.mean() - data.true_effect) < 4 * std_error
    assert data.true_effect_sample == pytest.approx(difference.mean())


def test_exact_truth_for_continuous_constant_effect():
    for outcome in ("linear", "nonlinear"):
        data = make_truncation(200, outcome=outcome, effect=2.5, random_state=0)
        assert data.true_effect == 2.5
        assert data.true_effect_mc_error == 0.0


def _gauss_hermite_average(function, dimension, nodes=40):
    """E[function(Z)] for Z ~ N(0, I) by tensor Gauss-Hermite quadrature."""
    points, weights = hermegauss(nodes)
    weights = weights / weights.sum()
    grids = np.meshgrid(*([points] * dimension), indexing="ij")
    weight = np.prod(np.meshgrid(*([weights] * dimension), indexing="ij"), axis=0)
    Z = np.column_stack([grid.ravel() for grid in grids])
    return float(np.sum(weight.ravel() * function(Z)))


def test_monte_carlo_truth_matches_quadrature():
    # Source: Gauss-Hermite quadrature (numpy.polynomial.hermite_e), independent of the
    # simulator's Monte Carlo sample. The stratum and outcome formulas below restate the
    # documented generative model; the SACE is E[e_a (mu1 - mu0)] / E[e_a].
    def always_share(Z):
        return expit(0.05 - 0.8 * Z[:, 0] + 0.5 * Z[:, 1])

    heterogeneous = make_truncation(10, effect_heterogeneity=0.5, random_state=0)
    share = _gauss_hermite_average(always_share, 2)
    weighted_x2 = _gauss_hermite_average(lambda Z: always_share(Z) * Z[:, 1], 2)
    expected = 1.0 + 0.5 * weighted_x2 / share
    assert abs(heterogeneous.true_effect - expected) < 4 * heterogeneous.true_effect_mc_error

    def risk_difference(Z):
        index = -0.2 + 0.8 * Z[:, 0] + 0.4 * Z[:, 1] - 0.4 * Z[:, 2]
        return always_share(Z) * (expit(index + 1.0) - expit(index))

    binary = make_truncation(10, outcome="binary", random_state=0)
    expected = _gauss_hermite_average(risk_difference, 3, nodes=30) / share
    assert abs(binary.true_effect - expected) < 4 * binary.true_effect_mc_error


def test_truth_does_not_depend_on_random_state():
    first = make_truncation(50, outcome="binary", random_state=1)
    second = make_truncation(50, outcome="binary", random_state=2)
    assert first.true_effect == second.true_effect
    assert first.true_means == second.true_means


def test_stratum_shares_match_principal_scores():
    # Source: simulated truth. Stratum frequencies are binomial means of the true
    # principal scores; allow 4 binomial standard errors.
    data = make_truncation(LARGE, harmed_ratio=0.2, random_state=3)
    scores = data.principal_scores
    assert scores.shape == (LARGE, 4)
    np.testing.assert_allclose(scores.sum(axis=1), 1.0)
    assert scores.min() >= 0.0
    for column, label in enumerate(data.stratum_labels):
        observed = np.mean(data.stratum == label)
        expected = scores[:, column].mean()
        std_error = np.sqrt(expected * (1 - expected) / LARGE)
        assert abs(observed - expected) < 4 * std_error, label


def test_default_shares_are_typical():
    # Source: the logistic-normal integrals E[expit(a + c)] of the documented stratum logits
    # (always-survivor logit a = 0.05 - 0.8 x1 + 0.5 x2 ~ N(0.05, 0.89), treatment lift c = 1),
    # computed by scipy quadrature; the sample mean has a standard error near 0.0004.
    from scipy import integrate, stats

    def survival_share(lift):
        def integrand(z):
            return expit(0.05 + lift + np.sqrt(0.89) * z) * stats.norm.pdf(z)

        return integrate.quad(integrand, -np.inf, np.inf)[0]

    always, treated = survival_share(0.0), survival_share(1.0)
    data = make_truncation(LARGE, random_state=4)
    shares = data.principal_scores.mean(axis=0)
    assert shares[0] == pytest.approx(always, abs=0.002)  # about 0.51
    assert shares[1] == pytest.approx(treated - always, abs=0.002)  # about 0.20
    assert shares[3] == pytest.approx(1 - treated, abs=0.002)  # about 0.29


@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
def test_monotonicity_holds_without_harmed_ratio(monotonicity):
    data = make_truncation(20_000, monotonicity=monotonicity, random_state=5)
    absent = "harmed" if monotonicity == "increasing" else "protected"
    assert not np.any(data.stratum == absent)
    if monotonicity == "increasing":
        assert np.all(data.s1 >= data.s0)
    else:
        assert np.all(data.s1 <= data.s0)


def test_harmed_ratio_is_realized():
    # Source: definition of the monotonicity sensitivity parameter (harmed share over
    # protected share), exact per unit and up to sampling error in counts.
    data = make_truncation(LARGE, harmed_ratio=0.3, random_state=6)
    scores = data.principal_scores
    np.testing.assert_allclose(scores[:, 2] / scores[:, 1], 0.3)
    n_protected = np.sum(data.stratum == "protected")
    n_harmed = np.sum(data.stratum == "harmed")
    ratio = n_harmed / n_protected
    # Delta method for a ratio of two counts of a multinomial.
    std_error = ratio * np.sqrt(1 / n_harmed + 1 / n_protected)
    assert abs(ratio - 0.3) < 4 * std_error


@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
def test_pi_difference_is_realized(monotonicity):
    # Source: ordinary least squares (statsmodels). With the linear outcome the conditional
    # mean is linear in x1..x3, so regressing the survivors' potential outcome on X and a
    # helped-stratum indicator recovers the principal ignorability difference.
    data = make_truncation(LARGE, pi_difference=0.7, monotonicity=monotonicity,
                           random_state=7)
    arm, helped = ("y1", "protected") if monotonicity == "increasing" else ("y0", "harmed")
    survives = ~np.isnan(data[arm])
    design = sm.add_constant(np.column_stack([
        data.X[survives, :3], (data.stratum[survives] == helped).astype(float)]))
    fit = sm.OLS(data[arm][survives], design).fit()
    assert abs(fit.params[-1] - 0.7) < 4 * fit.bse[-1]


def _naive_contrast(data):
    alive = data.survival == 1
    treated = data.treatment == 1
    y_treated, y_control = data.y[alive & treated], data.y[alive & ~treated]
    std_error = np.sqrt(y_treated.var(ddof=1) / y_treated.size
                        + y_control.var(ddof=1) / y_control.size)
    return y_treated.mean() - y_control.mean(), std_error


@pytest.mark.parametrize("design", ["observational", "randomized"])
def test_naive_survivor_contrast_is_biased_upward(design):
    # Source: common practice. Conditioning on post-treatment survival compares different
    # people; here treatment saves units with high outcomes, so the bias is upward.
    data = make_truncation(50_000, design=design, random_state=8)
    naive, std_error = _naive_contrast(data)
    assert naive - data.true_effect > 4 * std_error


def test_observed_data_follow_consistency():
    data = make_truncation(5000, random_state=9)
    np.testing.assert_array_equal(np.isnan(data.y), data.survival == 0)
    np.testing.assert_array_equal(data.survival, np.where(data.treatment == 1, data.s1, data.s0))
    observed = np.where(data.treatment == 1, data.y1, data.y0)
    np.testing.assert_array_equal(data.y[data.survival == 1], observed[data.survival == 1])
    assert data.X.dtype == float and data.X.shape == (5000, 5)
    assert data.treatment.dtype.kind == "i" and data.survival.dtype.kind == "i"
    assert set(np.unique(data.stratum)) <= set(data.stratum_labels)
    assert 0.0 < data.propensity.min() and data.propensity.max() < 1.0


def test_randomized_design_has_constant_probability():
    data = make_truncation(20_000, design="randomized", random_state=10)
    assert data.treatment_probability == 0.5
    np.testing.assert_array_equal(data.propensity, 0.5)
    # Source: binomial sampling, 4 standard errors.
    assert abs(data.treatment.mean() - 0.5) < 4 * np.sqrt(0.25 / 20_000)


def test_reproducible_with_seed_and_different_with_another():
    first = make_truncation(300, random_state=12)
    again = make_truncation(300, random_state=12)
    other = make_truncation(300, random_state=13)
    for key in ("X", "y", "treatment", "survival", "stratum"):
        np.testing.assert_array_equal(first[key], again[key])
    assert not np.array_equal(first.X, other.X)


def test_generators_are_accepted():
    from_generator = make_truncation(100, random_state=np.random.default_rng(14))
    np.testing.assert_array_equal(from_generator.X, make_truncation(100, random_state=14).X)
    legacy = np.random.RandomState(15)
    first = make_truncation(100, random_state=legacy)
    second = make_truncation(100, random_state=legacy)
    assert not np.array_equal(first.X, second.X)


def test_few_features_and_many_features():
    assert make_truncation(100, n_features=2, random_state=0).X.shape == (100, 2)
    assert make_truncation(100, n_features=100, random_state=0).X.shape == (100, 100)


BAD_ARGUMENTS = [
    ({"n_samples": 0}, ValueError, "n_samples"),
    ({"n_samples": 10.5}, TypeError, "n_samples"),
    ({"n_samples": True}, TypeError, "n_samples"),
    ({"n_features": 1}, ValueError, "n_features"),
    ({"design": "trial"}, ValueError, "design"),
    ({"outcome": "count"}, ValueError, "outcome"),
    ({"monotonicity": "none"}, ValueError, "monotonicity"),
    ({"effect": "big"}, TypeError, "effect"),
    ({"effect": np.inf}, ValueError, "effect"),
    ({"effect_heterogeneity": np.nan}, ValueError, "effect_heterogeneity"),
    ({"pi_difference": None}, TypeError, "pi_difference"),
    ({"harmed_ratio": 1.0}, ValueError, "harmed_ratio"),
    ({"harmed_ratio": -0.1}, ValueError, "harmed_ratio"),
    ({"noise": -1.0}, ValueError, "noise"),
    ({"random_state": "seed"}, TypeError, "random_state"),
    ({"random_state": -3}, ValueError, "random_state"),
]


@pytest.mark.parametrize(("kwargs", "error", "name"), BAD_ARGUMENTS,
                         ids=[str(case[0]) for case in BAD_ARGUMENTS])
def test_bad_arguments_raise_naming_the_argument(kwargs, error, name):
    with pytest.raises(error, match=rf"^{name}\b"):
        make_truncation(**{"n_samples": 50, **kwargs})


def test_choice_errors_list_the_allowed_values():
    with pytest.raises(ValueError, match="'observational', 'randomized'"):
        make_truncation(50, design="trial")


def test_params_and_descr():
    data = make_truncation(60, pi_difference=0.5, random_state=0)
    assert data.params["pi_difference"] == 0.5 and data.params["n_samples"] == 60
    assert "principal ignorability violated" in data.DESCR


@pytest.mark.parametrize("name", list(SCENARIOS))
def test_every_scenario_runs(name):
    data = make_scenario(name, 400, random_state=0)
    assert data.scenario == name
    assert data.y.shape == (400,)
    # Scenarios with missing data keep the full values beside the blanked ones.
    full_y, full_survival = data.get("y_full", data.y), data.get("survival_full", data.survival)
    if "intermediate" in data:  # an outcome after an intermediate exists for every unit
        assert not np.isnan(data.y).any()
    else:
        np.testing.assert_array_equal(np.isnan(full_y), full_survival == 0)
    assert np.isfinite(data.true_effect)


def test_scenario_table_lists_every_scenario():
    table = list_scenarios()
    assert list(table.columns) == ["name", "family", "description", "truth", "params", "bias"]
    assert table["name"].tolist() == list(SCENARIOS)
    kinds = dict(zip(table["name"], table["truth"], strict=True))
    assert kinds["binary"] == "monte_carlo" and kinds["linear"] == "exact"
    assert kinds["survival_misspecified"] == "monte_carlo"  # the effect varies with x2
    row = table.set_index("name").loc["monotonicity_violated"]
    assert row.params == {"harmed_ratio": 0.4, "harmed_difference": 1.5}
    assert "multiply_robust down" in row.bias


def test_make_scenario_takes_parameters_and_refuses_unknown_ones():
    # The grid axis of a study: a scenario's settings replaced one at a time.
    data = make_scenario("monotonicity_violated", 300, random_state=0, harmed_ratio=0.1,
                         harmed_difference=-1.0)  # fmt: skip
    assert data.params["harmed_ratio"] == 0.1 and data.params["harmed_difference"] == -1.0
    assert "harmed units' outcome shifted by -1" in data.DESCR
    # The same seed and settings as make_truncation give the same data.
    same = make_truncation(300, harmed_ratio=0.1, random_state=0)
    shifted = make_scenario("linear", 300, random_state=0, harmed_ratio=0.1)
    np.testing.assert_array_equal(same.y, shifted.y)
    with pytest.raises(TypeError, match="unknown scenario parameter.*'harmed_shift'"):
        make_scenario("linear", 100, harmed_shift=1.0)
    with pytest.raises(ValueError, match="misspecified must be one of"):
        make_scenario("linear", 100, misspecified=("propensity",))
    with pytest.raises(ValueError, match="harmed_ratio must lie in"):
        make_scenario("monotonicity_violated", 100, harmed_ratio=1.0)


def test_harmed_units_outcomes_are_shifted_and_the_truth_is_unchanged():
    # Source: simulated potential outcomes. The harmed units' Y(0) sits harmed_difference above
    # the always-survivors' with the same X; the SACE (an always-survivor quantity) stays 1.
    data = make_scenario("monotonicity_violated", LARGE, random_state=3)
    harmed = data.stratum == "harmed"
    always = data.stratum == "always_survivor"
    assert harmed.mean() > 0.04 and data.true_effect == 1.0
    x = data.X
    index0 = 1.0 + x[:, 0] + 0.5 * x[:, 1] - 0.5 * x[:, 2]  # the linear control index
    gap = (data.y0[harmed] - index0[harmed]).mean() - (data.y0[always] - index0[always]).mean()
    assert gap == pytest.approx(1.5, abs=4 * np.sqrt(1 / harmed.sum() + 1 / always.sum()))


def test_scenario_specifics():
    weak = make_scenario("weak_overlap", 20_000, random_state=1)
    assert weak.propensity.min() < 0.03 and weak.propensity.max() > 0.97
    clustered = make_scenario("clustered", 2000, random_state=1)
    assert clustered.groups.shape == (2000,)
    assert len(np.unique(clustered.groups)) == pytest.approx(100, abs=5)
    assert clustered.true_effect == make_scenario("linear", 10, random_state=1).true_effect
    assert make_scenario("high_dimensional", 50, random_state=0).X.shape == (50, 100)
    assert make_scenario("pi_violated", 50, random_state=0).params["pi_difference"] == 1.0


def test_clustered_effect_cancels_in_the_truth():
    # Source: simulated truth; the shared cluster effect is differenced away.
    data = make_scenario("clustered", LARGE, random_state=2)
    always = data.stratum == "always_survivor"
    difference = data.y1[always] - data.y0[always]
    assert abs(difference.mean() - data.true_effect) < 4 * difference.std() / np.sqrt(
        always.sum())


def test_make_scenario_rejects_unknown_name():
    with pytest.raises(ValueError, match="^name.*'linear'"):
        make_scenario("easy", 100)


def test_demo_layout():
    frame = load_demo()
    assert frame.shape == (2000, 10)
    roles = [DEMO_ROLES["identifier"], *DEMO_ROLES["covariates"], DEMO_ROLES["treatment"],
             DEMO_ROLES["survival"], DEMO_ROLES["outcome"]]
    assert sorted(frame.columns) == sorted(roles)
    for column in ("age", "female", "severity_score", "comorbidities", "pf_ratio",
                   "protective_ventilation", "alive_6mo"):
        assert pd.api.types.is_integer_dtype(frame[column]), column
    assert pd.api.types.is_float_dtype(frame["functional_score_6mo"])
    assert pd.api.types.is_string_dtype(frame["site"])
    assert frame["patient_id"].is_unique
    assert set(frame["protective_ventilation"]) == {0, 1}
    assert set(frame["alive_6mo"]) == {0, 1}


def test_demo_outcome_missing_exactly_for_deaths():
    frame = load_demo()
    score = frame[DEMO_ROLES["outcome"]]
    np.testing.assert_array_equal(score.isna(), frame[DEMO_ROLES["survival"]] == 0)
    assert score.min() >= 0 and score.max() <= 100


def test_demo_naive_contrast_is_biased_downward():
    # The demo's point: protected patients are sicker, so survivors under treatment score
    # lower and the survivor-only difference falls below the true SACE.
    frame = load_demo()
    alive = frame["alive_6mo"] == 1
    treated = frame["protective_ventilation"] == 1
    score = frame["functional_score_6mo"]
    naive = score[alive & treated].mean() - score[alive & ~treated].mean()
    assert naive < DEMO_TRUE_EFFECT - 1.0


def test_demo_card_states_the_true_effect():
    card = demo_path(DEMO_CARD).read_text(encoding="utf-8")
    match = re.search(r"True SACE: ([0-9.]+) points", card)
    assert match is not None
    assert float(match.group(1)) == DEMO_TRUE_EFFECT
    assert "invented" in card.lower()


def test_demo_script_regenerates_the_shipped_csv():
    pd.testing.assert_frame_equal(generate_demo(), load_demo())


def test_load_demo_returns_a_fresh_copy():
    frame = load_demo()
    frame.loc[:, "age"] = 0
    assert load_demo()["age"].max() > 0
