"""The three methods' formulas, each written once: any stratum, any sensitivity setting.

Every function takes an :class:`~._view.Oriented` view of the nuisance predictions (which names
the target stratum: its score coefficients ``e = a p_mixed + b p_pure + c`` and its observed
cell in each arm), a :class:`~._setting.Setting` of the sensitivity parameters (the null setting
is the estimator) and an optional ``subset``, and returns the stratum's means under each arm with
per-row influence values (:class:`~._view.MeanParts`). With the always-survivor stratum at the
null setting these are the SACE estimators; derivations in docs/guide/derivations/ (strata.md
for the strata, bounds-sensitivity.md for the settings, missing-data.md for the observation
factors).

An optional ``subset`` (a 0/1 row indicator) restricts the estimand to the stratum's members in
a subgroup without refitting: each estimating function is multiplied by the indicator while the
nuisance fits stay those of the whole sample. The influence values are then those of the whole
sample (zero outside the subgroup, up to nuisance terms), so they carry the randomness of the
subgroup's size as well as that of the shared nuisance fits.
"""

from __future__ import annotations

import numpy as np

from ._coarsening import weight_derivatives
from ._setting import NULL_SETTING, Scores, times
from ._view import ratio, unorient

__all__ = ["weighting_means", "regression_means", "robust_terms", "robust_means",
           "robust_harmed_terms"]  # fmt: skip


def _indicator(o, subset):
    return None if subset is None else np.asarray(subset, dtype=float)


def _restrict(g, values):
    return values if g is None else g * values


def _nonzero(derivatives):
    """Drop the derivatives that are a scalar 0 (the formula does not involve that model)."""
    return {k: v for k, v in derivatives.items() if not (np.isscalar(v) and v == 0)}


