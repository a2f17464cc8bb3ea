"""Which fitted nuisance models admit the M-estimation sandwich, and its pieces for them.

The sandwich (Stefanski & Boos 2002) needs each model to be the root of a canonical-link GLM
score ``sum_i w_i mask_i (target_i - prediction_i) Xd_i = 0`` over a design ``Xd = [1, Z]``.
That holds for the default models and for the models users most often pass:

- ``LogisticRegression`` without a penalty (``C=np.inf`` or ``penalty=None``; any solver),
  with an intercept and no class weights;
- ``LinearRegression`` with an intercept;
- a scikit-learn ``Pipeline`` of fixed transformers (listed in ``_FIXED``; also inside a
  ``ColumnTransformer``) ending in one of them. Its design is the transformed covariates.
  Scalers learn a shift and a scale from the data, but with an intercept in the model a
  column-wise affine map leaves the fitted predictions unchanged, so their estimation adds
  nothing to the variance; one-hot encoders and fixed functions learn no continuous parameter.

A user's solver stops at its own tolerance, so its coefficients are not an exact root of the
score. The sandwich is evaluated at the fitted predictions as they are (the residuals of the
model the user fitted); when the score left at the fitted coefficients would move them by more
than 1e-3 (standardized) in one Newton step, a warning says that the fit is loosely converged.

Penalized models, other learners and cross-fitted fits keep the bootstrap (or the efficient
influence function of the multiply robust estimator); :func:`sandwich_reason` says why.
"""

from __future__ import annotations

import numpy as np
from sklearn.compose import ColumnTransformer
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import (
    FunctionTransformer,
    MaxAbsScaler,
    MinMaxScaler,
    OneHotEncoder,
    PolynomialFeatures,
    RobustScaler,
    StandardScaler,
)

from .._warnings import warn_at_caller
from ..exceptions import LooseFitWarning
from ._mixture import stratum_pieces
from ._models import ParametricFit
from ._strata import PrincipalScoreModel
from ._stratum_arms import stratum_arms

__all__ = [
    "glm_kind", "sandwich_reason", "flexible_model_reason", "build_parametric", "response_glm",
    "LooseFitWarning",
]  # fmt: skip

_FIXED = (
    StandardScaler,
    MinMaxScaler,
    MaxAbsScaler,
    RobustScaler,
    OneHotEncoder,
    PolynomialFeatures,
    FunctionTransformer,
)
# One Newton step from the fitted coefficients (in equilibrated coordinates) larger than this
# means the solver stopped well before the root of the score (our choice: about a twentieth of
# the standard error of a standardized coefficient at n = 10,000).
_LOOSE_STEP = 1e-3
_CHUNK = 65_536


def _fixed_transformer(step):
    if step in ("passthrough", None, "drop"):
        return True
    if isinstance(step, Pipeline):
        return all(_fixed_transformer(s) for _, s in step.steps)
    if isinstance(step, ColumnTransformer):
        parts = [t for _, t, _ in step.transformers] + [step.remainder]
        return all(_fixed_transformer(t) for t in parts)
    return isinstance(step, _FIXED)


def _final_kind(model):
    """``"logistic"``, ``"linear"`` or None for a bare (final) estimator."""
    if isinstance(model, LogisticRegression):
        penalty = getattr(model, "penalty", "l2")
        unpenalized = penalty is None or penalty == "none" or np.isinf(float(model.C))
        if unpenalized and model.fit_intercept and model.class_weight is None:
            return "logistic"
        return None
    if isinstance(model, LinearRegression) and model.fit_intercept and not model.positive:
        return "linear"
    return None


def glm_kind(model):
    """``"logistic"`` / ``"linear"`` when ``model`` admits the GLM sandwich, else None.

    ``None`` (the default model) is recognized by the caller, not here.
    """
    if isinstance(model, Pipeline):
        if not all(_fixed_transformer(step) for _, step in model.steps[:-1]):
            return None
        return _final_kind(model.steps[-1][1])
    return _final_kind(model)


def _describe(model):
    name = type(model).__name__
    if isinstance(model, LogisticRegression):
        return f"{name} with C={model.C} (penalized)" if _final_kind(model) is None else name
    return name


