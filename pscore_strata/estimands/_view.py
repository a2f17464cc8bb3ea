"""The oriented view of the nuisance predictions that every estimand formula reads.

"Oriented" removes the monotonicity direction from the formulas: the *mixed* arm is the one
whose intermediate-1 units mix always-survivors with the stratum the treatment helps (the
treated arm when treatment can only help survival), the *pure* arm is the other one, whose
intermediate-1 units are all always-survivors. The view also names the target stratum
(:class:`~._strata.Stratum`): its principal-score coefficients and its observed cell in each arm,
with the outcome model of each cell.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from . import _coarsening
from ._strata import ALWAYS, Stratum, stratum_role

__all__ = ["Oriented", "orient", "MeanParts", "ratio", "unorient", "scale_effect",
           "scale_factors"]


def ratio(numerator, denominator):
    """``numerator / denominator`` with 0 where the numerator is 0 (rows that carry no weight).

    A model may predict a probability of exactly 0 for rows outside the cell that the formula
    weights (tree ensembles do); those rows contribute nothing and must not turn into NaN.
    """
    out = np.zeros(np.broadcast(numerator, denominator).shape)
    np.divide(numerator, denominator, out=out, where=numerator != 0)
    return out


@dataclass(frozen=True)
class Oriented:
    """Per-row arrays with the arms named by their role under monotonicity."""

    mixed: np.ndarray  # 1.0 for rows in the mixed arm
    pi: np.ndarray  # P(mixed arm | X)
    p_mixed: np.ndarray  # P(S=1 | mixed arm, X)
    p_pure: np.ndarray  # P(S=1 | pure arm, X): the always-survivor principal score
    m_mixed: np.ndarray | None  # outcome model of the stratum's cell in the mixed arm
    m_pure: np.ndarray | None
    survival: np.ndarray
    outcome: np.ndarray  # 0 where the formulas do not use it, so products stay finite
    weight: np.ndarray
    parametric: dict | None  # keys: "pi", "p_mixed", "p_pure", "m_mixed", "m_pure", ...
    increasing: bool
    # missing="at_random": inverse-probability-of-observation factors (estimands/_coarsening.py)
    coarsening: object = None
    stratum: Stratum = ALWAYS  # the target stratum's role, coefficients and cells

    # Monotone coarsening replaces each full-data indicator by the observed one over its
    # probability (docs/guide/derivations/missing-data.md): A -> A C / c_mixed for the survival
    # residuals and A S -> A C S R / (c_mixed r_mixed) for the outcome terms. Without
    # coarsening they are the full-data indicators, so every formula is unchanged bit for bit.
    @property
    def known_mixed(self):
        return self.mixed if self.coarsening is None else self.coarsening.known_mixed

    @property
    def known_pure(self):
        return 1 - self.mixed if self.coarsening is None else self.coarsening.known_pure

    @property
    def observed_mixed(self):
        if self.coarsening is None:
            return self.mixed * self.survival
        return self.coarsening.observed_mixed

    @property
    def observed_pure(self):
        if self.coarsening is None:
            return (1 - self.mixed) * self.survival
        return self.coarsening.observed_pure

    # -- the target stratum's cells ------------------------------------------------------------
    def cell(self, role):
        """Indicator of the stratum's observed cell in the arm of ``role`` (over its
        observation probability under missing data)."""
        s = self.stratum.s_mixed if role == "mixed" else self.stratum.s_pure
        if s == 1:
            return self.observed_mixed if role == "mixed" else self.observed_pure
        if self.coarsening is not None:
            return self.coarsening.observed(role, 0)
        arm = self.mixed if role == "mixed" else 1 - self.mixed
        return arm * (1 - self.survival)

    def arm_probability(self, role):
        return self.pi if role == "mixed" else 1 - self.pi

    def own_probability(self, role):
        """The arm's intermediate model ``P(S = 1 | arm, X)``."""
        return self.p_mixed if role == "mixed" else self.p_pure

    def cell_probability(self, role):
        """``P(arm | X) P(S = s | arm, X)`` of the stratum's cell in that arm."""
        s = self.stratum.s_mixed if role == "mixed" else self.stratum.s_pure
        p = self.own_probability(role)
        return self.arm_probability(role) * (p if s == 1 else 1 - p)

    def cell_residual(self, role):
        """``1{cell} (Y - m) / (P(arm) q)`` of the stratum's cell in ``role``'s arm: the
        parameter-free factor of the multiply robust estimator's outcome term (computed once
        per view, as the survival residuals below)."""
        cache = self.__dict__.setdefault("_cell_residuals", {})
        if role not in cache:
            m = self.m_mixed if role == "mixed" else self.m_pure
            cache[role] = ratio(self.cell(role) * (self.outcome - m), self.cell_probability(role))
        return cache[role]

    # The survival residuals of the efficient influence function, parameter-free (computed once
    # per view: a sensitivity grid evaluates many settings on one view).
    @cached_property
    def residual_mixed(self):
        return ratio(self.known_mixed * (self.survival - self.p_mixed), self.pi)

    @cached_property
    def residual_pure(self):
        return ratio(self.known_pure * (self.survival - self.p_pure), 1 - self.pi)

    def weighted_mean(self, values):
        # A numpy scalar, not a float: a zero normalizer (no always-survivor weight left) then
        # gives inf/NaN, which the estimators turn into a clear error, not a ZeroDivisionError.
        return np.float64(np.sum(self.weight * values) / np.sum(self.weight))

    def corrections(self, derivatives):
        """Sum of the nuisance-estimation terms for the given d f / d prediction arrays."""
        if self.parametric is None:
            return 0.0
        total = 0.0
        for name, derivative in derivatives.items():
            fit = self.parametric.get(name)
            if fit is not None:
                total = total + fit.correction(derivative, self.weight)
        return total


