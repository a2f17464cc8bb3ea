"""Trimming bounds on always-survivor quantile effects, without principal ignorability.

How they reduce to the mean bounds' construction (:class:`TrimmingBounds`). In each cell ``c``
the mixed-arm survivors are a mixture: always-survivors in share ``q_c`` and the helped stratum.
Whatever the always-survivors' outcome distribution ``A_c`` is, it is a ``q_c``-part of the cell's
mixed-survivor distribution ``F_c``, so it lies (in the stochastic order) between ``L_c``, the
lowest ``q_c`` of ``F_c`` (``L_c(v) = min(F_c(v) / q_c, 1)``), and ``U_c``, the highest ``q_c``
(``U_c(v) = max((F_c(v) - 1 + q_c) / q_c, 0)``). The always-survivor distribution of the whole
population is ``A = sum_c omega_c A_c`` with the mean bounds' cell weights ``omega_c`` (estimated
always-survivor counts), and mixing keeps the stochastic order, so ``A`` lies between the two
*trimmed mixtures* ``G_L = sum_c omega_c L_c`` and ``G_U = sum_c omega_c U_c``, both attainable.
The mean bounds are the means of ``G_L`` and ``G_U`` (Lee 2009, averaged over
cells); the quantile bounds are their ``u``-quantiles (Imai 2008, Statistics & Probability
Letters 78; Lee 2009 for quantiles). The pure arm's always-survivor distribution is
identified: the inverse-probability-weighted distribution of its survivors, which equals
``sum_c omega_c`` of the cells' pure-arm distributions. With one cell, ``G_L`` quantiles are the
``u q`` quantiles of the mixed-arm survivors and ``G_U`` quantiles their ``1 - q + u q`` ones.

Standard errors: the influence function of a quantile of ``G`` is ``-IF_G(Q) / g(Q)`` (the
density ``g`` by a Gaussian kernel with Silverman's bandwidth over ``G``'s point masses), with
``IF_G`` from the cell CDFs, the shares ``q_c`` and the weights ``omega_c`` by the delta method,
and the default treatment model's estimation carried by M-estimation, as for the mean bounds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._validation import check_level
from ..distributions._cdf import observed_survivors
from ..distributions._conditional import MAX_LEVELS
from ..distributions._quantiles import (
    check_quantiles,
    kernel_density,
    quantiles_of,
    silverman_bandwidth,
)
from ..inference._standard_errors import estimator_dof, influence_std_error
from ._trimming import imbens_manski_interval

__all__ = ["trimmed_mixtures", "quantile_bounds", "add_quantile_bounds", "quantile_intervals"]


def add_quantile_bounds(bounds, o, labels, data):
    """Set ``bounds.quantile_bounds_`` (``None`` without ``quantiles``); called by ``fit``."""
    bounds.quantile_bounds_ = None
    if bounds.quantiles is None:
        return
    quantiles = check_quantiles(bounds.quantiles)
    if np.unique(data.outcome[observed_survivors(data)]).size <= MAX_LEVELS:
        raise ValueError(
            f"`quantiles` needs a continuous outcome; the survivors' outcome takes at most "
            f"{MAX_LEVELS} values, where quantiles sit on point masses. Use quantiles=None."
        )
    table, influence = quantile_bounds(o, labels, quantiles)
    for key in ("lower", "upper"):
        table[f"std_error_{key}"] = influence_std_error(influence[key], o.weight, data.groups)
    bounds.quantile_influence_ = influence
    bounds.quantile_bounds_ = quantile_intervals(table, 0.95, estimator_dof(bounds))


def quantile_intervals(table, level=0.95, dof=None):
    """Add Imbens-Manski intervals (``ci_low``, ``ci_high``) at ``level`` to a bounds table
    (t reference with ``dof`` degrees of freedom under few clusters)."""
    level = check_level(level)
    table = table.copy()
    ends = [imbens_manski_interval(r.lower, r.upper, r.std_error_lower, r.std_error_upper, level,
                                   dof)
            for r in table.itertuples()]  # fmt: skip
    table["ci_low"], table["ci_high"] = np.array(ends).T
    return table


def _kept(values, weights, share, highest):
    """Weight each row keeps when only the lowest (or highest) ``share`` of the mass is kept."""
    order = np.argsort(-values if highest else values, kind="stable")
    w = weights[order]
    before = np.cumsum(w) - w
    kept = np.empty_like(w)
    kept[order] = np.clip(share * w.sum() - before, 0.0, w)
    return kept


def _weights(o):
    """Inverse-probability weights of each arm: for survival shares (rows of known status,
    ``A C / (pi c)``) and for outcome distributions (observed survivors, ``A C S R /
    (pi c r)``), as in the mean bounds; without missing data ``A / pi`` and ``A S / pi``."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return (o.known_mixed / o.pi, o.known_pure / (1 - o.pi), o.observed_mixed / o.pi,
                o.observed_pure / (1 - o.pi))  # fmt: skip


