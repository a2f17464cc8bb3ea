"""The report's "Distributions" section: always-survivor CDFs, quantile effects, ordinal levels.

The record is computed from the primary estimator (its stored nuisance predictions; the
conditional CDF models of outcome regression and the multiply robust estimator are fitted on the
same design matrix). Continuous outcomes get the CDFs, quantile effects and their trimming bounds;
outcomes with at most 20 integer levels get the level distributions and the probability of a
better level.
"""

from __future__ import annotations

import weakref

import numpy as np

from ._options import METHOD_LABELS, fit_arguments, model_settings, number
from ._wording import outcome_label

__all__ = ["distributions_section", "distribution_figures", "level_labels", "QUANTILES",
           "share_bounds"]  # fmt: skip

QUANTILES = (0.1, 0.25, 0.5, 0.75, 0.9)

# The report's fitted mean bounds, by the run's collector (see share_bounds).
_SHARED_BOUNDS = weakref.WeakKeyDictionary()


def share_bounds(collector, bounds):
    """Give the distribution section of the run of ``collector`` the report's fitted mean
    bounds: with the default (linear) models its quantile bounds are the same fit's."""
    _SHARED_BOUNDS[collector] = bounds


def _numbers(values):
    return [number(v) for v in np.asarray(values, dtype=float)]


def level_labels(data, options):
    """``{level: label}`` from ``--levels``, else the data file's value labels, else ``None``."""
    given = getattr(options, "levels", None)
    if given:
        return dict(given)
    return (getattr(data, "levels", None) or {}).get("outcome")


def _level_text(level, labels):
    whole = f"{level:.0f}" if float(level).is_integer() else f"{level:g}"
    if labels and float(level) in labels:
        return f"{whole} = {labels[float(level)]}"
    return whole


def _levels_record(result, labels, options):
    keys = ("level", "treated", "control", "std_error_treated", "std_error_control",
            "difference", "std_error_difference", "ci_low_difference", "ci_high_difference")
    return {
        "available": True,
        "kind": "levels",
        "levels": [{**{key: number(row[key]) for key in keys},
                    "label": _level_text(row["level"], labels)}
                   for _, row in result.levels.iterrows()],
        "better_level_probability": {
            "estimate": number(result.probability),
            "std_error": number(result.std_error),
            "ci_low": number(result.ci_low),
            "ci_high": number(result.ci_high),
            "better": "higher",
        },
        "estimator": METHOD_LABELS[options.method],
        "notes": list(result.notes),
    }  # fmt: skip


def distributions_section(collector, primary, data, options):
    """JSON-ready record of the section (``available: False`` with a reason when impossible)."""
    from ..distributions import ordinal_comparison, quantile_effects, survivor_distribution
    from ..distributions._conditional import MAX_LEVELS

    label = "outcome distributions"
    if not getattr(options, "distributions", True):
        return {"available": False, "skipped": True, "reason": "Not computed: the analysis was "
                "run with --no-distributions."}
    quantiles = tuple(getattr(options, "quantiles", QUANTILES))
    survivors = data.outcome[data.survival == 1]
    survivors = survivors[~np.isnan(survivors)]  # missing at random: observed outcomes only
    levels = np.unique(survivors)
    X = data.design
    try:
        if levels.size <= MAX_LEVELS:
            if not np.all(levels == np.round(levels)):
                return {"available": False, "reason": "The outcome has few distinct values that "
                        "are not integer levels; code them as integers for the level analysis."}
            result = collector.run(label, ordinal_comparison, primary, X=X, level=options.level)
            return _levels_record(result, level_labels(data, options), options)
        distribution = collector.run(label, survivor_distribution, primary, X=X,
                                     level=options.level, random_state=options.seed)
        table = collector.run(label, quantile_effects, primary, quantiles, options.level, X=X)
    except ValueError as error:
        return {"available": False, "reason": f"Distributions could not be computed: {error}"}
    frame = distribution.to_frame()
    record = {
        "available": True,
        "kind": "continuous",
        "cdf": {column: _numbers(frame[column]) for column in frame.columns},
        "band_critical_value": {"treated": number(distribution.band_critical_treated),
                                "control": number(distribution.band_critical_control)},
        "quantile_effects": [
            {key: number(row[key]) for key in
             ("quantile", "treated", "control", "effect", "std_error", "ci_low", "ci_high")}
            for _, row in table.iterrows()
        ],
        "quantile_bounds": _quantile_bounds(collector, options, data, primary, quantiles),
        "notes": list(distribution.notes[:1]) + list(table.attrs["notes"]),
    }  # fmt: skip
    return record