def sandwich_reason(estimator):
    """Why the sandwich standard error does not apply to ``estimator``'s models (a sentence)."""
    if getattr(estimator, "n_folds", None) is not None:
        return "the models are cross-fitted (the sandwich needs every model fitted on all rows)"
    roles = [("treatment_model", estimator.treatment_model)]
    if getattr(estimator, "_treatment_enters_estimate", True) is False:
        roles = []
    roles.append(("survival_model", estimator.survival_model))
    if getattr(estimator, "_uses_outcome_model", False):
        roles.append(("outcome_model", estimator.outcome_model))
    if getattr(estimator, "missing", "error") == "at_random":
        for role in ("follow_up_model", "response_model"):
            model = getattr(estimator, role, None)
            if not response_glm(model):
                return (
                    f"`{role}` is {_describe(model)}, not an unpenalized LogisticRegression "
                    "on the covariates as given"
                )
    for role, model in roles:
        if model is None or isinstance(model, int | float) or _default_strata(model):
            continue
        if role == "survival_model" and _stratum_model(model):
            return (
                f"`survival_model` is a PrincipalScoreModel fitted by EM with "
                f"{type(model.estimator).__name__}; the sandwich needs its default multinomial "
                "logistic model (estimator=None)"
            )
        if glm_kind(model) is None:
            return (
                f"`{role}` is {_describe(model)}, not an unpenalized logistic or linear "
                "regression (alone or after fixed transformers)"
            )
    return "a model is not an unpenalized generalized linear model"


def _design(fitted, X):
    """The numeric design the final GLM saw, for every row (None: intercept only)."""
    if X is None:
        return None
    if isinstance(fitted, Pipeline):
        Z = fitted[:-1].transform(X)
        if hasattr(Z, "toarray"):
            Z = Z.toarray()
        return np.asarray(Z, dtype=float)
    return np.asarray(X, dtype=float)


def _information(Z, a):
    if Z is None:
        return np.array([[a.sum()]])
    k = Z.shape[1]
    info = np.zeros((k + 1, k + 1))
    info[0, 0] = a.sum()
    info[0, 1:] = info[1:, 0] = a @ Z
    for start in range(0, Z.shape[0], _CHUNK):
        block = Z[start : start + _CHUNK]
        info[1:, 1:] += block.T @ (block * a[start : start + _CHUNK, None])
    return info


def _equilibrated_pinv(info):
    """Pseudo-inverse after scaling rows and columns to unit diagonal.

    The sandwich is invariant to rescaling a covariate; the scaled matrix keeps it so in
    floating point (a column multiplied by 1e8 otherwise swamps the intercept's direction).
    """
    scale = np.sqrt(np.abs(np.diag(info)))
    scale[scale == 0] = 1.0
    inverse = np.linalg.pinv(info / np.outer(scale, scale))
    return inverse / np.outer(scale, scale)


def parametric_piece(design, mask, target, prediction, slope, weights, *, check_root=False,
                     role="model"):  # fmt: skip
    """A :class:`~._models.ParametricFit` for one GLM fit (equilibrated, chunked)."""
    residual = np.where(mask, np.nan_to_num(target) - prediction, 0.0)
    total = weights.sum()
    info = _information(design, weights * mask * slope) / total
    h_inverse = _equilibrated_pinv(info)
    if check_root:
        score = _information_vector(design, weights * residual) / total
        step = h_inverse @ score
        size = np.sqrt(np.abs(np.diag(info)))
        moved = float(np.max(np.abs(step * size)))
        if moved > _LOOSE_STEP:
            warn_at_caller(
                f"The {role} stopped before the root of its score equations (one more Newton "
                f"step would move its standardized coefficients by {moved:.1e}). "
                "The sandwich standard error uses its predictions as fitted; tighten `tol` "
                "(or use solver='newton-cholesky') for an exact maximum-likelihood fit.",
                LooseFitWarning)
    # The mask stays boolean (one byte a row) and a constant slope a scalar: the correction
    # only multiplies by them.
    return ParametricFit(design=design, mask=mask, residual=residual, slope=slope,
                         h_inverse=h_inverse)  # fmt: skip


def _information_vector(Z, u):
    if Z is None:
        return np.array([u.sum()])
    return np.concatenate([[u.sum()], Z.T @ u])


def flexible_model_reason(estimator):
    """Why the influence values alone do not carry the nuisance fits' error (a sentence), or None.

    The efficient influence function accounts for the estimation of the nuisance models when they
    are parametric or cross-fitted (Chernozhukov et al. 2018, section 3: without sample splitting
    the learners must lie in a Donsker class). A flexible learner fitted and evaluated on the
    same rows (``n_folds=None``) adapts to their noise, and the spread of the influence values
    then understates the error.
    """
    if getattr(estimator, "n_folds", None) is not None:
        return None
    roles = ["treatment_model", "survival_model", "outcome_model"]
    if getattr(estimator, "missing", "error") == "at_random":
        roles += ["follow_up_model", "response_model"]
    for role in roles:
        model = getattr(estimator, role, None)
        if not _parametric(model):
            return (
                f"`{role}` is {type(model).__name__}, a flexible learner fitted and evaluated on "
                "the same rows (n_folds=None)"
            )
    return None


def _parametric(model):
    """A known probability, the default, or a scikit-learn linear model (penalized or not),
    alone, after fixed transformers, or inside a PrincipalScoreModel."""
    if model is None or isinstance(model, int | float):
        return True
    if _stratum_model(model):
        return _parametric(model.estimator)
    if isinstance(model, Pipeline):
        fixed = all(_fixed_transformer(step) for _, step in model.steps[:-1])
        return fixed and _parametric(model.steps[-1][1])
    return any(kind.__module__.startswith("sklearn.linear_model") for kind in type(model).__mro__)