def _cells(o, labels):
    """Per-cell quantities of the mean bounds, recomputed (same formulas as ``_bounds``)."""
    w, S = o.weight, o.survival
    mixed_weight, pure_weight, mixed_observed, pure_observed = _weights(o)
    total = w.sum()
    cells = []
    for code in np.unique(labels):
        C = (labels == code).astype(float)
        n_m, s_m = np.sum(w * C * mixed_weight) / total, np.sum(w * C * mixed_weight * S) / total
        n_p, s_p = np.sum(w * C * pure_weight) / total, np.sum(w * C * pure_weight * S) / total
        p_m, p_p = s_m / n_m, s_p / n_p
        q = p_p / p_m
        if q > 1:
            q, if_q = 1.0, np.zeros(w.size)
        else:
            if_q = q * (C * pure_weight * (S - p_p) / (n_p * p_p)
                        - C * mixed_weight * (S - p_m) / (n_m * p_m))  # fmt: skip
        share = np.sum(w * C) / total
        # Normalizers of the cell's outcome distributions (= s_m, s_p without missing data).
        o_m = np.sum(w * C * mixed_observed) / total
        o_p = np.sum(w * C * pure_observed) / total
        cells.append(dict(C=C, s_m=s_m, s_p=s_p, o_m=o_m, o_p=o_p, q=q, if_q=if_q,
                          alpha=share * p_p,
                          alpha_free=C * p_p,
                          alpha_weighted=share * C * pure_weight * (S - p_p) / n_p))  # fmt: skip
    alpha_total = sum(c["alpha"] for c in cells)
    for c in cells:
        c["omega"] = c["alpha"] / alpha_total
    return cells, alpha_total, mixed_observed, pure_observed


def trimmed_mixtures(o, labels):
    """Row masses of ``G_L``, ``G_U`` (mixed-arm survivors) and of the pure arm's distribution.

    Each array sums to 1; the means of ``G_L`` and ``G_U`` are the mean bounds' mixed-arm
    always-survivor means.
    """
    cells, _, mixed_observed, pure_observed = _cells(o, labels)
    Y = o.outcome
    masses = {"lower": np.zeros(Y.size), "upper": np.zeros(Y.size)}
    for c in cells:
        rows = (c["C"] * mixed_observed) > 0
        cell_weight = (o.weight * mixed_observed)[rows]
        for key, highest in (("lower", False), ("upper", True)):
            kept = _kept(Y[rows], cell_weight, c["q"], highest)
            masses[key][rows] += c["omega"] * kept / (c["q"] * cell_weight.sum())
    pure = o.weight * pure_observed
    masses["pure"] = np.zeros(Y.size)
    for c in cells:
        masses["pure"] += c["omega"] * c["C"] * pure / np.sum(c["C"] * pure)
    return masses


def _cell_cdf(key, c, below, o, mixed_observed, pure_observed, total):
    """A cell's trimmed (or pure-arm) CDF at one value and its influence values, split into
    the outcome part (proportional to ``1 / r`` under missing data) and the survival part."""
    w = o.weight
    if key == "pure":
        F = np.sum(w * c["C"] * pure_observed * below) / total / c["o_p"]
        return F, c["C"] * pure_observed * (below - F) / c["o_p"], 0.0
    F = np.sum(w * c["C"] * mixed_observed * below) / total / c["o_m"]
    if_F = c["C"] * mixed_observed * (below - F) / c["o_m"]
    q, if_q = c["q"], c["if_q"]
    if key == "lower":  # L_c = min(F / q, 1)
        if F >= q:
            return 1.0, 0.0, 0.0
        return F / q, if_F / q, -F * if_q / q**2
    # U_c = max((F - 1 + q) / q, 0)
    if F <= 1 - q:
        return 0.0, 0.0, 0.0
    return (F - 1 + q) / q, if_F / q, (1 - F) * if_q / q**2


