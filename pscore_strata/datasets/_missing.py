"""Loss to follow-up and outcome non-response for the simulator, with the truth unchanged.

Missingness is drawn after the full data, so a dataset without it is the same for a given seed
as before. Both mechanisms are logistic in the covariate ``x2`` (which drives the effect when
``effect_heterogeneity`` is non-zero), so they are missing at random given X within each arm
and complete-case analysis is biased. An optional shift of the non-responders' outcomes
(``nonresponse_shift``) makes the outcomes missing not at random, for sensitivity checks.
"""

import numbers

import numpy as np
from scipy.special import expit, logit

from ._checks import check_real

__all__ = [
    "check_missingness", "apply_missingness", "observation_probability", "shifted_truth",
]

_ARMS = ("treated", "control")


def _check_one(spec, name):
    if isinstance(spec, numbers.Real) and not isinstance(spec, bool | np.bool_):
        return (check_real(spec, name, low=0.0, high=1.0), 0.0)
    if isinstance(spec, tuple | list) and len(spec) == 2:
        probability = check_real(spec[0], f"{name} probability", low=0.0, high=1.0)
        return (probability, check_real(spec[1], f"{name} strength"))
    raise TypeError(
        f"{name} must be None, a probability in (0, 1], a pair (probability, strength) or a dict "
        f"with keys 'treated' and 'control' holding those; got {spec!r}."
    )


def check_missingness(spec, name):
    """``None`` or ``{1: (probability, strength), 0: (...)}`` for one mechanism."""
    if spec is None:
        return None
    if isinstance(spec, dict):
        if set(spec) != set(_ARMS):
            raise ValueError(f"{name} as a dict needs exactly the keys 'treated' and 'control'.")
        parsed = {1: _check_one(spec["treated"], name), 0: _check_one(spec["control"], name)}
    else:
        parsed = {arm: _check_one(spec, name) for arm in (1, 0)}
    if any(probability == 0 for probability, _ in parsed.values()):
        raise ValueError(f"{name} probability must be above 0 (some units must be observed).")
    return parsed


def observation_probability(spec, X, arm):
    """``P(observed | T=arm, X)``: ``expit(logit(probability) + strength * x2)``."""
    n = X.shape[0]
    if spec is None:
        return np.ones(n)
    probability, strength = spec[arm]
    if probability == 1:
        return np.ones(n)
    return expit(logit(probability) + strength * X[:, 1])


def apply_missingness(data, follow_up, response, rng, nonresponse_shift=0.0,
                      every_outcome=False):  # fmt: skip
    """Blank the survival status of units lost to follow-up and the outcomes of non-responders.

    ``every_outcome``: the outcome exists for every unit (an intermediate after which it is
    still measured), so response is drawn for units of either intermediate value.

    Adds ``survival_full``, ``y_full`` (the values before blanking), ``status_known``,
    ``outcome_observed``, ``follow_up_probability`` and ``response_probability`` to ``data``;
    ``survival`` becomes float with NaN where unknown and ``y`` NaN where not observed.
    """
    if follow_up is None and response is None:
        return data
    X, T = data.X, data.treatment
    c = np.where(T == 1, observation_probability(follow_up, X, 1),
                 observation_probability(follow_up, X, 0))  # fmt: skip
    r = np.where(T == 1, observation_probability(response, X, 1),
                 observation_probability(response, X, 0))  # fmt: skip
    known = rng.random(T.size) < c
    # Response is drawn for every survivor, so whether a status is known stays independent of
    # the outcome even when the outcomes of non-responders are shifted.
    would_respond = rng.random(T.size) < r
    observed = known & would_respond & ((data.survival == 1) | every_outcome)
    y_full = np.array(data.y, dtype=float)
    if nonresponse_shift:
        # Missing not at random: non-responding survivors' outcomes sit this far above the
        # responders' with the same X and arm.
        shifted = (data.survival == 1) & ~would_respond
        y_full = np.where(shifted, y_full + nonresponse_shift, y_full)
    data.survival_full = np.asarray(data.survival, dtype=int)
    data.y_full = y_full
    data.status_known = known.astype(int)
    data.outcome_observed = observed.astype(int)
    data.follow_up_probability = c
    data.response_probability = r
    data.survival = np.where(known, data.survival_full, np.nan)
    data.y = np.where(observed, y_full, np.nan)
    return data


def shifted_truth(base_truth, response, nonresponse_shift, always_share, X):
    """SACE when non-responders' outcomes are shifted in both arms (Monte Carlo over ``X``).

    Each always-survivor's outcome under arm t is shifted when it would not respond under t,
    with probability ``1 - r_t(X)``: the SACE moves by
    ``shift (E[e_a (1 - r_1)] - E[e_a (1 - r_0)]) / E[e_a]``.
    """
    if not nonresponse_shift or response is None:
        return base_truth
    gap = [np.mean(always_share * (1 - observation_probability(response, X, arm)))
           for arm in (1, 0)]  # fmt: skip
    return base_truth + nonresponse_shift * (gap[0] - gap[1]) / np.mean(always_share)
