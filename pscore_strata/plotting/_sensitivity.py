"""Figures for the sensitivity analysis (matplotlib is imported only when a figure is drawn)."""

from __future__ import annotations

import numpy as np

from ..assumptions._sensitivity import NULL_SETTING, sensitivity_grid
from ..assumptions._tipping import tipping_point

__all__ = ["plot_sensitivity", "plot_sensitivity_contour"]

_LABELS = {
    "pi_difference": "principal ignorability: {mixed} minus always-survivor mean (difference)",
    "pi_ratio": "principal ignorability: {mixed} / always-survivor mean (ratio)",
    "harmed_ratio": "monotonicity: {other} / {mixed} stratum size",
}


def _label(parameter, estimator):
    # The stratum that mixes with the always-survivors is the protected one under
    # "increasing" monotonicity and the harmed one under "decreasing".
    increasing = getattr(estimator, "monotonicity", "increasing") == "increasing"
    mixed, other = ("protected", "harmed") if increasing else ("harmed", "protected")
    return _LABELS[parameter].format(mixed=mixed, other=other)


def _footer(ax):
    """The caution under the x-axis label, kept inside the saved figure."""
    return ax.annotate(_CAUTION, (0, 0), xycoords=ax.xaxis.label, xytext=(0, -4),
                       textcoords="offset points", va="top", fontsize=7, color="dimgrey",
                       annotation_clip=False)  # fmt: skip

_CAUTION = (
    "The always-survivor stratum is latent and the assumptions are untestable.\n"
    "Not for individual decisions: follow the study protocol and consult a qualified statistician."
)


def _pyplot():
    try:
        import matplotlib.pyplot as plt
    except ImportError as error:  # pragma: no cover - depends on the environment
        raise ImportError(
            "Plotting needs matplotlib: pip install matplotlib (or, from a checkout of "
            "pscore_strata, pip install '.[plot]')."
        ) from error
    return plt


def plot_sensitivity(estimator, parameter="pi_difference", values=None, *, level=0.95, ax=None):
    """Effect and confidence band along one sensitivity parameter, with the tipping point.

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
    parameter : {"pi_difference", "pi_ratio", "harmed_ratio"}, default="pi_difference"
    values : sequence of float, optional
        Grid of the parameter; by default a range around the null that reaches past the
        tipping point when there is one.
    level : float, default=0.95
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes
    """
    plt = _pyplot()
    tip = tipping_point(estimator, parameter, level=level)
    default_grid = values is None
    values = _default_values(parameter, tip) if default_grid else values
    grid = sensitivity_grid(estimator, level=level, **{parameter: values})
    if default_grid and parameter == "harmed_ratio":
        grid = _informative(grid, estimator.n_samples_)
    if ax is None:
        _, ax = plt.subplots(figsize=(7, 4.9), layout="constrained")
    x = grid[parameter].to_numpy()
    ax.fill_between(x, grid["ci_low"], grid["ci_high"], alpha=0.25, label=f"{level:.0%} interval")
    ax.plot(x, grid["effect"], lw=2, label="SACE")
    null_effect = 0.0 if estimator.scale == "difference" else 1.0
    ax.axhline(null_effect, color="black", lw=0.8)
    ax.axvline(NULL_SETTING[parameter], color="grey", ls=":", lw=1, label="assumption holds")
    if np.isfinite(tip):
        ax.axvline(tip, color="tab:red", ls="--", lw=1.2, label=f"tipping point {tip:.3f}")
    if parameter == "pi_ratio":
        ax.set_xscale("log")
    ax.set_xlabel(_label(parameter, estimator))
    ax.set_ylabel(f"SACE ({estimator.scale})")
    ax.set_title(f"Sensitivity of the SACE ({type(estimator).__name__})", fontsize=11)
    ax.legend(fontsize=8, loc="best")
    _footer(ax)
    return ax


def _informative(grid, n_samples):
    """The harmed-ratio grid up to where the always-survivor score is clipped at zero for more
    than 5% of rows (common practice, as in the diagnostics): beyond it the data say little."""
    from ..diagnostics._arrays import ROW_SHARE_TOLERANCE

    informative = (grid["n_rows_clipped"] <= ROW_SHARE_TOLERANCE * n_samples).to_numpy()
    last = int(np.flatnonzero(informative)[-1]) if informative.any() else 0
    return grid.iloc[: max(last + 1, 3)]