def weighting_means(o, setting=NULL_SETTING, subset=None, scores=None):
    """Normalized principal score weighting (Ding & Lu 2017, JRSSB), with M-estimation terms.

    Each arm's cell of the stratum is reweighted by ``e / (P(arm|X) P(S=s|arm,X))`` (the unit's
    chance of being in the stratum over its chance of being observed in that cell), normalized
    within the cell (within the subgroup's cell with ``subset``). For the always-survivors:
    mixed-arm survivors get ``p_pure / (pi p_mixed)``, pure-arm survivors ``1 / (1 - pi)``.
    Away from principal ignorability the mixed cell's numerator is ``G(Y)`` (:mod:`._setting`).

    M-estimation terms, with ``f = base (G(Y) - mu e)`` and ``base = 1{cell} / (P(arm) q)``:
    ``df/dP(arm) = -f/P(arm)``, ``df/dq = -f/q`` through the arm's own intermediate model, and
    ``base (dG/dp - mu de/dp)`` through the score's coefficients.
    """
    st = scores or Scores(o, setting)
    g = _indicator(o, subset)
    Y = o.outcome
    result = []
    for role in ("mixed", "pure"):
        arm_p = o.arm_probability(role)
        sign = -1.0 if role == "mixed" else 1.0  # d f / d pi = sign f / P(arm)
        s = o.stratum.s_mixed if role == "mixed" else o.stratum.s_pure
        cell = _restrict(g, o.cell(role))
        if role == "pure" and st.pure_is_cell:
            # e / q is 1: the pure arm's survivors are all always-survivors.
            w = ratio(cell, arm_p)
            normalizer = o.weighted_mean(w)
            mu = o.weighted_mean(w * Y) / normalizer
            f = w * (Y - mu)
            derivatives = {"pi": sign * ratio(f, arm_p)}
        else:
            own = o.own_probability(role)
            base = ratio(cell, o.cell_probability(role))
            if not st.plain(role):
                G, G_pp, G_pm, _ = st.g(role, Y)
                normalizer = o.weighted_mean(base * st.e)
                mu = o.weighted_mean(base * G) / normalizer
                f = base * G - mu * base * st.e
                through_score = {"p_pure": base * (G_pp - mu * st.b),
                                 "p_mixed": base * (G_pm - mu * st.a)}  # fmt: skip
            else:
                w = ratio(cell * st.e, o.cell_probability(role))
                normalizer = o.weighted_mean(w)
                mu = o.weighted_mean(w * Y) / normalizer
                f = w * (Y - mu)
                d_score = base * (Y - mu)
                through_score = {"p_pure": times(st.b, d_score),
                                 "p_mixed": times(st.a, d_score)}  # fmt: skip
            own_term = -ratio(f, own) if s == 1 else ratio(f, 1 - own)
            key = "p_mixed" if role == "mixed" else "p_pure"
            through_score[key] = through_score[key] + own_term
            derivatives = {"pi": sign * ratio(f, arm_p), **through_score}
        derivatives.update(weight_derivatives(o, f, role, s))
        result.append((mu, (f + o.corrections(_nonzero(derivatives))) / normalizer))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def regression_means(o, setting=NULL_SETTING, subset=None, scores=None):
    """Outcome regression: ``mu_t = E[G_t] / E[e]`` with ``G_t = e m_t`` under principal
    ignorability (``m_t`` the outcome model of the stratum's cell in arm ``t``)."""
    st = scores or Scores(o, setting)
    g = _indicator(o, subset)
    score = _restrict(g, st.e)
    normalizer = o.weighted_mean(score)
    result = []
    for role, key, m in (("mixed", "m_mixed", o.m_mixed), ("pure", "m_pure", o.m_pure)):
        if not st.plain(role):
            G, G_pp, G_pm, G_m = st.g(role, m)
            mu = o.weighted_mean(_restrict(g, G)) / normalizer
            f = _restrict(g, G) - mu * score
            derivatives = {
                "p_pure": _restrict(g, G_pp - mu * st.b),
                "p_mixed": _restrict(g, G_pm - mu * st.a),
                key: _restrict(g, G_m),
            }
        else:
            mu = o.weighted_mean(score * m) / normalizer
            f = score * (m - mu)
            gap = _restrict(g, m - mu)
            derivatives = {"p_pure": times(st.b, gap), "p_mixed": times(st.a, gap), key: score}
        result.append((mu, (f + o.corrections(_nonzero(derivatives))) / normalizer))
    (mu_mixed, if_mixed), (mu_pure, if_pure) = result
    return unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def robust_terms(o, setting=NULL_SETTING, scores=None):
    """Efficient-influence-function terms (Jiang, Yang & Ding 2022, JRSSB), oriented.

    For a functional ``E[G(p_pure, p_mixed, m)]`` the efficient influence function adds to ``G``
    each partial derivative times the residual of that regression, inverse-weighted by the
    chance of being in the rows it is fitted on (Hahn 1998). Returns ``(phi_e, phi_mixed,
    phi_pure)``; the means are ``mean(phi_t) / mean(phi_e)``.
    """
    st = scores or Scores(o, setting)
    S_resid = times(st.a, o.residual_mixed) + times(st.b, o.residual_pure)
    phi_e = st.e + S_resid
    Y = o.outcome
    phi_mixed = _robust_cell(o, st, "mixed", o.m_mixed, Y)
    m = o.m_pure
    if not st.plain("pure"):
        phi_pure = _robust_cell(o, st, "pure", m, Y)
    else:
        if st.pure_is_cell:
            observed = ratio(o.cell("pure") * (Y - m), o.arm_probability("pure"))
        else:
            observed = st.e * o.cell_residual("pure")
        phi_pure = st.e * m + m * S_resid + observed
    return phi_e, phi_mixed, phi_pure


def _robust_cell(o, st, role, m, Y):
    """``G + dG/dp_pure r_pure + dG/dp_mixed r_mixed + dG/dm 1{cell} (Y - m) / (P(arm) q)``."""
    G, G_pp, G_pm, G_m = st.g(role, m)
    return (
        G + times(G_pp, o.residual_pure) + times(G_pm, o.residual_mixed)
        + G_m * o.cell_residual(role)
    )  # fmt: skip


