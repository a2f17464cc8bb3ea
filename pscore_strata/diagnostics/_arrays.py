"""Per-row arrays the diagnostics look at: balancing weights, scores and the thresholds used.

Balancing property (Ding & Lu 2017, JRSSB): under monotonicity
"increasing" and correct models, for any covariate function ``h(X)`` the always-survivor mean
``E[h(X) | always-survivor]`` is the weighted mean of ``h`` among treated survivors with weights
``p0 / (pi p1)``, among control survivors with weights ``1 / (1 - pi)``, and among everyone with
weights ``p0``. Under "decreasing" the arms swap roles. For another target stratum ``g``
(``stratum=``) the same holds with each arm's cell of ``g`` weighted by
``e_g / (P(arm|X) P(S=s_g(arm)|arm,X))`` and everyone by ``e_g``
(docs/guide/derivations/strata.md, section 4); the weight sets keep their names
(``treated_survivors`` is then the treated cell of ``g``).
"""

from __future__ import annotations

import numpy as np
from sklearn.exceptions import NotFittedError

from .._results import BOUNDS, identification_of
from ..estimands._view import orient

# Thresholds below are common practice (rules of thumb), not derived from theory.
SMD_THRESHOLD = 0.1
PROBABILITY_BOUNDS = (0.05, 0.95)
SCORE_FLOOR = 0.05
ROW_SHARE_TOLERANCE = 0.05
# Fitted survival probabilities that cross by less than this are equal up to rounding (two
# arms fitted to the same shares differ by ~1e-13), not a contradiction of monotonicity.
VIOLATION_TOLERANCE = 1e-8


def oriented_predictions(estimator):
    if not (hasattr(estimator, "nuisance_") and hasattr(estimator, "training_data_")):
        if identification_of(estimator) == BOUNDS:
            raise TypeError(
                f"`estimator` is a {type(estimator).__name__}: bounds keep no principal "
                "score weights to diagnose. Pass a fitted PrincipalScoreWeighting, "
                "OutcomeRegression or MultiplyRobust (with the same models) instead."
            )
        if isinstance(estimator, type):
            raise TypeError(
                f"`estimator` must be a fitted estimator; got the class {estimator.__name__}. "
                f"Fit an instance first: {estimator.__name__}().fit(X, y, treatment=..., "
                "survival=...)."
            )
        if hasattr(estimator, "fit") and hasattr(estimator, "get_params"):
            raise NotFittedError(
                f"This {type(estimator).__name__} is not fitted yet; call "
                "fit(X, y, treatment=..., survival=...) before asking for diagnostics."
            )
        raise TypeError(
            "`estimator` must be a fitted pscore_strata estimator (PrincipalScoreWeighting, "
            f"OutcomeRegression or MultiplyRobust); got {type(estimator).__name__}."
        )
    monotonicity = getattr(estimator, "monotonicity", "increasing")
    stratum = getattr(estimator, "stratum_", "always_survivor")
    data, nuisance = estimator.training_data_, estimator.nuisance_
    # One view per fit, rows and direction, kept with the fit's other derived values (every
    # diagnostic reads it; building it copies several columns of the rows).
    store = getattr(nuisance, "derived", None)
    key = ("oriented view", id(nuisance), id(data), monotonicity, stratum)
    if store is not None and key in store:
        return store[key][0]
    if stratum != "always_survivor":
        view = estimator._oriented(data, nuisance)
    else:
        view = orient(data, nuisance, monotonicity)
    if store is not None:
        store[key] = (view, nuisance, data)  # held, so that the ids stay theirs
    return view


def treated_indicator(o):
    return o.mixed if o.increasing else 1.0 - o.mixed


def balancing_weights(o):
    """Row weights of the three reconstructions, times the sample weights, keyed by group."""
    if hasattr(o, "cell_weights"):  # another stratum than the always-survivors
        cells = o.cell_weights()
        treated, control = ((cells["mixed"], cells["pure"]) if o.increasing
                            else (cells["pure"], cells["mixed"]))  # fmt: skip
        return {"treated_survivors": o.weight * treated, "control_survivors": o.weight * control,
                "everyone": o.weight * o.score}  # fmt: skip
    # Observed survivors; with missing data they carry 1 / (c r) (equal to A S otherwise).
    observed_mixed, observed_pure = o.observed_mixed, o.observed_pure
    with np.errstate(divide="ignore", invalid="ignore"):
        mixed = np.where(observed_mixed > 0, observed_mixed * o.p_pure / (o.pi * o.p_mixed), 0.0)
        pure = np.where(observed_pure > 0, observed_pure / (1.0 - o.pi), 0.0)
    treated, control = (mixed, pure) if o.increasing else (pure, mixed)
    return {
        "treated_survivors": o.weight * treated,
        "control_survivors": o.weight * control,
        "everyone": o.weight * o.p_pure,
    }


def survivor_weights(o):
    T = treated_indicator(o)
    if hasattr(o, "cell_weights"):  # the target stratum's cells, unweighted
        treated, control = ((o.cell("mixed"), o.cell("pure")) if o.increasing
                            else (o.cell("pure"), o.cell("mixed")))  # fmt: skip
        return {"treated_survivors": o.weight * treated, "control_survivors": o.weight * control}
    observed = o.survival if o.coarsening is None else o.survival * o.coarsening.responded
    return {
        "treated_survivors": o.weight * T * observed,
        "control_survivors": o.weight * (1 - T) * observed,
    }


def effective_sample_size(weights):
    """Kish (1965) effective sample size ``(sum w)^2 / sum w^2`` of non-negative weights.

    Parameters
    ----------
    weights : array-like of shape (n_rows,)
        Non-negative weights.

    Returns
    -------
    float
        Between 1 and the number of rows with positive weight; NaN when every weight is 0.
    """
    weights = np.asarray(weights, dtype=float)
    square_sum = np.sum(weights**2)
    return float(np.sum(weights) ** 2 / square_sum) if square_sum > 0 else 0.0


def fitted_scores(o):
    """Per-row scores: treatment probability and the principal scores (clipped as fitted)."""
    always = np.minimum(o.p_pure, o.p_mixed)
    helped = np.clip(o.p_mixed - o.p_pure, 0.0, None)
    treatment_probability = o.pi if o.increasing else 1.0 - o.pi
    return {
        "treatment": treatment_probability,
        "always_survivor": always,
        "protected" if o.increasing else "harmed": helped,
        "doomed": 1.0 - always - helped,
    }
