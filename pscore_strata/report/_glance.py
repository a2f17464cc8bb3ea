"""What the report shows before anything is unfolded: the "at a glance" facts and one headline per
folded section (the sentence that stays visible when the section is closed).

Every sentence is built from the ``results`` dictionary, with the report's number formats.
"""

from __future__ import annotations

from ._format import count, interval, number, percent

__all__ = ["FOLDED", "FOLD_TITLES", "headlines", "main_warnings", "tipping_text"]

# Long sections folded into <details>; the estimand, estimates, subgroups, bounds, assumptions
# and cautions stay open.
FOLDED = ("data", "missing", "diagnostics", "model_checks", "sensitivity", "distributions")
FOLD_TITLES = {"data": "Data", "missing": "Missing data", "diagnostics": "Diagnostics",
               "model_checks": "Fitted models", "sensitivity": "Sensitivity analysis",
               "distributions": "Beyond the mean: outcome distributions"}  # fmt: skip
MAX_WARNINGS = 4


def tipping_text(results):
    """The principal-ignorability tipping point: ``(value, detail)`` texts for the glance card.

    For a stratum other than the always-survivors, one per mixed cell its effect rests on.
    """
    record = results.get("sensitivity") or {}
    keys = [key for key in ("pi_difference", "pi_difference_doomed") if key in record]
    if not keys:
        return "not computed", ""
    if "contrast" not in record[keys[0]]:
        return _tipping_text(record["pi_difference"], "outcome_sd_survivors")
    texts = [_tipping_text(record[key], "outcome_sd") for key in keys]
    contrasts = [record[key]["contrast"] for key in keys]
    if len({value for value, _ in texts}) == 1 and len({d for _, d in texts}) == 1:
        value, detail = texts[0]
        return value, f"{detail} ({' and '.join(contrasts)})" if detail else " and ".join(contrasts)
    return (" / ".join(value for value, _ in texts),
            "; ".join(f"{c}: {d}" if d else c for c, (_, d) in zip(contrasts, texts, strict=True)))


def _tipping_text(sens, sd_key):
    status, tip = sens.get("tipping_status"), sens.get("tipping_point")
    if status == "covers_null":
        return "none", "the interval covers 0 under principal ignorability itself"
    if status == "not_available":
        return "not available", "no valid interval to tip"
    if tip is None:
        return "not reached", "within the grid of outcome shifts"
    sd = sens.get(sd_key) or 0
    in_sd = f"{number(tip / sd)} outcome SDs: " if sd else ""
    beyond = " (beyond the outcome's observed range)" if status == "beyond_outcome_range" else ""
    return number(tip), f"{in_sd}the outcome shift at which the interval first covers 0{beyond}"


def main_warnings(results):
    """The first few warnings (diagnostics first, then the data's), and how many were left out."""
    found = list((results.get("diagnostics") or {}).get("warnings") or [])
    found += [m.removeprefix("data: ") for m in results.get("warnings", [])
              if m.startswith("data: ")]  # fmt: skip
    others = [m for m in results.get("warnings", []) if not m.startswith("data: ")]
    found += others
    return found[:MAX_WARNINGS], max(0, len(found) - MAX_WARNINGS)


def _data(results, w):
    overview = results["data_overview"]
    arms = {a["arm"]: a for a in overview["arms"]}
    text = (f"{count(overview['n_rows_analyzed'])} {w['units']} analysed: "
            f"{count(arms['treated']['n'])} {w['treated_arm']} "
            f"({percent(arms['treated']['survival_share'])} without {w['event']}), "
            f"{count(arms['control']['n'])} {w['control_arm']} "
            f"({percent(arms['control']['survival_share'])}).")  # fmt: skip
    if overview.get("n_rows_dropped"):
        text += f" {count(overview['n_rows_dropped'])} incomplete rows dropped."
    return text