def _derivatives(o, weighted, outcome_part):
    """Derivatives of the influence pieces in the treatment (and, with missing data, the
    follow-up and response) predictions, as in the mean bounds: every weighted piece is
    proportional to ``1 / pi`` and ``1 / c`` of its arm, the outcome pieces also to ``1 / r``."""
    A = o.mixed
    derivatives = {"pi": np.where(A == 1, -weighted / o.pi, weighted / (1 - o.pi))}
    co = o.coarsening
    if co is not None:
        with np.errstate(divide="ignore", invalid="ignore"):
            derivatives.update({
                "c_mixed": np.where(A == 1, -weighted / co.c_mixed, 0.0),
                "c_pure": np.where(A == 0, -weighted / co.c_pure, 0.0),
                "r_mixed": np.where(A == 1, -outcome_part / co.r_mixed, 0.0),
                "r_pure": np.where(A == 0, -outcome_part / co.r_pure, 0.0),
            })  # fmt: skip
    return derivatives


def _effective_size(mass):
    return mass.sum() ** 2 / np.sum(mass**2)


def quantile_bounds(o, labels, quantiles):
    """Bounds on the quantile effects with influence values.

    Returns
    -------
    table : DataFrame
        ``quantile``, ``lower``, ``upper`` (treated minus control) and the arms' quantiles:
        ``mixed_arm_lower``, ``mixed_arm_upper`` (quantiles of ``G_L``, ``G_U``), ``pure_arm``.
    influence : dict
        ``"lower"``, ``"upper"``: arrays of shape (n_rows, n_quantiles).
    """
    cells, alpha_total, mixed_observed, pure_observed = _cells(o, labels)
    masses = trimmed_mixtures(o, labels)
    Y, S, w = o.outcome, o.survival, o.weight
    total = w.sum()
    survivors = S > 0
    support = {key: (Y[survivors], m[survivors]) for key, m in masses.items()}
    point, density = {}, {}
    for key, (values, mass) in support.items():
        order = np.argsort(values, kind="stable")
        values, mass = values[order], mass[order]
        point[key] = quantiles_of(values, np.cumsum(mass), quantiles)
        bandwidth = silverman_bandwidth(values, mass, _effective_size(mass))
        density[key] = kernel_density(point[key], values, mass, bandwidth)
    weighted_alpha = sum(c["alpha_weighted"] for c in cells)
    free_alpha = sum(c["alpha_free"] for c in cells)
    def piece(key, j):
        """(weighted, free, outcome) influence pieces of quantile ``j`` of ``key``."""
        below = (Y <= point[key][j]).astype(float)
        outcome_part, weighted, free = 0.0, 0.0, 0.0
        for c in cells:
            value, if_outcome, if_survival = _cell_cdf(key, c, below, o, mixed_observed,
                                                       pure_observed, total)  # fmt: skip
            om = c["omega"]
            outcome_part = outcome_part + om * if_outcome
            weighted = weighted + om * (if_outcome + if_survival) + value / alpha_total * (
                c["alpha_weighted"] - om * weighted_alpha)
            free = free + value / alpha_total * (c["alpha_free"] - om * free_alpha)
        scale = -1.0 / density[key][j]
        return weighted * scale, free * scale, outcome_part * scale

    # One quantile at a time: memory O(rows), and no strided writes into rows x quantiles.
    influence = {key: np.empty((Y.size, quantiles.size)) for key in ("lower", "upper")}
    for j in range(quantiles.size):
        pure = piece("pure", j)
        for key in ("lower", "upper"):
            own = piece(key, j)
            raw_w = own[0] - pure[0]
            raw = raw_w + own[1] - pure[1]
            raw_outcome = own[2] - pure[2]
            correction = o.corrections(_derivatives(o, raw_w, raw_outcome))
            influence[key][:, j] = raw - (w @ raw) / total + correction
    lower = point["lower"] - point["pure"]
    upper = point["upper"] - point["pure"]
    mixed_lower, mixed_upper, pure = point["lower"], point["upper"], point["pure"]
    if not o.increasing:
        # Effect = pure-arm quantile minus mixed-arm quantile: the bounds swap and change sign.
        lower, upper = -upper, -lower
        influence = {"lower": -influence["upper"], "upper": -influence["lower"]}
    table = pd.DataFrame({"quantile": quantiles, "lower": lower, "upper": upper,
                          "mixed_arm_lower": mixed_lower, "mixed_arm_upper": mixed_upper,
                          "pure_arm": pure})  # fmt: skip
    return table, influence
