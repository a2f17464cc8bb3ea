"""Sharing one fitted nuisance between estimators: what it was fitted on, and the checks.

One analysis fits each nuisance model once (DESIGN.md section 6): the outcome regression and
multiply robust estimators use the same five models, the weighting estimator and the trimming
bounds the first three. A :class:`~._fit.NuisanceFit` records the settings it was fitted with
(``settings``); an estimator given ``nuisance=`` refuses a fit made on other rows, other data,
other models, another fold split or another monotonicity direction, so a shared fit gives
exactly the numbers a separate fit would.
"""

from __future__ import annotations

import hashlib
import numbers
from dataclasses import replace

import numpy as np
from sklearn.base import is_classifier

from .._checked_once import once
from ._fit import NuisanceFit
from ._missing import model_cells
from ._missing import model_key as missing_model_key
from ._sandwich import build_parametric, parametric_piece, response_glm

__all__ = ["record_settings", "shared_nuisance", "model_key"]


def model_key(model):
    """A comparable description of a model argument (its class and every parameter)."""
    if model is None:
        return "default"
    if isinstance(model, numbers.Real) and not isinstance(model, bool):
        return float(model)
    if not hasattr(model, "get_params"):
        return (type(model).__qualname__, id(model))
    params = model.get_params(deep=True)
    return (
        type(model).__qualname__,
        tuple(
            (name, type(value).__qualname__ if hasattr(value, "get_params") else repr(value))
            for name, value in sorted(params.items())
        ),
    )


def _fingerprint(data):
    """Digest of the rows the models were fitted on (treatment, survival, outcome, weights)."""
    return once("rows fingerprint", (data,), None, lambda: _rows_digest(data))


def _rows_digest(data):
    digest = hashlib.blake2b(digest_size=16)
    for values in (data.treatment, data.survival, np.nan_to_num(data.outcome, nan=0.0),
                   data.sample_weight, getattr(data, "status_known", None),
                   getattr(data, "outcome_observed", None)):  # fmt: skip
        if values is not None:
            digest.update(np.ascontiguousarray(values).tobytes())
    return digest.hexdigest()


def _state_key(random_state):
    if random_state is None or isinstance(random_state, numbers.Integral):
        return random_state
    return ("object", id(random_state))


def record_settings(nuisance, owner, data, random_state):
    """Attach what ``nuisance`` was fitted with (``owner``: the estimator or bounds)."""
    uses_outcome = nuisance.outcome is not None
    nuisance.settings = {
        "n_samples": data.n_samples,
        "n_features": data.n_features,
        "feature_names": tuple(data.feature_names),
        "data": _fingerprint(data),
        "treatment_model": model_key(owner.treatment_model),
        "survival_model": model_key(owner.survival_model),
        "outcome_model": model_key(getattr(owner, "outcome_model", None)) if uses_outcome
        else None,
        "response_model": model_key(getattr(owner, "response_model", None))
        if nuisance.missingness is not None else None,
        "follow_up_model": model_key(getattr(owner, "follow_up_model", None))
        if nuisance.missingness is not None else None,
        "n_folds": getattr(owner, "n_folds", None),
        "random_state": _state_key(random_state),
        "monotonicity": owner.monotonicity,
    }  # fmt: skip
    return nuisance


def _differs(name, fitted, wanted):
    return (
        f"`nuisance` was fitted with {name}={fitted!r}, but this estimator has {name}={wanted!r}"
    )