def _missing(results, w):
    record = results.get("missing_data")
    if record is None:
        return (f"Every {w['unit']}'s survival status and every survivor's outcome were "
                "observed.")
    arms = record.get("by_arm") or []
    if not arms:
        return record.get("reason")
    unknown = sum(a["n_status_unknown"] for a in arms)
    missing = sum(a["n_outcome_missing"] for a in arms)
    return (f"Status unknown for {count(unknown)} {w['units']}, outcome missing for "
            f"{count(missing)} known survivors; assumed missing at random.")  # fmt: skip


def _diagnostics(results, w):
    record = results.get("diagnostics") or {}
    if record.get("available") is False:
        return record.get("reason")
    n = len(record.get("warnings") or [])
    text = "No diagnostic warning." if n == 0 else f"{n} diagnostic warning{'s' * (n > 1)}."
    balance = record.get("balance") or []
    weighted = [abs(b["smd_treated_vs_control"]) for b in balance
                if b.get("smd_treated_vs_control") is not None]  # fmt: skip
    if weighted:
        text += f" Largest weighted |SMD| {number(max(weighted))} (common-practice limit 0.1)."
    ess = [row for row in record.get("weights") or [] if row.get("effective_sample_size")]
    if ess:
        low = min(ess, key=lambda r: r["effective_sample_size"] / max(r["n_rows"], 1))
        text += (f" Smallest effective sample size: {count(low['effective_sample_size'])} of "
                 f"{count(low['n_rows'])} {low['weights'].replace('_', ' ')}.")  # fmt: skip
    return text


def _model_checks(results, w):
    record = results.get("model_checks") or {}
    if record.get("available") is False:
        return record.get("reason")
    tests = (record.get("fit_check") or {}).get("tests") or []
    both = [t for t in tests if t["arm"] == "both" and t.get("p_value") is not None]
    if both:
        t = both[0]
        return (f"Survival fit check, both arms: chi-square {number(t['statistic'], 2)} on "
                f"{t['df']} df, p = {number(t['p_value'])}.")  # fmt: skip
    return "Calibration of the fitted survival models by arm."


def _sensitivity(results, w):
    record = results.get("sensitivity") or {}
    if "harmed_ratio" not in record:
        return record.get("reason")
    value, detail = tipping_text(results)
    if "contrast" in record["harmed_ratio"]:
        mono = record["harmed_ratio"]
        shown = {"unchanged": "the effect does not move with it alone",
                 "covers_null": "none to report", "not_available": "not available"}.get(
            mono.get("tipping_status"))  # fmt: skip
        if shown is None:
            shown = ("not reached" if mono.get("tipping_point") is None else
                     f"stratum ratio {number(mono['tipping_point'])}")  # fmt: skip
        return (f"Tipping point for principal ignorability: {value} ({detail}); for "
                f"monotonicity: {shown}.")  # fmt: skip
    return (f"Tipping point for principal ignorability: {value} ({detail}); for "
            "monotonicity: "
            + ("not reached" if record["harmed_ratio"].get("tipping_point") is None else
               f"stratum ratio {number(record['harmed_ratio']['tipping_point'])}")
            + ".")  # fmt: skip


def _distributions(results, w):
    record = results.get("distributions") or {}
    if not record.get("available"):
        return record.get("reason") or "Not computed."
    level = f"{results['settings']['level']:.0%}"
    for q in record.get("quantile_effects") or []:
        if q["quantile"] == 0.5:
            shown = (f", {level} CI {interval(q['ci_low'], q['ci_high'])}"
                     if q.get("ci_low") is not None else "")  # fmt: skip
            return f"Difference in median among always-survivors: {number(q['effect'])}{shown}."
    if record.get("kind") == "levels":
        p = record.get("better_level_probability") or {}
        if p.get("estimate") is not None:
            return (f"Probability that a {w['treated_arm']} always-survivor has a better level: "
                    f"{number(p['estimate'])}.")  # fmt: skip
    return "Outcome distributions of the always-survivors under each arm."


_BUILDERS = {"data": _data, "missing": _missing, "diagnostics": _diagnostics,
             "model_checks": _model_checks, "sensitivity": _sensitivity,
             "distributions": _distributions}  # fmt: skip


def headlines(results, words):
    """Section name -> the sentence shown while the section is folded."""
    return {name: _BUILDERS[name](results, words) or "" for name in FOLDED}
