"""Every named scenario stresses what its description says: its stated biases, by simulation.

Source of every check: the simulator's known truth (exact, or a fixed-seed average over 2,000,000
draws of X, confirmed here by Gauss-Hermite quadrature for the setting with a heterogeneous
effect). Each scenario's ``bias`` record (``datasets.SCENARIOS[name].bias``) states, per
built-in estimator with its default models (``missing="at_random"``), the direction of its
large-sample bias; a lean study of a few large replicates shows each statement: ``"up"`` and
``"down"`` need the mean error beyond 3 Monte Carlo standard errors in that direction,
``"none"`` within 4 of zero. benchmarks/scenario_bias.py runs the same study with more replicates.
"""

import numpy as np
import pytest
from scipy.special import expit
from sklearn.base import BaseEstimator, clone

import pscore_strata as ps
from pscore_strata.datasets import SCENARIOS

ESTIMATORS = {
    "weighting": ps.PrincipalScoreWeighting(missing="at_random"),
    "regression": ps.OutcomeRegression(missing="at_random"),
    "multiply_robust": ps.MultiplyRobust(missing="at_random"),
}
N, REPS = 20_000, 6
SMALLER = {"high_dimensional": 8_000}
REPS_FOR = {"nonlinear": 24}  # 100 covariates: fewer rows keep the test lean


class CompleteCases(BaseEstimator):
    """The multiply robust estimator on the rows with a known status and, if alive, an outcome."""

    def fit(self, X, y, *, treatment, survival, groups=None):
        keep = ~np.isnan(survival) & ~((survival == 1) & np.isnan(y))
        inner = clone(ps.MultiplyRobust()).fit(X[keep], y[keep], treatment=treatment[keep],
                                               survival=survival[keep])  # fmt: skip
        self.effect_, self.std_error_ = inner.effect_, inner.std_error_
        return self


STATED = [name for name, record in SCENARIOS.items() if record.bias]
TRUNCATION = [name for name, record in SCENARIOS.items() if record.family == "truncation"]


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::UserWarning")
@pytest.mark.parametrize("name", STATED)
def test_each_scenario_shows_its_stated_bias(name):
    stated = SCENARIOS[name].bias
    estimators = {k: v for k, v in ESTIMATORS.items() if k in stated}
    if "complete_cases" in stated:
        estimators["complete_cases"] = CompleteCases()
    results = ps.simulation.run_study(estimators, name, SMALLER.get(name, N),
                                      n_reps=REPS_FOR.get(name, REPS), random_state=29,
                                      n_jobs=1)  # fmt: skip
    summary = ps.simulation.summarize(results).set_index("estimator")
    assert (summary["n_failed"] == 0).all()
    for estimator, direction in stated.items():
        z = summary.loc[estimator, "bias"] / summary.loc[estimator, "bias_mcse"]
        shown = {"up": z > 3, "down": z < -3, "none": abs(z) < 4}[direction]
        assert shown, (name, estimator, direction, summary.loc[estimator, ["bias", "bias_mcse"]])


def test_survival_misspecified_truth_matches_gauss_hermite_quadrature():
    # Source: Gauss-Hermite quadrature of E[e_a(X) (mu1 - mu0)(X)] / E[e_a(X)] over x1, x2 ~
    # N(0, 1) (x3 does not enter these two functions), with the always-survivor logit
    # 0.05 - 0.8 x1 + 0.5 x2 + 1.5 (x2^2 - 1) and effect 1 + 0.5 x2 written out here.
    nodes, weights = np.polynomial.hermite_e.hermegauss(80)
    weights = weights / weights.sum()
    x1, x2 = np.meshgrid(nodes, nodes, indexing="ij")
    w = np.outer(weights, weights)
    always = expit(0.05 - 0.8 * x1 + 0.5 * x2 + 1.5 * (x2**2 - 1))
    truth = np.sum(w * always * (1 + 0.5 * x2)) / np.sum(w * always)
    data = ps.datasets.make_scenario("survival_misspecified", 10, random_state=0)
    assert abs(data.true_effect - truth) < 4 * data.true_effect_mc_error + 1e-4
    assert data.true_effect_mc_error < 1e-3


@pytest.mark.parametrize("name", TRUNCATION)
def test_each_scenario_states_a_bias_for_every_built_in_estimator(name):
    assert set(ESTIMATORS) <= set(SCENARIOS[name].bias)
    assert SCENARIOS[name].truth in ("exact", "quadrature", "monte_carlo")


def test_the_guide_lists_every_scenario_with_its_stated_biases():
    from pathlib import Path

    page = (Path(__file__).parents[1] / "docs" / "guide" / "simulation.md").read_text()
    rows = {name.strip().strip("`"): line.split("|")[3].strip()
            for line in page.splitlines() if line.startswith("| `")
            for name in line.split("|")[1].split(",")}  # fmt: skip
    for name, record in SCENARIOS.items():
        assert name in rows, name
        if not record.bias:
            continue
        stated = " / ".join(record.bias[k] for k in ESTIMATORS)
        assert rows[name] == stated, (name, rows[name], stated)