def shared_nuisance(owner, nuisance, data, *, uses_outcome, sandwich, treatment_enters=True,
                    n_repeats=1, fold_seed=None):  # fmt: skip
    """Check a previously fitted nuisance against ``owner`` and these data; adapt its sandwich.

    ``fold_seed``: the fold-split seed the fit must have been made with (one repeat's seed, when
    the fits of several cross-fitting repeats are shared); ``None``: ``owner.random_state``.

    Returns the nuisance to use: the same predictions and models, with the sandwich pieces
    ``owner`` would have built itself (rebuilt from the fitted models, or none).
    """
    if not isinstance(nuisance, NuisanceFit):
        raise TypeError(
            "`nuisance` must be the `nuisance_` attribute of a fitted pscore_strata estimator "
            f"(a NuisanceFit); got {type(nuisance).__name__}."
        )
    settings = getattr(nuisance, "settings", None)
    if settings is None:
        raise ValueError(
            "`nuisance` does not record the settings it was fitted with; pass the `nuisance_` "
            "of a fitted estimator, or drop `nuisance` to fit the models."
        )
    if n_repeats > 1:
        raise ValueError(
            f"`nuisance` holds one fit, but this estimator repeats cross-fitting "
            f"(n_repeats={n_repeats}); use n_repeats=1 or drop `nuisance`."
        )
    problems = []
    if settings["n_samples"] != data.n_samples:
        problems.append(
            f"`nuisance` was fitted on {settings['n_samples']} rows, these data have "
            f"{data.n_samples}"
        )
    elif settings["data"] != _fingerprint(data):
        problems.append(
            "`nuisance` was fitted on other data (treatment, survival, outcome or sample "
            "weights differ)"
        )
    if settings["n_features"] != data.n_features or (
        settings["feature_names"] and settings["feature_names"] != tuple(data.feature_names)
    ):
        problems.append(
            f"`nuisance` was fitted on {settings['n_features']} covariates "
            f"{list(settings['feature_names']) or ''}, these data have {data.n_features}"
        )
    for name in ("treatment_model", "survival_model"):
        if settings[name] != model_key(getattr(owner, name)):
            problems.append(_differs(name, settings[name], model_key(getattr(owner, name))))
    if uses_outcome:
        if settings["outcome_model"] is None or nuisance.outcome is None:
            problems.append(
                "`nuisance` was fitted without the outcome model this estimator needs (share "
                "the nuisance of an OutcomeRegression or MultiplyRobust fit instead)"
            )
        elif settings["outcome_model"] != model_key(owner.outcome_model):
            problems.append(
                _differs("outcome_model", settings["outcome_model"],
                         model_key(owner.outcome_model))  # fmt: skip
            )
    for role in ("response_model", "follow_up_model"):
        mine = model_key(getattr(owner, role, None))
        if nuisance.missingness is not None and settings.get(role) != mine:
            problems.append(_differs(role, settings.get(role), mine))
    n_folds = getattr(owner, "n_folds", None)
    if settings["n_folds"] != n_folds:
        problems.append(_differs("n_folds", settings["n_folds"], n_folds))
    elif n_folds is not None and settings["random_state"] != _state_key(
        owner.random_state if fold_seed is None else fold_seed
    ):
        problems.append(
            _differs("random_state (fold split)", settings["random_state"], owner.random_state)
        )
    if settings["monotonicity"] != owner.monotonicity:
        problems.append(_differs("monotonicity", settings["monotonicity"], owner.monotonicity))
    if problems:
        raise ValueError(
            "; ".join(problems) + ". A shared nuisance must come from the same rows and the same "
            "model settings; fit with matching settings or drop `nuisance` to refit."
        )
    parametric = None
    if sandwich:
        outcome_model = getattr(owner, "outcome_model", None) if uses_outcome else None
        binary = data.binary_outcome
        if outcome_model is not None:
            binary = is_classifier(outcome_model)
        treatment_model = owner.treatment_model
        coarsened = getattr(data, "status_known", None) is not None
        parametric = build_parametric(
            data, nuisance,
            {"treatment": treatment_model, "survival": owner.survival_model,
             "outcome": outcome_model},
            fit_outcome=uses_outcome, binary_outcome=binary,
            known_probability=isinstance(treatment_model, numbers.Real)
            and not isinstance(treatment_model, bool),
            treatment_enters_estimate=treatment_enters,
            known=data.status_known == 1 if coarsened else None,
            observed=data.outcome_observed == 1 if coarsened else None,
        )  # fmt: skip
        if parametric is not None and nuisance.missingness is not None:
            missing = _missing_pieces(data, nuisance, getattr(owner, "response_model", None),
                                      getattr(owner, "follow_up_model", None))  # fmt: skip
            parametric = None if missing is None else {**parametric, **missing}
    shared = replace(nuisance, parametric=parametric)
    shared.settings = settings
    return shared


def _missing_pieces(data, nuisance, response_model, follow_up_model=None):
    """Sandwich pieces of the follow-up and response models, as ``fit_missingness`` builds them."""
    if not (response_glm(response_model) and response_glm(follow_up_model)):
        return None
    design = None if data.X is None else np.asarray(data.X, dtype=float)
    pieces = {}
    cells = model_cells(data, zero_cells=("response", 1, 0) in nuisance.models
                        or ("response", 0, 0) in nuisance.models)  # fmt: skip
    for (kind, cell), (mask, target) in cells.items():
        key = missing_model_key(kind, cell)
        if key not in nuisance.models:
            continue
        values = nuisance.missingness[kind][cell]
        pieces[key] = parametric_piece(design, mask, target, values, values * (1 - values),
                                       data.sample_weight)  # fmt: skip
    return pieces