def _stratum_model(model):
    return isinstance(model, PrincipalScoreModel)


def _default_strata(model):
    """A :class:`~._strata.PrincipalScoreModel` with its multinomial logistic default."""
    return _stratum_model(model) and model.estimator is None


def response_glm(model):
    """Whether a follow-up/response model admits the sandwich on the raw covariates."""
    return model is None or (not isinstance(model, Pipeline) and glm_kind(model) == "logistic")


def build_parametric(data, nuisance, given, *, fit_outcome, binary_outcome, known_probability,
                     treatment_enters_estimate=True, known=None, observed=None):  # fmt: skip
    """Sandwich pieces of every model that enters the estimate, or None if one does not qualify.

    ``given`` maps ``"treatment"``, ``"survival"``, ``"outcome"`` to the models the user passed
    (None: the default). Each qualifying model must have been fitted once, on all rows (with
    missing data: survival models on rows of known status, ``known``, and outcome models on
    rows with an observed outcome, ``observed``; the defaults are those of complete data).
    """
    if nuisance.cross_fitted:
        return None
    T, S, Y, w = data.treatment, data.survival, data.outcome, data.sample_weight
    n = data.n_samples
    if known is None:
        known = np.ones(n, bool)
    if observed is None:
        observed = np.ones(n, bool)  # every outcome observed; each cell's piece takes its rows
    roles = ["survival"] + (["outcome"] if fit_outcome else [])
    if not known_probability:
        roles.insert(0, "treatment")
    kinds = {}
    for role in roles:
        model = given.get(role)
        kind = "default" if model is None else glm_kind(model)
        if role == "survival" and _default_strata(model):
            kind = "strata"
        if kind is None:
            if role == "treatment" and not treatment_enters_estimate:
                continue  # only feeds reported shares
            return None
        kinds[role] = kind
    pieces = {}
    raw = []  # the numeric covariates, converted once and shared by every bare model

    def design_for(fitted, user_model):
        if data.X is None:
            return None
        if isinstance(user_model, Pipeline):
            return _design(fitted, data.X)
        if not raw:
            raw.append(np.asarray(data.X, dtype=float))
        return raw[0]

    # Pieces depend only on the data, the model and its predictions: estimators sharing this
    # nuisance (already checked to be fitted on these data) share them too.
    memo = nuisance.__dict__.setdefault("_sandwich_pieces", {})
    for role in kinds:
        user = given.get(role)
        check = user is not None
        keys = ["treatment"] if role == "treatment" else [(role, 0), (role, 1)]
        if role == "outcome":
            keys += [(role, arm, 0) for arm in (0, 1) if (role, arm, 0) in nuisance.models]
        if all(key in memo for key in keys):
            pieces.update({key: memo[key] for key in keys})
            continue
        if kinds[role] == "strata":
            strata = nuisance.models[("survival", 0)][0].strata
            pieces.update({("survival", arm): piece for arm, piece in stratum_pieces(
                strata, data.X, T, S, w, known, stratum_arms(strata)).items()})  # fmt: skip
            continue
        if role == "treatment":
            pi = nuisance.treatment_probability
            fitted = nuisance.models["treatment"][0]
            pieces["treatment"] = parametric_piece(
                design_for(fitted, user), np.ones(n, bool), T, pi, pi * (1 - pi), w,
                check_root=check, role="treatment model",
            )  # fmt: skip
            continue
        for arm in (0, 1):
            fitted = nuisance.models[(role, arm)][0]
            if role == "survival":
                p = nuisance.survival[arm]
                pieces[("survival", arm)] = parametric_piece(
                    design_for(fitted, user), (T == arm) & known, S, p, p * (1 - p), w,
                    check_root=check, role=f"survival model (arm {arm})",
                )  # fmt: skip
            else:
                m = nuisance.outcome[arm]
                slope = m * (1 - m) if binary_outcome else 1.0
                pieces[("outcome", arm)] = parametric_piece(
                    design_for(fitted, user), (T == arm) & observed & (S == 1), Y, m, slope, w,
                    check_root=check, role=f"outcome model (arm {arm})",
                )  # fmt: skip
                if ("outcome", arm, 0) in nuisance.models:
                    # The stratum formulas' outcome model among the arm's units with S = 0.
                    m = nuisance.outcome[(arm, 0)]
                    pieces[("outcome", arm, 0)] = parametric_piece(
                        design_for(nuisance.models[("outcome", arm, 0)][0], user),
                        (T == arm) & (S == 0) & known & observed, np.nan_to_num(Y), m,
                        m * (1 - m) if binary_outcome else 1.0, w,
                        check_root=check, role=f"outcome model (arm {arm}, intermediate 0)",
                    )  # fmt: skip
    memo.update(pieces)
    return pieces
