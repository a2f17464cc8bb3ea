"""Estimator parameter checks (the part of :mod:`pscore_strata._validation` that reads settings).

Run at ``fit`` (scikit-learn convention: ``__init__`` only stores). Each message names the
parameter, says what was expected, shows what was got and says what to do.
"""

from __future__ import annotations

import functools
import inspect
import numbers

import numpy as np

from ._warnings import warn_at_caller

__all__ = [
    "check_estimator_arguments",
    "check_model",
    "check_random_state",
    "check_n_jobs",
    "check_n_bootstrap",
    "check_n_folds",
    "check_positive_integer",
    "positional_still_accepted",
]

_ROLES = {
    "classifier": "a scikit-learn classifier with predict_proba (it models a probability)",
    "treatment": (
        "a scikit-learn classifier with predict_proba, or the known probability of treatment "
        "as a number in (0, 1)"
    ),
    "outcome": "a scikit-learn regressor (or a classifier for a 0/1 outcome) with predict",
}


def check_model(model, name, role="classifier"):
    """``None`` (the default model) or an estimator instance able to do the ``role``."""
    if model is None:
        return model
    if role == "treatment" and _is_number(model):
        return model
    expected = _ROLES[role]
    if isinstance(model, type):
        raise TypeError(
            f"`{name}` must be {expected}; got the class {model.__name__}. Pass an instance: "
            f"{name}={model.__name__}()."
        )
    if isinstance(model, bool | str | numbers.Number):
        raise TypeError(
            f"`{name}` must be {expected}, or None for the default; got {model!r}. Pass an "
            "estimator instance, for example LogisticRegression()."
        )
    if not (hasattr(model, "fit") and hasattr(model, "get_params")):
        raise TypeError(
            f"`{name}` must be {expected}; got an instance of {type(model).__name__}, which "
            "has no fit and get_params. Pass a scikit-learn estimator or pipeline."
        )
    method = "predict" if role == "outcome" else "predict_proba"
    if not hasattr(model, method):
        raise TypeError(
            f"`{name}` must be {expected}; {type(model).__name__} has no {method}"
            + (" (it is a regressor)" if hasattr(model, "predict") and method != "predict" else "")
            + ". Use a classifier such as LogisticRegression or RandomForestClassifier."
        )
    return model


def _is_number(value):
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def check_random_state(value):
    """What :class:`numpy.random.SeedSequence` and scikit-learn both accept."""
    if value is None or isinstance(
        value, np.random.RandomState | np.random.Generator | np.random.SeedSequence
    ):
        return value
    if isinstance(value, numbers.Integral) and not isinstance(value, bool) and 0 <= value < 2**32:
        return value
    raise ValueError(
        "`random_state` must be None, an integer in [0, 2**32) or a numpy RandomState, "
        f"Generator or SeedSequence; got {value!r}. Pass an integer such as random_state=0 for "
        "reproducible results."
    )


def check_n_jobs(value):
    """joblib's ``n_jobs``: None or a non-zero integer (negative counts from the CPU count)."""
    if value is None or (isinstance(value, numbers.Integral) and not isinstance(value, bool)
                         and value != 0):  # fmt: skip
        return value
    raise ValueError(
        f"`n_jobs` must be None or a non-zero integer (-1 uses every core); got {value!r}."
    )


def check_n_bootstrap(value):
    """0 (no bootstrap) or at least two resamples: one cannot give a standard deviation."""
    if isinstance(value, numbers.Integral) and not isinstance(value, bool) and (
        value == 0 or value >= 2
    ):
        return int(value)
    raise ValueError(
        f"`n_bootstrap` must be 0 (no bootstrap) or an integer >= 2 (a standard deviation needs "
        f"two resamples; 200 or more is common practice); got {value!r}."
    )


def check_positive_integer(value, name, low=1):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise TypeError(f"`{name}` must be an integer >= {low}; got {value!r}.")
    if value < low:
        raise ValueError(f"`{name}` must be an integer >= {low}; got {value}.")
    return int(value)


def check_n_folds(n_folds, data):
    """``None`` or ``2 <= n_folds <=`` the smallest treatment x survival cell (folds are
    stratified by that cell, so each fold needs a row of each)."""
    if n_folds is None:
        return None
    if isinstance(n_folds, bool) or not isinstance(n_folds, numbers.Integral) or n_folds < 2:
        raise ValueError(f"`n_folds` must be None or an integer >= 2; got {n_folds!r}.")
    counts = np.bincount(2 * data.treatment.astype(int) + data.survival, minlength=4)
    smallest = int(counts.min())
    if n_folds > smallest:
        label = ["control deaths", "control survivors", "treated deaths", "treated survivors"]
        raise ValueError(
            f"`n_folds`={n_folds} is larger than the smallest treatment x survival cell "
            f"({smallest} {label[int(np.argmin(counts))]}); every fold needs rows of each cell. "
            f"Use n_folds <= {smallest} (5 or 10 is common practice), or None."
        )
    return n_folds


def check_estimator_arguments(estimator):
    """The model and run parameters an estimator (or the bounds) has, each checked."""
    roles = {
        "treatment_model": "treatment",
        "survival_model": "classifier",
        "response_model": "classifier",
        "follow_up_model": "classifier",
        "outcome_model": "outcome",
    }
    params = estimator.get_params(deep=False)
    for name, role in roles.items():
        if name in params:
            check_model(params[name], name, role)
    if "random_state" in params:
        check_random_state(params["random_state"])
    if "n_jobs" in params:
        check_n_jobs(params["n_jobs"])
    if "n_bootstrap" in params:
        check_n_bootstrap(params["n_bootstrap"])


def positional_still_accepted(function):
    """Let a method whose trailing parameters became keyword-only take them by position, with a
    ``FutureWarning``, for one release (scripts written for the positional form keep running).

    The wrapped signature (what ``inspect.signature`` and the documentation show) is the
    keyword-only one.
    """
    parameters = list(inspect.signature(function).parameters.values())
    leading = sum(p.kind is p.POSITIONAL_OR_KEYWORD for p in parameters)
    keyword_only = [p.name for p in parameters if p.kind is p.KEYWORD_ONLY]
    name = function.__qualname__

    @functools.wraps(function)
    def accept(*args, **kwargs):
        extra = args[leading:]
        if extra:
            if len(extra) > len(keyword_only):
                raise TypeError(
                    f"{name}() takes {leading - 1} positional argument(s) after self and "
                    f"{len(keyword_only)} by keyword ({', '.join(keyword_only)}); got "
                    f"{len(args) - 1} positional."
                )
            given = dict(zip(keyword_only, extra, strict=False))
            twice = sorted(set(given) & set(kwargs))
            if twice:
                raise TypeError(f"{name}() got {', '.join(twice)} both by position and keyword.")
            written = ", ".join(f"{key}=..." for key in given)
            warn_at_caller(
                f"Passing {', '.join(given)} to {name}() by position is deprecated and will "
                f"stop working in the next release; write them by keyword: "
                f"{function.__name__}(X, {written}).",
                FutureWarning)
            kwargs.update(given)
        return function(*args[:leading], **kwargs)

    return accept
