"""The report's "Over visits" section: the survivor effect at each follow-up visit, jointly.

Computed by :func:`pscore_strata.visit_effects` with the primary estimator's settings, on the same
rows and design matrix as the rest of the report; the per-visit columns are prepared with the same
coding rules as the main outcome and survival columns (``_data.prepare_visits``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ._honesty import accounts_for_nuisance, unavailable_reason
from ._options import build_estimator, number

__all__ = ["visits_section", "visit_figures", "POPULATION_TEXT"]

POPULATION_TEXT = {
    "each": (
        "At each visit, the always-survivors to that visit: those who would be alive at the "
        "visit under either arm. This is a different, smaller group at each later visit, so a "
        "change over visits mixes a change in the effect with a change in who is described."
    ),
    "last": (
        "At every visit, the always-survivors to the last visit: one group, whose outcomes "
        "exist at every earlier visit, so the trajectory describes the same people (fewer than "
        "the early visits could describe)."
    ),
}

_ROW_KEYS = (
    "effect", "std_error", "ci_low", "ci_high", "band_low", "band_high", "always_survivor_share",
    "survival_share_treated", "survival_share_control",
)  # fmt: skip


def visits_section(collector, data, options, population):
    """JSON-ready record of the section and the table behind it (``(None, None)`` when the
    analysis has one visit)."""
    from ..visits import visit_effects

    if not data.visits:
        return None, None
    if population not in POPULATION_TEXT:
        raise ValueError(
            f"`visit_population` must be 'each' or 'last'; got {population!r}."
        )
    y = pd.DataFrame({v.label: v.outcome for v in data.visits})
    survival = pd.DataFrame({v.label: v.survival for v in data.visits})
    estimator = build_estimator(options.method, options, len(data.treatment))

    def run(estimator):
        return collector.run(
            "effects over visits", visit_effects, estimator, data.design, y,
            treatment=data.treatment, survival=survival, population=population,
            sample_weight=data.sample_weight, groups=data.groups, level=options.level,
        )  # fmt: skip

    try:
        table = run(estimator)
        method = table.attrs["std_error_method"]
        if not accounts_for_nuisance(method):
            if not options.bootstrap:
                return {"available": False, "reason": "Effects over visits: "
                        + unavailable_reason(method, options.learner)}, None  # fmt: skip
            # The joint refitting bootstrap: units resampled once for all visits.
            table = run(estimator.set_params(n_bootstrap=options.bootstrap))
    except (ValueError, RuntimeError) as error:
        hint = (" Leave that visit's --outcome and --survival columns out to analyse the "
                "others." if str(error).startswith("At visit") else "")  # fmt: skip
        return {"available": False, "reason": f"The effects over visits could not be computed: "
                f"{error}{hint}"}, None  # fmt: skip
    test = table.attrs["wald_test"]
    df = test["df"]
    rows = []
    for visit, row in zip(data.visits, table.to_dict("records"), strict=True):
        rows.append({
            "visit": visit.label, "outcome_column": visit.outcome_column,
            "survival_column": visit.survival_column,
            **{key: number(row[key]) for key in _ROW_KEYS},
            "n_survivors_treated": int(row["n_survivors_treated"]),
            "n_survivors_control": int(row["n_survivors_control"]),
        })  # fmt: skip
    covariance = table.attrs["covariance"].to_numpy()
    return {
        "available": True,
        "population": population,
        "population_text": POPULATION_TEXT[population],
        "method": options.method,
        "scale": table.attrs["scale"],
        "visits": rows,
        "band_critical_value": number(table.attrs["band_critical"]),
        "wald_test": {
            "statistic": number(test["statistic"]),
            "df": list(df) if isinstance(df, tuple) else int(df),
            "p_value": number(test["p_value"]),
            "reference": test["reference"],
        },
        "covariance": [[number(v) for v in line] for line in np.asarray(covariance)],
        "std_error_method": table.attrs["std_error_method"],
        "notes": list(table.attrs["notes"]),
    }, table


def visit_figures(analysis):
    """``(name, title, draw, args, caption)`` of the section's figure, if any."""
    table = analysis.visits
    if table is None:
        return []
    results = analysis.results
    from ..plotting import plot_visit_effects

    def draw(table):
        axes = plot_visit_effects(table, outcome="the visit's outcome")
        return axes[0].figure

    level = f"{results['settings']['level']:.0%}"
    return [(
        "visits.png", "Effects over visits", draw, (table,),
        f"Left: the effect at each visit with its {level} pointwise interval (bars) and the "
        f"{level} simultaneous band over all visits (shaded boxes). Right: the share of each "
        "arm recorded alive at each visit, among units whose status is known.",
    )]  # fmt: skip


def print_visits(results):
    """The key lines of the section for the command line (nothing for one visit)."""
    from ._format import interval
    from ._format import number as shown

    record = results.get("visits")
    if not record:
        return
    if not record["available"]:
        print(f"  Over visits: {record['reason']}")
        return
    level = f"{results['settings']['level']:.0%}"
    print(f"  Over visits (population '{record['population']}'; {level} pointwise CI, "
          f"{level} band over all visits):")  # fmt: skip
    for row in record["visits"]:
        print(f"    {row['visit']:<24} {shown(row['effect']):>10}   CI "
              f"{interval(row['ci_low'], row['ci_high'])}   band "
              f"{interval(row['band_low'], row['band_high'])}")  # fmt: skip
    p_value = record["wald_test"]["p_value"]
    shown_p = "p < 0.001" if p_value is not None and p_value < 0.001 else f"p = {shown(p_value)}"
    print(f"    No effect at any visit: {shown_p}")
