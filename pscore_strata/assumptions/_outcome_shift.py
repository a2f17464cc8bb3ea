"""Sensitivity to outcomes missing not at random: the delta adjustment, without refitting.

Under ``missing="at_random"`` a non-responding survivor's outcome has the responders' mean given
X and arm. The delta adjustment of common practice in trials departs from that by a chosen
``outcome_shift`` ``d_t``: non-responders' mean is ``m_t(X) + d_t``, so the mean of all known
survivors given X is ``m_t(X) + d_t (1 - r_t(X))`` (the response model ``r_t`` is unaffected:
it is a model of who responds, which the data identify). Every estimator is linear in the
survivors' outcomes, so the shifted always-survivor mean is the estimator applied to
``Y + d_t (1 - r_t(X))`` (responders) and ``m_t + d_t (1 - r_t)`` (outcome models), plus, in the
influence values, the estimation error of ``r_t`` that the shift now carries
(docs/guide/derivations/missing-data.md, section 4).
"""

from __future__ import annotations

import itertools
import numbers
from dataclasses import replace

import numpy as np
import pandas as pd

from ..estimands._formulas import robust_terms
from ..estimands._methods import method_of
from ..estimands._view import MeanParts, orient, ratio, scale_effect, unorient
from ..estimators._repeats import median_aggregate
from ..estimators._summary import CAUTIONS
from ..inference._standard_errors import estimator_dof, influence_std_error, normal_interval

__all__ = ["outcome_shift_grid", "shifted_effect"]


def _shifted_view(o, shift_mixed, shift_pure):
    co = o.coarsening
    gap_mixed, gap_pure = 1 - co.r_mixed, 1 - co.r_pure
    outcome_shift = o.mixed * shift_mixed * gap_mixed + (1 - o.mixed) * shift_pure * gap_pure
    return replace(
        o,
        outcome=o.outcome + outcome_shift * co.responded,
        m_mixed=None if o.m_mixed is None else o.m_mixed + shift_mixed * gap_mixed,
        m_pure=None if o.m_pure is None else o.m_pure + shift_pure * gap_pure,
    )


def _response_terms(method, o, shift_mixed, shift_pure):
    """Influence terms of the response models' estimation that the shift adds, by role."""
    co = o.coarsening
    if method.name == "robust":
        # Efficient influence function of E[p_pure (1 - r_t)] adds -p_pure times the response
        # residual among the arm's known survivors over their probability (Hahn 1998).
        phi_e = robust_terms(o)[0]
        share = o.weighted_mean(phi_e)
        known_survivor = co.known * o.survival
        mixed = ratio(
            o.p_pure * o.mixed * known_survivor * (co.responded - co.r_mixed),
            o.pi * co.c_mixed * o.p_mixed,
        )
        pure = ratio(
            (1 - o.mixed) * known_survivor * (co.responded - co.r_pure),
            (1 - o.pi) * co.c_pure,
        )
        return -shift_mixed * mixed / share, -shift_pure * pure / share
    if o.parametric is None:
        return 0.0, 0.0
    if method.name == "weighting":
        weights = (
            ratio(co.observed_mixed * o.p_pure, o.pi * o.p_mixed),
            ratio(co.observed_pure, 1 - o.pi),
        )
    else:
        weights = (o.p_pure, o.p_pure)
    terms = []
    for key, shift, w in zip(("r_mixed", "r_pure"), (shift_mixed, shift_pure), weights,
                             strict=True):  # fmt: skip
        terms.append(o.corrections({key: -shift * w}) / o.weighted_mean(w))
    return tuple(terms)


def shifted_effect(estimator, nuisance, shift_treated, shift_control):
    """Effect and influence values with non-responders' means shifted by the given amounts."""
    method = method_of(estimator)
    data = estimator.training_data_
    o = orient(data, nuisance, estimator.monotonicity)
    if o.coarsening is None:
        parts = method.means(o)
    else:
        shift_mixed, shift_pure = (
            (shift_treated, shift_control) if o.increasing else (shift_control, shift_treated)
        )
        shifted = _shifted_view(o, shift_mixed, shift_pure)
        with np.errstate(divide="ignore", invalid="ignore"):
            parts = method.means(shifted)
            extra_mixed, extra_pure = _response_terms(method, shifted, shift_mixed, shift_pure)
        extra = unorient(o, 0.0, 0.0, extra_mixed, extra_pure)
        parts = MeanParts(
            parts.mean_treated,
            parts.mean_control,
            parts.influence_treated + extra.influence_treated,
            parts.influence_control + extra.influence_control,
        )
    return scale_effect(parts, estimator.scale)


def _check_shift(value):
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real):
        raise TypeError(f"`outcome_shift` values must be real numbers; got {value!r}.")
    if not np.isfinite(value):
        raise ValueError(f"`outcome_shift` values must be finite; got {value}.")
    return float(value)


def _values(values):
    values = np.atleast_1d(np.asarray(values, dtype=object))
    if values.ndim != 1 or values.size == 0:
        raise ValueError("`outcome_shift` must be a number or a non-empty 1-d list of numbers.")
    return [_check_shift(v) for v in values]


def _axes(outcome_shift):
    if isinstance(outcome_shift, dict):
        if set(outcome_shift) != {"treated", "control"}:
            raise ValueError(
                "`outcome_shift` as a dict sets each arm: give exactly the keys 'treated' and "
                f"'control'; got {sorted(map(str, outcome_shift))}."
            )
        treated, control = _values(outcome_shift["treated"]), _values(outcome_shift["control"])
        return [({"outcome_shift_treated": a, "outcome_shift_control": b}, a, b)
                for a, b in itertools.product(treated, control)]  # fmt: skip
    return [({"outcome_shift": v}, v, v) for v in _values(outcome_shift)]


def outcome_shift_grid(estimator, outcome_shift, level):
    """The rows of :func:`sensitivity_grid` for ``outcome_shift`` (see its docstring)."""
    data = estimator.training_data_
    if data.outcome_observed is None:
        raise ValueError(
            "`outcome_shift` concerns survivors whose outcome is missing, but the estimator was "
            "fitted on data without missing outcomes (or without missing=\"at_random\")."
        )
    log_scale = estimator.scale != "difference"
    rows = []
    for columns, shift_treated, shift_control in _axes(outcome_shift):
        effects, errors = [], []
        for nuisance in getattr(estimator, "_repeat_fits", [estimator.nuisance_]):
            effect, influence = shifted_effect(estimator, nuisance, shift_treated, shift_control)
            effects.append(float(effect))
            errors.append(influence_std_error(influence, data.sample_weight, data.groups))
        effect, se = median_aggregate(effects, errors)
        low, high = normal_interval(effect, se, level, log_scale, estimator_dof(estimator))
        rows.append({**columns, "effect": float(effect), "std_error": float(se), "ci_low": low,
                     "ci_high": high, "n_rows_clipped": 0})  # fmt: skip
    table = pd.DataFrame(rows)
    table.attrs["notes"] = [
        "outcome_shift: the mean outcome of survivors without an observed outcome minus that of "
        "responders with the same covariates and arm (0 = missing at random). It cannot be "
        "estimated from the data: read the grid as how far non-responders would have to differ "
        "to change the conclusion.",
        CAUTIONS,
    ]
    return table
