"""Tipping points: the smallest departure from an untestable assumption that flips the sign.

The search runs on the no-refit formulas of :mod:`._sensitivity`: a coarse path from the null
value towards each end of the search range brackets the first crossing, and Brent's method
refines it.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import optimize

from ..inference._influence import normal_interval
from ._sensitivity import (
    _NULL,
    _check_estimator,
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
    parameter : {"pi_difference", "pi_ratio", "harmed_ratio"}, default="pi_difference"
    criterion : {"interval", "estimate"}, default="interval"
        ``"interval"``: where the confidence interval first covers the null effect (0, or 1
        on ratio scales); ``"estimate"``: where the estimate reaches it.
    level : float, default=0.95
    search : (float, float), optional
        Range of the parameter to search; defaults to ``±20`` outcome standard deviations for
        ``pi_difference``, ``[1/50, 50]`` for ``pi_ratio`` and ``[0, 0.999]`` for
        ``harmed_ratio``.

    Returns
    -------
    float
        The parameter value nearest the null value (on the log scale for ``pi_ratio``) at which
        the criterion is met, found by Brent's method on the no-refit formulas; ``0``/``1`` if
        it is met at the null already; NaN (with a warning) if not met inside ``search``.

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
    if parameter not in _NULL:
        raise ValueError(f"`parameter` must be one of {list(_NULL)}; got {parameter!r}.")
    if criterion not in ("interval", "estimate"):
        raise ValueError(f"`criterion` must be 'interval' or 'estimate'; got {criterion!r}.")
    data = estimator.training_data_
    null_effect = 0.0 if estimator.scale == "difference" else 1.0
    log_scale = estimator.scale != "difference"
    sign = np.sign(estimator.effect_ - null_effect)
    # Built once: the oriented predictions, and for pi_difference the affine path (_paths.py).
    path = sensitivity_path(estimator)

    def criterion_gap(effect, se):
        if criterion == "estimate":
            return sign * (effect - null_effect)
        low, high = normal_interval(effect, se, level, log_scale)
        return low - null_effect if sign > 0 else null_effect - high

    def distance(value):
        setting = {parameter: _check_value(parameter, value)}
        return criterion_gap(*_effect_and_error(estimator, setting, path)[:2])

    null = _NULL[parameter]
    if distance(null) <= 0:
        return null
    if search is None:
        spread = float(np.nanstd(data.outcome[data.survival == 1])) or 1.0
        search = {
            "pi_difference": (-20 * spread, 20 * spread),
            "pi_ratio": (1 / 50, 50.0),
            "harmed_ratio": (0.0, 0.999),
        }[parameter]
    found = []
    for end in search:
        if end == null:
            continue
        points = _path(null, end, parameter)
        if parameter == "pi_difference":
            # The whole coarse path at once; the first crossing brackets the root.
            effects, errors, _ = path.along_delta(points)
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
        warnings.warn(
            f"The {criterion} does not reach the null effect for {parameter} in {search}; "
            "returning NaN.",
            UserWarning,
            stacklevel=2,
        )
        return float("nan")
    if parameter == "pi_ratio":
        return float(min(found, key=lambda v: abs(np.log(v))))
    return float(min(found, key=lambda v: abs(v - null)))


def _path(null, end, parameter, n_points=40):
    """Points from the null value towards ``end`` (geometric for ratios), for bracketing."""
    if parameter == "pi_ratio":
        return np.exp(np.linspace(np.log(null), np.log(end), n_points + 1)[1:])
    return np.linspace(null, end, n_points + 1)[1:]
