"""Estimand formulas: always-survivor means and their influence values from nuisance predictions.

Every function here takes an :class:`Oriented` view of the nuisance predictions and returns the
two always-survivor means with per-row influence values. "Oriented" removes the monotonicity
direction from the formulas: the *mixed* arm is the one whose survivors mix always-survivors with
the stratum the treatment helps (the treated arm when treatment can only help survival), the
*pure* arm is the other one, whose survivors are all always-survivors.

An optional ``subset`` (a 0/1 row indicator) restricts the estimand to the always-survivors of a
subgroup without refitting: each estimating function is multiplied by the indicator while the
nuisance fits stay those of the whole sample. The influence values are then those of the whole
sample (zero outside the subgroup, up to nuisance terms), so they carry the randomness of the
subgroup's size as well as that of the shared nuisance fits.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import _coarsening

__all__ = [
    "Oriented",
    "orient",
    "MeanParts",
    "ratio",
    "unorient",
    "weighting_means",
    "regression_means",
    "robust_terms",
    "robust_means",
    "scale_effect",
]


@dataclass(frozen=True)
class Oriented:
    """Per-row arrays with the arms named by their role under monotonicity."""

    mixed: np.ndarray  # 1.0 for rows in the mixed arm
    pi: np.ndarray  # P(mixed arm | X)
    p_mixed: np.ndarray  # P(S=1 | mixed arm, X)
    p_pure: np.ndarray  # P(S=1 | pure arm, X): the always-survivor principal score
    m_mixed: np.ndarray | None
    m_pure: np.ndarray | None
    survival: np.ndarray
    outcome: np.ndarray  # 0 where survival == 0, so products stay finite
    weight: np.ndarray
    parametric: dict | None  # keys: "pi", "p_mixed", "p_pure", "m_mixed", "m_pure"
    increasing: bool
    # missing="at_random": inverse-probability-of-observation factors (estimands/_coarsening.py)
    coarsening: object = None

    # Monotone coarsening replaces each full-data indicator by the observed one over its
    # probability (docs/guide/derivations/missing-data.md): A -> A C / c_mixed for the survival
    # residuals and
    # A S -> A C S R / (c_mixed r_mixed) for the outcome terms. Without coarsening they are the
    # full-data indicators, so every formula is unchanged bit for bit.
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


def orient(data, nuisance, monotonicity):
    """Name the arms by role. ``monotonicity`` is ``"increasing"`` or ``"decreasing"``."""
    increasing = monotonicity == "increasing"
    mixed_arm, pure_arm = (1, 0) if increasing else (0, 1)
    pi = nuisance.treatment_probability
    outcome = nuisance.outcome
    parametric = None
    if nuisance.parametric is not None:
        source = nuisance.parametric
        parametric = {
            "p_mixed": source.get(("survival", mixed_arm)),
            "p_pure": source.get(("survival", pure_arm)),
            "m_mixed": source.get(("outcome", mixed_arm)),
            "m_pure": source.get(("outcome", pure_arm)),
        }
        if "treatment" in source:
            # A logistic model of 1 - T is the same fit with every residual negated.
            parametric["pi"] = source["treatment"] if increasing else source["treatment"].negated()
        parametric.update(_coarsening.parametric_view(source, mixed_arm, pure_arm))
    return Oriented(
        mixed=(data.treatment == mixed_arm).astype(float),
        pi=pi if increasing else 1.0 - pi,
        p_mixed=nuisance.survival[mixed_arm],
        p_pure=nuisance.survival[pure_arm],
        m_mixed=None if outcome is None else outcome[mixed_arm],
        m_pure=None if outcome is None else outcome[pure_arm],
        survival=data.survival.astype(float),
        outcome=np.where(data.survival == 1, np.nan_to_num(data.outcome), 0.0),
        weight=data.sample_weight,
        parametric=parametric,
        increasing=increasing,
        coarsening=_coarsening.coarsening(data, nuisance, mixed_arm, pure_arm),
    )


@dataclass(frozen=True)
class MeanParts:
    """Always-survivor means under each arm and their influence values."""

    mean_treated: float
    mean_control: float
    influence_treated: np.ndarray
    influence_control: np.ndarray


def ratio(numerator, denominator):
    """``numerator / denominator`` with 0 where the numerator is 0 (rows that carry no weight).

    A model may predict a probability of exactly 0 for rows outside the cell that the formula
    weights (tree ensembles do); those rows contribute nothing and must not turn into NaN.
    """
    out = np.zeros(np.broadcast(numerator, denominator).shape)
    np.divide(numerator, denominator, out=out, where=numerator != 0)
    return out


def unorient(o, mu_mixed, mu_pure, if_mixed, if_pure):
    if o.increasing:
        return MeanParts(mu_mixed, mu_pure, if_mixed, if_pure)
    return MeanParts(mu_pure, mu_mixed, if_pure, if_mixed)


def _indicator(o, subset):
    return np.ones_like(o.weight) if subset is None else np.asarray(subset, dtype=float)


def weighting_means(o, subset=None):
    """Normalized principal score weighting (Ding & Lu 2017, JRSSB), with M-estimation terms.

    Mixed-arm survivors get weight ``p_pure / (pi p_mixed)`` (their chance of being
    always-survivors over their chance of being observed); pure-arm survivors get ``1/(1-pi)``.
    Within a subgroup the weights are normalized over the subgroup's survivors.
    """
    Y = o.outcome
    g = _indicator(o, subset)
    # With missing data the observed survivors also carry 1 / (c r)
    # (docs/guide/derivations/missing-data.md).
    w_mixed = ratio(g * o.observed_mixed * o.p_pure, o.pi * o.p_mixed)
    normalizer = o.weighted_mean(w_mixed)
    mu_mixed = o.weighted_mean(w_mixed * Y) / normalizer
    f = w_mixed * (Y - mu_mixed)
    correction = o.corrections(
        {"pi": -ratio(f, o.pi), "p_mixed": -ratio(f, o.p_mixed), "p_pure": ratio(f, o.p_pure),
         **_coarsening.weight_derivatives(o, f, "mixed")}
    )  # fmt: skip
    if_mixed = (f + correction) / normalizer

    w_pure = ratio(g * o.observed_pure, 1 - o.pi)
    normalizer = o.weighted_mean(w_pure)
    mu_pure = o.weighted_mean(w_pure * Y) / normalizer
    f = w_pure * (Y - mu_pure)
    correction = o.corrections(
        {"pi": ratio(f, 1 - o.pi), **_coarsening.weight_derivatives(o, f, "pure")}
    )
    if_pure = (f + correction) / normalizer
    return unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def regression_means(o, subset=None):
    """Outcome regression: ``mu_t = E[p_pure m_t] / E[p_pure]`` (principal ignorability)."""
    g = _indicator(o, subset)
    always = g * o.p_pure
    normalizer = o.weighted_mean(always)
    result = []
    for key, m in (("m_mixed", o.m_mixed), ("m_pure", o.m_pure)):
        mu = o.weighted_mean(always * m) / normalizer
        f = always * (m - mu)
        correction = o.corrections({"p_pure": g * (m - mu), key: always})
        result.append((mu, (f + correction) / normalizer))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def robust_terms(o):
    """Efficient-influence-function terms of Jiang, Yang & Ding (2022, JRSSB), oriented.

    Returns ``(phi_e, phi_mixed, phi_pure)``; the means are ``mean(phi_t) / mean(phi_e)``.
    """
    S, Y = o.survival, o.outcome
    pure_residual = ratio(o.known_pure * (S - o.p_pure), 1 - o.pi)
    phi_e = pure_residual + o.p_pure
    phi_mixed = (
        pure_residual * o.m_mixed
        + ratio(o.p_pure * o.observed_mixed * (Y - o.m_mixed), o.pi * o.p_mixed)
        + o.p_pure * o.m_mixed
    )
    if o.coarsening is None:
        phi_pure = ratio((1 - o.mixed) * (S * Y - o.p_pure * o.m_pure), 1 - o.pi)
    else:
        # a0 (S R (Y - m0) / r0 + (S - p0) m0): each residual over its observation probability.
        phi_pure = ratio(o.observed_pure * (Y - o.m_pure), 1 - o.pi) + pure_residual * o.m_pure
    phi_pure = phi_pure + o.p_pure * o.m_pure
    return phi_e, phi_mixed, phi_pure


def robust_means(o, subset=None):
    """Multiply robust means; influence values ``(phi_t - mu_t phi_e) / mean(phi_e)``.

    No nuisance-estimation terms are added: the efficient influence function is orthogonal to
    the nuisance functions (Jiang, Yang & Ding 2022), so with cross-fitting, or with
    parametric models that are all correct, their estimation does not change the first-order
    variance.
    """
    phi_e, phi_mixed, phi_pure = robust_terms(o)
    if subset is not None:
        g = _indicator(o, subset)
        phi_e, phi_mixed, phi_pure = g * phi_e, g * phi_mixed, g * phi_pure
    share = o.weighted_mean(phi_e)
    mu_mixed = o.weighted_mean(phi_mixed) / share
    mu_pure = o.weighted_mean(phi_pure) / share
    if_mixed = (phi_mixed - mu_mixed * phi_e) / share
    if_pure = (phi_pure - mu_pure * phi_e) / share
    return unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


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
