"""Figures of the always-survivor distributions and quantile effects (matplotlib, lazily)."""

from __future__ import annotations

import numpy as np

from ..estimands._strata import stratum_words
from ._sensitivity import _CAUTION, _pyplot

__all__ = ["plot_survivor_distribution", "plot_quantile_effects", "plot_level_shares"]

_ARMS = (("treated", "#1f5f8b"), ("control", "#b5651d"))


def plot_survivor_distribution(distribution, *, axes=None, outcome="outcome"):
    """Always-survivor CDFs with pointwise intervals and simultaneous bands, naive CDFs beside.

    Parameters
    ----------
    distribution : SurvivorDistribution
        From :func:`pscore_strata.survivor_distribution`.
    axes : pair of matplotlib Axes, optional
        Left: the always-survivor CDFs; right: the survivors' empirical CDFs per arm.
    outcome : str, default="outcome"
        Name of the outcome for the axis label.

    Returns
    -------
    ndarray of two matplotlib Axes
    """
    plt = _pyplot()
    if axes is None:
        _, axes = plt.subplots(1, 2, figsize=(10, 4), sharey=True, layout="constrained")
    frame = distribution.to_frame()
    x = frame["value"].to_numpy()
    left, right = axes
    level = f"{distribution.level:.0%}"
    for arm, color in _ARMS:
        left.fill_between(x, frame[f"{arm}_band_low"], frame[f"{arm}_band_high"], step="post",
                          color=color, alpha=0.15, linewidth=0)  # fmt: skip
        left.fill_between(x, frame[f"{arm}_ci_low"], frame[f"{arm}_ci_high"], step="post",
                          color=color, alpha=0.3, linewidth=0)  # fmt: skip
        left.step(x, frame[arm], where="post", color=color, linewidth=2, label=f"under {arm}")
        right.step(x, frame[f"naive_{arm}"], where="post", color=color, linewidth=2,
                   linestyle="--", label=f"{arm} survivors")  # fmt: skip
    stratum = getattr(distribution, "stratum", "always_survivor")
    group = ("Always-survivors" if stratum == "always_survivor" else
             f"The {stratum_words(stratum)} stratum")  # fmt: skip
    left.set_title(f"{group} (bands: {level} pointwise, darker; simultaneous, lighter)",
                   fontsize=9)  # fmt: skip
    if stratum == "always_survivor":
        right.set_title("All survivors of each arm (naive; biased when treatment changes who "
                        "survives)", fontsize=9)  # fmt: skip
    else:
        right.set_title("The stratum's cell in each arm as observed (naive; a cell may mix in "
                        "another stratum)", fontsize=9)  # fmt: skip
    for ax in axes:
        ax.set_xlabel(outcome)
        ax.set_ylim(-0.02, 1.02)
        ax.grid(color="0.92")
        ax.legend(fontsize=8, loc="lower right")
    left.set_ylabel(f"P({outcome} <= value)")
    left.annotate(_CAUTION, (0, 0), (0, -48), xycoords="axes fraction",
                  textcoords="offset points", fontsize=7, color="dimgrey")  # fmt: skip
    return np.asarray(axes)


def plot_quantile_effects(table, *, ax=None, outcome="outcome", bounds=None):
    """Quantile effects with intervals, and trimming bounds when given.

    Parameters
    ----------
    table : DataFrame
        From :func:`pscore_strata.quantile_effects`.
    ax : matplotlib Axes, optional
    outcome : str, default="outcome"
    bounds : DataFrame, optional
        ``TrimmingBounds(quantiles=...).quantile_bounds_``, drawn as shaded bars.

    Returns
    -------
    matplotlib Axes
    """
    plt = _pyplot()
    if ax is None:
        _, ax = plt.subplots(figsize=(7, 4), layout="constrained")
    u = table["quantile"].to_numpy()
    ax.errorbar(u, table["effect"], yerr=[table["effect"] - table["ci_low"],
                                          table["ci_high"] - table["effect"]],
                fmt="o", color="#1f5f8b", capsize=4, label="quantile effect (CI)")  # fmt: skip
    if bounds is not None:
        ax.vlines(bounds["quantile"] + 0.012, bounds["lower"], bounds["upper"], color="#b5651d",
                  linewidth=6, alpha=0.5, label="bounds without principal ignorability")
    ax.axhline(0, color="0.3", linewidth=1, linestyle="--")
    ax.set_xticks(u, [f"{q:g}" for q in u])
    stratum = table.attrs.get("stratum", "always_survivor")
    words = stratum_words(stratum)
    members = "always-survivors" if stratum == "always_survivor" else f"the {words} stratum"
    ax.set_xlabel(f"quantile of the {words} distribution")
    ax.set_ylabel(f"difference in {outcome} (treated - control)")
    ax.set_title(f"Quantile effects among {members}", fontsize=10)
    ax.grid(color="0.92")
    ax.legend(fontsize=8)
    return ax


