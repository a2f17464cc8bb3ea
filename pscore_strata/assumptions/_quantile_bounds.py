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

import weakref

import numpy as np
import pandas as pd
from scipy import stats

from .._validation import check_level
from ..distributions._cdf import observed_survivors
from ..distributions._conditional import MAX_LEVELS
from ..distributions._expansion import column_std_errors, empty_rows
from ..distributions._quantiles import (
    check_quantiles,
    kernel_density,
    quantiles_of,
    silverman_bandwidth,
)
from ..inference._standard_errors import estimator_dof, influence_std_error
from ..nuisance._models import ParametricFit
from ._trimming import imbens_manski_interval

__all__ = ["trimmed_mixtures", "quantile_bounds", "add_quantile_bounds", "quantile_intervals",
           "quantile_bounds_of"]  # fmt: skip


def add_quantile_bounds(bounds, o, labels, data):
    """Set ``bounds.quantile_bounds_`` (``None`` without ``quantiles``); called by ``fit``."""
    _remember(bounds, o, labels, data)
    bounds.quantile_bounds_ = None
    if bounds.quantiles is None:
        return
    table, influence = _quantile_table(bounds, o, labels, data, bounds.quantiles)
    bounds.quantile_influence_ = influence
    bounds.quantile_bounds_ = table


def _quantile_table(bounds, o, labels, data, quantiles):
    quantiles = check_quantiles(quantiles)
    if np.unique(data.outcome[observed_survivors(data)]).size <= MAX_LEVELS:
        raise ValueError(
            f"`quantiles` needs a continuous outcome; the survivors' outcome takes at most "
            f"{MAX_LEVELS} values, where quantiles sit on point masses. Use quantiles=None."
        )
    table, influence = quantile_bounds(o, labels, quantiles)
    for key in ("lower", "upper"):
        table[f"std_error_{key}"] = (
            column_std_errors(influence[key], o.weight) if data.groups is None
            else influence_std_error(influence[key], o.weight, data.groups))  # fmt: skip
    return quantile_intervals(table, 0.95, estimator_dof(bounds)), influence


# The most recent fit's oriented view, cells and data: fitted mean bounds give quantile bounds
# without a refit (the report's distribution section). One fit at a time: one fit's memory.
_LAST = {}


def _remember(bounds, o, labels, data):
    _LAST.clear()
    _LAST["inputs"] = (o, labels, data)
    _LAST["bounds"] = weakref.ref(bounds, lambda ref: _LAST.get("bounds") is ref and
                                  _LAST.clear())  # fmt: skip


def quantile_bounds_of(bounds, quantiles):
    """``quantile_bounds_`` of fitted ``bounds`` at ``quantiles`` without refitting them (the
    same numbers as a fit with ``quantiles``), or ``None`` when another fit has run since
    (then refit with ``quantiles``)."""
    held = _LAST.get("bounds")
    if held is None or held() is not bounds:
        return None
    o, labels, data = _LAST["inputs"]
    return _quantile_table(bounds, o, labels, data, quantiles)[0]


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


def _sorted_survivors(o):
    """Survivor rows by outcome, ties by row (one sort shared by every cell and mixture)."""
    rows = np.flatnonzero(o.survival > 0)
    return rows[np.argsort(o.outcome[rows], kind="stable")]


def _descending(order, values):
    """The stable descending order (ties by row) from the stable ascending ``order``:
    reversed, then each run of tied values reversed back."""
    reverse = order[::-1]
    v = values[reverse]
    if v.size < 2:
        return reverse
    change = np.flatnonzero(v[1:] != v[:-1]) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change, [v.size]])
    position = np.repeat(starts + ends - 1, ends - starts) - np.arange(v.size)
    return reverse[position]


