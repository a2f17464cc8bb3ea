"""One estimator on one simulated dataset: the estimator contract of the harness.

The contract, as :func:`run_study` documents it: ``fit(X, y, *, treatment, survival)`` (plus
``groups=`` when the scenario returns cluster labels), then either a point estimate in
``effect_`` with ``std_error_`` (a float, possibly NaN) and an optional ``conf_int(level)``
(when absent, the Wald interval ``effect_ +/- z std_error_``, marked ``"wald"`` in the
``interval`` column), or bounds in ``lower_`` and ``upper_`` with ``conf_int(level)`` covering
the true effect (Imbens & Manski 2004) and, optionally,
``conf_int(level, coverage="identified_set")`` covering the identified set. Which of the two,
``identification`` says (:mod:`pscore_strata._results`).
"""

from __future__ import annotations

import time
import warnings

import numpy as np
from scipy import stats
from sklearn.base import clone

from .._results import BOUNDS, POINT, identification_of

__all__ = ["seeded_clone", "fit_one", "is_bounds"]


def seeded_clone(estimator, seed):
    """Clone and fix every unset ``random_state`` (also in nested models) from ``seed``.

    Without this, folds and bootstrap resamples would come from global state and differ
    between workers.
    """
    est = clone(estimator)
    unset = [
        k for k, v in est.get_params(deep=True).items() if k.endswith("random_state") and v is None
    ]
    if unset:
        value = int(seed.generate_state(1)[0])
        est.set_params(**dict.fromkeys(unset, value))
    return est


def is_bounds(fitted):
    """Whether a fitted estimator reports bounds rather than a point estimate."""
    return identification_of(fitted) == BOUNDS


def _wald(center, std_error, level):
    z = stats.norm.ppf(0.5 + level / 2)
    return center - z * std_error, center + z * std_error


def _point(estimator, level, row):
    row["estimate"] = float(estimator.effect_)
    row["std_error"] = float(getattr(estimator, "std_error_", np.nan))
    if hasattr(estimator, "conf_int"):
        row["ci_low"], row["ci_high"] = map(float, estimator.conf_int(level))
        row["interval"] = "conf_int"
    else:
        row["ci_low"], row["ci_high"] = map(float, _wald(row["estimate"], row["std_error"], level))
        row["interval"] = "wald"
    if not np.isfinite(row["estimate"]):
        row["failed"], row["error"] = True, "non-finite estimate"


def _bounds(estimator, level, row):
    row["kind"] = "bounds"
    row["lower"], row["upper"] = float(estimator.lower_), float(estimator.upper_)
    row["ci_low"], row["ci_high"] = map(float, estimator.conf_int(level))
    row["interval"] = "conf_int"
    try:
        row["set_low"], row["set_high"] = map(
            float, estimator.conf_int(level, coverage="identified_set")
        )
    except TypeError:  # an estimator without the identified-set interval
        pass
    if not (np.isfinite(row["lower"]) and np.isfinite(row["upper"])):
        row["failed"], row["error"] = True, "non-finite bounds"


def fit_one(estimator, data, level):
    """Fit ``estimator`` on ``data``; return the result columns of one row (never raises)."""
    fit_kwargs = {"treatment": data.treatment, "survival": data.survival}
    if data.get("groups") is not None:
        fit_kwargs["groups"] = data.groups
    row = dict(
        kind="point", estimate=np.nan, std_error=np.nan, ci_low=np.nan, ci_high=np.nan,
        interval="", lower=np.nan, upper=np.nan, set_low=np.nan, set_high=np.nan,
        failed=False, error="", warnings="",
    )  # fmt: skip
    start = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            estimator.fit(data.X, data.y, **fit_kwargs)
            if is_bounds(estimator):
                _bounds(estimator, level, row)
            elif identification_of(estimator) == POINT:
                _point(estimator, level, row)
            else:
                raise AttributeError(
                    f"{type(estimator).__name__} has neither effect_ nor lower_ and upper_ after "
                    "fit; see the estimator contract in run_study's documentation"
                )
        except Exception as exc:  # a failed fit is a result of the study, not a crash
            row["failed"] = True
            row["error"] = f"{type(exc).__name__}: {exc}"
    row["fit_seconds"] = time.perf_counter() - start
    row["warnings"] = "; ".join(sorted({w.category.__name__ for w in caught}))
    return row
