"""The nuisance layer: treatment, survival and outcome models, fitted per arm.

Everything downstream (estimators, bounds, sensitivity grids, diagnostics) is a function of the
per-row predictions returned here, so a new estimand never refits a model (DESIGN.md section 6).

Notation: ``pi(X) = P(T=1|X)``, ``p_t(X) = P(S=1|T=t,X)``, ``m_t(X) = E[Y|T=t,S=1,X]``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from sklearn.base import is_classifier
from sklearn.model_selection import StratifiedKFold

from .._validation import EXTREME_PROBABILITY
from .._warnings import warn_at_caller
from ..exceptions import MonotonicityWarning, OverlapWarning, SeparationWarning
from ._missing import fit_missingness
from ._models import (
    ConstantModel,
    ParametricFit,
    default_binary_model,
    default_outcome_model,
    fit_predict,
    numeric_design,
)
from ._sandwich import build_parametric, parametric_piece, response_glm
from ._separation import warn_separation
from ._stratum_arms import StratumArm, check_stratum_model, fit_strata_scores

__all__ = [
    "NuisanceFit",
    "ParametricFit",
    "fit_nuisance",
    "default_binary_model",
    "OverlapWarning",
    "MonotonicityWarning",
]

_CHUNK = 65_536


@dataclass
class NuisanceFit:
    """Per-row nuisance predictions for the training rows and the fitted models.

    Attributes
    ----------
    treatment_probability : ndarray
        ``pi(X)`` per row.
    survival : dict
        ``{0: p0, 1: p1}``, the survival probability under each arm per row.
    outcome : dict or None
        ``{0: m0, 1: m1}``, the survivor outcome mean under each arm per row.
    parametric : dict or None
        :class:`ParametricFit` per model (keys ``"treatment"``, ``("survival", t)``,
        ``("outcome", t)``) when every model is a default GLM fitted on all rows; the
        sandwich standard error needs them. ``None`` otherwise.
    models : dict
        Fitted models (a list per arm: one per fold when cross-fitted), for predictions on new
        rows.
    cross_fitted : bool
        Whether the predictions are cross-fitted (``n_folds``).
    missingness : dict or None
        With ``missing="at_random"`` and missing data: the follow-up and response
        probabilities per row.
    settings : dict or None
        The rows and model settings of the fit, so that another estimator can reuse it
        (``fit(..., nuisance=est.nuisance_)``) and refuse it when they differ.
    separation : list
        The separated binary models found at fit (messages; empty when none).
    derived : dict
        Values computed from these predictions alone (the diagnostics' tables and warnings),
        kept on first request. Estimators that share the fit (``nuisance=``) share it too, so a
        report fitting three estimators on one nuisance fit computes each diagnostic once.
    """

    treatment_probability: np.ndarray
    survival: dict
    outcome: dict | None
    parametric: dict | None
    models: dict = field(default_factory=dict)
    cross_fitted: bool = False
    # missing="at_random" (nuisance/_missing.py): {"follow_up": {0: c0, 1: c1}, "response":
    # {0: r0, 1: r1}} per row; None when nothing is missing.
    missingness: dict | None = None
    settings: dict | None = None  # what it was fitted with, for sharing (see _share.py)
    # SeparationWarning texts of the binary models that are separated (nuisance/_separation.py).
    separation: list = field(default_factory=list)
    # Filled by diagnostics/_cache.py; dataclasses.replace (the sharing in _share.py) passes the
    # same dict on, so the fits that hold these predictions share it.
    derived: dict = field(default_factory=dict, repr=False, compare=False)

    def __getstate__(self):
        # The derived values are recomputed on request; a pickled or copied fit leaves them out
        # (the oriented view alone holds several columns per row).
        state = self.__dict__.copy()
        state["derived"] = {}
        return state


def fit_nuisance(
    data,
    treatment_model=None,
    survival_model=None,
    outcome_model=None,
    *,
    fit_outcome=False,
    n_folds=None,
    random_state=None,
    treatment_enters_estimate=True,
    response_model=None,
    follow_up_model=None,
    sandwich=True,
    monotonicity=None,
    check_separation=True,
    zero_cells=False,
):
    """Fit the nuisance models and return a :class:`NuisanceFit`.

    Parameters
    ----------
    data : TruncationData
    treatment_model : estimator, float in (0, 1) or None
        A number is a known randomization probability; ``None`` is the default logistic model.
    survival_model, outcome_model : estimator or None
        Cloned and fitted separately in each arm (outcome model among survivors only).
    fit_outcome : bool
        Whether the estimator needs the outcome model.
    n_folds : int or None
        K-fold cross-fitting (folds stratified by treatment x survival) when given.
    random_state : int, RandomState or None
        Seeds the fold split.
    treatment_enters_estimate : bool, default=True
        ``False`` when the estimator's formula does not use ``pi`` (outcome regression), so a
        non-default treatment model does not rule out the sandwich standard error.
    follow_up_model : classifier or None
        The follow-up models ``c_t`` (``None``: the default logistic model).
    response_model : classifier or None
        Follow-up and response models when ``data`` has missing status or outcomes
        (``None``: the default logistic model); survival models are then fitted on rows with
        known status and outcome models on rows with an observed outcome.
    sandwich : bool, default=True
        Build the M-estimation sandwich pieces (``parametric``) when the models allow it;
        ``False`` skips them (the multiply robust estimator never uses them).
    monotonicity : {"increasing", "decreasing"} or None
        The estimator's direction; a :class:`PrincipalScoreModel` survival model must share it.
    check_separation : bool, default=True
        Look for separated binary models (:mod:`._separation`) and warn with
        :class:`~pscore_strata.exceptions.SeparationWarning`; bootstrap refits skip it.
    zero_cells : bool, default=False
        Also fit the outcome model among each arm's units with intermediate 0 (stored under
        ``outcome[(arm, 0)]`` and ``models[("outcome", arm, 0)]``): the strata other than the
        always-survivors need ``E[Y | T=t, S=0, X]`` (docs/guide/derivations/strata.md).

    Returns
    -------
    NuisanceFit
        Per-row predictions and the fitted models (with the sandwich pieces when built).
    """
    n = data.n_samples
    T, S, Y, w = data.treatment, data.survival, data.outcome, data.sample_weight
    weighted = data.weighted
    X = data.X
    coarsened = data.status_known is not None
    known = data.status_known == 1 if coarsened else np.ones(n, bool)
    # Observed outcomes; under missing data with every stratum's outcome (zero_cells) they
    # include units with intermediate 0, so each cell's fit takes its own rows.
    observed = data.outcome_observed == 1 if coarsened else np.ones(n, bool)
    known_probability = isinstance(treatment_model, int | float) and not isinstance(
        treatment_model, bool
    )
    if known_probability and not 0 < treatment_model < 1:
        raise ValueError(
            "`treatment_model` given as a number is the known probability of treatment and must "
            f"lie strictly between 0 and 1; got {treatment_model}."
        )
    binary_outcome = data.binary_outcome
    if outcome_model is not None and fit_outcome:
        binary_outcome = is_classifier(outcome_model)
        if binary_outcome and not data.binary_outcome:
            raise ValueError(
                f"`outcome_model` is a classifier ({type(outcome_model).__name__}) but `y` is not "
                "binary among survivors; use a regressor for a continuous outcome."
            )
    models = {
        "treatment": default_binary_model() if treatment_model is None else treatment_model,
        "survival": default_binary_model() if survival_model is None else survival_model,
        "outcome": (
            default_outcome_model(binary_outcome) if outcome_model is None else outcome_model
        ),
    }
    strata = check_stratum_model(survival_model, monotonicity)
    all_rows = np.arange(n)
    if n_folds is None:
        splits = [(all_rows, all_rows)]
    else:
        if not isinstance(n_folds, int | np.integer) or n_folds < 2:
            raise ValueError(f"`n_folds` must be None or an integer >= 2; got {n_folds!r}.")
        splitter = StratifiedKFold(n_splits=int(n_folds), shuffle=True, random_state=random_state)
        splits = list(splitter.split(np.zeros(n), 2 * T + S))

    pi = np.empty(n)
    survival = {0: np.empty(n), 1: np.empty(n)}
    outcome = {0: np.empty(n), 1: np.empty(n)} if fit_outcome else None
    fitted = {"treatment": [], ("survival", 0): [], ("survival", 1): []}
    # The outcome models of units with intermediate 0 (the response models of those units are
    # fitted below whenever the stratum uses them, also for weighting).
    zero_outcomes = zero_cells and fit_outcome
    if fit_outcome:
        fitted[("outcome", 0)] = []
        fitted[("outcome", 1)] = []
    if zero_outcomes:
        for arm in (0, 1):
            outcome[(arm, 0)] = np.empty(n)
            fitted[("outcome", arm, 0)] = []
    for train, test in splits:
        if known_probability:
            pi[test] = float(treatment_model)
            fitted["treatment"].append(ConstantModel(treatment_model))
        else:
            model, pi[test] = fit_predict(
                models["treatment"], X, T.astype(float), train, test, w, weighted, True
            )
            fitted["treatment"].append(model)
        if strata:
            # One stratum model on both arms supplies p0 and p1 (nuisance/_stratum_arms.py).
            model, predicted = fit_strata_scores(
                survival_model, X, T, S, w if weighted else None, train[known[train]], test
            )
            for arm in (0, 1):
                survival[arm][test] = predicted[arm]
                fitted[("survival", arm)].append(StratumArm(model, arm))
        for arm in (0, 1):
            arm_rows = train[T[train] == arm]
            if not strata:
                model, survival[arm][test] = fit_predict(
                    models["survival"], X, S.astype(float), arm_rows[known[arm_rows]], test, w,
                    weighted, True,
                )
                fitted[("survival", arm)].append(model)
            if fit_outcome:
                rows = arm_rows[observed[arm_rows] & (S[arm_rows] == 1)]
                model, outcome[arm][test] = fit_predict(
                    models["outcome"], X, Y, rows, test, w, weighted, binary_outcome
                )
                fitted[("outcome", arm)].append(model)
            if zero_outcomes:
                rows = arm_rows[(S[arm_rows] == 0) & known[arm_rows] & observed[arm_rows]]
                model, outcome[(arm, 0)][test] = fit_predict(
                    models["outcome"], X, Y, rows, test, w, weighted, binary_outcome
                )
                fitted[("outcome", arm, 0)].append(model)

    result = NuisanceFit(
        treatment_probability=pi,
        survival=survival,
        outcome=outcome,
        parametric=None,
        models=fitted,
        cross_fitted=n_folds is not None,
    )
    if sandwich:
        # Every model that enters the estimate must be an unpenalized GLM fitted on all rows
        # (the defaults, or a user's model that _sandwich recognizes).
        result.parametric = build_parametric(
            data, result,
            {"treatment": treatment_model, "survival": survival_model, "outcome": outcome_model},
            fit_outcome=fit_outcome, binary_outcome=binary_outcome,
            known_probability=known_probability,
            treatment_enters_estimate=treatment_enters_estimate,
            known=known, observed=observed,
        )  # fmt: skip
    if coarsened:
        # The response model's pieces share the raw design, so it must be a bare GLM.
        pieces = (result.parametric is not None and response_glm(response_model)
                  and response_glm(follow_up_model))  # fmt: skip
        missingness, missing_models, missing_parametric = fit_missingness(
            data,
            {"follow_up": default_binary_model() if follow_up_model is None else follow_up_model,
             "response": default_binary_model() if response_model is None else response_model},
            splits,
            numeric_design(X) if pieces else None,
            parametric_piece if pieces else None,
            zero_cells=zero_cells,
        )
        fitted.update(missing_models)
        result.missingness = missingness
        result.parametric = {**result.parametric, **missing_parametric} if pieces else None
    if check_separation:
        result.separation = warn_separation(data, result, known_probability, SeparationWarning,
                                            strata=bool(strata))  # fmt: skip
    _warn_extremes(pi, survival, known_probability)
    return result


def _warn_extremes(pi, survival, known_probability):
    low, high = EXTREME_PROBABILITY, 1 - EXTREME_PROBABILITY
    messages = []
    if not known_probability:
        count = int(np.sum((pi < low) | (pi > high)))
        if count:
            messages.append(
                f"{count} row(s) have a fitted treatment probability outside [{low}, {high}]"
            )
    for arm in (1, 0):
        count = int(np.sum(survival[arm] < low))
        if count:
            messages.append(
                f"{count} row(s) have a fitted survival probability under "
                f"{'treatment' if arm else 'control'} below {low}"
            )
    if messages:
        warn_at_caller(
            "; ".join(messages)
            + ". Weights built from them are unstable: check overlap, simplify or regularize the "
            "models, or restrict the population.",
            OverlapWarning)
