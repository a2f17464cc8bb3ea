"""Estimand formulas for any principal stratum (docs/guide/derivations/strata.md).

The oriented view of :mod:`._formulas` names the arms by role: the *mixed* arm is the one
where the treatment changes the intermediate of some units (the treated arm under increasing
monotonicity), the *pure* arm the other one. In that view there are three strata whatever the
direction: the always stratum (intermediate 1 under both arms), the changed stratum (1 under the
mixed arm only: protected under "increasing", harmed under "decreasing") and the doomed (0 under
both). Each has a principal score linear in the two intermediate models,
``e = a p_mixed + b p_pure + c``, and sits in one observed cell per arm; every formula here is
written once over those coefficients and cells:

- weighting: the cell ``(arm, s)`` reweighted by ``e / (P(arm|X) P(S=s|arm,X))``, normalized;
- regression: ``E[e m_{arm,s}] / E[e]``;
- multiply robust: the efficient-influence-function terms of Jiang, Yang & Ding (2022, JRSSB),
  ``phi = e m + a A (S - p_mixed) m / pi + b (1-A)(S - p_pure) m / (1-pi)
  + e 1{cell} (Y - m) / (P(arm|X) P(S=s|arm,X))`` over the same terms with ``m = 1`` and no
  last term.

With the always stratum these are the SACE formulas of :mod:`._formulas`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..estimands._formulas import MeanParts, Oriented
from ..estimands._formulas import ratio as _ratio

__all__ = [
    "Stratum",
    "STRATA",
    "STRATUM_ALIASES",
    "resolve_stratum",
    "stratum_names",
    "StratumView",
    "stratum_view",
    "stratum_weighting_means",
    "stratum_regression_means",
    "stratum_robust_means",
    "needs_zero_cells",
    "arm_cells",
    "stratum_words",
    "ignorability_statement",
    "require_always_survivor",
]


@dataclass(frozen=True)
class Stratum:
    """A principal stratum in the oriented view."""

    role: str  # "always", "changed" or "doomed"
    mixed_coefficient: float  # a in e = a p_mixed + b p_pure + c
    pure_coefficient: float  # b
    constant: float  # c
    s_mixed: int  # the stratum's intermediate under the mixed arm
    s_pure: int  # ... and under the pure arm

    def score(self, p_mixed, p_pure):
        e = self.constant + self.mixed_coefficient * p_mixed
        return e + self.pure_coefficient * p_pure


_ROLES = {
    "always": Stratum("always", 0.0, 1.0, 0.0, 1, 1),
    "changed": Stratum("changed", 1.0, -1.0, 0.0, 1, 0),
    "doomed": Stratum("doomed", -1.0, 0.0, 1.0, 0, 0),
}

# The stratum names by monotonicity direction, and their role in the oriented view.
STRATA = {
    "increasing": {"always_survivor": "always", "protected": "changed", "doomed": "doomed"},
    "decreasing": {"always_survivor": "always", "harmed": "changed", "doomed": "doomed"},
}
# Noncompliance names (assignment T, treatment received S; no defiers).
STRATUM_ALIASES = {"always_taker": "always_survivor", "complier": "protected",
                   "never_taker": "doomed"}  # fmt: skip


def stratum_names():
    """Every name ``stratum=`` accepts."""
    return ("always_survivor", "protected", "doomed", "harmed", *STRATUM_ALIASES)


def resolve_stratum(stratum, monotonicity):
    """The canonical stratum name for ``stratum=`` under ``monotonicity``, or a clear error."""
    if not isinstance(stratum, str) or stratum not in stratum_names():
        raise ValueError(f"`stratum` must be one of {list(stratum_names())}; got {stratum!r}.")
    if stratum in STRATUM_ALIASES:
        if monotonicity != "increasing":
            raise ValueError(
                f"`stratum`={stratum!r} is a noncompliance name, defined under monotonicity="
                "'increasing' (no defiers); with monotonicity='decreasing' use "
                "'always_survivor', 'harmed' or 'doomed'."
            )
        return STRATUM_ALIASES[stratum]
    if stratum not in STRATA[monotonicity]:
        needed = "decreasing" if stratum == "harmed" else "increasing"
        raise ValueError(
            f"`stratum`={stratum!r} exists only under monotonicity='{needed}'; with "
            f"monotonicity={monotonicity!r} the strata are {list(STRATA[monotonicity])}."
        )
    return stratum


def needs_zero_cells(stratum):
    """Whether the stratum's formulas use units whose intermediate is 0 (their outcomes)."""
    return stratum != "always_survivor"


