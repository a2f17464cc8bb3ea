"""The estimators' formulas with ``Y -> 1{Y <= v}``, at every grid value at once.

Each ``*_grid`` function is the formula of the same name in
:mod:`pscore_strata.estimands._formulas`, line for line, with the outcome (and, for the
outcome-model estimators, the conditional CDF predictions) replaced by
:class:`~._expansion.Expansion` objects over a grid of values, so one pass over the rows serves
every value (cost O(n x bases), not O(n x values)). The formula layer stays the definition:
:func:`pscore_strata.distributions._paths.cdf_path` evaluates the layer's own formula at one
grid value on every call and refuses a mismatch, and ``tests/test_distribution_reference.py``
checks these functions against the per-value path at every grid point to 1e-8.

Nuisance-estimation terms: a GLM fit's term ``mask r_i Xd_i . H^-1 mean_w(d * slope * Xd)`` is
linear in the derivative ``d``, so for an expanded ``d`` its gradient is a small
``(parameters x values)`` matrix (:meth:`Expansion.cross`) and the term one more block.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..estimands._setting import Scores
from ..estimands._strata import ALWAYS
from ._expansion import Expansion

__all__ = ["GridParts", "weighting_grid", "regression_grid", "robust_grid"]


@dataclass
class GridParts:
    """Always-survivor CDFs at the grid values and their influence values (expanded)."""

    mean_treated: np.ndarray
    mean_control: np.ndarray
    influence_treated: Expansion | None
    influence_control: Expansion | None


def _reciprocal(x):
    """``1 / x`` with 0 where ``x`` is 0 (the formulas' ``_ratio`` on rows without weight)."""
    x = np.asarray(x, dtype=float)
    out = np.zeros(x.shape)
    np.divide(1.0, x, out=out, where=x != 0)
    return out


def _fit_factors(fit, weights, ones):
    """``(rights, lefts, h_inverse)`` with ``correction(d) = sum_l f_l (B_l @ direction_l)``,
    ``direction = h_inverse @ [B_r' (f_r d)]_r`` (the two fit classes' ``correction``)."""
    total = weights.sum()
    if hasattr(fit, "strata"):  # StratumScoreFit: one block of parameters per free stratum
        e, design = fit.strata, fit.design
        p = e[:, list(fit.members)].sum(axis=1)
        free = range(fit.residual.shape[1])
        rights = [(weights * e[:, j] * ((j in fit.members) - p) / total, design) for j in free]
        lefts = [(fit.residual[:, j], design) for j in free]
        return rights, lefts, fit.h_inverse
    factor = weights * fit.slope / total
    row = fit.mask * fit.residual
    bases = [ones] if fit.design is None else [ones, fit.design]
    return [(factor, B) for B in bases], [(row, B) for B in bases], fit.h_inverse


def _correction_blocks(fit, derivative, weights):
    rights, lefts, h_inverse = _fit_factors(fit, weights, derivative.grid.ones)
    gradient = np.vstack([derivative.cross(np.broadcast_to(f, weights.shape), B)
                          for f, B in rights])  # fmt: skip
    direction = h_inverse @ gradient
    blocks, start = [], 0
    for f, B in lefts:
        blocks.append((f, B, direction[start : start + B.shape[1]]))
        start += B.shape[1]
    return blocks


def _corrected(o, expansion, derivatives):
    """``expansion`` plus ``o.corrections``: ``derivatives`` maps a nuisance name to
    ``(per-row factor, expanded array)``, the derivative being their product."""
    if o.parametric is None:
        return expansion
    blocks = []
    for name, (factor, base) in derivatives.items():
        fit = o.parametric.get(name)
        if fit is not None:
            blocks += _correction_blocks(fit, base.scaled(factor), o.weight)
    return Expansion(expansion.grid, expansion.D, expansion.blocks + blocks, expansion.index)


def _weighted_mean(o, expansion):
    return expansion.weighted_sum(o.weight) / np.sum(o.weight)


def _unorient(o, mu_mixed, mu_pure, if_mixed, if_pure):
    if o.increasing:
        return GridParts(mu_mixed, mu_pure, if_mixed, if_pure)
    return GridParts(mu_pure, mu_mixed, if_pure, if_mixed)


def _coarsening_factors(o, role, s=1):
    """Per-row factors of the coarsening's ``weight_derivatives``: an estimating function
    proportional to ``1 / (c r)`` has derivatives ``-f / c`` and ``-f / r`` (``r`` the response
    model of the cell's intermediate ``s``)."""
    co = o.coarsening
    if co is None:
        return {}
    c = co.c_mixed if role == "mixed" else co.c_pure
    if s == 1:
        r, key = (co.r_mixed if role == "mixed" else co.r_pure), f"r_{role}"
    else:
        r, key = (co.r_mixed0 if role == "mixed" else co.r_pure0), f"r_{role}0"
    return {f"c_{role}": -_reciprocal(c), key: -_reciprocal(r)}


def weighting_grid(o, indicator, with_influence=True):
    """:func:`~pscore_strata.estimands._formulas.weighting_means` on ``indicator``."""
    if o.stratum is not ALWAYS:
        return _stratum_weighting_grid(o, indicator, with_influence)
    w_mixed = _reciprocal(o.pi * o.p_mixed) * (o.observed_mixed * o.p_pure)
    normalizer = o.weighted_mean(w_mixed)
    weighted = indicator.scaled(w_mixed)
    mu_mixed = _weighted_mean(o, weighted) / normalizer
    w_pure = _reciprocal(1 - o.pi) * o.observed_pure
    normalizer_pure = o.weighted_mean(w_pure)
    weighted_pure = indicator.scaled(w_pure)
    mu_pure = _weighted_mean(o, weighted_pure) / normalizer_pure
    if not with_influence:
        return _unorient(o, mu_mixed, mu_pure, None, None)
    f = weighted.plus_outer(w_mixed, -mu_mixed)
    derivatives = {"pi": (-_reciprocal(o.pi), f), "p_mixed": (-_reciprocal(o.p_mixed), f),
                   "p_pure": (_reciprocal(o.p_pure), f)}  # fmt: skip
    derivatives.update({k: (v, f) for k, v in _coarsening_factors(o, "mixed").items()})
    if_mixed = _corrected(o, f, derivatives).scaled(1 / normalizer)
    f = weighted_pure.plus_outer(w_pure, -mu_pure)
    derivatives = {"pi": (_reciprocal(1 - o.pi), f)}
    derivatives.update({k: (v, f) for k, v in _coarsening_factors(o, "pure").items()})
    if_pure = _corrected(o, f, derivatives).scaled(1 / normalizer_pure)
    return _unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def _stratum_weighting_grid(o, indicator, with_influence):
    """The weighting formula for a stratum other than the always-survivors (null setting).

    Each arm's cell is reweighted by ``w = 1{cell} e / (P(arm) q)``. With ``g = base (Y - mu)``
    and ``base = 1{cell} / (P(arm) q)``, every derivative of ``f = w (Y - mu)`` is a per-row
    factor times ``g``: ``sign e / P(arm)`` through the treatment model, the score's
    coefficient plus ``e (-1/q or 1/(1-q))`` through the arm's own intermediate model, and
    ``-e / c``, ``-e / r`` through the observation models.
    """
    st = Scores(o)
    result = []
    for role in ("mixed", "pure"):
        s = o.stratum.s_mixed if role == "mixed" else o.stratum.s_pure
        arm_p = o.arm_probability(role)
        base = _reciprocal(o.cell_probability(role)) * o.cell(role)
        w = base * st.e
        normalizer = o.weighted_mean(w)
        weighted = indicator.scaled(w)
        mu = _weighted_mean(o, weighted) / normalizer
        if not with_influence:
            result.append((mu, None))
            continue
        f = weighted.plus_outer(w, -mu)
        g = indicator.scaled(base).plus_outer(base, -mu)
        own = o.own_probability(role)
        own_factor = -_reciprocal(own) if s == 1 else _reciprocal(1 - own)
        sign = -1.0 if role == "mixed" else 1.0
        factors = {"pi": sign * st.e * _reciprocal(arm_p), "p_pure": st.b, "p_mixed": st.a}
        key = "p_mixed" if role == "mixed" else "p_pure"
        factors[key] = factors[key] + st.e * own_factor
        for name, factor in _coarsening_factors(o, role, s).items():
            factors[name] = st.e * factor
        derivatives = {k: (v, g) for k, v in factors.items()
                       if not (np.isscalar(v) and v == 0)}  # fmt: skip
        result.append((mu, _corrected(o, f, derivatives).scaled(1 / normalizer)))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return _unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def regression_grid(o, m_mixed, m_pure, blends, with_influence=True):
    """:func:`~pscore_strata.estimands._formulas.regression_means` on expanded ``m``.

    ``blends`` maps ``"m_mixed"`` / ``"m_pure"`` to a function of a per-row derivative and
    the influence blocks that returns those blocks with the conditional CDF fits' correction
    added (it may fold the prediction's own block into it), or to ``None``.
    """
    if o.stratum is ALWAYS:
        always, through_score = o.p_pure, {"p_pure": 1.0}
    else:
        st = Scores(o)
        always = st.e  # the target stratum's score e = a p_mixed + b p_pure + c
        through_score = {k: v for k, v in (("p_pure", st.b), ("p_mixed", st.a))
                         if not (np.isscalar(v) and v == 0)}  # fmt: skip
    normalizer = o.weighted_mean(always)
    result = []
    for key, m in (("m_mixed", m_mixed), ("m_pure", m_pure)):
        weighted = m.scaled(always)
        mu = _weighted_mean(o, weighted) / normalizer
        if not with_influence:
            result.append((mu, None))
            continue
        f = weighted.plus_outer(always, -mu)
        gap = m.plus_outer(np.ones_like(always), -mu)
        influence = _corrected(o, f, {k: (v, gap) for k, v in through_score.items()})
        if o.parametric is not None and blends.get(key) is not None:
            influence = Expansion(influence.grid, influence.D,
                                  blends[key](always, influence.blocks), influence.index)
        result.append((mu, influence.scaled(1 / normalizer)))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return _unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def robust_grid(o, indicator, m_mixed, m_pure, with_influence=True):
    """:func:`~pscore_strata.estimands._formulas.robust_means` on expanded ``Y`` and ``m``."""
    if o.stratum is not ALWAYS:
        return _stratum_robust_grid(o, indicator, m_mixed, m_pure, with_influence)
    S = o.survival
    pure_residual = _reciprocal(1 - o.pi) * (o.known_pure * (S - o.p_pure))
    phi_e = pure_residual + o.p_pure
    # phi_mixed = pure_residual m + p_pure A_obs (Y - m) / (pi p_mixed) + p_pure m
    b = _reciprocal(o.pi * o.p_mixed) * (o.p_pure * o.observed_mixed)
    phi_mixed = indicator.scaled(b) + m_mixed.scaled(pure_residual - b + o.p_pure)
    if o.coarsening is None:
        # (1 - A)(S Y - p_pure m) / (1 - pi) + p_pure m; the indicator already carries S.
        a = _reciprocal(1 - o.pi) * (1 - o.mixed)
        phi_pure = indicator.scaled(a) + m_pure.scaled(o.p_pure - a * o.p_pure)
    else:
        a = _reciprocal(1 - o.pi) * o.observed_pure
        phi_pure = indicator.scaled(a) + m_pure.scaled(-a + pure_residual + o.p_pure)
    share = o.weighted_mean(phi_e)
    mu_mixed = _weighted_mean(o, phi_mixed) / share
    mu_pure = _weighted_mean(o, phi_pure) / share
    if not with_influence:
        return _unorient(o, mu_mixed, mu_pure, None, None)
    if_mixed = phi_mixed.plus_outer(phi_e, -mu_mixed).scaled(1 / share)
    if_pure = phi_pure.plus_outer(phi_e, -mu_pure).scaled(1 / share)
    return _unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def _stratum_robust_grid(o, indicator, m_mixed, m_pure, with_influence):
    """The multiply robust formula for a stratum other than the always-survivors.

    With ``phi_e = e + a r_mixed + b r_pure`` (``r`` the intermediate residuals over the arm
    probabilities) and ``base = 1{cell} / (P(arm) q)`` in each arm,
    ``phi_t = m phi_e + e base (Y - m)`` (:func:`~pscore_strata.estimands._formulas.
    robust_terms` at the null setting).
    """
    st = Scores(o)
    phi_e = st.e + _times(st.a, o.residual_mixed) + _times(st.b, o.residual_pure)
    share = o.weighted_mean(phi_e)
    result = []
    for role, m in (("mixed", m_mixed), ("pure", m_pure)):
        b = _reciprocal(o.cell_probability(role)) * o.cell(role) * st.e
        phi = indicator.scaled(b) + m.scaled(phi_e - b)
        mu = _weighted_mean(o, phi) / share
        influence = phi.plus_outer(phi_e, -mu).scaled(1 / share) if with_influence else None
        result.append((mu, influence))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return _unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def _times(coefficient, values):
    return 0.0 if np.isscalar(coefficient) and coefficient == 0 else coefficient * values