def _default_values(parameter, tip):
    if parameter == "harmed_ratio":
        top = min(0.99, 1.05 * tip) if np.isfinite(tip) and tip > 0.9 else 0.9
        return np.linspace(0.0, top, 46)
    if parameter == "pi_ratio":
        reach = abs(np.log(tip)) * 1.5 if np.isfinite(tip) and tip != 1 else np.log(2.0)
        return np.exp(np.linspace(-reach, reach, 61))
    reach = abs(tip) * 1.5 if np.isfinite(tip) and tip != 0 else 1.0
    return np.linspace(-reach, reach, 61)


def plot_sensitivity_contour(
    estimator, principal_ignorability="pi_difference", pi_values=None, harmed_values=None, *,
    level=0.95, ax=None,
):  # fmt: skip
    """Effect over principal ignorability x monotonicity departures, with the zero contours.

    The solid black line is where the estimate equals the null effect; the dashed line is where
    the confidence interval starts to cover it.

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
    principal_ignorability : {"pi_difference", "pi_ratio"}, default="pi_difference"
    pi_values, harmed_values : sequence of float, optional
    level : float, default=0.95
    ax : matplotlib Axes, optional

    Returns
    -------
    matplotlib Axes
    """
    plt = _pyplot()
    if principal_ignorability not in ("pi_difference", "pi_ratio"):
        raise ValueError(
            "`principal_ignorability` must be 'pi_difference' or 'pi_ratio'; got "
            f"{principal_ignorability!r}."
        )
    if pi_values is None:
        tip = tipping_point(estimator, principal_ignorability, criterion="estimate")
        pi_values = _default_values(principal_ignorability, tip)
    harmed_values = np.linspace(0, 0.5, 26) if harmed_values is None else harmed_values
    grid = sensitivity_grid(
        estimator, level=level,
        **{principal_ignorability: pi_values, "harmed_ratio": harmed_values},
    )  # fmt: skip
    shape = (len(pi_values), len(harmed_values))
    x = grid[principal_ignorability].to_numpy().reshape(shape)
    y = grid["harmed_ratio"].to_numpy().reshape(shape)
    effect = grid["effect"].to_numpy().reshape(shape)
    null_effect = 0.0 if estimator.scale == "difference" else 1.0
    sign = np.sign(estimator.effect_ - null_effect) or 1.0
    near_end = (grid["ci_low"] if sign > 0 else grid["ci_high"]).to_numpy().reshape(shape)
    if ax is None:
        _, ax = plt.subplots(figsize=(7, 5.4), layout="constrained")
    spread = np.nanmax(np.abs(effect - null_effect))
    filled = ax.contourf(x, y, effect, levels=21, cmap="RdBu_r",
                         vmin=null_effect - spread, vmax=null_effect + spread)  # fmt: skip
    plt.colorbar(filled, ax=ax, label=f"SACE ({estimator.scale})")
    for surface, style, name in ((effect, "-", "estimate"), (near_end, "--", "interval end")):
        if np.nanmin(surface) < null_effect < np.nanmax(surface):
            lines = ax.contour(x, y, surface, levels=[null_effect], colors="black",
                               linestyles=style, linewidths=1.5)  # fmt: skip
            ax.clabel(lines, fmt={null_effect: f"{name} = {null_effect:g}"}, fontsize=8)
    # The null point sits on the lower edge of the grid: drawn unclipped and above the
    # contours, so the whole marker shows.
    ax.plot([NULL_SETTING[principal_ignorability]], [0.0], "k*", ms=10,
            label="both assumptions hold", clip_on=False, zorder=5)  # fmt: skip
    if principal_ignorability == "pi_ratio":
        ax.set_xscale("log")
    ax.set_xlabel(_label(principal_ignorability, estimator))
    ax.set_ylabel(_label("harmed_ratio", estimator))
    ax.set_title(f"SACE under two departures ({type(estimator).__name__})", fontsize=11)
    ax.legend(fontsize=8, loc="upper right")
    _footer(ax)
    return ax