def arm_cells(stratum, monotonicity):
    """``{1: s_g(1), 0: s_g(0)}``: the stratum's intermediate under each arm (its cells)."""
    spec = _ROLES[STRATA[monotonicity][stratum]]
    if monotonicity == "increasing":
        return {1: spec.s_mixed, 0: spec.s_pure}
    return {1: spec.s_pure, 0: spec.s_mixed}


_WORDS = {"always_survivor": "always-survivor", "protected": "protected", "harmed": "harmed",
          "doomed": "doomed"}  # fmt: skip


def stratum_words(stratum):
    """The stratum's name in text (``"always-survivor"``, ``"protected"``, ...)."""
    return _WORDS[stratum]


# Principal ignorability in mean form, one statement per observed cell that mixes two strata
# (docs/guide/derivations/strata.md section 3); keyed by (monotonicity, arm of the cell).
_IGNORABILITY = {
    ("increasing", 1): "E[Y(1) | always-survivor, X] = E[Y(1) | protected, X]",
    ("increasing", 0): "E[Y(0) | protected, X] = E[Y(0) | doomed, X]",
    ("decreasing", 0): "E[Y(0) | always-survivor, X] = E[Y(0) | harmed, X]",
    ("decreasing", 1): "E[Y(1) | harmed, X] = E[Y(1) | doomed, X]",
}


def ignorability_statement(stratum, monotonicity):
    """The principal ignorability the stratum's effect rests on, in words."""
    cells = arm_cells(stratum, monotonicity)
    mixed_cells = {("increasing", 1, 1), ("increasing", 0, 0), ("decreasing", 0, 1),
                   ("decreasing", 1, 0)}  # fmt: skip
    needed = [_IGNORABILITY[(monotonicity, arm)] for arm in (1, 0)
              if (monotonicity, arm, cells[arm]) in mixed_cells]  # fmt: skip
    return (
        f"The {stratum_words(stratum)} effect assumes principal ignorability (mean form): "
        + " and ".join(needed)
        + ", with monotonicity "
        + ("S(1) >= S(0)" if monotonicity == "increasing" else "S(1) <= S(0)")
        + ". These assumptions cannot be checked from the data."
    )


def require_always_survivor(estimator, what):
    """Refuse ``what`` for an estimator fitted for another stratum than the always-survivors."""
    stratum = getattr(estimator, "stratum_", "always_survivor")
    if stratum != "always_survivor":
        raise ValueError(
            f"{what}: not available yet for an estimator fitted with `stratum`="
            f"{getattr(estimator, 'stratum', stratum)!r} (only for the always-survivor stratum). "
            "Refit with stratum='always_survivor', or report the stratum's mean effect without "
            "it."
        )