def plot_level_shares(comparison, *, ax=None, labels=None, arm_names=("treated", "control"),
                      outcome="outcome"):  # fmt: skip
    """Stacked bars of the always-survivors' level shares under each arm.

    Parameters
    ----------
    comparison : OrdinalComparison or DataFrame
        From :func:`pscore_strata.ordinal_comparison` (or its ``levels`` table: columns
        ``level``, ``treated``, ``control``).
    ax : matplotlib Axes, optional
    labels : mapping or sequence of str, optional
        Text for each level (``{level: label}``, or one label per level in order); default:
        the levels as integers.
    arm_names : (str, str), default=("treated", "control")
        Names of the two arms, treated first.
    outcome : str, default="outcome"

    Returns
    -------
    matplotlib Axes

    Examples
    --------
    >>> import numpy as np, pscore_strata as ps
    >>> data = ps.datasets.make_truncation(500, random_state=0)
    >>> y = np.clip(np.round(data.y), 0, 3)
    >>> est = ps.PrincipalScoreWeighting().fit(
    ...     data.X, y, treatment=data.treatment, survival=data.survival)
    >>> ax = ps.plotting.plot_level_shares(ps.ordinal_comparison(est))
    >>> len(ax.patches)
    8
    """
    plt = _pyplot()
    table = getattr(comparison, "levels", comparison)
    levels = np.asarray(table["level"], dtype=float)
    if labels is None:
        names = [f"{v:g}" for v in levels]
    elif isinstance(labels, dict):
        names = [str(labels.get(v, labels.get(int(v), f"{v:g}"))) for v in levels]
    else:
        names = [str(text) for text in labels]
        if len(names) != levels.size:
            raise ValueError(
                f"`labels` must give one label per level ({levels.size}); got {len(names)}."
            )
    if ax is None:
        _, ax = plt.subplots(figsize=(7, 2.2 + 0.1 * levels.size), layout="constrained")
    colors = plt.get_cmap("RdYlBu")(np.linspace(0.1, 0.9, levels.size))
    left = np.zeros(2)
    for k, name in enumerate(names):
        shares = np.array([table["treated"].iloc[k], table["control"].iloc[k]], dtype=float)
        ax.barh([0, 1], shares, left=left, color=colors[k], edgecolor="white", label=name)
        for row, (start, width) in enumerate(zip(left, shares, strict=True)):
            if width >= 0.06:
                ax.text(start + width / 2, row, f"{width:.0%}", ha="center", va="center",
                        fontsize=8)  # fmt: skip
        left = left + shares
    ax.set_yticks([0, 1], list(arm_names))
    ax.invert_yaxis()
    ax.set_xlim(0, 1)
    from matplotlib.ticker import PercentFormatter

    ax.xaxis.set_major_formatter(PercentFormatter(1.0))
    ax.set_xlabel(f"share of always-survivors at each level of {outcome}")
    ax.set_title("Level shares among always-survivors (estimated; the stratum is latent)",
                 fontsize=10)  # fmt: skip
    ax.legend(fontsize=8, ncol=min(levels.size, 4), loc="upper center",
              bbox_to_anchor=(0.5, -0.35 - 0.02 * levels.size), frameon=False)  # fmt: skip
    return ax
