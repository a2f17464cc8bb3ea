"""Settings of one analysis: the options, the estimator they build, the fit arguments."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..estimators import MultiplyRobust, OutcomeRegression, PrincipalScoreWeighting

__all__ = ["AnalysisOptions", "build_estimator", "fit_arguments", "model_settings", "number"]

METHODS = {
    "weighting": PrincipalScoreWeighting,
    "regression": OutcomeRegression,
    "robust": MultiplyRobust,
}
METHOD_LABELS = {
    "weighting": "Principal score weighting",
    "regression": "Outcome regression",
    "robust": "Multiply robust",
}
SENSITIVITY_POINTS = 21
# Shallow trees, a small learning rate and at least 40 rows per leaf: in samples of a few
# thousand, unregularized boosting pushes fitted probabilities to 0 or 1 and the weights explode
# (checked on the "nonlinear" scenario: 1500 rows, SE 1.3 unregularized against 0.14 here).
BOOSTING_PARAMS = dict(max_iter=200, learning_rate=0.05, max_leaf_nodes=8, min_samples_leaf=40)


@dataclass(frozen=True)
class AnalysisOptions:
    method: str = "robust"
    learner: str = "linear"
    folds: int | None = None
    bootstrap: int = 0
    level: float = 0.95
    monotonicity: str = "increasing"
    seed: int = 0
    # Words of the study (report/_wording.py): the event that truncates the outcome, what one
    # row is ("SINGULAR" or "SINGULAR/PLURAL"), and (treated, control) arm names.
    event_name: str = "death"
    unit_name: str = "unit"
    arm_names: tuple | None = None
    missing: str = "error"


def model_settings(options):
    """Nuisance models and fold count for the chosen learner."""
    if options.learner == "linear":
        return {}, options.folds
    from sklearn.ensemble import HistGradientBoostingClassifier

    classifier = HistGradientBoostingClassifier(random_state=options.seed, **BOOSTING_PARAMS)
    models = {"treatment_model": classifier, "survival_model": classifier}
    return models, options.folds or 5


def build_estimator(method, options):
    """The estimator the command line fits for ``method`` (exposed so tests can refit it)."""
    models, folds = model_settings(options)
    params = dict(models, monotonicity=options.monotonicity, n_folds=folds,
                  random_state=options.seed, missing=options.missing)  # fmt: skip
    if method != "weighting" and models:
        from sklearn.ensemble import HistGradientBoostingRegressor

        params["outcome_model"] = HistGradientBoostingRegressor(
            random_state=options.seed, **BOOSTING_PARAMS
        )
    if method != "robust" and models:
        # The refitting bootstrap inside these estimators would refit every boosting model
        # hundreds of times; --bootstrap N runs it once, for the primary estimator, instead.
        params["n_bootstrap"] = 0
    return METHODS[method](**params)


def fit_arguments(data):
    return dict(
        treatment=data.treatment,
        survival=data.survival,
        sample_weight=data.sample_weight,
        groups=data.groups,
    )


def number(value):
    value = float(value)
    return value if np.isfinite(value) else None
