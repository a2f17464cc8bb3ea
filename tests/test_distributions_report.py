"""The report's distributions section and its results.json record.

External references: the JSON Schema specification (jsonschema library), and the library's own
public functions called as a user would (the report must show the same numbers).
"""

import json

import jsonschema
import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.datasets import make_truncation


def frame_of(data, y):
    frame = pd.DataFrame(data.X[:, :3], columns=["x1", "x2", "x3"])
    frame["score"], frame["treated"], frame["alive"] = y, data.treatment, data.survival
    return frame


ROLES = report.ColumnRoles(outcome="score", treatment="treated", survival="alive",
                           covariates=("x1", "x2", "x3"))  # fmt: skip


@pytest.fixture(scope="module")
def continuous(tmp_path_factory):
    data = make_truncation(1500, n_features=3, random_state=5)
    frame = frame_of(data, np.exp(0.5 * data.y))
    out = tmp_path_factory.mktemp("continuous")
    options = report.AnalysisOptions(method="weighting")
    return frame, report.analyze_frame(frame, ROLES, options, out_dir=out), out


def validate(results):
    jsonschema.validate(results, report.schema(), cls=jsonschema.Draft202012Validator)


def test_continuous_record_matches_the_public_functions(continuous):
    frame, analysis, out = continuous
    results = json.loads((out / "results.json").read_text())
    validate(results)
    assert results["schema_version"] == report.SCHEMA_VERSION == "1.4.0"
    record = results["distributions"]
    assert record["kind"] == "continuous"
    est = ps.PrincipalScoreWeighting().fit(frame[["x1", "x2", "x3"]], frame["score"],
                                           treatment=frame["treated"], survival=frame["alive"])
    table = ps.quantile_effects(est, (0.1, 0.25, 0.5, 0.75, 0.9))
    np.testing.assert_allclose([q["effect"] for q in record["quantile_effects"]],
                               table["effect"], rtol=1e-9)  # fmt: skip
    assert {"distributions.png", "quantile_effects.png"} <= set(results["figures"])
    html = (out / "report.html").read_text()
    assert "Beyond the mean" in html and "Imbens-Manski" in html


def test_level_outcome_gives_the_level_record(tmp_path):
    data = make_truncation(1500, n_features=3, random_state=6)
    frame = frame_of(data, np.clip(np.round(data.y), 0, 3))
    analysis = report.analyze_frame(frame, ROLES, report.AnalysisOptions(method="weighting"),
                                    out_dir=tmp_path)  # fmt: skip
    results = json.loads((tmp_path / "results.json").read_text())
    validate(results)
    record = results["distributions"]
    assert record["kind"] == "levels" and len(record["levels"]) == 4
    assert record["better_level_probability"]["estimate"] == pytest.approx(
        ps.ordinal_comparison(analysis.primary).probability
    )
    assert "higher level" in (tmp_path / "report.html").read_text()


def test_unavailable_distributions_render(continuous):
    _, analysis, _ = continuous
    results = json.loads(json.dumps(analysis.results))
    results["distributions"] = {"available": False, "reason": "distributions missing here"}
    validate(results)
    assert "distributions missing here" in report.render_html(results, [])


def _cli(tmp_path, frame, *extra):
    from pscore_strata.cli import main

    path = tmp_path / "data.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "report"
    code = main(["analyze", str(path), "--outcome", "score", "--treatment", "treated",
                 "--survival", "alive", "--covariates", "x1", "x2", "x3", "--out", str(out),
                 "--quiet", *extra])  # fmt: skip
    return code, out


def test_cli_quantiles_choose_the_quantile_rows(tmp_path, continuous):
    # Source: ps.quantile_effects called on the report's primary estimator settings.
    frame, _, _ = continuous
    code, out = _cli(tmp_path, frame, "--method", "weighting", "--quantiles", "0.75,0.25")
    assert code == 0
    results = json.loads((out / "results.json").read_text())
    validate(results)
    assert results["settings"]["quantiles"] == [0.25, 0.75]
    rows = results["distributions"]["quantile_effects"]
    assert [r["quantile"] for r in rows] == [0.25, 0.75]
    assert [b["quantile"] for b in results["distributions"]["quantile_bounds"]] == [0.25, 0.75]
    est = ps.PrincipalScoreWeighting().fit(frame[["x1", "x2", "x3"]], frame["score"],
                                           treatment=frame["treated"], survival=frame["alive"])
    table = ps.quantile_effects(est, (0.25, 0.75))
    np.testing.assert_allclose([r["effect"] for r in rows], table["effect"], rtol=1e-6)


def test_cli_no_distributions_skips_the_section_and_says_so(tmp_path, continuous):
    frame, _, _ = continuous
    code, out = _cli(tmp_path, frame, "--method", "weighting", "--no-distributions")
    assert code == 0
    results = json.loads((out / "results.json").read_text())
    validate(results)
    assert results["settings"]["distributions"] is False
    assert results["distributions"] == {"available": False, "skipped": True, "reason":
                                        "Not computed: the analysis was run with "
                                        "--no-distributions."}  # fmt: skip
    html = (out / "report.html").read_text()
    assert "run with --no-distributions" in html
    assert not (out / "quantile_effects.png").exists()


@pytest.mark.parametrize("text", ["0.5,1.2", "", "half", "0"])
def test_cli_bad_quantiles_are_refused_naming_the_option(tmp_path, continuous, capsys, text):
    frame, _, _ = continuous
    code, _ = _cli(tmp_path, frame, "--quantiles", text)
    assert code == 2
    assert "--quantiles must be comma-separated probabilities" in capsys.readouterr().err


def test_missing_at_random_report_has_distributions(tmp_path):
    data = make_truncation(1500, n_features=3, random_state=6, follow_up=(0.8, 0.5),
                           response=(0.8, -0.5))  # fmt: skip
    frame = frame_of(data, data.y)
    options = report.AnalysisOptions(method="weighting", missing="at_random")
    report.analyze_frame(frame, ROLES, options, out_dir=tmp_path)
    results = json.loads((tmp_path / "results.json").read_text())
    validate(results)
    record = results["distributions"]
    assert record["available"] and record["kind"] == "continuous"
    assert record["quantile_bounds"]
    est = ps.PrincipalScoreWeighting(missing="at_random").fit(
        frame[["x1", "x2", "x3"]], frame["score"], treatment=frame["treated"],
        survival=frame["alive"])
    table = ps.quantile_effects(est, (0.1, 0.25, 0.5, 0.75, 0.9))
    np.testing.assert_allclose([r["effect"] for r in record["quantile_effects"]],
                               table["effect"], rtol=1e-6)  # fmt: skip
