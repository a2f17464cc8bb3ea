"""The analysis as manuscript tables: results, balance, weights, sensitivity, subgroups, quantiles.

Every table is built from the ``results`` dictionary (the contents of results.json), with the
report's number formats (:mod:`._format`), so a table, the report and the JSON file agree at the
printed precision. The footnotes state the assumptions and the cautions in the study's words.
"""

from __future__ import annotations

import math

import pandas as pd

from ..tables import Table, write_tables
from ._format import count, number
from ._strata import latent_label, stratum_definition

__all__ = ["manuscript_tables", "write_manuscript_tables", "TABLE_FORMATS", "table_formats"]

TABLE_FORMATS = ("docx", "tex", "md")
_RIGHT = "right"
MAX_GRID_ROWS = 21


def _interval(record, low="ci_low", high="ci_high"):
    if record.get(low) is None or record.get(high) is None:
        return None
    return (record[low], record[high])


def _numbers(frame, columns, rows=None):
    """Pre-formatted cells, "—" where there is no value. One number of decimals for the whole
    block (``rows``, by default every row), from its largest value: three below 100, one below
    1,000, none above (the report's rule for one number, applied to the block so a column
    reads evenly)."""
    rows = list(range(len(frame))) if rows is None else list(rows)
    values = [v for c in columns for i in rows for v in _flat(frame[c].iloc[i])]
    places = _places(values)
    for column in columns:
        cells = list(frame[column])
        for i in rows:
            cells[i] = _cell(cells[i], places)
        frame[column] = cells
    return frame


def _flat(value):
    values = value if isinstance(value, tuple) else (value,)
    return [v for v in values if v is not None and not (isinstance(v, float) and math.isnan(v))]


def _places(values):
    size = max((abs(v) for v in values), default=0.0)
    return 3 if size < 100 else (1 if size < 1000 else 0)


def _cell(value, places=3):
    if isinstance(value, str):
        return value
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    if isinstance(value, tuple):
        return f"{_cell(value[0], places)} to {_cell(value[1], places)}"
    text = f"{value:,.{places}f}"
    return text[1:] if text.startswith("-") and not text.strip("-0.,") else text


def _words(results):
    words = results["wording"]
    outcome = words.get("outcome_label") or results["columns"]["outcome"]
    return words, outcome


def assumptions_note(results):
    """One footnote naming the assumptions (in the study's words) and the cautions."""
    parts = [f"{a['name']}: {a['statement'].rstrip('.')}" for a in results["assumptions"]]
    words, _ = _words(results)
    return (
        "Assumptions of the point estimates — " + "; ".join(parts) + ". The bounds drop "
        f"principal ignorability. The {latent_label(results)} stratum is latent and these "
        "assumptions cannot be tested; the estimates describe a population, not any individual "
        f"{words['unit']}, and are to be read under the study protocol with a qualified "
        "statistician."
    )


def short_assumptions_note(results):
    words, _ = _words(results)
    return (
        "Estimates assume monotonicity and principal ignorability (stated in the note to the "
        f"results table); the {latent_label(results)} stratum is latent and these assumptions "
        f"cannot be tested. Population-level summaries, not for decisions about an individual "
        f"{words['unit']}."
    )


def _level(results):
    return f"{results['settings']['level']:.0%} CI"