def _masses(o, cells, mixed_observed, pure_observed, order):
    """Row masses of ``G_L``, ``G_U`` and the pure arm (:func:`trimmed_mixtures`), from the
    survivors sorted once (``order``)."""
    Y = o.outcome
    masses = {"lower": np.zeros(Y.size), "upper": np.zeros(Y.size)}
    weight_mixed = o.weight * mixed_observed
    for c in cells:
        rows = (c["C"] * mixed_observed) > 0
        cell_total = weight_mixed[rows].sum()
        ascending = order[rows[order]]
        if ascending.size != np.count_nonzero(rows):  # rows outside the survivors: own sort
            ascending = np.flatnonzero(rows)[np.argsort(Y[rows], kind="stable")]
        # The lowest (highest) q of the cell's mass: in increasing (decreasing) order of the
        # outcome, ties by row, each row keeps the part of its weight that fits below the cut.
        for key, ranked in (("lower", ascending), ("upper", _descending(ascending, Y))):
            w = weight_mixed[ranked]
            before = np.cumsum(w) - w
            kept = np.clip(c["q"] * w.sum() - before, 0.0, w)
            masses[key][ranked] += c["omega"] * kept / (c["q"] * cell_total)
    pure = o.weight * pure_observed
    masses["pure"] = np.zeros(Y.size)
    for c in cells:
        masses["pure"] += c["omega"] * c["C"] * pure / np.sum(c["C"] * pure)
    return masses


def trimmed_mixtures(o, labels):
    """Row masses of ``G_L``, ``G_U`` (mixed-arm survivors) and of the pure arm's distribution.

    Each array sums to 1; the means of ``G_L`` and ``G_U`` are the mean bounds' mixed-arm
    always-survivor means.
    """
    cells, _, mixed_observed, pure_observed = _cells(o, labels)
    return _masses(o, cells, mixed_observed, pure_observed, _sorted_survivors(o))


def _window_density(at, values, mass, bandwidth):
    """:func:`kernel_density` over sorted ``values``, summing only within 12 bandwidths of
    each point (the kernel is below 6e-32 of its peak beyond: far below rounding)."""
    if not bandwidth > 0:
        return kernel_density(at, values, mass, bandwidth)
    low = np.searchsorted(values, at - 12 * bandwidth, side="left")
    high = np.searchsorted(values, at + 12 * bandwidth, side="right")
    return np.array([stats.norm.pdf((a - values[i:j]) / bandwidth) @ mass[i:j] / bandwidth
                     for a, i, j in zip(at, low, high, strict=True)])  # fmt: skip


_CHUNK = 65_536


def _cell_columns(key, c, points, Y, w, mixed_observed, pure_observed, total):
    """A cell's trimmed (or pure-arm) CDF ``F`` at ``points`` (one per quantile) and its value:
    ``(rows, F, normalizer, value, outcome scale, survival coefficient)``, the last two zero
    where the trimmed CDF is flat at 0 or 1."""
    observed = pure_observed if key == "pure" else mixed_observed
    normalizer = c["o_p"] if key == "pure" else c["o_m"]
    weighted = w * c["C"] * observed
    F = np.array([np.sum(weighted * (Y <= p)) for p in points]) / total / normalizer
    rows = c["C"] * observed
    ones, zeros = np.ones(points.size), np.zeros(points.size)
    if key == "pure":
        return rows, F, normalizer, F, ones, zeros
    q = c["q"]
    if key == "lower":  # L_c = min(F / q, 1)
        active = F < q
        value = np.where(active, F / q, 1.0)
        survival = -F / q**2
    else:  # U_c = max((F - 1 + q) / q, 0)
        active = F > 1 - q
        value = np.where(active, (F - 1 + q) / q, 0.0)
        survival = (1 - F) / q**2
    scale = np.where(active, 1 / q, 0.0)
    return rows, F, normalizer, value, scale, np.where(active, survival, 0.0)


