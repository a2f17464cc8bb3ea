"""Operating characteristics of a Monte Carlo study, with their Monte Carlo standard errors.

Every performance measure and its Monte Carlo standard error (MCSE) follows Morris, White &
Crowther (2019), "Using simulation studies to evaluate statistical methods", Stat Med 38,
Table 6, with ``k`` successful replicates, estimates ``t_i``, their mean ``m`` and the truth
``theta``:

- bias ``m - theta``, MCSE ``sd / sqrt(k)``;
- empirical SE ``sd = sqrt(sum (t_i - m)^2 / (k - 1))``, MCSE ``sd / sqrt(2 (k - 1))``;
- MSE ``mean (t_i - theta)^2``, MCSE ``sqrt(sum ((t_i - theta)^2 - MSE)^2 / (k (k - 1)))``;
  RMSE is its square root, MCSE by the delta method ``MCSE(MSE) / (2 RMSE)``;
- model SE ``sqrt(mean se_i^2)``, MCSE ``sqrt(Var(se^2) / (4 k modelSE^2))``; the ratio
  ``modelSE / sd``, MCSE ``ratio sqrt(Var(se^2) / (4 k modelSE^4) + 1 / (2 (k - 1)))``;
- coverage ``c``, MCSE ``sqrt(c (1 - c) / k)``;
- relative efficiency of an estimator against a reference, ``(sd_ref / sd)^2`` over the
  replicates where both succeeded, MCSE ``2 RE sqrt((1 - rho^2) / (k - 1))`` with ``rho`` the
  correlation of the paired estimates.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["summarize"]

_SUMMARY_CAUTION = (
    "These operating characteristics hold for simulated data in which the assumptions are known "
    "to hold or fail by construction. In real data the always-survivor stratum is latent and "
    "monotonicity and principal ignorability cannot be tested; no individual decisions should "
    "rest on an estimate. Defer to the study protocol, local regulation and a qualified "
    "statistician."
)
_MCSE_NOTE = (
    "Monte Carlo standard errors (the *_mcse columns) follow Morris, White & Crowther (2019, "
    "Stat Med); quote them with the measures. se_sd_ratio uses the root mean squared standard "
    "error."
)

_GROUP = ["scenario", "params", "estimator", "n_samples"]
_NEEDED = ["scenario", "estimator", "n_samples", "estimate", "std_error", "ci_low", "ci_high",
           "truth", "failed"]  # fmt: skip
_OPTIONAL = {"params": "{}", "kind": "point", "replicate": None, "fit_seconds": np.nan,
             "interval": "", "lower": np.nan, "upper": np.nan, "set_low": np.nan,
             "set_high": np.nan, "truth_lower": np.nan, "truth_upper": np.nan}  # fmt: skip


def _share(flags):
    k = len(flags)
    c = float(np.mean(flags)) if k else np.nan
    return c, (float(np.sqrt(c * (1 - c) / k)) if k else np.nan)


def _point_measures(ok, truth):
    k = len(ok)
    t = ok["estimate"].to_numpy(float)
    se = ok["std_error"].to_numpy(float)
    known = bool(np.isfinite(truth))
    m = float(t.mean()) if k else np.nan
    sd = float(t.std(ddof=1)) if k > 1 else np.nan
    out = {"mean_estimate": m}
    out["bias"] = m - truth if known and k else np.nan
    out["bias_mcse"] = sd / np.sqrt(k) if known and k > 1 else np.nan
    out["sd"], out["sd_mcse"] = sd, (sd / np.sqrt(2 * (k - 1)) if k > 1 else np.nan)
    if known and k > 1:
        squared = (t - truth) ** 2
        mse = float(squared.mean())
        mse_mcse = float(np.sqrt(np.sum((squared - mse) ** 2) / (k * (k - 1))))
        out["rmse"] = np.sqrt(mse)
        out["rmse_mcse"] = mse_mcse / (2 * out["rmse"]) if mse > 0 else np.nan
    else:
        out["rmse"] = float(np.sqrt(np.mean((t - truth) ** 2))) if known and k else np.nan
        out["rmse_mcse"] = np.nan
    has_se = k > 1 and np.isfinite(se).all()
    variance = se**2
    model_se = float(np.sqrt(variance.mean())) if has_se else np.nan
    var_of_var = float(variance.var(ddof=1)) if has_se else np.nan
    out["mean_se"] = float(se.mean()) if k else np.nan
    out["model_se"] = model_se
    out["model_se_mcse"] = (float(np.sqrt(var_of_var / (4 * k * model_se**2)))
                            if has_se and model_se > 0 else np.nan)  # fmt: skip
    if has_se and sd > 0 and model_se > 0:
        ratio = model_se / sd
        out["se_sd_ratio"] = ratio
        out["se_sd_ratio_mcse"] = ratio * float(
            np.sqrt(var_of_var / (4 * k * model_se**4) + 1 / (2 * (k - 1)))
        )
    else:
        out["se_sd_ratio"] = out["se_sd_ratio_mcse"] = np.nan
    return out


def _interval_measures(ok, truth):
    out = {}
    if np.isfinite(truth) and len(ok):
        covered = (ok["ci_low"] <= truth) & (truth <= ok["ci_high"])
        out["coverage"], out["coverage_mcse"] = _share(covered.to_numpy())
    else:
        out["coverage"] = out["coverage_mcse"] = np.nan
    out["mean_width"] = float((ok["ci_high"] - ok["ci_low"]).mean()) if len(ok) else np.nan
    return out


def _bounds_measures(ok, truth):
    lower, upper = ok["lower"].to_numpy(float), ok["upper"].to_numpy(float)
    true_lower, true_upper = ok["truth_lower"].mean(), ok["truth_upper"].mean()
    out = {"mean_lower": float(lower.mean()) if len(ok) else np.nan,
           "mean_upper": float(upper.mean()) if len(ok) else np.nan}  # fmt: skip
    out["mean_bounds_width"] = out["mean_upper"] - out["mean_lower"]
    out["lower_bias"] = out["mean_lower"] - true_lower
    out["upper_bias"] = out["mean_upper"] - true_upper
    if np.isfinite(truth) and len(ok):
        out["bounds_cover_truth"] = float(np.mean((lower <= truth) & (truth <= upper)))
    else:
        out["bounds_cover_truth"] = np.nan
    known_set = np.isfinite(true_lower) and np.isfinite(true_upper)
    if known_set and len(ok) and ok["set_low"].notna().all():
        holds = (ok["set_low"] <= true_lower) & (true_upper <= ok["set_high"])
        out["set_coverage"], out["set_coverage_mcse"] = _share(holds.to_numpy())
    else:
        out["set_coverage"] = out["set_coverage_mcse"] = np.nan
    return out


def _summarize_group(group):
    ok = group[~group["failed"].astype(bool)]
    truths = group["truth"].to_numpy(float)
    # A NaN truth means "unknown": bias, RMSE and coverage are NaN, never a number.
    truth = float(truths.mean()) if np.isfinite(truths).all() else np.nan
    bounds = (group["kind"] == "bounds").any()
    row = {
        "kind": "bounds" if bounds else "point",
        "n_reps": len(group),
        "n_failed": len(group) - len(ok),
        "truth": truth,
        "interval": ", ".join(sorted(set(ok["interval"]) - {""})),
    }
    if bounds:
        row.update(_bounds_measures(ok, truth))
    else:
        row.update(_point_measures(ok, truth))
    row.update(_interval_measures(ok, truth))
    row["median_fit_seconds"] = float(group["fit_seconds"].median())
    return row


def _relative_to(results, summary, reference):
    """Relative efficiency and paired differences against ``reference``, per cell group."""
    ok = results[~results["failed"].astype(bool) & (results["kind"] == "point")]
    keys = ["scenario", "params", "n_samples", "replicate"]
    base = ok[ok["estimator"] == reference].set_index(keys)["estimate"]
    columns = {c: [] for c in ("relative_efficiency", "relative_efficiency_mcse",
                               "mean_difference", "mean_difference_mcse", "n_paired")}  # fmt: skip
    for row in summary.itertuples(index=False):
        mine = ok[(ok["estimator"] == row.estimator) & (ok["scenario"] == row.scenario)
                  & (ok["params"] == row.params) & (ok["n_samples"] == row.n_samples)]
        paired = pd.concat([mine.set_index(keys)["estimate"], base], axis=1, join="inner")
        k = len(paired)
        values = dict.fromkeys(columns, np.nan)
        values["n_paired"] = k
        if row.kind == "point" and k > 2:
            t, r = paired.iloc[:, 0].to_numpy(), paired.iloc[:, 1].to_numpy()
            sd_t, sd_r = t.std(ddof=1), r.std(ddof=1)
            if sd_t > 0 and sd_r > 0:
                efficiency = (sd_r / sd_t) ** 2
                rho = np.corrcoef(t, r)[0, 1] if row.estimator != reference else 1.0
                values["relative_efficiency"] = efficiency
                values["relative_efficiency_mcse"] = 2 * efficiency * np.sqrt(
                    max(0.0, 1 - rho**2) / (k - 1))
            difference = t - r
            values["mean_difference"] = difference.mean()
            values["mean_difference_mcse"] = difference.std(ddof=1) / np.sqrt(k)
        for name, value in values.items():
            columns[name].append(value)
    summary = summary.assign(reference=reference, **columns)
    summary["n_paired"] = summary["n_paired"].astype(int)
    return summary


def summarize(results, *, reference=None):
    """Operating characteristics per scenario x parameter setting x estimator x sample size.

    Parameters
    ----------
    results : pandas.DataFrame
        The output of :func:`run_study` (or any table with its columns).
    reference : str, optional
        An estimator name: adds each estimator's relative efficiency against it,
        ``(sd_reference / sd)^2`` on the replicates where both succeeded (above 1: more
        precise than the reference), and the paired mean difference of the estimates, each
        with its Monte Carlo standard error.

    Returns
    -------
    summary : pandas.DataFrame
        One row per scenario x params x estimator x n_samples, in order of appearance, with
        ``kind``, ``n_reps``, ``n_failed``, ``truth``, ``interval`` (how the intervals were
        made: ``conf_int`` or ``wald``) and, for point estimators, ``mean_estimate``, ``bias``,
        ``sd`` (empirical SE, ddof=1), ``rmse``, ``mean_se``, ``model_se`` (root mean squared
        SE), ``se_sd_ratio`` (near 1 when standard errors are honest), ``coverage`` (share of
        intervals holding the truth) and ``mean_width``, each measure with its Monte Carlo
        standard error in ``<measure>_mcse`` (Morris, White & Crowther 2019, Table 6); for
        bounds estimators ``mean_lower``, ``mean_upper``, ``lower_bias``, ``upper_bias``
        (against the scenario's ``true_bounds``), ``mean_bounds_width``,
        ``bounds_cover_truth``, ``coverage`` (of the true effect by the Imbens-Manski interval)
        and ``set_coverage`` (of the identified set by its interval); then
        ``median_fit_seconds`` and, with ``reference``, ``relative_efficiency``,
        ``mean_difference`` (and their MCSEs), ``n_paired``. A NaN truth (unknown) gives NaN
        bias, RMSE and coverage. Failed replicates count in ``n_failed`` only.
        ``attrs["notes"]`` carries the cautions for reading it.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> results = ps.simulation.run_study(
    ...     {"weighting": ps.PrincipalScoreWeighting(), "robust": ps.MultiplyRobust()},
    ...     "linear", 400, n_reps=4, random_state=0)
    >>> summary = ps.simulation.summarize(results, reference="weighting")
    >>> float(summary["relative_efficiency"].iloc[0])  # the reference against itself
    1.0
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
    results = results.assign(
        **{c: default for c, default in _OPTIONAL.items() if c not in results.columns}
    )
    if reference is not None and reference not in set(results["estimator"]):
        raise ValueError(
            f"`reference` must be one of the study's estimators "
            f"({', '.join(map(repr, dict.fromkeys(results['estimator'])))}); got {reference!r}."
        )
    rows = [
        {**dict(zip(_GROUP, keys, strict=True)), **_summarize_group(group)}
        for keys, group in results.groupby(_GROUP, sort=False)
    ]
    summary = pd.DataFrame(rows)
    summary["n_reps"] = summary["n_reps"].astype(int)
    summary["n_failed"] = summary["n_failed"].astype(int)
    if reference is not None:
        if results["replicate"].isna().any():
            raise ValueError("`reference` needs the `replicate` column to pair the estimates.")
        summary = _relative_to(results, summary, reference)
    summary = summary[[c for c in summary.columns if not summary[c].isna().all()
                       or c in _ALWAYS]]  # fmt: skip
    summary.attrs["notes"] = [_SUMMARY_CAUTION, _MCSE_NOTE]
    return summary


_ALWAYS = {"bias", "bias_mcse", "sd", "rmse", "se_sd_ratio", "coverage", "coverage_mcse",
           "mean_width", "truth", "mean_estimate", "mean_se"}  # fmt: skip
