"""The truncation-by-death scenario family: named settings of the simulator with known truth."""

import functools

from ._checks import check_choice, check_positive_int, check_real
from ._family import Scenario
from ._identified import identified_set
from ._missing import apply_missingness, check_missingness
from ._simulate import (
    DESIGNS,
    MONOTONICITY,
    OUTCOMES,
    STRATUM_MODELS,
    _simulate,
    describe,
)

__all__ = ["TRUNCATION_SCENARIOS", "TRUNCATION_PARAMS"]

MODEL_FAMILIES = ("treatment", "survival", "outcome")

# Every parameter a truncation scenario accepts, with the value it takes unless the scenario or
# the caller sets another. The first block are make_truncation's arguments; the second are knobs
# only the named scenarios use.
TRUNCATION_PARAMS = dict(
    n_features=5, design="observational", outcome="linear", effect=1.0,
    effect_heterogeneity=0.0, pi_difference=0.0, harmed_ratio=0.0,
    monotonicity="increasing", noise=1.0, follow_up=None, response=None,
    stratum_model="logistic",
    treatment_scale=1.0, cluster_size=None, cluster_sd=1.0, misspecified=(),
    harmed_difference=0.0,
)


def _check_params(params):
    unknown = sorted(set(params) - set(TRUNCATION_PARAMS))
    if unknown:
        raise TypeError(
            f"unknown scenario parameter(s) {', '.join(map(repr, unknown))}; a truncation "
            f"scenario accepts {', '.join(TRUNCATION_PARAMS)}."
        )
    p = {**TRUNCATION_PARAMS, **params}
    p["n_features"] = check_positive_int(p["n_features"], "n_features", minimum=2)
    p["design"] = check_choice(p["design"], "design", DESIGNS)
    p["outcome"] = check_choice(p["outcome"], "outcome", OUTCOMES)
    p["monotonicity"] = check_choice(p["monotonicity"], "monotonicity", MONOTONICITY)
    p["stratum_model"] = check_choice(p["stratum_model"], "stratum_model", STRATUM_MODELS)
    for name in ("effect", "effect_heterogeneity", "pi_difference", "harmed_difference"):
        p[name] = check_real(p[name], name)
    p["harmed_ratio"] = check_real(p["harmed_ratio"], "harmed_ratio", low=0.0, high=1.0,
                                   high_open=True)  # fmt: skip
    p["noise"] = check_real(p["noise"], "noise", low=0.0)
    p["treatment_scale"] = check_real(p["treatment_scale"], "treatment_scale", low=0.0)
    p["cluster_sd"] = check_real(p["cluster_sd"], "cluster_sd", low=0.0)
    if p["cluster_size"] is not None:
        p["cluster_size"] = check_positive_int(p["cluster_size"], "cluster_size")
    families = p["misspecified"]
    families = (families,) if isinstance(families, str) else tuple(families)
    for family in families:
        check_choice(family, "misspecified", MODEL_FAMILIES)
    p["misspecified"] = tuple(f for f in MODEL_FAMILIES if f in families)
    return p


def _draw(n_samples, rng, **params):
    """One dataset of the truncation family (``rng`` a numpy Generator)."""
    n_samples = check_positive_int(n_samples, "n_samples")
    p = _check_params(params)
    settings = {"n_samples": n_samples, **p}
    follow_up = check_missingness(p.pop("follow_up"), "follow_up")
    response = check_missingness(p.pop("response"), "response")
    cluster_size = p.pop("cluster_size")
    knobs = {k: p.pop(k) for k in ("treatment_scale", "cluster_sd", "stratum_model",
                                   "misspecified", "harmed_difference")}  # fmt: skip
    if cluster_size is not None:
        knobs["n_clusters"] = max(1, round(n_samples / cluster_size))
    data = _simulate(n_samples, **p, rng=rng, **knobs)
    data = apply_missingness(data, follow_up, response, rng)
    data.params = settings
    data.treatment_probability = 0.5 if p["design"] == "randomized" else None
    data.DESCR = describe(settings, data.true_effect, data.true_effect_mc_error)
    return data


def _identified_set(**params):
    """The identified set of the covariate-free trimming bounds (see ``_identified.py``)."""
    return identified_set(_draw, _check_params(params)["n_features"], **params)


