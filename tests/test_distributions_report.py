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
