"""How a result says what it estimates: a point estimate of the effect, or bounds on it.

Every effect estimator of the package, :class:`~pscore_strata.TrimmingBounds` and
:class:`~pscore_strata.BootstrapResult` carry ``identification``: ``"point"`` when the
assumptions identify the effect itself (``effect_`` / ``estimate``: one number), ``"bounds"``
when they identify only an interval that contains it (``lower_`` and ``upper_``). Code that
treats the two differently reads this attribute, never which other attributes exist.
"""

from __future__ import annotations

__all__ = ["POINT", "BOUNDS", "identification_of"]

POINT = "point"
BOUNDS = "bounds"


def identification_of(result):
    """``"point"``, ``"bounds"`` or ``None`` (neither) for a fitted estimator or a result.

    Reads ``identification``. An estimator from outside the package may not declare it; it is
    then read off the attribute contract that :func:`~pscore_strata.bootstrap` and
    :func:`~pscore_strata.simulation.run_study` document: ``lower_`` and ``upper_`` for bounds
    (also beside an ``effect_``: declare ``identification = "point"`` to say otherwise),
    otherwise ``effect_`` for a point estimate.

    Parameters
    ----------
    result : object
        A fitted estimator, bounds or bootstrap result.

    Returns
    -------
    str or None
    """
    declared = getattr(result, "identification", None)
    if declared is not None:
        if declared not in (POINT, BOUNDS):
            raise ValueError(
                f"{type(result).__name__}.identification must be {POINT!r} or {BOUNDS!r}; "
                f"got {declared!r}."
            )
        return declared
    attributes = set(dir(result))
    if {"lower_", "upper_"} <= attributes:
        return BOUNDS
    if "effect_" in attributes:
        return POINT
    return None
