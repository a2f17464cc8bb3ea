"""The command line on a CSV with blanks: unknown survival status and survivors' missing outcomes.

External references: the counts of blanks recomputed with pandas from the CSV, the Python API
fitted the same way (the report must show the API's numbers), and the results JSON Schema.
"""

import json

import jsonschema
import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.cli import main

COVARIATES = ["x1", "x2", "x3"]


@pytest.fixture(scope="module")
def blank_csv(tmp_path_factory):
    data = ps.datasets.make_scenario("missing_outcomes", 3000, random_state=0)
    frame = pd.DataFrame(data.X, columns=[f"x{j + 1}" for j in range(5)])
    frame["arm"], frame["alive"], frame["score"] = data.treatment, data.survival, data.y
    path = tmp_path_factory.mktemp("data") / "blanks.csv"
    frame.to_csv(path, index=False)
    return path, pd.read_csv(path)


def _args(path, out, *extra):
    return ["analyze", str(path), "--outcome", "score", "--treatment", "arm", "--survival",
            "alive", "--covariates", *COVARIATES, "--out", str(out), "--quiet", *extra]  # fmt: skip


def test_without_the_option_the_error_counts_rows_and_names_it(blank_csv, tmp_path, capsys):
    path, frame = blank_csv
    status = main(_args(path, tmp_path))
    err = capsys.readouterr().err
    unknown = frame["alive"].isna()
    no_outcome = (frame["alive"] == 1) & frame["score"].isna()
    assert status == 2
    assert f"Missing values in {int((unknown | no_outcome).sum())} of {len(frame)} rows" in err
    assert f"'alive' {int(unknown.sum())}" in err and f"'score' {int(no_outcome.sum())}" in err
    assert "--missing at_random" in err and "missing at random" in err


def test_missing_at_random_report_matches_the_api(blank_csv, tmp_path, capsys):
    path, frame = blank_csv
    assert main(_args(path, tmp_path, "--missing", "at_random")) == 0
    out = capsys.readouterr().out
    assert "Missing data, treated" in out
    results = json.loads((tmp_path / "results.json").read_text())
    jsonschema.validate(results, report.schema())
    assert results["settings"]["missing"] == "at_random"
    by_arm = {row["arm"]: row for row in results["missing_data"]["by_arm"]}
    for arm, label in ((1, "treated"), (0, "control")):
        rows = frame[frame["arm"] == arm]
        assert by_arm[label]["n_status_unknown"] == int(rows["alive"].isna().sum())
        missing = (rows["alive"] == 1) & rows["score"].isna()
        assert by_arm[label]["n_outcome_missing"] == int(missing.sum())
    api = ps.MultiplyRobust(missing="at_random", random_state=0).fit(
        frame[COVARIATES], frame["score"], treatment=frame["arm"], survival=frame["alive"]
    )
    primary = next(e for e in results["estimates"] if e["primary"])
    assert primary["effect"] == pytest.approx(api.effect_, abs=1e-10)
    assert primary["std_error"] == pytest.approx(api.std_error_, rel=1e-10)
    grid = results["missing_data"]["outcome_shift"]["grid"]
    zero = next(g for g in grid if g["value"] == 0)
    assert zero["effect"] == pytest.approx(api.effect_, abs=1e-12)
    html = (tmp_path / "report.html").read_text()
    assert "Missing data" in html and "Assumption (missing at random)" in html
    assert any(a["name"].startswith("Missing at random") for a in results["assumptions"])


def test_other_blanks_still_refuse_with_missing_at_random(blank_csv, tmp_path, capsys):
    path, frame = blank_csv
    frame = frame.copy()
    frame.loc[:4, "x1"] = np.nan
    other = tmp_path / "covariate_blanks.csv"
    frame.to_csv(other, index=False)
    assert main(_args(other, tmp_path / "out", "--missing", "at_random")) == 2
    err = capsys.readouterr().err
    assert "Missing values in 5 of" in err and "'x1' 5" in err
