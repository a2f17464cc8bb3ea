"""The trimming computations behind :class:`~._bounds.TrimmingBounds`: weighted trimmed means,
their closed form for binary outcomes, the Imbens-Manski interval, and the cell-wise bounds with
their influence values (Zhang & Rubin 2003; Lee 2009; derivation in the class docstring)."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd

from .._warnings import warn_at_caller
from ..estimands._view import ratio
from ..exceptions import MonotonicityWarning
from ..inference._standard_errors import imbens_manski_critical_value, influence_std_error

__all__ = ["trimmed_means", "binary_trimmed_means", "imbens_manski_interval", "trimming_bounds"]


def trimmed_means(values, weights, share):
    """Weighted means of the lowest and the highest ``share`` of the weight mass.

    The observation that straddles the cut keeps the fraction of its weight that fits, so ties
    and small samples are trimmed exactly (no rounding of ``share * n``).

    Parameters
    ----------
    values : ndarray of shape (n,)
    weights : ndarray of shape (n,)
        Non-negative weights (at least one positive).
    share : float in (0, 1]
        Share of the weight mass kept at each end.

    Returns
    -------
    lower, upper : float
    lower_cut, upper_cut : float
        The ``share`` and ``1 - share`` weighted quantiles where the trimming stops.
    """
    order = np.argsort(values, kind="stable")
    sorted_values, sorted_weights = values[order], weights[order]
    target = share * sorted_weights.sum()
    results = []
    for vals, wts in ((sorted_values, sorted_weights), (sorted_values[::-1], sorted_weights[::-1])):
        before = np.cumsum(wts) - wts
        kept = np.clip(target - before, 0.0, wts)
        last = np.flatnonzero(kept > 0)
        results.append((float(np.sum(kept * vals) / target), float(vals[last[-1]])))
    (lower, lower_cut), (upper, upper_cut) = results
    return lower, upper, lower_cut, upper_cut


def binary_trimmed_means(success_share, share):
    """Closed form of :func:`trimmed_means` for 0/1 outcomes with mean ``success_share``.

    The lowest ``share`` holds all the zeros it can (``1 - success_share`` of the mass); the
    highest ``share`` holds all the ones it can (Zhang & Rubin 2003, for binary data).
    """
    lower = max(0.0, (success_share - (1.0 - share)) / share)
    upper = min(1.0, success_share / share)
    return lower, upper


def imbens_manski_interval(lower, upper, se_lower, se_upper, level=0.95, dof=None):
    """Interval covering every point of the identified set with probability ``level``.

    Solves ``Phi(c + width / max(se)) - Phi(-c) = level`` for ``c`` (Imbens & Manski 2004,
    Econometrica 72) and returns ``(lower - c se_lower, upper + c se_upper)``. With
    ``dof`` (few clusters) ``Phi`` is Student's t with ``dof`` degrees of freedom.

    Parameters
    ----------
    lower, upper : float
        Estimated bounds.
    se_lower, se_upper : float
        Their standard errors.
    level : float, default=0.95
    dof : int or None, default=None

    Returns
    -------
    (low, high) : tuple of float
    """
    c = imbens_manski_critical_value(upper - lower, se_lower, se_upper, level, dof)
    return float(lower - c * se_lower), float(upper + c * se_upper)


def trimming_bounds(o, labels, data):
    """Trimming bounds on the oriented view ``o`` within the cells ``labels``.

    Returns the fitted attributes of :class:`~._bounds.TrimmingBounds` (``lower_``, ``upper_``,
    their influence values and standard errors, ``cells_``, ``trimming_share_``, ...) as a dict.
    """
    fitted = SimpleNamespace()
    w, A, S, Y = o.weight, o.mixed, o.survival, o.outcome
    # Survival shares use rows of known status (weights A C / (pi c)), outcome distributions
    # the observed survivors (A C S R / (pi c r)); without missing data both are A / pi.
    with np.errstate(divide="ignore", invalid="ignore"):
        mixed_weight, pure_weight = o.known_mixed / o.pi, o.known_pure / (1 - o.pi)
    degenerate = ~(np.isfinite(mixed_weight) & np.isfinite(pure_weight))
    if degenerate.any():
        raise ValueError(
            f"The fitted treatment probability is 0 or 1 for {int(degenerate.sum())} of "
            f"{o.pi.size} rows (perfect separation: too few rows for the treatment model, or "
            "no overlap), so the inverse probability weights are infinite. Use more data, "
            "X=None for a randomized trial, a known probability as `treatment_model`, or a "
            "regularized model."
        )
    mixed_observed, pure_observed = o.observed_mixed / o.pi, o.observed_pure / (1 - o.pi)
    response_parts = []
    total = w.sum()
    # Each influence piece is either proportional to a row's inverse-probability weight
    # (``weighted``: its derivative in pi is known) or free of pi (``free``).
    pieces = {key: np.zeros(o.pi.size) for key in ("lw", "uw", "lf", "uf")}
    rows, alphas, alpha_influence, cell_values = [], [], [], []
    n_clipped = 0
    for code in np.unique(labels):
        C = (labels == code).astype(float)
        n_m, s_m = (
            np.sum(w * C * mixed_weight) / total,
            np.sum(w * C * mixed_weight * S) / total,
        )
        n_p, s_p = np.sum(w * C * pure_weight) / total, np.sum(w * C * pure_weight * S) / total
        if s_m <= 0 or s_p <= 0:
            arm = "mixed" if s_m <= 0 else "pure"
            raise ValueError(
                f"Cell {code} has no survivors in the {arm} arm, so its bounds are undefined. "
                "Merge sparse `cells` (or lower `n_strata`)."
            )
        p_m, p_p = s_m / n_m, s_p / n_p
        q = p_p / p_m
        if q > 1:
            n_clipped += 1
            q = 1.0
            if_q = np.zeros(o.pi.size)
        else:
            if_q = q * (C * pure_weight * (S - p_p) / (n_p * p_p)
                        - C * mixed_weight * (S - p_m) / (n_m * p_m))  # fmt: skip
        survivors = (C * mixed_observed) > 0
        y_cell, w_cell = Y[survivors], (w * mixed_observed)[survivors]
        if data.binary_outcome:
            success = float(np.sum(w_cell * y_cell) / w_cell.sum())
            low, high = binary_trimmed_means(success, q)
            _, _, cut_low, cut_high = trimmed_means(y_cell, w_cell, q)
        else:
            low, high, cut_low, cut_high = trimmed_means(y_cell, w_cell, q)
        base = C * mixed_observed / (np.sum(w * C * mixed_observed) / total)
        outcome_low = base * (((Y - cut_low) * (Y <= cut_low) + q * cut_low) / q - low)
        if_low = outcome_low + (cut_low - low) / q * if_q
        outcome_high = base * (((Y - cut_high) * (Y >= cut_high) + q * cut_high) / q - high)
        if_high = outcome_high + (cut_high - high) / q * if_q
        s_observed = np.sum(w * C * pure_observed) / total
        pure_mean = np.sum(w * C * pure_observed * Y) / total / s_observed
        if_pure = C * pure_observed * (Y - pure_mean) / s_observed
        share = np.sum(w * C) / total
        alphas.append(share * p_p)
        # alpha = share * p_p: a pi-free part (C) and a weighted part (the influence of p_p).
        alpha_influence.append((C * p_p, share * C * pure_weight * (S - p_p) / n_p))
        cell_values.append((low - pure_mean, high - pure_mean, if_low - if_pure,
                            if_high - if_pure))  # fmt: skip
        rows.append((code, C.sum(), q, low, high, pure_mean))
        # The parts proportional to 1 / r (outcome distributions), for the response terms.
        response_parts.append((outcome_low - if_pure, outcome_high - if_pure))
    alpha_total = sum(alphas)
    omegas = [a / alpha_total for a in alphas]
    weighted_alpha = sum(part for _, part in alpha_influence)
    free_alpha = sum(part for part, _ in alpha_influence)
    lower = sum(om * v[0] for om, v in zip(omegas, cell_values, strict=True))
    upper = sum(om * v[1] for om, v in zip(omegas, cell_values, strict=True))
    for (free, weighted), om, v in zip(alpha_influence, omegas, cell_values, strict=True):
        pieces["lw"] += om * v[2] + v[0] / alpha_total * (weighted - om * weighted_alpha)
        pieces["uw"] += om * v[3] + v[1] / alpha_total * (weighted - om * weighted_alpha)
        pieces["lf"] += v[0] / alpha_total * (free - om * free_alpha)
        pieces["uf"] += v[1] / alpha_total * (free - om * free_alpha)
    influence = {}
    for index, bound in enumerate(("l", "u")):
        weighted, free = pieces[bound + "w"], pieces[bound + "f"]
        raw = weighted + free
        derivative = np.where(A == 1, -weighted / o.pi, weighted / (1 - o.pi))
        derivatives = {"pi": derivative}
        if o.coarsening is not None:
            # Every weighted piece is proportional to 1 / c of its arm; the outcome pieces
            # also to 1 / r, so the estimated follow-up and response models enter like pi.
            co = o.coarsening
            outcome_part = sum(om * parts[index]
                               for om, parts in zip(omegas, response_parts, strict=True))
            derivatives.update({
                "c_mixed": -ratio(A * weighted, co.c_mixed),
                "c_pure": -ratio((1 - A) * weighted, co.c_pure),
                "r_mixed": -ratio(A * outcome_part, co.r_mixed),
                "r_pure": -ratio((1 - A) * outcome_part, co.r_pure),
            })  # fmt: skip
        influence[bound] = raw - o.weighted_mean(raw) + o.corrections(derivatives)
    if not o.increasing:
        # SACE = pure-arm mean - mixed-arm mean: the bounds swap and change sign.
        lower, upper = -upper, -lower
        influence = {"l": -influence["u"], "u": -influence["l"]}
    fitted.lower_, fitted.upper_ = float(lower), float(upper)
    fitted.influence_lower_, fitted.influence_upper_ = influence["l"], influence["u"]
    fitted.std_error_lower_ = influence_std_error(influence["l"], w, data.groups)
    fitted.std_error_upper_ = influence_std_error(influence["u"], w, data.groups)
    fitted.cells_ = pd.DataFrame(
        rows,
        columns=[
            "cell",
            "n_rows",
            "always_survivor_share",
            "mixed_mean_lower",
            "mixed_mean_upper",
            "pure_mean",
        ],  # fmt: skip
    ).set_index("cell")
    fitted.cells_.insert(1, "weight", omegas)
    fitted.trimming_share_ = float(1 - np.dot(omegas, fitted.cells_["always_survivor_share"]))
    fitted.n_clipped_cells_ = n_clipped
    fitted.n_samples_ = data.n_samples
    fitted.n_features_in_ = data.n_features
    fitted.binary_outcome_ = data.binary_outcome
    if n_clipped:
        warn_at_caller(
            f"In {n_clipped} cell(s) the {'treated' if o.increasing else 'control'} arm "
            "survives less than the other arm, contradicting the monotonicity assumption; "
            "no trimming was done there (always-survivor share set to 1).",
            MonotonicityWarning)
    return vars(fitted)
