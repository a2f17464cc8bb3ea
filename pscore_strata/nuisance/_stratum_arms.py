"""The stratum model inside a nuisance fit: one arm's survival probability (:class:`StratumArm`),
fitting it on a fold, and the checks the nuisance layer makes of it."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import clone

from ._strata import PrincipalScoreModel

__all__ = ["StratumArm", "fit_strata_scores", "check_stratum_model", "stratum_arms"]


class StratumArm:
    """One arm's survival probability from a fitted :class:`PrincipalScoreModel`.

    Stands where an arm-wise survival classifier stands in a nuisance fit, so code that asks a
    fold model for ``predict_proba(X)[:, 1]`` gets ``p_t(X)``; ``strata`` is the stratum model.
    """

    def __init__(self, strata, arm):
        self.strata, self.arm = strata, arm

    def predict_proba(self, X):
        survival = self.strata.survival_probability(X)[self.arm]
        return np.column_stack([1.0 - survival, survival])


def fit_strata_scores(model, X, treatment, survival, weights, fit_rows, predict_rows):
    """Fit a clone of ``model`` on ``fit_rows``; return it and ``{0: p0, 1: p1}`` on
    ``predict_rows``."""

    def take(values, rows):
        if values is None:
            return None
        if rows.size == len(values) and np.array_equal(rows, np.arange(rows.size)):
            return values  # all rows in order: no copy of X
        return values.iloc[rows] if isinstance(values, pd.DataFrame) else values[rows]

    fitted = clone(model).fit(
        take(X, fit_rows), treatment=treatment[fit_rows], survival=survival[fit_rows],
        sample_weight=None if weights is None else weights[fit_rows],
    )  # fmt: skip
    predict_X = take(X, predict_rows)
    if predict_X is None:
        p0, p1 = (np.repeat(p, predict_rows.size) for p in fitted.survival_probability(None))
    else:
        p0, p1 = fitted.survival_probability(predict_X)
    return fitted, {0: p0, 1: p1}


def check_stratum_model(model, monotonicity):
    """Whether ``model`` is a stratum model; refuse one whose direction differs."""
    if not isinstance(model, PrincipalScoreModel):
        return False
    if monotonicity is not None and model.monotonicity != monotonicity:
        raise ValueError(
            f"`survival_model` is a PrincipalScoreModel with monotonicity="
            f"{model.monotonicity!r}, but the estimator has monotonicity={monotonicity!r}. "
            "The strata (protected or harmed) must be the same: set both to the same value."
        )
    return True


def stratum_arms(model):
    """Which strata each arm's survival probability sums: ``{arm: members}``."""
    mixed, pure = (1, 0) if model.monotonicity == "increasing" else (0, 1)
    return {mixed: (0, 1), pure: (0,)}
