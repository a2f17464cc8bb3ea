"""Figures for the diagnostics: covariate balance, score overlap and weight distributions.

matplotlib is an optional dependency, imported inside each function so that
``import pscore_strata`` never loads it. Every function draws on ``ax`` when given and returns
the matplotlib Figure.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .. import diagnostics
from ..diagnostics._arrays import (
    PROBABILITY_BOUNDS,
    balancing_weights,
    effective_sample_size,
    fitted_scores,
    oriented_predictions,
    treated_indicator,
)

__all__ = ["plot_balance", "plot_overlap", "plot_weights"]

_COMPARISONS = ("treated_vs_control", "treated_vs_everyone", "control_vs_everyone")
_GROUP_LABELS = {
    "treated_survivors": "treated survivors",
    "control_survivors": "control survivors",
    "everyone": "everyone (weights: always-survivor score)",
}
_ARM_COLORS = {"treated": "#1f77b4", "control": "#d95f02"}
_BAND_COLOR = "#e3efe6"  # the acceptable band of the balance figure
_INSIDE_COLOR, _OUTSIDE_COLOR = "#2a7f62", "#9c2f2f"


def _figure_and_axes(ax, figsize):
    if ax is not None:
        return ax.figure, ax
    import matplotlib.pyplot as plt

    figure, ax = plt.subplots(figsize=figsize, layout="constrained")
    return figure, ax


def histogram_steps(ax, values, edges, *, density=False, weights=None, fill=False, **style):
    """``ax.hist(values, bins=edges, ...)`` drawn as one step patch.

    The heights are ``np.histogram``'s (``density=True``: each bin's share over its width, as
    ``ax.hist``). ``fill=True`` draws the filled bars of ``ax.hist``'s default style,
    ``fill=False`` its ``histtype="step"`` outline. One patch instead of one per bin keeps the
    figure cheap at a million rows.
    """
    heights, _ = np.histogram(values, bins=edges, weights=weights, density=density)
    return ax.stairs(heights, edges, fill=fill, **style)


def _legend_below(ax, ncol):
    # Below the axes, so the legend never hides data whatever its shape.
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.18), ncol=ncol, fontsize=8, frameon=False)


def plot_balance(
    estimator,
    X=None,
    *,
    comparison="treated_vs_control",
    threshold=0.1,
    max_covariates=40,
    ax=None,
):
    """Arrow per covariate from the unweighted to the weighted standardized mean difference.

    Each row starts at the survivors' unweighted difference (treated against control, a short
    grey bar) and ends at the weighted difference between two always-survivor reconstructions
    (a filled end, dark when it stays outside the band). The shaded band is ``|SMD| < threshold``.
    Rows are sorted by the unweighted imbalance, the largest at the top, so the eye reads how
    far the analysis moved each covariate and where it still falls short.

    Parameters
    ----------
    estimator : fitted estimator or DataFrame
        A fitted estimator (then ``X`` is required) or a table from
        :func:`pscore_strata.balance_table`.
    X : array-like or DataFrame, optional
        Covariates of the fitted rows.
    comparison : {"treated_vs_control", "treated_vs_everyone", "control_vs_everyone"}
        Which pair of weighted always-survivor reconstructions ends the arrows.
    threshold : float, default=0.1
        Half-width of the shaded band; 0.1 is the common-practice limit for a negligible
        imbalance.
    max_covariates : int, default=40
        Show at most this many covariates, those with the largest raw or weighted ``|SMD|`` (the
        title then says how many were left out; the full list is in the balance table).
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    if not isinstance(max_covariates, int | np.integer) or max_covariates < 1:
        raise ValueError(f"`max_covariates` must be a positive integer; got {max_covariates!r}.")
    if comparison not in _COMPARISONS:
        raise ValueError(f"`comparison` must be one of {list(_COMPARISONS)}; got {comparison!r}.")
    table = estimator if isinstance(estimator, pd.DataFrame) else None
    if table is None:
        table = diagnostics.balance_table(estimator, X)
    raw = table["raw_smd_treated_vs_control"].astype(float)
    weighted = table[f"smd_{comparison}"].astype(float)
    largest = np.maximum(raw.abs(), weighted.abs()).sort_values(ascending=False)
    shown = largest.index[:max_covariates]
    order = raw[shown].abs().sort_values().index  # largest unweighted imbalance on top
    positions = np.arange(len(order))
    figure, ax = _figure_and_axes(ax, (6.4, 1.9 + 0.34 * len(order)))
    reach = max(float(np.nanmax(np.abs([raw[order], weighted[order]]))), threshold) * 1.12
    ax.axvspan(-threshold, threshold, color=_BAND_COLOR, zorder=0,
               label=f"|SMD| < {threshold:g} (common practice)")  # fmt: skip
    ax.axvline(0, color="0.55", linewidth=0.8, zorder=1)
    first, second = comparison.split("_vs_")
    inside = weighted[order].abs() < threshold
    for y, name in zip(positions, order, strict=True):
        start, end = raw[name], weighted[name]
        if np.isfinite(start) and np.isfinite(end) and abs(end - start) > 1e-3 * reach:
            ax.annotate("", xy=(end, y), xytext=(start, y), zorder=2,
                        arrowprops={"arrowstyle": "-|>", "color": "0.45", "linewidth": 1.1,
                                    "shrinkA": 0, "shrinkB": 4, "mutation_scale": 9})  # fmt: skip
    ax.scatter(raw[order], positions, marker="|", s=110, linewidths=2.2, color="0.5", zorder=3,
               label="survivors, unweighted: treated vs control")  # fmt: skip
    ax.scatter(weighted[order], positions, marker="D", s=30, zorder=4,
               color=np.where(inside, _INSIDE_COLOR, _OUTSIDE_COLOR),
               label=f"weighted: {first} vs {second} reconstruction")  # fmt: skip
    ax.set_yticks(positions, [str(name) for name in order])
    ax.set_ylim(-0.7, len(order) - 0.3)
    ax.set_xlim(-reach, reach)
    ax.set_xlabel("standardized mean difference (arrow: unweighted to weighted)")
    ax.grid(axis="x", color="0.93", zorder=0)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    title = "Covariate balance of the always-survivor reconstructions"
    if len(order) < len(raw):
        title += f"\n({len(order)} of {len(raw)} covariates: the largest differences)"
    ax.set_title(title, fontsize=10, pad=10)
    _legend_below(ax, ncol=1)  # one entry a line: the study's arm names can be long
    return figure


