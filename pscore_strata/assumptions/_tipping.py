"""Tipping points: the smallest departure from an untestable assumption that flips the sign.

The search runs on the no-refit formulas of :mod:`._sensitivity`: a coarse path from the null
value towards each end of the search range brackets the first crossing, and Brent's method
refines it.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from .._warnings import warn_at_caller
from ..inference._standard_errors import estimator_dof, normal_interval
from ._sensitivity import (
    NULL_SETTING,
    _check_estimator,
    _check_relevant,
    _check_value,
    _effect_and_error,
    sensitivity_path,
)

__all__ = ["tipping_point"]


def tipping_point(
    estimator, parameter="pi_difference", *, criterion="interval", level=0.95, search=None
):
    """Smallest departure from the null value at which the conclusion about the sign flips.

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
    parameter : {"pi_difference", "pi_ratio", "harmed_ratio", "pi_difference_doomed"}, \
default="pi_difference"
        One parameter of :func:`sensitivity_grid` that the fitted stratum's effect depends on
        (``pi_difference_doomed`` for the helped and doomed strata only).
    criterion : {"interval", "estimate"}, default="interval"
        ``"interval"``: where the confidence interval first covers the null effect (0, or 1
        on ratio scales); ``"estimate"``: where the estimate reaches it.
    level : float, default=0.95
    search : (float, float), optional
        Range of the parameter to search, ``(low, high)`` around the null value and inside
        the parameter's range; defaults to ``±20`` outcome standard deviations for
        ``pi_difference`` and ``pi_difference_doomed``, ``[1/50, 50]`` for ``pi_ratio`` and
        ``[0, 0.999]`` for ``harmed_ratio``.

    Returns
    -------
    float
        The parameter value nearest the null value (on the log scale for ``pi_ratio``) at which
        the criterion is met, found by Brent's method on the no-refit formulas; ``0``/``1`` if
        it is met at the null already; NaN with a warning giving the reason ("not reached")
        if it is not met inside ``search``, if the criterion jumps across the null instead of
        reaching it (where principal scores are clipped, ``harmed_ratio``), or if more than
        half of the rows' principal scores are clipped at the crossing.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> est = ps.OutcomeRegression().fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> delta = ps.tipping_point(est)
    >>> row = ps.sensitivity_grid(est, pi_difference=delta)
    >>> round(float(row["ci_low"].iloc[0]), 6) == 0
    True
    """
    _check_estimator(estimator)
    if parameter not in NULL_SETTING:
        raise ValueError(f"`parameter` must be one of {list(NULL_SETTING)}; got {parameter!r}.")
    _check_relevant(estimator, [parameter])
    if criterion not in ("interval", "estimate"):
        raise ValueError(f"`criterion` must be 'interval' or 'estimate'; got {criterion!r}.")
    data = estimator.training_data_
    null_effect = 0.0 if estimator.scale == "difference" else 1.0
    log_scale = estimator.scale != "difference"
    sign = np.sign(estimator.effect_ - null_effect)
    # Kept per estimator: the oriented predictions, the affine paths in the difference
    # parameters, the harmed-ratio path and the answers already computed (_paths.py).
    path = sensitivity_path(estimator)
    dof = estimator_dof(estimator)

    def criterion_gap(effect, se):
        if criterion == "estimate":
            return sign * (effect - null_effect)
        low, high = normal_interval(effect, se, level, log_scale, dof)
        return low - null_effect if sign > 0 else null_effect - high

    def distance(value):
        setting = {parameter: _check_value(parameter, value)}
        return criterion_gap(*_effect_and_error(estimator, setting, path)[:2])

    null = NULL_SETTING[parameter]
    search = _check_search(search, parameter, null)
    if distance(null) <= 0:
        return null
    if search is None:
        # The outcomes the fitted stratum's formulas use (survivors' for the always-survivors).
        used = data.outcome if getattr(estimator, "stratum_", "always_survivor") != (
            "always_survivor") else data.outcome[data.survival == 1]  # fmt: skip
        spread = float(np.nanstd(used)) or 1.0
        search = {
            "pi_difference": (-20 * spread, 20 * spread),
            "pi_difference_doomed": (-20 * spread, 20 * spread),
            "pi_ratio": (1 / 50, 50.0),
            "harmed_ratio": (0.0, 0.999),
        }[parameter]
    found = []
    for end in search:
        if end == null:
            continue
        points = _path(null, end, parameter)
        if parameter in ("pi_difference", "pi_difference_doomed"):
            # The whole coarse path at once (affine, _paths.py); the first crossing brackets
            # the root.
            effects, errors, _ = path.along_delta(points, parameter=parameter)
            gaps = np.array([criterion_gap(e, s) for e, s in zip(effects, errors, strict=True)])
            crossed = np.flatnonzero(gaps <= 0)
            if crossed.size:
                first = crossed[0]
                previous = null if first == 0 else points[first - 1]
                found.append(optimize.brentq(distance, previous, points[first], xtol=1e-10))
            continue
        previous = null
        for point in points:
            if distance(point) <= 0:
                found.append(optimize.brentq(distance, previous, point, xtol=1e-10))
                break
            previous = point
    if not found:
        return _not_reached(f"the {criterion} does not reach the null effect for {parameter} in "
                            f"{tuple(search)}")  # fmt: skip
    if parameter == "pi_ratio":
        root = float(min(found, key=lambda v: abs(np.log(v))))
    else:
        root = float(min(found, key=lambda v: abs(v - null)))
    # The criterion is continuous except where principal scores are clipped (harmed_ratio:
    # rows whose implied always-survivor score would be negative); there Brent's method
    # converges to the jump. A root is returned only if the criterion is zero there.
    effect, se, clipped = _effect_and_error(estimator, {parameter: root}, path)
    gap = criterion_gap(effect, se)
    tolerance = _ROOT_TOLERANCE * (abs(estimator.effect_) + estimator.std_error_)
    n = data.n_samples
    if clipped > _CLIPPED_SHARE * n:
        return _not_reached(
            f"at {parameter}={root:.4g} the {criterion} meets the null effect only where {clipped}"
            f" of {n} rows have clipped principal scores (more than {_CLIPPED_SHARE:.0%}), so the"
            " answer rests on rows the sensitivity model cannot describe"
        )
    if not abs(gap) <= tolerance:
        return _not_reached(
            f"the {criterion} jumps across the null effect at {parameter}={root:.4g} (it is "
            f"{gap:.3g} away there, with {clipped} of {n} rows' principal scores clipped) "
            "instead of reaching it continuously; see sensitivity_grid around that value"
        )
    return root


# |criterion| at the returned root, relative to |effect| + SE (Brent's xtol is 1e-10).
_ROOT_TOLERANCE = 1e-6
# Beyond half the rows clipped, the adjusted estimate describes the clipping more than the data.
_CLIPPED_SHARE = 0.5


def _not_reached(reason):
    warn_at_caller(f"Tipping point not reached: {reason}; returning NaN.", UserWarning)  # fmt: skip
    return float("nan")


def _check_search(search, parameter, null):
    if search is None:
        return None
    try:
        ends = tuple(float(_check_value(parameter, v)) for v in search)
    except (TypeError, ValueError):
        ends = ()
    if len(ends) != 2 or ends[0] == ends[1] or not min(ends) <= null <= max(ends):
        raise ValueError(
            f"`search` must be two different values of `{parameter}` around its null value "
            f"{null}, as (low, high), inside the parameter's range; got {search!r}."
        )
    return ends


def _path(null, end, parameter, n_points=40):
    """Points from the null value towards ``end`` (geometric for ratios), for bracketing."""
    if parameter == "pi_ratio":
        return np.exp(np.linspace(np.log(null), np.log(end), n_points + 1)[1:])
    return np.linspace(null, end, n_points + 1)[1:]
