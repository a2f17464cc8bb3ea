"""Operating characteristics of a Monte Carlo study: bias, RMSE, coverage, and their figure."""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["summarize", "plot_summary"]

_SUMMARY_CAUTION = (
    "These operating characteristics hold for simulated data in which the assumptions are known "
    "to hold or fail by construction. In real data the always-survivor stratum is latent and "
    "monotonicity and principal ignorability cannot be tested; no individual decisions should "
    "rest on an estimate. Defer to the study protocol, local regulation and a qualified "
    "statistician."
)


# -- summaries ---------------------------------------------------------------------------------
_GROUP = ["scenario", "estimator", "n_samples"]
_NEEDED = [*_GROUP, "estimate", "std_error", "ci_low", "ci_high", "truth", "failed"]


def _summarize_group(group):
    ok = group[~group["failed"].astype(bool)]
    k = len(ok)
    error = ok["estimate"] - ok["truth"]
    sd = float(ok["estimate"].std(ddof=1)) if k > 1 else np.nan
    covered = (ok["ci_low"] <= ok["truth"]) & (ok["truth"] <= ok["ci_high"])
    coverage = float(covered.mean()) if k else np.nan
    mean_se = float(ok["std_error"].mean()) if k else np.nan
    return pd.Series(
        {
            "n_reps": len(group),
            "n_failed": len(group) - k,
            "truth": float(group["truth"].mean()),
            "mean_estimate": float(ok["estimate"].mean()) if k else np.nan,
            "bias": float(error.mean()) if k else np.nan,
            # Monte Carlo standard errors of the bias and the coverage (Morris, White & Crowther
            # 2019, Stat Med, Table 6): SD / sqrt(k) and sqrt(c (1 - c) / k).
            "bias_mcse": sd / np.sqrt(k) if k > 1 else np.nan,
            "sd": sd,
            "rmse": float(np.sqrt(np.mean(error**2))) if k else np.nan,
            "mean_se": mean_se,
            "se_sd_ratio": mean_se / sd if k > 1 and sd > 0 else np.nan,
            "coverage": coverage,
            "coverage_mcse": float(np.sqrt(coverage * (1 - coverage) / k)) if k else np.nan,
            "mean_width": float((ok["ci_high"] - ok["ci_low"]).mean()) if k else np.nan,
        }
    )


def summarize(results):
    """Operating characteristics per scenario x estimator x sample size.

    Parameters
    ----------
    results : pandas.DataFrame
        The output of :func:`run_study` (or any table with its columns).

    Returns
    -------
    summary : pandas.DataFrame
        One row per scenario x estimator x n_samples, in order of appearance, with ``n_reps``,
        ``n_failed``, ``truth``, ``mean_estimate``, ``bias`` (mean of estimate - truth),
        ``bias_mcse``, ``sd`` (Monte Carlo SD, ddof=1), ``rmse``, ``mean_se``, ``se_sd_ratio``
        (near 1 when standard errors are honest), ``coverage`` (share of intervals holding the
        truth), ``coverage_mcse`` and ``mean_width``. Failed replicates count in ``n_failed``
        only. ``attrs["notes"]`` carries the cautions for reading it.
    """
    if not isinstance(results, pd.DataFrame):
        raise TypeError(
            f"`results` must be the DataFrame returned by run_study; got {type(results).__name__}."
        )
    missing = [c for c in _NEEDED if c not in results.columns]
    if missing:
        raise ValueError(
            f"`results` lacks the column(s) {', '.join(missing)}; pass the DataFrame returned by "
            "run_study."
        )
    if results.empty:
        raise ValueError("`results` has no rows; run a study with at least one replicate.")
    summary = results.groupby(_GROUP, sort=False)[_NEEDED[3:]].apply(_summarize_group).reset_index()
    summary["n_reps"] = summary["n_reps"].astype(int)
    summary["n_failed"] = summary["n_failed"].astype(int)
    summary.attrs["notes"] = [_SUMMARY_CAUTION]
    return summary


_PANELS = (
    ("bias", "Bias (+/- 2 MC s.e.)"),
    ("rmse", "RMSE"),
    ("se_sd_ratio", "Mean SE / SD"),
    ("coverage", "Coverage"),
)


def plot_summary(summary, *, level=0.95):
    """Draw bias, RMSE, SE/SD and coverage against sample size, one row per scenario.

    Parameters
    ----------
    summary : pandas.DataFrame
        The output of :func:`summarize`.
    level : float, default=0.95
        Nominal level drawn as the coverage reference line.

    Returns
    -------
    fig : matplotlib.figure.Figure
    """
    if not isinstance(summary, pd.DataFrame) or "se_sd_ratio" not in summary.columns:
        raise TypeError("`summary` must be the DataFrame returned by summarize(results).")
    import matplotlib.pyplot as plt

    scenarios = list(dict.fromkeys(summary["scenario"]))
    estimators = list(dict.fromkeys(summary["estimator"]))
    sizes = sorted(set(summary["n_samples"]))
    fig, axes = plt.subplots(
        len(scenarios),
        len(_PANELS),
        figsize=(3.2 * len(_PANELS), 2.3 * len(scenarios) + 0.8),
        squeeze=False,
        sharex=True,
    )
    colors = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for i, scenario in enumerate(scenarios):
        rows = summary[summary["scenario"] == scenario]
        for j, (column, title) in enumerate(_PANELS):
            ax = axes[i, j]
            for k, name in enumerate(estimators):
                part = rows[rows["estimator"] == name].sort_values("n_samples")
                offset = 1 + 0.04 * (k - (len(estimators) - 1) / 2)  # keep error bars apart
                x = part["n_samples"] * offset
                color = colors[k % len(colors)]
                if column in ("bias", "coverage"):
                    half = 2 * part[f"{column}_mcse"]
                    ax.errorbar(
                        x,
                        part[column],
                        yerr=half,
                        marker="o",
                        ms=4,
                        capsize=2,
                        color=color,
                        label=name,
                    )
                else:
                    ax.plot(x, part[column], marker="o", ms=4, color=color, label=name)
            reference = {"bias": 0.0, "se_sd_ratio": 1.0, "coverage": level}.get(column)
            if reference is not None:
                ax.axhline(reference, color="0.4", lw=0.8, ls="--")
            if column == "rmse":
                ax.set_ylim(bottom=0)
            if column == "coverage":
                # Error bars may pass 0 or 1; coverage itself cannot.
                low = np.nanmin(np.append(rows["coverage"].to_numpy(), level))
                ax.set_ylim(max(-0.02, low - 0.05), 1.02)
            ax.set_xscale("log")
            ax.set_xticks(sizes, [f"{n:g}" for n in sizes])
            ax.minorticks_off()
            ax.grid(alpha=0.3)
            if i == 0:
                ax.set_title(title, fontsize=10)
            if j == 0:
                ax.set_ylabel(scenario, fontsize=10)
            if i == len(scenarios) - 1:
                ax.set_xlabel("sample size")
    handles, labels = axes[0, 0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="upper center", ncol=len(estimators), frameon=False)
    fig.tight_layout(rect=(0, 0, 1, 1 - 0.5 / fig.get_figheight()))
    return fig