def plot_overlap(estimator, *, score="treatment", bins=40, ax=None):
    """Histograms of a fitted score in the treated and control arms.

    Parameters
    ----------
    estimator : fitted estimator exposing ``nuisance_`` and ``training_data_``
    score : {"treatment", "always_survivor", "protected", "harmed", "doomed"}
        ``"treatment"`` is the treatment probability ``pi(X)``; the others are principal
        scores (``"protected"`` under monotonicity "increasing", ``"harmed"`` under
        "decreasing").
    bins : int, default=40
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    o = oriented_predictions(estimator)
    scores = fitted_scores(o)
    if score not in scores:
        raise ValueError(f"`score` must be one of {list(scores)}; got {score!r}.")
    values = scores[score]
    treated = treated_indicator(o) == 1
    figure, ax = _figure_and_axes(ax, (6.4, 4.2))
    edges = np.linspace(0.0, 1.0, bins + 1)
    for arm, rows in (("treated", treated), ("control", ~treated)):
        histogram_steps(
            ax, values[rows], edges, density=True, fill=True, alpha=0.45,
            color=_ARM_COLORS[arm], label=f"{arm} (n={int(rows.sum()):,})",
        )  # fmt: skip
    low, high = PROBABILITY_BOUNDS
    bounds = (low, high) if score == "treatment" else (low,)
    for i, bound in enumerate(bounds):
        label = f"common-practice bound{'s' if len(bounds) > 1 else ''}" if i == 0 else None
        ax.axvline(bound, color="0.3", linestyle="--", linewidth=1, label=label)
    name = "treatment probability" if score == "treatment" else f"{score} score"
    ax.set_xlim(0, 1)
    ax.set_xlabel(f"fitted {name.replace('_', '-')}")
    ax.set_ylabel("density")
    ax.set_title(f"Overlap of the fitted {name.replace('_', '-')} by arm", fontsize=10)
    _legend_below(ax, ncol=3)
    return figure


def plot_weights(estimator, *, bins=50, ax=None):
    """Distribution of the balancing weights of each reconstruction (log scale).

    Each weight set is divided by its mean so the three share one axis; the legend gives the
    Kish effective sample size against the number of rows with positive weight.

    Parameters
    ----------
    estimator : fitted estimator exposing ``nuisance_`` and ``training_data_``
    bins : int, default=50
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    o = oriented_predictions(estimator)
    weights = {g: w[w > 0] for g, w in balancing_weights(o).items()}
    scaled = {g: w / w.mean() for g, w in weights.items()}
    low = min(v.min() for v in scaled.values())
    high = max(v.max() for v in scaled.values())
    edges = np.geomspace(low, high * (1 + 1e-9), bins + 1)
    figure, ax = _figure_and_axes(ax, (6.4, 4.2))
    colors = (_ARM_COLORS["treated"], _ARM_COLORS["control"], "0.4")
    for (group, values), color in zip(scaled.items(), colors, strict=True):
        ess = effective_sample_size(weights[group])
        histogram_steps(
            ax, values, edges, weights=np.full(values.size, 1 / values.size), linewidth=1.6,
            color=color, label=f"{_GROUP_LABELS[group]}: ESS {ess:,.0f} of {values.size:,} rows",
        )  # fmt: skip
    ax.axvline(1.0, color="0.6", linestyle=":", linewidth=1)
    ax.set_xscale("log")
    # Plain numbers at 1-2-5 steps read better than powers of ten over a narrow weight range.
    ax.xaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0)))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("weight / mean weight (log scale)")
    ax.set_ylabel("share of the set's rows")
    ax.set_title("Balancing weights of the always-survivor reconstructions", fontsize=10)
    _legend_below(ax, ncol=1)
    return figure