def _quantile_bounds(collector, options, data, primary, quantiles=QUANTILES):
    from ..assumptions import TrimmingBounds
    from ..assumptions._quantile_bounds import quantile_bounds_of, quantile_intervals
    from ..inference._standard_errors import estimator_dof

    label = "outcome distributions"
    # With the default models the report's mean bounds are this fit (same models, the
    # analysis' one nuisance fit): their quantile bounds need no refit.
    bounds, table = _SHARED_BOUNDS.get(collector), None
    shared = options.learner == "linear" and options.stratum == "always_survivor"
    try:
        if bounds is not None and shared:
            table = collector.run(label, quantile_bounds_of, bounds, quantiles)
        if table is None:
            models, _ = model_settings(options)
            if options.survival_model == "arm-wise":
                models.pop("survival_model", None)  # unused without score strata
            bounds = TrimmingBounds(monotonicity=options.monotonicity, quantiles=quantiles,
                                    missing=options.missing, **models)  # fmt: skip
            # With the default models the bounds reuse the analysis' one fit (never a
            # cross-fitted one).
            nuisance = primary.nuisance_
            nuisance = None if options.learner != "linear" or nuisance.cross_fitted else nuisance
            collector.run(label, bounds.fit, data.design, data.outcome, **fit_arguments(data),
                          nuisance=nuisance)  # fmt: skip
            table = bounds.quantile_bounds_
    except ValueError:
        return None
    table = quantile_intervals(table, options.level, estimator_dof(bounds))
    return [{key: number(row[key]) for key in
             ("quantile", "lower", "upper", "std_error_lower", "std_error_upper", "ci_low",
              "ci_high")}
            for _, row in table.iterrows()]  # fmt: skip


def _cdf_figure(results):
    import pandas as pd

    from ..distributions import SurvivorDistribution
    from ..inference._standard_errors import reference_dof
    from ..plotting import plot_survivor_distribution

    record = results["distributions"]
    frame = pd.DataFrame(record["cdf"]).astype(float)
    level = results["settings"]["level"]
    # Rebuilt from the JSON record: the figure shows exactly the numbers in results.json.
    distribution = SurvivorDistribution(
        values=frame["value"].to_numpy(), treated=frame["treated"].to_numpy(),
        control=frame["control"].to_numpy(),
        std_error_treated=frame["treated_std_error"].to_numpy(),
        std_error_control=frame["control_std_error"].to_numpy(),
        band_critical_treated=float(record["band_critical_value"]["treated"] or np.nan),
        band_critical_control=float(record["band_critical_value"]["control"] or np.nan),
        naive_treated=frame["naive_treated"].to_numpy(),
        naive_control=frame["naive_control"].to_numpy(),
        influence_treated=None, influence_control=None, level=level,
        dof=reference_dof(results["data_overview"]["n_clusters"]),
    )  # fmt: skip
    axes = plot_survivor_distribution(distribution, outcome=outcome_label(results))
    return axes[0].figure


def _quantile_figure(results):
    import pandas as pd

    from ..plotting import plot_quantile_effects

    record = results["distributions"]
    table = pd.DataFrame(record["quantile_effects"]).astype(float)
    bounds = record.get("quantile_bounds")
    bounds = None if not bounds else pd.DataFrame(bounds).astype(float)
    ax = plot_quantile_effects(table, outcome=outcome_label(results), bounds=bounds)
    return ax.figure


def _level_figure(results):
    import pandas as pd

    from ..plotting import plot_level_shares

    record = results["distributions"]
    table = pd.DataFrame(record["levels"])
    wording = results.get("wording") or {}
    arms = (wording.get("treated_arm", "treated"), wording.get("control_arm", "control"))
    outcome = outcome_label(results)
    ax = plot_level_shares(table, labels=list(table["label"]), arm_names=arms, outcome=outcome)
    return ax.figure


def distribution_figures(results):
    """``(name, title, draw, args, caption)`` entries for :func:`._figures.draw_figures`."""
    record = results.get("distributions") or {}
    if record.get("kind") == "levels":
        return [
            ("level_shares.png", "Level shares among always-survivors", _level_figure,
             (results,), "Estimated share of the always-survivors at each level under each "
             "arm (the stratum is latent: these are estimates for a group nobody can list). "
             "The difference between the bars is the per-level difference in the table."),
        ]  # fmt: skip
    if record.get("kind") != "continuous":
        return []
    return [
        ("distributions.png", "Always-survivor outcome distributions", _cdf_figure, (results,),
         "Left: estimated outcome distributions (CDFs) of the always-survivors under each arm, "
         "with pointwise intervals (darker) and simultaneous bands (lighter). Right: the "
         "survivors of each arm as observed, which mix in the units whose survival the "
         "treatment changed."),
        ("quantile_effects.png", "Quantile effects", _quantile_figure, (results,),
         "Differences between the always-survivor quantiles under treatment and under control, "
         "with confidence intervals; shaded bars: bounds without principal ignorability."),
    ]  # fmt: skip