@dataclass(frozen=True)
class StratumView:
    """Per-row arrays for one stratum's formulas, arms named by role."""

    stratum: Stratum
    mixed: np.ndarray  # 1.0 for rows in the mixed arm
    pi: np.ndarray  # P(mixed arm | X)
    p_mixed: np.ndarray
    p_pure: np.ndarray
    m_mixed: np.ndarray | None  # outcome regression of the stratum's cell in the mixed arm
    m_pure: np.ndarray | None
    survival: np.ndarray
    outcome: np.ndarray  # 0 where not used, so products stay finite
    weight: np.ndarray
    parametric: dict | None  # keys "pi", "p_mixed", "p_pure", "m_mixed", "m_pure"
    increasing: bool

    coarsening = None  # missing="at_random" is not available for these strata

    @property
    def score(self):
        return self.stratum.score(self.p_mixed, self.p_pure)

    @property
    def observed_mixed(self):
        return self.cell("mixed")

    @property
    def observed_pure(self):
        return self.cell("pure")

    def cell_weights(self):
        """Weights of the stratum's reconstruction from each arm's cell: ``e / (P(arm) q)``."""
        return {role: self.score * _ratio(self.cell(role), self.cell_probability(role))
                for role in ("mixed", "pure")}  # fmt: skip

    def cell(self, role):
        s = self.stratum.s_mixed if role == "mixed" else self.stratum.s_pure
        arm = self.mixed if role == "mixed" else 1 - self.mixed
        return arm * (self.survival if s == 1 else 1 - self.survival)

    def cell_probability(self, role):
        """``P(arm | X) P(S = s | arm, X)`` of the stratum's cell in that arm."""
        if role == "mixed":
            p, arm = self.p_mixed, self.pi
            s = self.stratum.s_mixed
        else:
            p, arm = self.p_pure, 1 - self.pi
            s = self.stratum.s_pure
        return arm * (p if s == 1 else 1 - p)

    # The same normalized mean and nuisance-estimation terms as the SACE's oriented view.
    weighted_mean = Oriented.weighted_mean
    corrections = Oriented.corrections


def stratum_view(data, nuisance, monotonicity, stratum):
    """The :class:`StratumView` of ``stratum`` (a canonical name) for these data and fits."""
    increasing = monotonicity == "increasing"
    mixed_arm, pure_arm = (1, 0) if increasing else (0, 1)
    spec = _ROLES[STRATA[monotonicity][stratum]]
    outcome = nuisance.outcome

    def cell_key(arm, s):
        return arm if s == 1 else (arm, 0)

    m_keys = (cell_key(mixed_arm, spec.s_mixed), cell_key(pure_arm, spec.s_pure))
    parametric = None
    if nuisance.parametric is not None:
        source = nuisance.parametric
        parametric = {
            "p_mixed": source.get(("survival", mixed_arm)),
            "p_pure": source.get(("survival", pure_arm)),
            "m_mixed": source.get(_outcome_piece(m_keys[0])),
            "m_pure": source.get(_outcome_piece(m_keys[1])),
        }
        if "treatment" in source:
            parametric["pi"] = source["treatment"] if increasing else source["treatment"].negated()
    pi = nuisance.treatment_probability
    survival = data.survival.astype(float)
    return StratumView(
        stratum=spec,
        mixed=(data.treatment == mixed_arm).astype(float),
        pi=pi if increasing else 1.0 - pi,
        p_mixed=nuisance.survival[mixed_arm],
        p_pure=nuisance.survival[pure_arm],
        m_mixed=None if outcome is None else outcome[m_keys[0]],
        m_pure=None if outcome is None else outcome[m_keys[1]],
        survival=survival,
        outcome=np.nan_to_num(data.outcome),
        weight=data.sample_weight,
        parametric=parametric,
        increasing=increasing,
    )


def _outcome_piece(key):
    return ("outcome", key) if not isinstance(key, tuple) else ("outcome", key[0], 0)


def _indicator(v, subset):
    return np.ones_like(v.weight) if subset is None else np.asarray(subset, dtype=float)


def _unorient(v, mu_mixed, mu_pure, if_mixed, if_pure):
    if v.increasing:
        return MeanParts(mu_mixed, mu_pure, if_mixed, if_pure)
    return MeanParts(mu_pure, mu_mixed, if_pure, if_mixed)


