"""The three methods' always-survivor means with the sensitivity parameters of
:mod:`._sensitivity` (``delta``, ``eps``, ``xi``), in the oriented view, with their influence
values (derivation in docs/guide/derivations/bounds-sensitivity.md)."""

from __future__ import annotations

import numpy as np

from ..estimands._coarsening import weight_derivatives


class _Stratum:
    """Always-survivor score ``e_a`` and the mixed-arm functional ``G = e_a mu_mixed(X)``.

    ``G`` is linear in the mixed-arm outcome mean ``m``, so the same function applied to an
    observed ``Y`` gives the weighting estimator's numerator. The partial derivatives in
    ``p_pure``, ``p_mixed`` and ``m`` feed both the efficient influence function and the
    M-estimation corrections.
    """

    def __init__(self, o, delta, eps, xi):
        self.o, self.delta, self.eps, self.xi = o, delta, eps, xi
        p_p, p_m = o.p_pure, o.p_mixed
        self.e_always = (p_p - xi * p_m) / (1 - xi)
        self.e_helped = (p_m - p_p) / (1 - xi)
        self.a_pure, self.a_mixed = 1 / (1 - xi), -xi / (1 - xi)
        self.clipped = self.e_always < 0
        if self.clipped.any():
            # A negative always-survivor score is impossible: xi is too large for these rows.
            self.e_always = np.where(self.clipped, 0.0, self.e_always)
            self.a_pure = np.where(self.clipped, 0.0, self.a_pure)
            self.a_mixed = np.where(self.clipped, 0.0, self.a_mixed)

    def g(self, m):
        """``G`` with its partials ``(G, dG/dp_pure, dG/dp_mixed, dG/dm)``."""
        e_a, e_h, p_m = self.e_always, self.e_helped, self.o.p_mixed
        a_p, a_m, h = self.a_pure, self.a_mixed, 1 / (1 - self.xi)
        if self.eps is not None:
            eps = self.eps
            denominator = e_a + eps * e_h
            d_pp = a_p - eps * h
            d_pm = a_m + eps * h
            k = e_a * p_m / denominator
            k_pp = (a_p * p_m * denominator - e_a * p_m * d_pp) / denominator**2
            k_pm = ((a_m * p_m + e_a) * denominator - e_a * p_m * d_pm) / denominator**2
            return k * m, k_pp * m, k_pm * m, k
        delta = self.delta
        shift = e_a * e_h / p_m
        shift_pp = (a_p * e_h - e_a * h) / p_m
        shift_pm = (a_m * e_h + e_a * h) / p_m - shift / p_m
        return (
            e_a * m - delta * shift,
            a_p * m - delta * shift_pp,
            a_m * m - delta * shift_pm,
            e_a,
        )


def _ratio(o, numerator, denominator, derivatives, parametric):
    """Hajek-type ratio ``sum(w num)/sum(w den)`` with influence values.

    ``derivatives(mu)`` returns d f / d prediction for ``f = num - mu den``; they enter through
    the M-estimation corrections only when ``parametric`` is true.
    """
    normalizer = o.weighted_mean(denominator)
    mu = o.weighted_mean(numerator) / normalizer
    f = numerator - mu * denominator
    correction = o.corrections(derivatives(mu, f)) if parametric else 0.0
    return mu, (f + correction) / normalizer


