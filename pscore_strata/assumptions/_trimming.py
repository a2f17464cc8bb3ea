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


def _cell_mean_bounds(C, observed, w, Y, total, keep, if_keep, binary):
    """Bounds on the stratum's mean in one arm's cell within covariate cell ``C``: the means of
    the lowest and the highest ``keep`` share of the cell's outcomes (its mean when ``keep`` is
    1), with influence values, and the parts of them proportional to ``1 / r``.

    Returns ``(low, high, if_low, if_high, outcome_low, outcome_high, keep)``.
    """
    rows = (C * observed) > 0
    y_cell, w_cell = Y[rows], (w * observed)[rows]
    normalizer = np.sum(w * C * observed) / total
    if keep == 1.0:
        mean = np.sum(w * C * observed * Y) / total / normalizer
        influence = C * observed * (Y - mean) / normalizer
        return mean, mean, influence, influence, influence, influence, keep
    if binary:
        success = float(np.sum(w_cell * y_cell) / w_cell.sum())
        low, high = binary_trimmed_means(success, keep)
        _, _, cut_low, cut_high = trimmed_means(y_cell, w_cell, keep)
    else:
        low, high, cut_low, cut_high = trimmed_means(y_cell, w_cell, keep)
    base = C * observed / normalizer
    outcome_low = base * (((Y - cut_low) * (Y <= cut_low) + keep * cut_low) / keep - low)
    outcome_high = base * (((Y - cut_high) * (Y >= cut_high) + keep * cut_high) / keep - high)
    if_low = outcome_low + (cut_low - low) / keep * if_keep
    if_high = outcome_high + (cut_high - high) / keep * if_keep
    return low, high, if_low, if_high, outcome_low, outcome_high, keep


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
    spec = o.stratum
    observed = {role: o.cell(role) / o.arm_probability(role) for role in ("mixed", "pure")}
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
        # Influence values of the two arms' survival shares in the cell.
        shares = {"mixed": (p_m, C * mixed_weight * (S - p_m) / n_m),
                  "pure": (p_p, C * pure_weight * (S - p_p) / n_p)}  # fmt: skip
        score = spec.score(p_m, p_p)
        share = np.sum(w * C) / total
        if score <= 0:
            # The stratum is empty here (the fitted survival shares contradict monotonicity):
            # the cell gets no weight.
            n_clipped += 1
            zeros = np.zeros(o.pi.size)
            alphas.append(0.0)
            alpha_influence.append((zeros, zeros))
            cell_values.append((0.0, 0.0, zeros, zeros))
            rows.append((code, C.sum(), 0.0, 0.0, *[np.nan] * 4))
            response_parts.append((zeros, zeros))
            continue
        arms = {}
        clipped = False
        for role in ("mixed", "pure"):
            s_cell = spec.s_mixed if role == "mixed" else spec.s_pure
            p, _ = shares[role]
            cell_p = p if s_cell == 1 else 1 - p
            keep = score / cell_p  # the stratum's share of the cell
            if keep > 1:
                clipped, keep, if_keep = True, 1.0, np.zeros(o.pi.size)
            else:
                # d keep / d p: the score's coefficient less keep times d cell_p / d p.
                sign = 1.0 if s_cell == 1 else -1.0
                d_mixed = spec.mixed_coefficient - (keep * sign if role == "mixed" else 0.0)
                d_pure = spec.pure_coefficient - (keep * sign if role == "pure" else 0.0)
                if_keep = (d_mixed * shares["mixed"][1] + d_pure * shares["pure"][1]) / cell_p
            arms[role] = _cell_mean_bounds(C, observed[role], w, Y, total, keep, if_keep,
                                           data.binary_outcome)  # fmt: skip
        n_clipped += clipped
        low_m, high_m, if_low_m, if_high_m, out_low_m, out_high_m, keep_m = arms["mixed"]
        low_p, high_p, if_low_p, if_high_p, out_low_p, out_high_p, keep_p = arms["pure"]
        alphas.append(share * score)
        # alpha = share * e: a pi-free part (C) and a weighted part (the influence of e).
        if_score = (spec.mixed_coefficient * shares["mixed"][1]
                    + spec.pure_coefficient * shares["pure"][1])  # fmt: skip
        alpha_influence.append((C * score, share * if_score))
        cell_values.append((low_m - high_p, high_m - low_p, if_low_m - if_high_p,
                            if_high_m - if_low_p))  # fmt: skip
        rows.append((code, C.sum(), keep_m, keep_p, low_m, high_m, low_p, high_p))
        # The parts proportional to 1 / r (outcome distributions), for the response terms.
        response_parts.append((out_low_m - out_high_p, out_high_m - out_low_p))
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
            zero_m, zero_p = ("0" if spec.s_mixed == 0 else ""), ("0" if spec.s_pure == 0 else "")
            derivatives.update({
                "c_mixed": -ratio(A * weighted, co.c_mixed),
                "c_pure": -ratio((1 - A) * weighted, co.c_pure),
                f"r_mixed{zero_m}": -ratio(A * outcome_part, getattr(co, f"r_mixed{zero_m}")),
                f"r_pure{zero_p}": -ratio((1 - A) * outcome_part, getattr(co, f"r_pure{zero_p}")),
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
    table = pd.DataFrame(rows, columns=["cell", "n_rows", "share_mixed", "share_pure",
                                        "mixed_mean_lower", "mixed_mean_upper",
                                        "pure_mean_lower", "pure_mean_upper"]).set_index("cell")
    table.insert(1, "weight", omegas)
    keep_mixed = float(np.dot(omegas, table["share_mixed"]))
    keep_pure = float(np.dot(omegas, table["share_pure"]))
    if spec.role == "always":
        # The always-survivors' table as before: one trimmed cell, the pure arm's mean.
        table = table.rename(columns={"share_mixed": "always_survivor_share",
                                      "pure_mean_lower": "pure_mean"})
        table = table.drop(columns=["share_pure", "pure_mean_upper"])
    fitted.cells_ = table
    # Share of the stratum's cell trimmed in each arm (0 where the cell holds the stratum only).
    by_role = {"mixed": 1 - keep_mixed, "pure": 1 - keep_pure}
    mixed_arm = "treated" if o.increasing else "control"
    pure_arm = "control" if o.increasing else "treated"
    fitted.trimming_shares_ = {mixed_arm: by_role["mixed"], pure_arm: by_role["pure"]}
    fitted.trimming_share_ = by_role["mixed"] if spec.role == "always" else max(by_role.values())
    fitted.n_clipped_cells_ = n_clipped
    fitted.n_samples_ = data.n_samples
    fitted.n_features_in_ = data.n_features
    fitted.binary_outcome_ = data.binary_outcome
    if n_clipped:
        what = ("no trimming was done there (always-survivor share set to 1)"
                if spec.role == "always" else
                "the stratum's share was set to 1 there, or the cell left out where the "
                "stratum is empty")  # fmt: skip
        warn_at_caller(
            f"In {n_clipped} cell(s) the {'treated' if o.increasing else 'control'} arm "
            "survives less than the other arm, contradicting the monotonicity assumption; "
            f"{what}.",
            MonotonicityWarning)
    return vars(fitted)
