"""The figure of a study's summary: each measure with its Monte Carlo error bars."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

__all__ = ["plot_summary"]

_PANELS = (
    ("bias", "Bias"),
    ("rmse", "RMSE"),
    ("se_sd_ratio", "Model SE / empirical SE"),
    ("coverage", "Coverage"),
)


def _x_values(summary, x):
    if x == "n_samples":
        return summary["n_samples"].astype(float)
    values = [json.loads(p).get(x, np.nan) for p in summary["params"]]
    if all(v is None or (isinstance(v, float) and np.isnan(v)) for v in values):
        raise ValueError(
            f"`x` must be 'n_samples' or a parameter varied by the study's params; no setting "
            f"holds {x!r}."
        )
    return pd.Series(values, index=summary.index, dtype=float)


def plot_summary(summary, *, level=0.95, x="n_samples"):
    """Draw bias, RMSE, SE/SD and coverage with +/- 2 Monte Carlo s.e. bars, a row per scenario.

    Parameters
    ----------
    summary : pandas.DataFrame
        The output of :func:`summarize`.
    level : float, default=0.95
        Nominal level drawn as the coverage reference line.
    x : str, default="n_samples"
        The horizontal axis: the sample size (log scale) or the name of a parameter the study
        varied with ``params`` (one line per estimator and, when the study also varied the
        other parameters or n, per remaining setting).

    Returns
    -------
    fig : matplotlib.figure.Figure
    """
    if not isinstance(summary, pd.DataFrame) or "se_sd_ratio" not in summary.columns:
        raise TypeError("`summary` must be the DataFrame returned by summarize(results).")
    import matplotlib.pyplot as plt

    summary = summary.assign(params=summary.get("params", "{}"))
    if "kind" in summary.columns:
        summary = summary[summary["kind"] == "point"]
    xs = _x_values(summary, x)
    summary = summary.assign(_x=xs)
    if x == "n_samples":
        summary = summary.assign(_line=summary["estimator"] + _other_settings(summary, None))
    else:
        sizes = summary["n_samples"].map(lambda n: f", n={n}")
        if summary["n_samples"].nunique() <= 1:
            sizes = ""
        summary = summary.assign(_line=summary["estimator"] + _other_settings(summary, x) + sizes)
    scenarios = list(dict.fromkeys(summary["scenario"]))
    lines = list(dict.fromkeys(summary["_line"]))
    ticks = sorted(set(summary["_x"].dropna()))
    fig, axes = plt.subplots(
        len(scenarios), len(_PANELS),
        figsize=(3.2 * len(_PANELS), 2.3 * len(scenarios) + 0.8), squeeze=False, sharex=True,
    )  # fmt: skip
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for i, scenario in enumerate(scenarios):
        rows = summary[summary["scenario"] == scenario]
        for j, (column, title) in enumerate(_PANELS):
            ax = axes[i, j]
            for k, name in enumerate(lines):
                part = rows[rows["_line"] == name].sort_values("_x")
                spread = 0.04 * (k - (len(lines) - 1) / 2)  # keep error bars apart
                xpos = part["_x"] * (1 + spread) if x == "n_samples" else part["_x"] + spread * (
                    (max(ticks) - min(ticks)) / 4 if len(ticks) > 1 else 1)
                mcse = part.get(f"{column}_mcse", pd.Series(np.nan, index=part.index))
                ax.errorbar(xpos, part[column], yerr=2 * mcse.to_numpy(float), marker="o", ms=4,
                            capsize=2, color=colors[k % len(colors)], label=name)  # fmt: skip
            reference = {"bias": 0.0, "se_sd_ratio": 1.0, "coverage": level}.get(column)
            if reference is not None:
                ax.axhline(reference, color="0.4", lw=0.8, ls="--")
            if column == "rmse":
                ax.set_ylim(bottom=0)
            if column == "coverage":
                # Error bars may pass 0 or 1; coverage itself cannot.
                low = np.nanmin(np.append(rows["coverage"].to_numpy(float), level))
                ax.set_ylim(max(-0.02, low - 0.05), 1.02)
            if x == "n_samples":
                ax.set_xscale("log")
                ax.set_xticks(ticks, [f"{n:g}" for n in ticks])
                ax.minorticks_off()
            ax.grid(alpha=0.3)
            if i == 0:
                ax.set_title(title + " (+/- 2 MC s.e.)", fontsize=9)
            if j == 0:
                ax.set_ylabel(scenario, fontsize=10)
            if i == len(scenarios) - 1:
                ax.set_xlabel("sample size" if x == "n_samples" else x)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="upper center", ncol=min(len(lines), 4), frameon=False)
    fig.tight_layout(rect=(0, 0, 1, 1 - 0.5 / fig.get_figheight()))
    return fig


def _other_settings(summary, x):
    """Label suffix for settings other than the x axis, when the study varied them."""
    def rest(p):
        setting = {k: v for k, v in json.loads(p).items() if k != x}
        return ", ".join(f"{k}={v}" for k, v in setting.items())

    labels = summary["params"].map(rest)
    if labels.nunique() <= 1:
        return ""
    return " (" + labels + ")"
