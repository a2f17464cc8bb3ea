"""The nuisance layer: treatment, survival and outcome models, fitted per arm.

Everything downstream (estimators, bounds, sensitivity grids, diagnostics) is a function of the
per-row predictions returned here, so a new estimand never refits a model (DESIGN.md section 6).

Notation: ``pi(X) = P(T=1|X)``, ``p_t(X) = P(S=1|T=t,X)``, ``m_t(X) = E[Y|T=t,S=1,X]``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd
from sklearn.base import clone, is_classifier
from sklearn.model_selection import StratifiedKFold
from sklearn.pipeline import Pipeline
from sklearn.utils.validation import has_fit_parameter

from .._validation import EXTREME_PROBABILITY
from ._conditioned import StandardizedLinearRegression, StandardizedLogisticRegression
from ._sandwich import build_parametric, response_glm
from ._strata import StratumArm, check_stratum_model, fit_strata_scores

__all__ = [
    "NuisanceFit",
    "ParametricFit",
    "fit_nuisance",
    "default_binary_model",
    "OverlapWarning",
    "MonotonicityWarning",
]

_CHUNK = 65_536


class OverlapWarning(UserWarning):
    """Fitted probabilities close to 0 or 1: weights are unstable and overlap is doubtful."""


class MonotonicityWarning(UserWarning):
    """The fitted survival models contradict the monotonicity assumption for some rows."""


def default_binary_model():
    """Unpenalized logistic regression (``C=inf``; exact Newton steps, tight tolerance).

    Fitted on standardized columns and mapped back, so the units of the covariates do not
    change the fit (:mod:`._conditioned`).
    """
    return StandardizedLogisticRegression(
        C=np.inf, solver="newton-cholesky", tol=1e-10, max_iter=200
    )


def _default_outcome_model(binary):
    return default_binary_model() if binary else StandardizedLinearRegression()


@dataclass(frozen=True)
class ParametricFit:
    """What the M-estimation sandwich needs from one canonical-link GLM nuisance fit.

    The fit solves ``sum_i w_i mask_i (target_i - prediction_i) Xd_i = 0`` with ``Xd = [1, X]``.
    Its coefficient influence rows are ``I_i = H^{-1} mask_i residual_i Xd_i`` with
    ``H = sum_i w_i mask_i slope_i Xd_i Xd_i' / sum_i w_i`` (Stefanski & Boos 2002), where
    ``slope`` is the derivative of the prediction with respect to the linear predictor
    (``p(1-p)`` for logistic, 1 for linear regression).
    """

    design: np.ndarray | None
    mask: np.ndarray
    residual: np.ndarray
    slope: np.ndarray
    h_inverse: np.ndarray

    def correction(self, derivative, weights):
        """Per-row term that carries this model's estimation error into an estimating equation.

        ``derivative`` is d f_i / d prediction_i for the target's estimating function f; the
        returned rows are ``I_i . mean_w(derivative * slope * Xd)``.
        """
        gradient = _design_transpose_dot(self.design, weights * derivative * self.slope)
        gradient /= weights.sum()
        direction = self.h_inverse @ gradient
        return self.mask * self.residual * _design_dot(self.design, direction)

    def negated(self):
        """The same fit seen as a model of ``1 - target`` (used when arms are swapped)."""
        return replace(self, residual=-self.residual)


def _design_dot(X, v):
    if X is None:
        return np.full(1, v[0])
    return X @ v[1:] + v[0]


def _design_transpose_dot(X, u):
    if X is None:
        return np.array([u.sum()])
    return np.concatenate([[u.sum()], X.T @ u])


def _information(X, a):
    """``sum_i a_i Xd_i Xd_i'`` in row chunks so memory stays O(chunk x features)."""
    if X is None:
        return np.array([[a.sum()]])
    k = X.shape[1]
    info = np.zeros((k + 1, k + 1))
    info[0, 0] = a.sum()
    info[0, 1:] = info[1:, 0] = a @ X
    for start in range(0, X.shape[0], _CHUNK):
        block = X[start : start + _CHUNK]
        info[1:, 1:] += block.T @ (block * a[start : start + _CHUNK, None])
    return info


def _parametric(design, mask, target, prediction, slope, weights):
    from ._sandwich import parametric_piece

    return parametric_piece(design, mask, target, prediction, slope, weights)


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
    settings : dict or None
        The rows and model settings of the fit, so that another estimator can reuse it
        (``fit(..., nuisance=est.nuisance_)``) and refuse it when they differ.
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


def _fit(model, X, target, weights):
    if weights is None:
        return model.fit(X, target)
    if isinstance(model, Pipeline):
        last = model.steps[-1][0]
        return model.fit(X, target, **{f"{last}__sample_weight": weights})
    if not has_fit_parameter(model, "sample_weight"):
        raise TypeError(
            f"{type(model).__name__} does not accept `sample_weight`, but weights were given. "
            "Choose a model that supports sample weights, or drop `sample_weight`."
        )
    return model.fit(X, target, sample_weight=weights)


def _rows(X, rows):
    if rows.size == X.shape[0] and rows[0] == 0 and rows[-1] == rows.size - 1:
        return X  # all rows in order: no copy (matters for memory at a million rows)
    return X.iloc[rows] if isinstance(X, pd.DataFrame) else X[rows]