def robust_means(o, setting=NULL_SETTING, subset=None, scores=None):
    """Multiply robust means; influence values ``(phi_t - mu_t phi_e) / mean(phi_e)``.

    No nuisance-estimation terms are added: the efficient influence function is orthogonal to
    the nuisance functions (Jiang, Yang & Ding 2022), so with cross-fitting, or with
    parametric models that are all correct, their estimation does not change the first-order
    variance. A setting that empties the stratum (share 0) has no effect: NaN.
    """
    phi_e, phi_mixed, phi_pure = robust_terms(o, setting, scores)
    g = _indicator(o, subset)
    phi_e, phi_mixed, phi_pure = (_restrict(g, phi) for phi in (phi_e, phi_mixed, phi_pure))
    share = o.weighted_mean(phi_e)
    with np.errstate(divide="ignore", invalid="ignore"):
        mu_mixed = o.weighted_mean(phi_mixed) / share
        mu_pure = o.weighted_mean(phi_pure) / share
        if_mixed = (phi_mixed - mu_mixed * phi_e) / share
        if_pure = (phi_pure - mu_pure * phi_e) / share
    return unorient(o, mu_mixed, mu_pure, if_mixed, if_pure)


def robust_harmed_terms(o):
    """:func:`robust_terms` along ``harmed_ratio`` alone (``delta = delta_0 = 0``, no ``eps``),
    per row, for the always-survivor and helped strata; ``None`` for the doomed stratum.

    With ``xi`` and ``s = xi / (1 - xi)`` (so ``1 / (1 - xi) = 1 + s``), the always-survivor
    score of a row is ``e_a = p_p + s d`` with ``d = p_p - p_m``, its coefficients ``a = -s``
    on ``p_m`` and ``b = 1 + s`` on ``p_p``, until it is clipped (``xi p_m > p_p``: then
    ``e_a = a = b = 0``). Both cells are plain (``G = e m``), so with the survival residuals
    ``r`` and the cells' outcome terms ``c_t`` (:func:`_robust_cell`)
    ``phi_e = e + a r_m + b r_p`` and ``phi_t = e (m_t + c_t) + m_t (a r_m + b r_p)`` are
    linear in the stratum's ``(e, a, b)``:

    - always-survivors: ``phi = A + s B`` on the rows not clipped, 0 on the clipped ones;
    - helped stratum, ``e = p_m - e_a``: on the rows not clipped ``(e, a, b) = (1 + s)
      (p_m - p_p, 1, -1)``, so ``phi = (1 + s) K`` (``A = B = K``, the helped formula at
      ``xi = 0``), except the rows with ``p_p > p_m``, whose helped score is negative and
      clipped at every ``xi > 0`` (their parts are 0; ``n_low`` counts them); on the rows whose
      always-survivor score is clipped, ``(e, a, b) = (p_m, 1, 0)``: a constant ``C``.

    Rows with ``p_p`` within a relative ``1e-9`` of ``p_m`` (helped stratum), whose clipping
    the direct formula decides by rounding, give ``None``: no exact path. At ``xi = 0`` the
    formulas are written differently (no clipping; ``e / q = 1`` exactly in the always-survivors'
    pure cell), so that point is left to :func:`robust_terms`.

    Returns
    -------
    dict or None
        ``{"e": (A, B), "mixed": (A, B), "pure": (A, B), "prefix": None or {"e": C,
        "mixed": C, "pure": C}, "n_low": int}`` of per-row arrays.
    """
    role = o.stratum.role
    if role == "doomed":
        return None
    p_m, p_p = o.p_mixed, o.p_pure
    r_m, r_p = o.residual_mixed, o.residual_pure
    outcome = {t: (m, m + o.cell_residual(t)) for t, m in (("mixed", o.m_mixed),
                                                          ("pure", o.m_pure))}  # fmt: skip

    def parts(e, a, b):
        survival = times(a, r_m) + times(b, r_p)
        found = {"e": e + survival}
        for t, (m, outcome_part) in outcome.items():
            found[t] = e * outcome_part + m * survival
        return found

    if role == "always":
        zero = parts(p_p, 0.0, 1.0)
        slope = parts(p_p - p_m, -1.0, 1.0)
        return {**{k: (zero[k], slope[k]) for k in zero}, "prefix": None, "n_low": 0}
    largest = np.maximum(p_m, p_p)
    if np.any((np.abs(p_p - p_m) <= 1e-9 * largest) & (largest > 0)):
        return None
    low = p_p > p_m
    kept = np.where(low, 0.0, 1.0)
    k = parts(kept * (p_m - p_p), kept, -kept)
    return {**{key: (v, v) for key, v in k.items()}, "prefix": parts(p_m, 1.0, 0.0),
            "n_low": int(np.count_nonzero(low))}
