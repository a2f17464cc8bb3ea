"""The analysis' manuscript tables (Word, LaTeX, Markdown), read back by independent readers and
compared with results.json at the printed precision: a printed number with d decimals lies within
half a unit of its last digit of the value in results.json."""

import json
import re

import pytest
from _table_readers import read_docx, read_latex, read_markdown

from pscore_strata import report
from pscore_strata.datasets import DEMO_ROLES, load_demo
from pscore_strata.report._manuscript import manuscript_tables, write_manuscript_tables

READERS = {
    "docx": read_docx,
    "tex": lambda path: read_latex(path.read_text()),
    "md": lambda path: read_markdown(path.read_text()),
}


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    frame = load_demo().iloc[:900]
    roles = report.ColumnRoles(
        outcome=DEMO_ROLES["outcome"], treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"], covariates=("age", "severity_score"),
        categorical=("site",), by="female",
    )  # fmt: skip
    options = report.AnalysisOptions(arm_names=("lung-protective", "usual care"),
                                     event_name="death", unit_name="patient")  # fmt: skip
    out = tmp_path_factory.mktemp("tables")
    analysis = report.analyze_frame(frame, roles, options, out_dir=out)
    write_manuscript_tables(analysis, out)
    return out, json.loads((out / "results.json").read_text())


def agrees(text, value):
    """``text`` prints ``value`` at its own precision ("—" when there is no value)."""
    if value is None:
        return text == "—"
    if isinstance(value, tuple):
        parts = text.split(" to ")
        return len(parts) == 2 and all(agrees(p, v) for p, v in zip(parts, value, strict=True))
    plain = text.replace(",", "")
    if not re.fullmatch(r"-?\d+(\.\d+)?", plain):
        return False
    decimals = len(plain.partition(".")[2])
    return abs(float(plain) - value) <= 0.5 * 10.0**-decimals + 1e-12


def interval(record, low="ci_low", high="ci_high"):
    return None if record[low] is None else (record[low], record[high])


def by_first_cell(rows):
    return {r[0]: r[1:] for r in rows}


@pytest.fixture(scope="module", params=sorted(READERS))
def found(request, written):
    out, results = written
    return READERS[request.param](out / f"tables.{request.param}"), results


def _table(found, start):
    tables, results = found
    captions = [c for c in tables if c.startswith(start)]
    assert len(captions) == 1, (start, list(tables))
    return tables[captions[0]], results


def test_results_table_equals_results_json(found):
    (header, rows), results = _table(found, "Effect of lung-protective versus usual care")
    assert header == ["Analysis", "Estimate", "SE", "95% CI", "Standard error"]
    cells = by_first_cell(rows)
    for record in results["estimates"]:
        label = record["label"] + (" (primary)" if record["primary"] else "")
        estimate, se, ci, method = cells[label]
        assert agrees(estimate, record["effect"]) and agrees(se, record["std_error"])
        assert agrees(ci, interval(record)) and method == record["std_error_method"]
    bounds = results["bounds"]
    estimate, se, ci, _ = cells["Bounds (lower to upper)"]
    assert agrees(estimate, (bounds["lower"], bounds["upper"])) and se == "—"
    assert agrees(ci, interval(bounds))
    naive = results["naive_survivor_contrast"]
    estimate, se, ci, _ = cells["Survivors only (biased)"]
    assert agrees(estimate, naive["estimate"]) and agrees(ci, interval(naive))
    share = results["stratum_shares"]["always_survivor"]
    assert agrees(cells["always-survivor"][0], share["estimate"])
    assert "Survivor average causal effect" in cells  # the group heading


def test_balance_table_equals_results_json(found):
    (header, rows), results = _table(found, "Covariate balance")
    assert header[0] == "Covariate" and len(header) == 5
    cells = by_first_cell(rows)
    keys = ["raw_smd_treated_vs_control", "smd_treated_vs_control", "smd_treated_vs_everyone",
            "smd_control_vs_everyone"]  # fmt: skip
    assert len(cells) == len(results["diagnostics"]["balance"])
    for record in results["diagnostics"]["balance"]:
        assert all(agrees(t, record[k]) for t, k in zip(cells[record["covariate"]], keys,
                                                         strict=True))  # fmt: skip


def test_sensitivity_tables_equal_results_json(found):
    start = "Sensitivity of the SACE on functional_score_6mo to "
    for end, key in (("principal", "pi_difference"), ("monotonicity", "harmed_ratio")):
        (header, rows), results = _table(found, start + end)
        grid = {g["value"]: g for g in results["sensitivity"][key]["grid"]}
        assert len(rows) <= 21 and any(float(r[0]) == 0 for r in rows)
        for value, effect, se, ci in rows:
            record = grid[float(value.replace(",", ""))]
            assert agrees(effect, record["effect"]) and agrees(se, record["std_error"])
            assert agrees(ci, interval(record))


def test_subgroup_and_quantile_tables_equal_results_json(found):
    (header, rows), results = _table(found, "Survivor average causal effect on")
    assert header[0] == "female"
    cells = by_first_cell(rows)
    for record in results["subgroups"]["rows"]:
        n, effect, se, ci = cells[str(record["label"])]
        assert n == f"{record['n']:,}" and agrees(effect, record["effect"])
        assert agrees(ci, interval(record))
    (header, rows), results = _table(found, "Quantile effects")
    assert header[1:3] == ["lung-protective", "usual care"]
    for row, record in zip(rows, results["distributions"]["quantile_effects"], strict=True):
        assert agrees(row[0], record["quantile"])
        for text, key in zip(row[1:5], ["treated", "control", "effect", "std_error"],
                             strict=True):  # fmt: skip
            assert agrees(text, record[key])
        assert agrees(row[5], interval(record))


def test_footnotes_state_the_assumptions_and_cautions(written):
    out, _ = written
    text = (out / "tables.md").read_text()
    assert "Principal ignorability:" in text and "Monotonicity:" in text
    assert "cannot be tested" in text and "individual patient" in text
    tables = manuscript_tables(json.loads((out / "results.json").read_text()))
    assert set(tables) == {"results", "balance", "weights", "sensitivity_ignorability",
                           "sensitivity_monotonicity", "subgroups", "quantiles"}  # fmt: skip
    assert all(any("latent" in note for note in t.footnote) for n, t in tables.items()
               if n != "weights")  # fmt: skip