def _terms(key, cells, columns, scale, weighted_alpha, free_alpha, alpha_total):
    """Per cell: the row vectors and per-quantile coefficients of ``key``'s influence pieces,
    each coefficient already multiplied by the cell weight and the density factor ``scale``
    (row vectors that are zero, as a single cell's alpha terms, are ``None``)."""
    terms = []
    for c, (factor, F, normalizer, value, outcome_scale, survival) in zip(
            cells, columns, strict=True):  # fmt: skip
        om = c["omega"]
        alpha_w = c["alpha_weighted"] - om * weighted_alpha
        alpha_f = c["alpha_free"] - om * free_alpha
        terms.append((factor, F, om * scale * outcome_scale / normalizer, om * scale * survival,
                      c["if_q"] if c["if_q"].any() else None, scale * value / alpha_total,
                      alpha_w if alpha_w.any() else None, alpha_f))  # fmt: skip
    return terms


def _pieces(terms, points, rows, Y):
    """(weighted, free, outcome) influence pieces on the chunk ``rows`` (r x J): per cell
    ``om (if_outcome + if_survival) + value / alpha (alpha_weighted - om weighted_alpha)``,
    ``value / alpha (alpha_free - om free_alpha)`` and ``om if_outcome``, over the density."""
    below = Y[rows, None] <= points[None, :]
    weighted = free = outcome_part = None
    for factor, F, coefficient, survival, if_q, share, alpha_w, alpha_f in terms:
        part = (below - F) * coefficient
        part *= factor[rows, None]
        both = part.copy()
        if if_q is not None:
            both += if_q[rows, None] * survival
        if alpha_w is not None:
            both += alpha_w[rows, None] * share
        own_free = alpha_f[rows, None] * share
        if weighted is None:
            weighted, free, outcome_part = both, own_free, part
        else:
            weighted += both
            free += own_free
            outcome_part += part
    return weighted, free, outcome_part


def _derivative_factors(o):
    """Per-row factors of :func:`_derivatives`: the derivative in each prediction is the
    weighted piece (``"pi"``, ``"c_*"``) or the outcome piece (``"r_*"``) times its factor."""
    A = o.mixed
    with np.errstate(divide="ignore", invalid="ignore"):
        factors = {"pi": ("weighted", np.where(A == 1, -1 / o.pi, 1 / (1 - o.pi)))}
        co = o.coarsening
        if co is not None:
            factors.update({
                "c_mixed": ("weighted", np.where(A == 1, -1 / co.c_mixed, 0.0)),
                "c_pure": ("weighted", np.where(A == 0, -1 / co.c_pure, 0.0)),
                "r_mixed": ("outcome", np.where(A == 1, -1 / co.r_mixed, 0.0)),
                "r_pure": ("outcome", np.where(A == 0, -1 / co.r_pure, 0.0)),
            })  # fmt: skip
    return factors