def results_table(results):
    words, outcome = _words(results)
    level = _level(results)
    rows, notes = [], []
    target = results.get("stratum") or {}
    other = target.get("name", "always_survivor") != "always_survivor"
    effect_group = (f"Effect in the {target['label']} stratum" if other
                    else "Survivor average causal effect")  # fmt: skip
    for record in results["estimates"]:
        label = record["label"] + (" (primary)" if record["primary"] else "")
        rows.append((effect_group, label, record["effect"], record["std_error"],
                     _interval(record), record["std_error_method"]))  # fmt: skip
        if record.get("interval_note"):
            notes.append(f"{record['label']}: {record['interval_note']}")
    boot = results.get("bootstrap")
    if boot:
        primary = next(r for r in results["estimates"] if r["primary"])
        rows.append((effect_group, f"{primary['label']}, bootstrap", boot["estimate"],
                     boot["std_error"], _interval(boot),
                     f"{boot['n_resamples']} resamples, {boot['interval']} interval"))  # fmt: skip
    bounds = results.get("bounds") or {}
    if "lower" in bounds:
        rows.append(("Without principal ignorability", "Bounds (lower to upper)",
                     (bounds["lower"], bounds["upper"]), None, _interval(bounds),
                     "Imbens-Manski interval"))  # fmt: skip
        if bounds.get("interval_note"):
            notes.append(f"Bounds: {bounds['interval_note']}")
    naive = results["naive_survivor_contrast"]
    rows.append(("For comparison", "Naive cell contrast (biased)" if other
                 else "Survivors only (biased)",
                 naive["estimate"], naive["std_error"], _interval(naive),
                 "influence function"))  # fmt: skip
    for name, share in results["stratum_shares"].items():
        rows.append((f"Principal strata (share of all {words['units']})", name.replace("_", "-"),
                     share["estimate"], share["std_error"], _interval(share),
                     "influence function"))  # fmt: skip
    frame = pd.DataFrame(rows, columns=["group", "Analysis", "Estimate", "SE", level,
                                        "Standard error"])  # fmt: skip
    shares = [i for i, g in enumerate(frame["group"]) if g.startswith("Principal strata")]
    effects = [i for i in range(len(frame)) if i not in shares]
    _numbers(frame, ["Estimate", "SE", level], effects)
    _numbers(frame, ["Estimate", "SE", level], shares)
    among = (target["label"] if target.get("name", "always_survivor") != "always_survivor"
             else "always-survivors")  # fmt: skip
    caption = (f"Effect of {words['treated_arm']} versus {words['control_arm']} on {outcome} "
               f"among {among} (n = {count(results['data_overview']['n_rows_analyzed'])}"
               f" {words['units']})")  # fmt: skip
    definition = (
        f"SACE: survivor average causal effect, the mean difference in {outcome} between "
        f"{words['treated_arm']} ('{words['treated_condition']}') and {words['control_arm']} "
        f"('{words['control_condition']}') among the {words['units']} who would avoid "
        f"{words['event']} under either arm (the always-survivors). Survivors only: the "
        "difference of the survivors' mean outcomes, biased when treatment changes who "
        "survives. SE: standard error; CI: confidence interval."
    )
    if other:
        definition = stratum_definition(target, words, outcome)
    footnote = [
        definition,
        *notes,
        assumptions_note(results),
    ]
    right = {c: _RIGHT for c in ("Estimate", "SE", level)}
    return Table(frame, caption, footnote=footnote, group_column="group", align=right,
                 label="tab:sace")


BALANCE_COLUMNS = {
    "covariate": "Covariate",
    "raw_smd_treated_vs_control": "Unweighted",
    "smd_treated_vs_control": "Treated vs control",
    "smd_treated_vs_everyone": "Treated vs everyone",
    "smd_control_vs_everyone": "Control vs everyone",
}


def balance_table(results):
    diagnostics = results.get("diagnostics") or {}
    if not diagnostics.get("balance"):
        return None
    words, _ = _words(results)
    frame = pd.DataFrame(diagnostics["balance"])[list(BALANCE_COLUMNS)].rename(
        columns=BALANCE_COLUMNS
    )
    numeric = list(BALANCE_COLUMNS.values())[1:]
    _numbers(frame, numeric)
    ess = diagnostics.get("effective_sample_size") or {}
    footnote = [
        "Standardized mean differences of the covariates between the three weighted "
        "reconstructions of the always-survivors: from the treated survivors (weights "
        "p0 / (pi p1)), from the control survivors (1 / (1 - pi)) and from everyone (p0) "
        "(Ding and Lu, 2017); when the models are right they agree. Unweighted: treated "
        "against control survivors, the imbalance the analysis removes. An absolute value "
        "below 0.1 is a common rule of thumb.",
    ]
    if ess:
        footnote.append("Effective sample sizes: " + "; ".join(
            f"{name.replace('_', ' ')} {count(value)}" for name, value in ess.items()) + ".")
    footnote.append(short_assumptions_note(results))
    return Table(frame, f"Covariate balance of the always-survivor reconstructions "
                 f"({words['treated_arm']} versus {words['control_arm']})", footnote=footnote,
                 align={c: _RIGHT for c in numeric}, label="tab:balance")  # fmt: skip


WEIGHT_COLUMNS = {"weights": "Weights", "n_rows": "Rows", "median": "Median", "max": "Maximum",
                  "max_over_median": "Maximum / median",
                  "effective_sample_size": "Effective sample size"}  # fmt: skip