def _outcome_key(arm, s):
    return arm if s == 1 else (arm, 0)


def _outcome_piece(key):
    return ("outcome", key) if not isinstance(key, tuple) else ("outcome", key[0], 0)


def orient(data, nuisance, monotonicity, stratum="always_survivor"):
    """Name the arms by role. ``monotonicity`` is ``"increasing"`` or ``"decreasing"``;
    ``stratum`` a canonical stratum name (:func:`~._strata.resolve_stratum`)."""
    increasing = monotonicity == "increasing"
    mixed_arm, pure_arm = (1, 0) if increasing else (0, 1)
    spec = stratum_role(stratum, monotonicity)
    keys = (_outcome_key(mixed_arm, spec.s_mixed), _outcome_key(pure_arm, spec.s_pure))
    pi = nuisance.treatment_probability
    outcome = nuisance.outcome
    parametric = None
    if nuisance.parametric is not None:
        source = nuisance.parametric
        parametric = {
            "p_mixed": source.get(("survival", mixed_arm)),
            "p_pure": source.get(("survival", pure_arm)),
            "m_mixed": source.get(_outcome_piece(keys[0])),
            "m_pure": source.get(_outcome_piece(keys[1])),
        }
        if "treatment" in source:
            # A logistic model of 1 - T is the same fit with every residual negated.
            parametric["pi"] = source["treatment"] if increasing else source["treatment"].negated()
        parametric.update(_coarsening.parametric_view(source, mixed_arm, pure_arm))
    if spec is ALWAYS:
        # Only survivors' outcomes enter (truncation by death: NaN elsewhere).
        y = np.where(data.survival == 1, np.nan_to_num(data.outcome), 0.0)
    else:
        y = np.nan_to_num(data.outcome)
    return Oriented(
        mixed=(data.treatment == mixed_arm).astype(float),
        pi=pi if increasing else 1.0 - pi,
        p_mixed=nuisance.survival[mixed_arm],
        p_pure=nuisance.survival[pure_arm],
        m_mixed=None if outcome is None else outcome[keys[0]],
        m_pure=None if outcome is None else outcome[keys[1]],
        survival=data.survival.astype(float),
        outcome=y,
        weight=data.sample_weight,
        parametric=parametric,
        increasing=increasing,
        coarsening=_coarsening.coarsening(data, nuisance, mixed_arm, pure_arm),
        stratum=spec,
    )


@dataclass(frozen=True)
class MeanParts:
    """The target stratum's means under each arm and their influence values."""

    mean_treated: float
    mean_control: float
    influence_treated: np.ndarray
    influence_control: np.ndarray


def unorient(o, mu_mixed, mu_pure, if_mixed, if_pure):
    """The means and influence values by role, returned by arm (treated, control)."""
    if o.increasing:
        return MeanParts(mu_mixed, mu_pure, if_mixed, if_pure)
    return MeanParts(mu_pure, mu_mixed, if_pure, if_mixed)


def scale_factors(mu1, mu0, scale):
    """``(effect, k1, k0)``: the effect on ``scale`` from the two means and its delta-method
    factors, ``d effect = k1 d mu1 - k0 d mu0`` (arrays or scalars alike)."""
    if scale == "difference":
        return mu1 - mu0, 1.0, 1.0
    if scale == "ratio":
        effect = mu1 / mu0
        return effect, effect / mu1, effect / mu0
    effect = (mu1 / (1 - mu1)) / (mu0 / (1 - mu0))
    return effect, effect / (mu1 * (1 - mu1)), effect / (mu0 * (1 - mu0))


def scale_effect(parts, scale):
    """Effect on the requested scale with delta-method influence values."""
    mu1, mu0 = parts.mean_treated, parts.mean_control
    if1, if0 = parts.influence_treated, parts.influence_control
    if scale == "difference":
        return mu1 - mu0, if1 - if0
    if scale == "ratio":
        ratio = mu1 / mu0
        return ratio, ratio * (if1 / mu1 - if0 / mu0)
    odds_ratio = (mu1 / (1 - mu1)) / (mu0 / (1 - mu0))
    return odds_ratio, odds_ratio * (if1 / (mu1 * (1 - mu1)) - if0 / (mu0 * (1 - mu0)))
