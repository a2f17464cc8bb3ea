"""--stratum and --intermediate through the command line and the report, on open data.

Data: Card (1995), "Using geographic variation in college proximity to estimate the return to
schooling", shipped by causaldata as ``close_college``: growing up near a four-year college
(``nearc4``) as the treatment, a college degree (``educ >= 16``, text-coded here) as the
intermediate, log wage (``lwage``, observed for every man) as the outcome.
"""

import json

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata.cli import main

causaldata = pytest.importorskip("causaldata")
COVARIATES = ["black", "smsa", "south"]


def _analyze(path, out, *extra, role="--intermediate"):
    return main(["analyze", str(path), "--outcome", "lwage", "--treatment", "nearc4", role,
                 "college", "--survived-value", "degree", "--covariates", *COVARIATES,
                 "--quiet", "--out", str(out), *extra])  # fmt: skip


@pytest.fixture(scope="module")
def complier_report(card, tmp_path_factory):
    frame, path = card
    out = tmp_path_factory.mktemp("complier")
    assert _analyze(path, out, "--stratum", "complier", "--unit-name", "man/men") == 0
    return frame, out, json.loads((out / "results.json").read_text())


def test_report_numbers_equal_the_python_api(complier_report):
    # Source: the same analysis through the Python API (the CLI must not compute anything else).
    frame, _, results = complier_report
    S = (frame["educ"] >= 16).astype(int)
    for record in results["estimates"]:
        cls = {"weighting": ps.PrincipalScoreWeighting, "regression": ps.OutcomeRegression,
               "robust": ps.MultiplyRobust}[record["method"]]  # fmt: skip
        est = cls(stratum="complier").fit(frame[COVARIATES].astype(float), frame["lwage"],
                                          treatment=frame["nearc4"], intermediate=S)  # fmt: skip
        assert record["effect"] == pytest.approx(est.effect_, abs=1e-10)
        assert record["std_error"] == pytest.approx(est.std_error_, abs=1e-10)
    assert results["settings"]["stratum"] == "complier"
    assert results["stratum"]["name"] == "protected"
    # Source: the naive contrast computed here, treated with a degree against control without.
    T = frame["nearc4"]
    naive = frame["lwage"][(T == 1) & (S == 1)].mean() - frame["lwage"][(T == 0) & (S == 0)].mean()
    assert results["naive_survivor_contrast"]["estimate"] == pytest.approx(naive, abs=1e-12)


def test_all_strata_table(complier_report):
    frame, _, results = complier_report
    rows = {row["stratum"]: row for row in results["strata"]["rows"]}
    assert list(rows) == ["always_survivor", "protected", "doomed"]
    assert sum(row["share"] for row in rows.values()) == pytest.approx(1.0, abs=1e-12)
    # Under monotonicity the doomed share is one minus the treated arm's share of degrees
    # (randomization-free form: its doubly robust mean; here close to the raw share).
    treated_share = (frame["educ"][frame["nearc4"] == 1] >= 16).mean()
    assert rows["doomed"]["share"] == pytest.approx(1 - treated_share, abs=0.03)
    primary = next(e for e in results["estimates"] if e["primary"])
    assert rows["protected"]["effect"] == pytest.approx(primary["effect"], abs=1e-12)


def test_report_is_worded_for_the_stratum(complier_report):
    _, out, results = complier_report
    html = (out / "report.html").read_text()
    assert "Effect in the complier (protected) stratum" in html
    assert "All strata" in html
    assert "Survivor average causal effect of" not in html
    assert "E[Y(0) | protected, X] = E[Y(0) | doomed, X]" in html
    # The trimming bounds of the stratum (tests/test_report_strata_bounds.py).
    assert results["bounds"]["arms"][0]["arm"] == "treated"
    # The sensitivity analysis serves the stratum (tests/test_report_strata_sensitivity.py).
    assert {"pi_difference", "pi_difference_doomed", "harmed_ratio"} <= set(results["sensitivity"])
    assert "individual" in " ".join(results["cautions"])
    assert results["estimand"]["variable"] == "'lwage', observed for every man."