def _predict(model, X, binary):
    if binary:
        return model.predict_proba(X)[:, 1]
    return np.asarray(model.predict(X), dtype=float)


class _ConstantModel:
    """An intercept-only model: the weighted share (or mean) of the target in the fit rows."""

    def __init__(self, value):
        self.value = float(value)

    def predict_proba(self, X):
        n = 1 if X is None else len(X)
        return np.column_stack([np.full(n, 1 - self.value), np.full(n, self.value)])

    def predict(self, X):
        return np.full(1 if X is None else len(X), self.value)


def _fit_predict(model, X, target, fit_rows, predict_rows, weights, weighted, binary):
    """Fit on ``fit_rows``; return (fitted model, predictions on ``predict_rows``)."""
    if X is None:
        w = weights[fit_rows]
        fitted = _ConstantModel(np.sum(w * target[fit_rows]) / w.sum())
        return fitted, _predict(fitted, None, binary).repeat(predict_rows.size)
    fitted = _fit(
        clone(model), _rows(X, fit_rows), _rows(target, fit_rows),
        _rows(weights, fit_rows) if weighted else None,
    )  # fmt: skip
    return fitted, _predict(fitted, _rows(X, predict_rows), binary)


def _numeric_design(X):
    if X is None:
        return None
    return np.asarray(X, dtype=float)


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
    sandwich=True,
    monotonicity=None,
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
    response_model : classifier or None
        Follow-up and response models when ``data`` has missing status or outcomes
        (``None``: the default logistic model); survival models are then fitted on rows with
        known status and outcome models on rows with an observed outcome.
    sandwich : bool, default=True
        Build the M-estimation sandwich pieces (``parametric``) when the models allow it;
        ``False`` skips them (the multiply robust estimator never uses them).
    monotonicity : {"increasing", "decreasing"} or None
        The estimator's direction; a :class:`PrincipalScoreModel` survival model must share it.
    zero_cells : bool, default=False
        Also fit the outcome model among each arm's units with intermediate 0 (stored under
        ``outcome[(arm, 0)]`` and ``models[("outcome", arm, 0)]``): the strata other than the
        always-survivors need ``E[Y | T=t, S=0, X]`` (docs/guide/derivations/strata.md).
    """
    n = data.n_samples
    T, S, Y, w = data.treatment, data.survival, data.outcome, data.sample_weight
    weighted = data.weighted
    X = data.X
    coarsened = data.status_known is not None
    known = data.status_known == 1 if coarsened else np.ones(n, bool)
    observed = data.outcome_observed == 1 if coarsened else S == 1
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
            _default_outcome_model(binary_outcome) if outcome_model is None else outcome_model
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
    zero_cells = zero_cells and fit_outcome
    if fit_outcome:
        fitted[("outcome", 0)] = []
        fitted[("outcome", 1)] = []
    if zero_cells:
        for arm in (0, 1):
            outcome[(arm, 0)] = np.empty(n)
            fitted[("outcome", arm, 0)] = []
    for train, test in splits:
        if known_probability:
            pi[test] = float(treatment_model)
            fitted["treatment"].append(_ConstantModel(treatment_model))
        else:
            model, pi[test] = _fit_predict(
                models["treatment"], X, T.astype(float), train, test, w, weighted, True
            )
            fitted["treatment"].append(model)
        if strata:
            # One stratum model on both arms supplies p0 and p1 (nuisance/_strata.py).
            model, predicted = fit_strata_scores(
                survival_model, X, T, S, w if weighted else None, train[known[train]], test
            )
            for arm in (0, 1):
                survival[arm][test] = predicted[arm]
                fitted[("survival", arm)].append(StratumArm(model, arm))
        for arm in (0, 1):
            arm_rows = train[T[train] == arm]
            if not strata:
                model, survival[arm][test] = _fit_predict(
                    models["survival"], X, S.astype(float), arm_rows[known[arm_rows]], test, w,
                    weighted, True,
                )
                fitted[("survival", arm)].append(model)
            if fit_outcome:
                rows = arm_rows[observed[arm_rows]]
                model, outcome[arm][test] = _fit_predict(
                    models["outcome"], X, Y, rows, test, w, weighted, binary_outcome
                )
                fitted[("outcome", arm)].append(model)
            if zero_cells:
                rows = arm_rows[S[arm_rows] == 0]
                model, outcome[(arm, 0)][test] = _fit_predict(
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
        from ._missing import fit_missingness

        # The response model's pieces share the raw design, so it must be a bare GLM.
        pieces = result.parametric is not None and response_glm(response_model)
        missingness, missing_models, missing_parametric = fit_missingness(
            data,
            default_binary_model() if response_model is None else response_model,
            splits,
            _numeric_design(X) if pieces else None,
            _parametric if pieces else None,
        )
        fitted.update(missing_models)
        result.missingness = missingness
        result.parametric = {**result.parametric, **missing_parametric} if pieces else None
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
        warnings.warn(
            "; ".join(messages)
            + ". Weights built from them are unstable: check overlap, simplify or regularize the "
            "models, or restrict the population.",
            OverlapWarning,
            stacklevel=3,
        )


def predict_models(fitted_list, X, binary=True):
    """Average the predictions of the fold models on new rows."""
    predictions = [_predict(model, X, binary) for model in fitted_list]
    return np.mean(predictions, axis=0)