def weights_table(results):
    diagnostics = results.get("diagnostics") or {}
    if not diagnostics.get("weights"):
        return None
    frame = pd.DataFrame(diagnostics["weights"])[list(WEIGHT_COLUMNS)].rename(
        columns=WEIGHT_COLUMNS
    )
    frame["Weights"] = [str(v).replace("_", " ") for v in frame["Weights"]]
    frame["Rows"] = [count(v) for v in frame["Rows"]]
    frame["Effective sample size"] = [count(v) for v in frame["Effective sample size"]]
    _numbers(frame, ["Median", "Maximum", "Maximum / median"])
    return Table(frame, "Weights of the principal score weighting estimator", footnote=[
        "Effective sample size: (sum of weights)^2 / sum of squared weights (Kish). A maximum "
        "far above the median means a few rows carry the estimate.",
    ], align={c: _RIGHT for c in list(WEIGHT_COLUMNS.values())[1:]}, label="tab:weights")


def _grid_table(results, key, parameter, caption, label):
    sens = results.get("sensitivity") or {}
    if key not in sens:
        return None
    (_, outcome), level = _words(results), _level(results)
    record = sens[key]
    grid, every = record["grid"], 1
    while len(grid[::every]) > MAX_GRID_ROWS:
        every += 1
    # Every k-th value, counted from the null value (0) so that it stays in the table.
    null = min(range(len(grid)), key=lambda i: abs(grid[i]["value"]))
    shown = [r for i, r in enumerate(grid) if (i - null) % every == 0]
    other = "contrast" in record  # another stratum than the always-survivors (--stratum)
    effect = "Effect" if other else "SACE"
    frame = pd.DataFrame(
        [(r["value"], r["effect"], r["std_error"], _interval(r)) for r in shown],
        columns=[parameter, effect, "SE", level],
    )
    _numbers(frame, [effect, "SE", level])
    tip, status = record.get("tipping_point"), record.get("tipping_status")
    tip_text = {"covers_null": "none (the interval covers 0 at the null value itself)",
                "unchanged": f"none (the {'effect' if other else 'SACE'} does not change "
                "with this parameter here)",
                "not_available": "not available"}.get(status)  # fmt: skip
    if tip_text is None:
        tip_text = "not reached within the grid" if tip is None else number(tip)
    footnote = [f"{parameter}: {record['description']}",
                f"Tipping point ({sens.get('criterion', 'the interval first covers 0')}): "
                f"{tip_text}."]  # fmt: skip
    footnote += [record["note"]] if other and record.get("note") else []
    if every > 1:
        footnote.append(f"One grid value in {every} is shown; results.json holds all "
                        f"{len(grid)}.")
    if sens.get("interval_note"):
        footnote.append(sens["interval_note"])
    footnote.append(short_assumptions_note(results))
    title = caption.format(outcome=outcome)
    if other:
        where = f" among {record['cell']}" if "cell" in record else ""
        title = title.replace("the SACE", f"the effect in the {results['stratum']['label']} "
                              "stratum") + where  # fmt: skip
    return Table(frame, title, footnote=footnote,
                 formats={parameter: ".4g"}, align={c: _RIGHT for c in frame.columns},
                 label=label)  # fmt: skip


def subgroup_table(results):
    record = results.get("subgroups") or {}
    if not record.get("rows"):
        return None
    _, outcome = _words(results)
    level = _level(results)
    frame = pd.DataFrame(
        [(str(r["label"]), r["n"], r["effect"], r["std_error"], _interval(r))
         for r in record["rows"]],
        columns=[record["column"], "Rows", "SACE", "SE", level],
    )  # fmt: skip
    frame["Rows"] = [count(v) for v in frame["Rows"]]
    _numbers(frame, ["SACE", "SE", level])
    footnote = [note for note in [record.get("interval_note")] if note]
    footnote += [*record.get("notes", []), short_assumptions_note(results)]
    return Table(frame, f"Survivor average causal effect on {outcome} by {record['column']}",
                 footnote=footnote, align={c: _RIGHT for c in frame.columns[1:]},
                 label="tab:subgroups")  # fmt: skip


