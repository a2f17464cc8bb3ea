"""The key results of an analysis as the command line prints them (standard output)."""

from __future__ import annotations

from pathlib import Path

from ._format import interval, number

__all__ = ["print_key_results", "print_survival_model"]


def print_survival_model(results):
    chosen = results.get("survival_model")
    if chosen:
        print(f"  Principal scores from the {chosen['label']} (--survival-model "
              f"{chosen['model']}): {chosen['description']}")  # fmt: skip
        if chosen["reason"]:
            print(f"  Chosen by fit: {chosen['reason']}")
    checks = results.get("model_checks") or {}
    for test in checks.get("fit_check", {}).get("tests", []):
        if test["arm"] == "both" and test["p_value"] is not None:
            print(f"  Survival fit check, both arms: chi-square {test['statistic']:.2f} on "
                  f"{test['df']} df, p = {test['p_value']:.3f}")  # fmt: skip
        elif test["arm"] == "both" and test.get("assessable") is False:
            # Perfectly predicted rows (separation) or as many coefficients as fitted values:
            # a p-value near 1 would only look like a perfect fit.
            print("  Survival fit check: cannot assess the fit (see Fitted models in the report)")


def _units(results):
    """``"<column> units"``, or, when ``--outcome-label`` names it, its scale in words."""
    column = results["columns"]["outcome"]
    label = (results.get("wording") or {}).get("outcome_label") or column
    return f"{column} units" if label == column else f"on the scale of {label}"