def stratum_weighting_means(v, subset=None):
    """Normalized principal score weighting of each arm's cell (derivation: section 4).

    M-estimation terms: with ``f = w (Y - mu)`` and ``w = e 1{cell} / (P(arm) q)``,
    ``df/de = 1{cell} (Y - mu) / (P(arm) q)`` enters through ``e``'s coefficients,
    ``df/dq = -f/q`` through the arm's own intermediate model, ``df/dP(arm) = -f/P(arm)``.
    """
    g = _indicator(v, subset)
    Y, spec, score = v.outcome, v.stratum, v.score
    result = []
    for role in ("mixed", "pure"):
        denominator = v.cell_probability(role)
        base = _ratio(g * v.cell(role), denominator)  # 1{cell} / (P(arm) q)
        w = score * base
        normalizer = v.weighted_mean(w)
        mu = v.weighted_mean(w * Y) / normalizer
        f = w * (Y - mu)
        d_score = base * (Y - mu)
        s, p = (spec.s_mixed, v.p_mixed) if role == "mixed" else (spec.s_pure, v.p_pure)
        own = -_ratio(f, p) if s == 1 else _ratio(f, 1 - p)
        derivatives = {
            "pi": -_ratio(f, v.pi) if role == "mixed" else _ratio(f, 1 - v.pi),
            "p_mixed": spec.mixed_coefficient * d_score + (own if role == "mixed" else 0.0),
            "p_pure": spec.pure_coefficient * d_score + (own if role == "pure" else 0.0),
        }
        result.append((mu, (f + v.corrections(derivatives)) / normalizer))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return _unorient(v, mu_mixed, mu_pure, if_mixed, if_pure)


def stratum_regression_means(v, subset=None):
    """Outcome regression ``mu_t = E[e m_{t,s}] / E[e]`` (derivation: section 5)."""
    g = _indicator(v, subset)
    spec = v.stratum
    score = g * v.score
    normalizer = v.weighted_mean(score)
    result = []
    for key, m in (("m_mixed", v.m_mixed), ("m_pure", v.m_pure)):
        mu = v.weighted_mean(score * m) / normalizer
        f = score * (m - mu)
        correction = v.corrections({
            "p_mixed": spec.mixed_coefficient * g * (m - mu),
            "p_pure": spec.pure_coefficient * g * (m - mu),
            key: score,
        })  # fmt: skip
        result.append((mu, (f + correction) / normalizer))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return _unorient(v, mu_mixed, mu_pure, if_mixed, if_pure)


def stratum_robust_terms(v):
    """``(phi_e, phi_mixed, phi_pure)`` of docs/guide/derivations/strata.md section 6."""
    spec, S, Y = v.stratum, v.survival, v.outcome
    score = v.score
    residual = (spec.mixed_coefficient * _ratio(v.mixed * (S - v.p_mixed), v.pi)
                + spec.pure_coefficient * _ratio((1 - v.mixed) * (S - v.p_pure), 1 - v.pi))
    phi_e = score + residual
    terms = []
    for role, m in (("mixed", v.m_mixed), ("pure", v.m_pure)):
        observed = _ratio(v.cell(role) * (Y - m), v.cell_probability(role))
        terms.append(score * m + residual * m + score * observed)
    return phi_e, terms[0], terms[1]


def stratum_robust_means(v, subset=None):
    """Multiply robust means; influence values ``(phi_t - mu_t phi_e) / mean(phi_e)``.

    No nuisance terms: the efficient influence function is orthogonal to the nuisance
    functions (Jiang, Yang & Ding 2022).
    """
    phi_e, phi_mixed, phi_pure = stratum_robust_terms(v)
    if subset is not None:
        g = _indicator(v, subset)
        phi_e, phi_mixed, phi_pure = g * phi_e, g * phi_mixed, g * phi_pure
    share = v.weighted_mean(phi_e)
    mu_mixed = v.weighted_mean(phi_mixed) / share
    mu_pure = v.weighted_mean(phi_pure) / share
    return _unorient(v, mu_mixed, mu_pure, (phi_mixed - mu_mixed * phi_e) / share,
                     (phi_pure - mu_pure * phi_e) / share)  # fmt: skip