def quantile_bounds(o, labels, quantiles):
    """Bounds on the quantile effects with influence values.

    One sort of the survivors serves every cell's trimming and the three mixtures; the
    influence values of all quantiles are formed together in row chunks (the M-estimation
    terms of the GLM fits from gradients accumulated over the chunks).

    Returns
    -------
    table : DataFrame
        ``quantile``, ``lower``, ``upper`` (treated minus control) and the arms' quantiles:
        ``mixed_arm_lower``, ``mixed_arm_upper`` (quantiles of ``G_L``, ``G_U``), ``pure_arm``.
    influence : dict
        ``"lower"``, ``"upper"``: arrays of shape (n_rows, n_quantiles).
    """
    quantiles = np.asarray(quantiles, dtype=float)
    cells, alpha_total, mixed_observed, pure_observed = _cells(o, labels)
    order = _sorted_survivors(o)
    masses = _masses(o, cells, mixed_observed, pure_observed, order)
    Y, w = o.outcome, o.weight
    total = w.sum()
    values = Y[order]
    point, density = {}, {}
    for key, row_mass in masses.items():
        mass = row_mass[order]
        point[key] = quantiles_of(values, np.cumsum(mass), quantiles)
        bandwidth = silverman_bandwidth(values, mass, mass.sum() ** 2 / np.sum(mass**2))
        density[key] = _window_density(point[key], values, mass, bandwidth)
    weighted_alpha = sum(c["alpha_weighted"] for c in cells)
    free_alpha = sum(c["alpha_free"] for c in cells)
    terms = {key: _terms(key, cells, [_cell_columns(key, c, point[key], Y, w, mixed_observed,
                                                    pure_observed, total) for c in cells],
                         -1.0 / density[key], weighted_alpha, free_alpha, alpha_total)
             for key in point}  # fmt: skip
    parametric = o.parametric or {}
    factors = {name: (source, factor) for name, (source, factor) in _derivative_factors(o).items()
               if parametric.get(name) is not None}  # fmt: skip
    # Plain GLM fits, batched over the quantiles: their gradient's row factor (w x slope x the
    # derivative factor); other fits get whole derivative columns and their own correction.
    batched = {name: w * parametric[name].slope * factor
               for name, (_, factor) in factors.items() if type(parametric[name]) is ParametricFit}
    keys = ("lower", "upper")
    n, k = Y.size, quantiles.size
    influence = {key: empty_rows((n, k)) for key in keys}
    means = {key: np.zeros(k) for key in keys}
    gradients, full = {}, {}  # batched GLM gradients; whole derivative columns of other fits
    for start in range(0, n, _CHUNK):
        rows = slice(start, start + _CHUNK)
        pure = _pieces(terms["pure"], point["pure"], rows, Y)
        for key in keys:
            own = _pieces(terms[key], point[key], rows, Y)
            sources = {"weighted": own[0] - pure[0]}
            raw = influence[key][rows]
            np.add(sources["weighted"], own[1], out=raw)
            raw -= pure[1]
            means[key] += w[rows] @ raw
            if any(source == "outcome" for source, _ in factors.values()):
                sources["outcome"] = own[2] - pure[2]
            for name, (source, factor) in factors.items():
                fit = parametric[name]
                if name not in batched:
                    full.setdefault((key, name), []).append(sources[source] * factor[rows, None])
                    continue
                u = sources[source] * batched[name][rows, None]
                part = u.sum(axis=0, keepdims=True)
                if fit.design is not None:
                    part = np.vstack([part, fit.design[rows].T @ u])
                gradients[key, name] = gradients.get((key, name), 0.0) + part
    directions = {pair: parametric[pair[1]].h_inverse @ (g / total)
                  for pair, g in gradients.items()}  # fmt: skip
    for start in range(0, n, _CHUNK):
        rows = slice(start, start + _CHUNK)
        for key in keys:
            block = influence[key][rows]
            block -= means[key] / total
            for (which, name), direction in directions.items():
                if which != key:
                    continue
                fit = parametric[name]
                fitted = np.broadcast_to(direction[0], block.shape)
                if fit.design is not None:
                    fitted = fit.design[rows] @ direction[1:] + direction[0]
                block += (fit.mask[rows] * fit.residual[rows])[:, None] * fitted
    for (key, name), chunks in full.items():
        d = np.vstack(chunks)
        for j in range(k):
            influence[key][:, j] += parametric[name].correction(d[:, j], w)
    lower, upper = point["lower"] - point["pure"], point["upper"] - point["pure"]
    mixed_lower, mixed_upper, pure = point["lower"], point["upper"], point["pure"]
    if not o.increasing:
        # Effect = pure-arm quantile minus mixed-arm quantile: the bounds swap and change sign.
        lower, upper = -upper, -lower
        influence = {"lower": -influence["upper"], "upper": -influence["lower"]}
    table = pd.DataFrame({"quantile": quantiles, "lower": lower, "upper": upper,
                          "mixed_arm_lower": mixed_lower, "mixed_arm_upper": mixed_upper,
                          "pure_arm": pure})  # fmt: skip
    return table, influence
