"""The report's later sections: bootstrap, diagnostics, bounds and sensitivity analysis.

Each function takes the step collector of :func:`._analysis.run_analysis` and returns the
JSON-ready record of its section; heavy parts are imported when the section runs.
"""

from __future__ import annotations

import numpy as np

from ._options import SENSITIVITY_POINTS, build_estimator, fit_arguments, model_settings, number

__all__ = ["bootstrap_section", "diagnostics_section", "bounds_section", "sensitivity_section"]


def bootstrap_section(collector, options, data):
    from ..inference import bootstrap

    template = build_estimator(options.method, options)
    result = collector.run(
        f"bootstrap: {options.bootstrap} resamples refitting every model",
        bootstrap,
        template,
        data.design,
        data.outcome,
        n_resamples=options.bootstrap,
        random_state=options.seed,
        progress=None,
        **fit_arguments(data),
    )
    low, high = result.conf_int(options.level, kind="percentile")
    return {
        "n_resamples": int(result.n_resamples),
        "n_failed": int(result.n_failed),
        "method": str(result.method),
        "estimate": float(result.estimate),
        "std_error": float(result.std_error),
        "ci_low": float(low),
        "ci_high": float(high),
        "interval": "percentile",
        "notes": list(result.notes),
    }


def diagnostics_section(collector, primary, covariates):
    from .. import diagnostics

    out = {"warnings": [], "balance": [], "effective_sample_size": {}, "weights": []}
    out["warnings"] = list(
        collector.run("diagnostics", diagnostics.diagnostic_warnings, primary, covariates)
    )
    if covariates is not None:
        table = diagnostics.balance_table(primary, covariates)
        for name, row in table.iterrows():
            out["balance"].append({
                "covariate": str(name),
                "raw_smd_treated_vs_control": number(row["raw_smd_treated_vs_control"]),
                "smd_treated_vs_control": number(row["smd_treated_vs_control"]),
                "smd_treated_vs_everyone": number(row["smd_treated_vs_everyone"]),
                "smd_control_vs_everyone": number(row["smd_control_vs_everyone"]),
            })  # fmt: skip
        ess = table.attrs["effective_sample_size"]
        out["effective_sample_size"] = {k: number(v) for k, v in ess.items()}
    for name, row in diagnostics.weight_summary(primary).iterrows():
        out["weights"].append({
            "weights": str(name),
            "n_rows": int(row["n_rows"]),
            "median": number(row["median"]),
            "max": number(row["max"]),
            "max_over_median": number(row["max_over_median"]),
            "effective_sample_size": number(row["effective_sample_size"]),
        })  # fmt: skip
    overlap = diagnostics.overlap_summary(primary).attrs
    out["share_treatment_probability_outside_0.05_0.95"] = number(
        overlap["share_treatment_outside_bounds"]
    )
    out["share_always_survivor_score_below_0.05"] = number(
        overlap["share_always_survivor_below_floor"]
    )
    out["n_monotonicity_violations"] = int(primary.n_monotonicity_violations_)
    return out


def bounds_section(collector, options, data):
    from ..assumptions import TrimmingBounds

    models, _ = model_settings(options)
    bounds = TrimmingBounds(monotonicity=options.monotonicity, missing=options.missing, **models)
    collector.run(
        "bounds without principal ignorability",
        bounds.fit,
        data.design,
        data.outcome,
        **fit_arguments(data),
    )
    low, high = bounds.conf_int(options.level)
    record = {
        "lower": float(bounds.lower_),
        "upper": float(bounds.upper_),
        "std_error_lower": number(bounds.std_error_lower_),
        "std_error_upper": number(bounds.std_error_upper_),
        "ci_low": number(low),
        "ci_high": number(high),
        "interval": "Imbens-Manski (covers the true SACE)",
        "trimming_share": float(bounds.trimming_share_),
        "notes": list(bounds.summary(options.level).attrs["notes"][:3]),
    }
    return record, bounds


def sensitivity_section(collector, primary, data, level):
    from ..assumptions import sensitivity_grid, tipping_point

    spread = float(np.nanstd(data.outcome[data.survival == 1], ddof=1)) or 1.0
    label = "sensitivity analysis"
    tips = {}
    for parameter in ("pi_difference", "harmed_ratio"):
        value = collector.run(label, tipping_point, primary, parameter, level=level)
        tips[parameter] = number(value)
    # The grids reach a little past the tipping points so that the figure shows them.
    reach = max(0.5 * spread, 1.25 * abs(tips["pi_difference"] or 0.0))
    deltas = np.round(np.linspace(-reach, reach, SENSITIVITY_POINTS), 10)
    top = min(0.95, max(0.5, 1.1 * (tips["harmed_ratio"] or 0.0)))
    harmed = np.round(np.linspace(0.0, top, 11), 4)

    def rows(table, parameter):
        return [
            {
                "value": float(r[parameter]),
                "effect": float(r["effect"]),
                "std_error": number(r["std_error"]),
                "ci_low": number(r["ci_low"]),
                "ci_high": number(r["ci_high"]),
            }
            for _, r in table.iterrows()
        ]

    grid_pi = collector.run(label, sensitivity_grid, primary, pi_difference=deltas, level=level)
    grid_mono = collector.run(
        label, sensitivity_grid, primary, harmed_ratio=harmed.tolist(), level=level
    )
    return {
        "pi_difference": {
            "description": "Mean outcome under treatment of the helped stratum minus that of the "
            "always-survivors with the same covariates (0 = principal ignorability).",
            "outcome_sd_survivors": spread,
            "grid": rows(grid_pi, "pi_difference"),
            "tipping_point": tips["pi_difference"],
        },
        "harmed_ratio": {
            "description": "Size of the stratum that monotonicity rules out relative to the "
            "helped stratum (0 = monotonicity).",
            "grid": rows(grid_mono, "harmed_ratio"),
            "tipping_point": tips["harmed_ratio"],
        },
        "criterion": f"the {level:.0%} confidence interval first covers 0",
    }