def _weighting(o, st, parametric):
    Y, pi = o.outcome, o.pi
    # Observed survivors; with missing data they also carry 1 / (c r)
    # (docs/guide/derivations/missing-data.md).
    base = o.observed_mixed / (pi * o.p_mixed)
    g, g_pp, g_pm, _ = st.g(Y)

    def mixed_derivatives(mu, f):
        return {
            "pi": -f / pi,
            "p_pure": base * (g_pp - mu * st.a_pure),
            "p_mixed": -f / o.p_mixed + base * (g_pm - mu * st.a_mixed),
            **weight_derivatives(o, f, "mixed"),
        }

    mu_m, if_m = _ratio(o, base * g, base * st.e_always, mixed_derivatives, parametric)
    base = o.observed_pure / ((1 - pi) * o.p_pure)

    def pure_derivatives(mu, f):
        return {
            "pi": f / (1 - pi),
            "p_pure": -f / o.p_pure + base * st.a_pure * (Y - mu),
            "p_mixed": base * st.a_mixed * (Y - mu),
            **weight_derivatives(o, f, "pure"),
        }

    mu_p, if_p = _ratio(o, base * st.e_always * Y, base * st.e_always, pure_derivatives, parametric)
    return mu_m, mu_p, if_m, if_p


def _regression(o, st, parametric):
    g, g_pp, g_pm, g_m = st.g(o.m_mixed)

    def mixed_derivatives(mu, f):
        return {
            "p_pure": g_pp - mu * st.a_pure,
            "p_mixed": g_pm - mu * st.a_mixed,
            "m_mixed": g_m,
        }

    def pure_derivatives(mu, f):
        return {
            "p_pure": st.a_pure * (o.m_pure - mu),
            "p_mixed": st.a_mixed * (o.m_pure - mu),
            "m_pure": st.e_always,
        }

    mu_m, if_m = _ratio(o, g, st.e_always, mixed_derivatives, parametric)
    mu_p, if_p = _ratio(o, st.e_always * o.m_pure, st.e_always, pure_derivatives, parametric)
    return mu_m, mu_p, if_m, if_p


def _robust_pieces(o):
    """The parameter-free arrays of :func:`_robust` (kept by a sensitivity path)."""
    S, Y, pi = o.survival, o.outcome, o.pi
    # Missing data: each residual over its observation probability
    # (docs/guide/derivations/missing-data.md).
    return {
        "resid_pure": o.known_pure * (S - o.p_pure) / (1 - pi),
        "resid_mixed": o.known_mixed * (S - o.p_mixed) / pi,
        "gap_mixed": Y - o.m_mixed,
        "gap_pure": Y - o.m_pure,
        "denominator_mixed": pi * o.p_mixed,
        "denominator_pure": (1 - pi) * o.p_pure,
    }


def _robust(o, st, parametric, cache=None):
    """Efficient-influence-function estimator of the adjusted means
    (docs/guide/derivations/bounds-sensitivity.md).

    For a functional ``E[G(p_p, p_m, m)]`` the efficient influence function adds to ``G`` each
    partial derivative times the residual of that regression, inverse-weighted by the chance of
    being in the rows it is fitted on (Hahn 1998; Jiang, Yang & Ding 2022).
    ``cache`` (a dict) keeps the parameter-free arrays between calls; the arithmetic is the
    same with or without it.
    """
    if cache is None:
        cache = {}
    if "robust" not in cache:
        cache["robust"] = _robust_pieces(o)
    pieces = cache["robust"]
    resid_pure, resid_mixed = pieces["resid_pure"], pieces["resid_mixed"]
    g, g_pp, g_pm, g_m = st.g(o.m_mixed)
    phi_mixed = (
        g + g_pp * resid_pure + g_pm * resid_mixed
        + g_m * o.observed_mixed * pieces["gap_mixed"] / pieces["denominator_mixed"]
    )  # fmt: skip
    score_resid = st.a_pure * resid_pure + st.a_mixed * resid_mixed
    phi_e = st.e_always + score_resid
    phi_pure = (
        st.e_always * o.m_pure + o.m_pure * score_resid
        + st.e_always * o.observed_pure * pieces["gap_pure"] / pieces["denominator_pure"]
    )  # fmt: skip
    share = o.weighted_mean(phi_e)
    mu_m, mu_p = o.weighted_mean(phi_mixed) / share, o.weighted_mean(phi_pure) / share
    return mu_m, mu_p, (phi_mixed - mu_m * phi_e) / share, (phi_pure - mu_p * phi_e) / share
