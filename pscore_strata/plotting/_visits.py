"""The figure of the survivor effects over visits (matplotlib is imported only when drawn)."""

from __future__ import annotations

import numpy as np

from ._sensitivity import _CAUTION, _pyplot

__all__ = ["plot_visit_effects"]

_ARMS = (("treated", "#1f5f8b"), ("control", "#b5651d"))


def plot_visit_effects(table, *, axes=None, outcome="outcome"):
    """The effect over visits with pointwise intervals and the simultaneous band; beside it
    the share alive per arm at each visit.

    Parameters
    ----------
    table : pandas.DataFrame
        From :func:`pscore_strata.visit_effects`.
    axes : pair of matplotlib Axes, optional
        Left: the effects; right: the survival shares.
    outcome : str, default="outcome"
        Name of the outcome for the axis label.

    Returns
    -------
    ndarray of two matplotlib Axes
    """
    plt = _pyplot()
    if axes is None:
        _, axes = plt.subplots(1, 2, figsize=(10, 4), layout="constrained",
                               gridspec_kw={"width_ratios": (3, 2)})  # fmt: skip
    left, right = axes
    x = np.arange(len(table))
    labels = [str(v) for v in table["visit"]]
    level = f"{table.attrs.get('level', 0.95):.0%}"
    null = 0.0 if table.attrs.get("scale", "difference") == "difference" else 1.0
    # The band is drawn per visit, not joined: nothing is estimated between visits.
    left.bar(x, table["band_high"] - table["band_low"], bottom=table["band_low"], width=0.35,
             color="#1f5f8b", alpha=0.15, linewidth=0,
             label=f"{level} simultaneous band")  # fmt: skip
    left.errorbar(x, table["effect"],
                  yerr=[table["effect"] - table["ci_low"], table["ci_high"] - table["effect"]],
                  color="#1f5f8b", marker="o", capsize=4, linewidth=1.5,
                  label=f"effect with {level} pointwise interval")  # fmt: skip
    left.axhline(null, color="0.4", linewidth=0.8, linestyle=":")
    population = table.attrs.get("population", "each")
    who = ("always-survivors to each visit (a different group per visit)" if population == "each"
           else "always-survivors to the last visit (one group)")  # fmt: skip
    test = table.attrs.get("wald_test")
    title = f"Survivor effect over visits: {who}"
    if test is not None and np.isfinite(test["p_value"]):
        shown = "p < 0.001" if test["p_value"] < 0.001 else f"p = {test['p_value']:.3f}"
        title += f"\nno effect at any visit: {shown}"
    left.set_title(title, fontsize=9)
    left.set_ylabel(f"effect on {outcome}")
    for arm, color in _ARMS:
        right.plot(x, table[f"survival_share_{arm}"], color=color, marker="o", linewidth=1.5,
                   label=arm)  # fmt: skip
    right.set_ylim(0, 1.02)
    right.set_ylabel("observed share alive (known status)")
    right.set_title("Survival per arm", fontsize=9)
    for ax in axes:
        ax.set_xticks(x, labels)
        ax.set_xlabel("visit")
        ax.grid(color="0.92")
        ax.legend(fontsize=8, loc="best")
    left.annotate(_CAUTION, (0, 0), (0, -48), xycoords="axes fraction",
                  textcoords="offset points", fontsize=7, color="dimgrey")  # fmt: skip
    return np.asarray(axes)