def _truncation(description, bias, **params):
    _check_params(params)
    p = {**TRUNCATION_PARAMS, **params}
    exact = p["outcome"] != "binary" and p["effect_heterogeneity"] == 0
    return Scenario(
        make=functools.partial(_draw), description=description,
        truth="exact" if exact else "monte_carlo", bias=bias, params=params,
        bounds=_identified_set,
    )


_NONE = {"weighting": "none", "regression": "none", "multiply_robust": "none"}

# Bias directions: measured by simulation at n = 20,000 and checked by the slow test in
# tests/test_scenario_bias.py (benchmarks/scenario_bias.py has the full table).
TRUNCATION_SCENARIOS = {
    "linear": _truncation(
        "Every model linear or main-effects logistic; all assumptions hold.", _NONE),
    "nonlinear": _truncation(
        "Curved outcome, stratum and treatment models: every linear working model is "
        "misspecified (weighting and regression biased down, multiply robust up).",
        {"weighting": "down", "regression": "down", "multiply_robust": "up"},
        outcome="nonlinear"),
    "treatment_misspecified": _truncation(
        "Only the treatment model is misspecified (its logit curves in x1): weighting is "
        "biased down; regression (no treatment model) and multiply robust are not.",
        {"weighting": "down", "regression": "none", "multiply_robust": "none"},
        misspecified=("treatment",)),
    "survival_misspecified": _truncation(
        "Only the survival (stratum) models are misspecified (the always-survivor logit curves "
        "in x2, which also drives the effect): weighting and regression are biased up; multiply "
        "robust (treatment and outcome models right) is not.",
        {"weighting": "up", "regression": "up", "multiply_robust": "none"},
        misspecified=("survival",), effect_heterogeneity=0.5),
    "outcome_misspecified": _truncation(
        "Only the outcome model is misspecified (Y curves in x1): regression is biased down; "
        "weighting (no outcome model) and multiply robust are not.",
        {"weighting": "none", "regression": "down", "multiply_robust": "none"},
        misspecified=("outcome",)),
    "weak_overlap": _truncation(
        "Treatment logits tripled: a quarter of units have propensities below 0.05 or above "
        "0.95 (extreme weights, optimistic standard errors; no large-sample bias).",
        _NONE, treatment_scale=3.0),
    "pi_violated": _truncation(
        "Principal ignorability fails: protected units' Y(1) is 1.0 above always-survivors' "
        "given X, so every estimator is biased up.",
        dict.fromkeys(_NONE, "up"), pi_difference=1.0),
    "monotonicity_violated": _truncation(
        "Monotonicity fails: harmed units (0.4 times the protected share) survive under "
        "control with Y(0) 1.5 above always-survivors' given X, so the control survivors look "
        "too good and every estimator assuming monotonicity is biased down.",
        dict.fromkeys(_NONE, "down"), harmed_ratio=0.4, harmed_difference=1.5),
    "binary": _truncation(
        "Binary outcome, effect 1.0 on the logit scale; truth is the risk difference.",
        _NONE, outcome="binary"),
    "clustered": _truncation(
        "Units in clusters of about 20 with a shared outcome random effect; returns groups.",
        _NONE, cluster_size=20, cluster_sd=1.0),
    "high_dimensional": _truncation(
        "100 covariates of which 3 matter.", _NONE, n_features=100),
    # Missing at random given X: complete-case analysis is biased in both (the effect varies
    # with x2, and losses depend on x2). The estimators are meant with missing="at_random".
    "lost_to_follow_up": _truncation(
        "Survival status unknown for about a quarter of units, mostly at high x2, where the "
        "effect is largest: complete cases understate the SACE; fit with "
        "missing=\"at_random\".",
        {**_NONE, "complete_cases": "down"}, effect_heterogeneity=0.5,
        follow_up={"treated": (0.7, -1.5), "control": (0.8, -1.5)}),
    "missing_outcomes": _truncation(
        "A tenth of units lost to follow-up and 30% of survivors without an outcome, both "
        "depending on x2 (which drives the effect), in opposite directions in the two arms: "
        "complete cases overstate the SACE; fit with missing=\"at_random\".",
        {**_NONE, "complete_cases": "up"}, effect_heterogeneity=0.5,
        follow_up=(0.9, 0.5), response={"treated": (0.7, -1.5), "control": (0.7, 1.5)}),
}
