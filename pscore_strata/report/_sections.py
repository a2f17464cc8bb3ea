"""The report's later sections: bootstrap, diagnostics and bounds (sensitivity: ``_sensitivity``).

Each function takes the step collector of :func:`._analysis.run_analysis` and returns the
JSON-ready record of its section; heavy parts are imported when the section runs.
"""

from __future__ import annotations

import numpy as np

from ._options import build_estimator, fit_arguments, model_settings, number

__all__ = [
    "bootstrap_section", "diagnostics_section", "bounds_section", "readable_step",
]  # fmt: skip


def run_bootstrap(collector, method, options, data):
    """Refitting bootstrap of the estimator the analysis fits for ``method``."""
    from ..inference import bootstrap

    return collector.run(
        f"bootstrap: {options.bootstrap} resamples refitting every model",
        bootstrap,
        build_estimator(method, options, len(data.treatment)),
        data.design,
        data.outcome,
        n_resamples=options.bootstrap,
        random_state=options.seed,
        progress=None,
        **fit_arguments(data),
    )


def refused_bootstrap(error, options):
    """The record of a bootstrap whose resamples failed too often: counts, no interval."""
    from ..inference._failures import MAX_FAILURE_SHARE

    return {
        "n_resamples": int(error.n_resamples),
        "n_failed": int(error.n_failed),
        "method": "resample",
        "estimate": None,
        "std_error": None,
        "ci_low": None,
        "ci_high": None,
        "interval": "percentile",
        "refused": True,
        "notes": [
            f"Bootstrap interval refused: {error.counts}. With more than "
            f"{MAX_FAILURE_SHARE:.0%} of the resamples failing, the replicates would describe "
            "only the resamples that kept deaths and survivors in every arm. Read the intervals "
            "above, or merge sparse covariate levels."
        ],
    }


def bootstrap_section(collector, options, data):
    from ..exceptions import BootstrapFailureError

    try:
        result = run_bootstrap(collector, options.method, options, data)
    except BootstrapFailureError as error:
        return refused_bootstrap(error, options)
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
        "refused": False,
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
    # The same two counts as the estimator's MonotonicityWarning and diagnostic_warnings.
    from ..diagnostics._arrays import SCORE_FLOOR
    from ..estimands._view import orient

    o = orient(primary.training_data_, primary.nuisance_, primary.monotonicity)
    out["n_monotonicity_reversed_beyond_floor"] = int(np.sum(o.p_pure - o.p_mixed > SCORE_FLOOR))
    return out


def bounds_section(collector, options, data, nuisance=None, words=None):
    """The ``bounds`` record and the fitted bounds, for the stratum of ``options.stratum``.

    For a stratum other than the always-survivors (``--stratum``) the record also says which
    cell is trimmed in which arm, by what share (:func:`._strata_bounds.stratum_bounds_record`).
    """
    from ..assumptions import TrimmingBounds

    models, _ = model_settings(options, len(data.treatment))
    if options.stratum != "always_survivor":
        models["stratum"] = options.stratum
    bounds = TrimmingBounds(monotonicity=options.monotonicity, missing=options.missing, **models)
    collector.run(
        "bounds without principal ignorability",
        bounds.fit,
        data.design,
        data.outcome,
        **fit_arguments(data),
        nuisance=nuisance,
    )
    low, high = bounds.conf_int(options.level)
    record = {
        "lower": float(bounds.lower_),
        "upper": float(bounds.upper_),
        "std_error_lower": number(bounds.std_error_lower_),
        "std_error_upper": number(bounds.std_error_upper_),
        "ci_low": number(low),
        "ci_high": number(high),
        "interval": "Imbens-Manski interval (it covers the true SACE)",
        "trimming_share": float(bounds.trimming_share_),
        # The first note restates the interval (already in the sentence), under its column name.
        "notes": list(bounds.summary(options.level).attrs["notes"][1:3]),
    }
    if options.stratum != "always_survivor":
        from ._strata_bounds import stratum_bounds_record

        record = stratum_bounds_record(record, bounds, options.stratum, words or {})
    return record, bounds


def readable_step(spread):
    """A readable grid step near a tenth of the outcome SD: 1, 2 or 5 times a power of ten."""
    target = 0.1 * spread
    power = 10.0 ** np.floor(np.log10(target))
    return float(min((m * power for m in (1, 2, 5, 10)), key=lambda v: abs(v - target)))


def _tipping_status(value, null, parameter, observed_range):
    """What a tipping point means, for the report's words.

    At the null value the interval covers no effect already, so there is no tipping point to
    report. A difference between two strata's means (``pi_difference``, and
    ``pi_difference_doomed`` for the other strata) larger than the width of the outcome's
    observed range cannot occur among the values seen.
    """
    if value is None:
        return "not_reached"
    if value == null:
        return "covers_null"
    differences = ("pi_difference", "pi_difference_doomed")
    if parameter in differences and abs(value) > observed_range[1] - observed_range[0]:
        return "beyond_outcome_range"
    return "reached"