def test_intermediate_is_survival_on_the_command_line(card, tmp_path):
    _, path = card
    assert _analyze(path, tmp_path / "a", "--stratum", "doomed") == 0
    assert _analyze(path, tmp_path / "b", "--stratum", "doomed", role="--survival") == 0
    a = json.loads((tmp_path / "a" / "results.json").read_text())
    b = json.loads((tmp_path / "b" / "results.json").read_text())
    assert [e["effect"] for e in a["estimates"]] == [e["effect"] for e in b["estimates"]]


def test_always_survivor_report_gets_the_strata_table_when_outcomes_exist(card, tmp_path):
    _, path = card
    assert _analyze(path, tmp_path / "o") == 0
    results = json.loads((tmp_path / "o" / "results.json").read_text())
    assert len(results["strata"]["rows"]) == 3
    assert results["bounds"].get("available", True)  # the always-survivor sections stay


def test_truncation_by_death_refuses_other_strata(tmp_path, capsys):
    data = ps.datasets.make_truncation(300, random_state=0)
    frame = pd.DataFrame(data.X[:, :2], columns=["x1", "x2"]).assign(
        t=data.treatment, s=data.survival, y=data.y)  # fmt: skip
    path = tmp_path / "truncated.csv"
    frame.to_csv(path, index=False)
    code = main(["analyze", str(path), "--outcome", "y", "--treatment", "t", "--survival", "s",
                 "--covariates", "x1", "x2", "--stratum", "complier", "--quiet",
                 "--out", str(tmp_path / "o")])  # fmt: skip
    assert code != 0
    assert "only the always-survivor effect exists" in capsys.readouterr().err
    code = main(["analyze", str(path), "--outcome", "y", "--treatment", "t", "--survival", "s",
                 "--stratum", "harmed", "--quiet", "--out", str(tmp_path / "p")])  # fmt: skip
    assert code != 0
    assert "--monotonicity 'decreasing'" in capsys.readouterr().err


def test_missing_outcomes_at_random_for_the_complier_effect(card, tmp_path):
    # Source: the same analysis through the Python API. 12% of the wages are blanked here
    # (invented, at random) so that units with and without a degree lack outcomes.
    frame, _ = card
    rng = np.random.default_rng(3)
    blanked = frame.assign(lwage=frame["lwage"].mask(rng.random(len(frame)) < 0.12))
    path = tmp_path / "card_missing.csv"
    blanked.to_csv(path, index=False)
    out = tmp_path / "report"
    assert _analyze(path, out, "--stratum", "complier", "--missing", "at_random") == 0
    results = json.loads((out / "results.json").read_text())
    S = (blanked["educ"] >= 16).astype(int)
    primary = next(r for r in results["estimates"] if r["primary"])
    est = ps.MultiplyRobust(stratum="complier", missing="at_random").fit(
        blanked[COVARIATES].astype(float), blanked["lwage"], treatment=blanked["nearc4"],
        intermediate=S)  # fmt: skip
    assert primary["effect"] == pytest.approx(est.effect_, abs=1e-10)
    by_arm = {a["arm"]: a for a in results["missing_data"]["by_arm"]}
    T, Y = blanked["nearc4"], blanked["lwage"]
    for arm, t in (("treated", 1), ("control", 0)):
        zero = (T == t) & (S == 0)
        assert by_arm[arm]["n_known_intermediate_0"] == int(zero.sum())
        assert by_arm[arm]["n_outcome_missing_intermediate_0"] == int((zero & Y.isna()).sum())
    assert results["missing_data"]["outcome_shift"] is None
    assert "always-survivor stratum only" in results["missing_data"]["outcome_shift_note"]
    assert "Units with intermediate 0" in (out / "report.html").read_text()