def quantile_table(results):
    record = results.get("distributions") or {}
    if not record.get("available") or not record.get("quantile_effects"):
        return None
    words, outcome = _words(results)
    level = _level(results)
    bounds = {b["quantile"]: b for b in record.get("quantile_bounds") or []}
    rows = []
    for q in record["quantile_effects"]:
        b = bounds.get(q["quantile"])
        rows.append((q["quantile"], q["treated"], q["control"], q["effect"], q["std_error"],
                     _interval(q), (b["lower"], b["upper"]) if b else None,
                     _interval(b) if b else None))  # fmt: skip
    columns = ["Quantile", words["treated_arm"], words["control_arm"], "Difference", "SE", level,
               "Bounds", f"Bounds, {level}"]  # fmt: skip
    frame = pd.DataFrame(rows, columns=columns)
    _numbers(frame, columns[1:])
    footnote = [
        f"Quantiles of {outcome} among always-survivors under each arm and their difference "
        "(quantile effects); bounds without principal ignorability from trimming.",
        *record.get("notes", []),
        short_assumptions_note(results),
    ]
    return Table(frame, f"Quantile effects on {outcome} among always-survivors",
                 footnote=footnote, formats={"Quantile": ".2f"},
                 align={c: _RIGHT for c in columns}, label="tab:quantiles")  # fmt: skip


def manuscript_tables(analysis):
    """The tables of an analysis, ready for a manuscript.

    Parameters
    ----------
    analysis : Analysis or dict
        What :func:`run_analysis` returned, or its ``results`` (the contents of results.json).

    Returns
    -------
    dict of str to pscore_strata.tables.Table
        ``"results"`` (estimators, SACE, SE, interval, bounds, naive contrast, stratum shares)
        and, when the analysis has them, ``"balance"``, ``"weights"``,
        ``"sensitivity_ignorability"``, ``"sensitivity_ignorability_doomed"`` (``--stratum``:
        the cell of the helped and the doomed), ``"sensitivity_monotonicity"``,
        ``"subgroups"`` and ``"quantiles"``. Numbers print as in the HTML report.
    """
    results = getattr(analysis, "results", analysis)
    tables = {
        "results": results_table(results),
        "balance": balance_table(results),
        "weights": weights_table(results),
        "sensitivity_ignorability": _grid_table(
            results, "pi_difference", "Difference in mean outcome",
            "Sensitivity of the SACE on {outcome} to principal ignorability", "tab:sens-pi"),
        "sensitivity_ignorability_doomed": _grid_table(
            results, "pi_difference_doomed", "Difference in mean outcome",
            "Sensitivity of the SACE on {outcome} to principal ignorability",
            "tab:sens-pi-doomed"),
        "sensitivity_monotonicity": _grid_table(
            results, "harmed_ratio", "Stratum ratio",
            "Sensitivity of the SACE on {outcome} to monotonicity", "tab:sens-mono"),
        "subgroups": subgroup_table(results),
        "quantiles": quantile_table(results),
    }  # fmt: skip
    return {name: table for name, table in tables.items() if table is not None}


def table_formats(text, option="--tables"):
    """The formats of ``--tables docx,tex,md`` (comma-separated), checked before any work."""
    from ._data import InputError

    formats = [part.strip().lower().lstrip(".") for part in str(text).split(",") if part.strip()]
    unknown = [f for f in formats if f not in TABLE_FORMATS]
    if unknown or not formats:
        raise InputError(
            f"{option} takes a comma-separated list of {', '.join(TABLE_FORMATS)} (for example "
            f"{option} docx,tex,md); got {text!r}."
        )
    return tuple(dict.fromkeys(formats))


def write_manuscript_tables(analysis, out_dir, formats=TABLE_FORMATS):
    """Write ``tables.<format>`` (every table of the analysis, in order) into ``out_dir``.

    Parameters
    ----------
    analysis : Analysis or dict
        What :func:`run_analysis` returned, or its ``results``.
    out_dir : str or path-like
        An existing folder (the report's, usually).
    formats : sequence of {"docx", "tex", "md"}, default=("docx", "tex", "md")
        One file per format: ``tables.docx`` (Word, one document with every table),
        ``tables.tex`` (a fragment for ``\\input``, one booktabs ``table`` float per table),
        ``tables.md`` (pipe tables).

    Returns
    -------
    list of pathlib.Path
    """
    import pathlib

    tables = manuscript_tables(analysis)
    results = getattr(analysis, "results", analysis)
    target = results.get("stratum") or {}
    effect = ("survivor average causal effect" if target.get("name", "always_survivor") ==
              "always_survivor" else f"effect in the {target['label']} stratum")  # fmt: skip
    title = f"Tables: {effect} on {_words(results)[1]}"
    return [write_tables(tables, pathlib.Path(out_dir) / f"tables.{fmt}", fmt, title=title)
            for fmt in formats]  # fmt: skip