def print_key_results(results, out_dir):
    level = f"{results['settings']['level']:.0%}"
    words = results["wording"]
    outcome = words.get("outcome_label") or results["columns"]["outcome"]
    target = results.get("stratum") or {"name": "always_survivor"}
    other = target["name"] != "always_survivor"
    title = (f"Effect in the {target['label']} stratum" if other
             else "Survivor average causal effect")  # fmt: skip
    print(f"{title} of {words['treated_arm']} "
          f"('{words['treated_condition']}') against {words['control_arm']} "
          f"('{words['control_condition']}') on '{outcome}' "
          f"({results['data_overview']['n_rows_analyzed']} {words['units']} "
          "analysed):")  # fmt: skip
    for record in results["estimates"]:
        tag = "  <- primary" if record["primary"] else ""
        if record["ci_low"] is None:
            print(f"  {record['label']:<27} {number(record['effect']):>10}   "
                  f"interval not available (see below){tag}")  # fmt: skip
        else:
            print(f"  {record['label']:<27} {number(record['effect']):>10}   {level} CI "
                  f"{interval(record['ci_low'], record['ci_high'])}{tag}")  # fmt: skip
    boot = results.get("bootstrap")
    if boot and boot.get("refused"):
        print(f"  {'Bootstrap (percentile)':<27} {'refused':>10}   {boot['n_failed']} of "
              f"{boot['n_resamples']} resamples could not be estimated (see the report)")
    elif boot:
        print(f"  {'Bootstrap (percentile)':<27} {number(boot['estimate']):>10}   {level} CI "
              f"{interval(boot['ci_low'], boot['ci_high'])}")  # fmt: skip
    bounds = results.get("bounds", {})
    if "lower" in bounds:
        print(f"  {'Bounds (no princ. ignor.)':<27} {number(bounds['lower']):>10} to "
              f"{number(bounds['upper'])}")  # fmt: skip
    missing = results.get("missing_data") or {}
    for arm in missing.get("by_arm", []):
        zero = ""
        if "n_known_intermediate_0" in arm:
            zero = (f" and {arm['n_outcome_missing_intermediate_0']} of "
                    f"{arm['n_known_intermediate_0']} with intermediate 0 "
                    f"({arm['share_outcome_missing_intermediate_0']:.1%})")  # fmt: skip
        print(f"  Missing data, {arm['arm']}: status unknown {arm['n_status_unknown']} "
              f"({arm['share_status_unknown']:.1%}), outcome missing {arm['n_outcome_missing']} "
              f"of {arm['n_known_survivors']} known survivors "
              f"({arm['share_outcome_missing']:.1%}){zero}; assumed missing at random")  # fmt: skip
    shift = missing.get("outcome_shift") or {}
    if shift:
        value = shift["smallest_shift_covering_zero"]
        shown = "not within the grid" if value is None else f"{value:.3g}"
        if value == 0:
            shown = "none to report (the CI covers 0 with no shift)"
        print(f"  Non-responders' outcome shift at which the CI covers 0: {shown}")
    naive = results["naive_survivor_contrast"]
    print(f"  {'Naive cell contrast' if other else 'Naive survivor contrast':<27} "
          f"{number(naive['estimate']):>10}   (biased; comparison)")  # fmt: skip
    if not results["columns"]["covariates"]:
        print("  Unadjusted (no covariates): the estimators equal the naive contrast because "
              "principal ignorability without covariates says so; "
              + ("the bounds drop it and the sensitivity analysis relaxes it." if other
                 else "the bounds drop it."))  # fmt: skip
    for row in (results.get("strata") or {}).get("rows", []):
        print(f"  All strata: {row['label']:<27} share {row['share']:.1%}, effect "
              f"{number(row['effect'])}, {level} CI {interval(row['ci_low'], row['ci_high'])}")
    for record in results["estimates"]:
        if record["ci_low"] is None:
            print(f"  {record['label']}: {record['interval_note']}")
    _print_tipping_points(results)
    for subgroup in (results.get("subgroups") or {}).get("rows", []):
        shown = (f"{level} CI {interval(subgroup['ci_low'], subgroup['ci_high'])}"
                 if subgroup["ci_low"] is not None else "interval not available")  # fmt: skip
        print(f"  {results['subgroups']['column']} = {subgroup['label']!s:<16} "
              f"{number(subgroup['effect']):>10}   {shown} ({subgroup['n']} rows)")  # fmt: skip
    print_survival_model(results)
    primary = next((e for e in results["estimates"] if e["primary"]), {})
    for message in primary.get("separation", []):
        print(f"  warning: {message}")
    for message in results.get("diagnostics", {}).get("warnings", []):
        print(f"  warning: {message}")
    for message in results.get("warnings", []):
        if message.startswith("data: "):
            print(f"  warning: {message[6:]}")
    from ._visits import print_visits

    print_visits(results)
    print(f"Report: {Path(out_dir) / 'report.html'} (also results.json and the figures).")
    stratum = f"the {target['label']} stratum" if other else "the always-survivor stratum"
    print(f"Caution: {stratum} is latent and the assumptions are untestable; "
          "no individual decisions. Follow the study protocol and local regulation, and have a "
          "qualified statistician review the analysis.")  # fmt: skip


def _print_tipping_points(results):
    """The principal-ignorability tipping points: one for the always-survivors, one per mixed
    cell the stratum shares for another stratum (``--stratum``)."""
    sens = results.get("sensitivity", {})
    for key in ("pi_difference", "pi_difference_doomed"):
        if key not in sens:
            continue
        record = sens[key]
        other = "contrast" in record
        tip = record["tipping_point"]
        sd = record["outcome_sd"] if other else record["outcome_sd_survivors"]
        status = record.get("tipping_status")
        shown = ("not reached" if tip is None else
                 f"{number(tip)} {_units(results)} ({number(tip / sd)} outcome SDs)")
        if tip is None and sens.get("interval_note"):
            shown = "not available"
        if status == "covers_null":
            shown = "none to report (the CI covers 0 under principal ignorability itself)"
        elif status == "beyond_outcome_range":
            low, high = record["outcome_range"] if other else record["outcome_range_survivors"]
            whole = "whole outcome range" if other else "survivors' whole outcome range"
            shown += f", more than the {whole} ({number(low)} to {number(high)})"
        what = f" ({record['contrast']})" if other else " (difference)"
        print(f"  Tipping point for principal ignorability{what}: {shown}")
