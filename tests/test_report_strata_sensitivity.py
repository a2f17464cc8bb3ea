"""The report's sensitivity section for a stratum other than the always-survivors (--stratum).

Data: Card (1995), "Using geographic variation in college proximity to estimate the return to
schooling", shipped by causaldata as ``close_college`` (growing up near a four-year college as
the treatment, a college degree as the intermediate, log wage as the outcome, observed for every
man); and the simulated intermediate scenario of ``make_intermediate`` for the decreasing
direction.
"""

import json
import warnings

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.cli import main
from pscore_strata.report._manuscript import manuscript_tables

causaldata = pytest.importorskip("causaldata")
jsonschema = pytest.importorskip("jsonschema")
COVARIATES = ["black", "smsa", "south"]


def _run(card, tmp_path_factory, stratum, covariates=True):
    frame, path = card
    out = tmp_path_factory.mktemp(f"{stratum}_{covariates}")
    extra = ["--covariates", *COVARIATES] if covariates else []
    code = main(["analyze", str(path), "--outcome", "lwage", "--treatment", "nearc4",
                 "--intermediate", "college", "--survived-value", "degree", *extra,
                 "--stratum", stratum, "--unit-name", "man/men", "--tables", "md", "--quiet",
                 "--out", str(out)])  # fmt: skip
    assert code == 0
    return out, json.loads((out / "results.json").read_text())


@pytest.fixture(scope="module")
def complier(card, tmp_path_factory):
    return _run(card, tmp_path_factory, "complier")


@pytest.fixture(scope="module")
def never_taker(card, tmp_path_factory):
    return _run(card, tmp_path_factory, "never_taker")


def _estimator(frame, stratum, covariates=True):
    S = (frame["educ"] >= 16).astype(int)
    X = frame[COVARIATES].astype(float) if covariates else None
    return ps.MultiplyRobust(stratum=stratum).fit(X, frame["lwage"], treatment=frame["nearc4"],
                                                  intermediate=S)  # fmt: skip


def _check_against_api(results, est):
    # Source: the public sensitivity_grid and tipping_point on the same estimator (the report
    # must compute nothing else).
    sens = results["sensitivity"]
    for key in ("pi_difference", "pi_difference_doomed", "harmed_ratio"):
        if key not in sens:
            continue
        values = [row["value"] for row in sens[key]["grid"]]
        grid = ps.sensitivity_grid(est, **{key: values})
        for row, (_, expected) in zip(sens[key]["grid"], grid.iterrows(), strict=True):
            assert row["effect"] == pytest.approx(expected["effect"], abs=1e-10)
            assert row["std_error"] == pytest.approx(expected["std_error"], abs=1e-10)
            assert row["ci_low"] == pytest.approx(expected["ci_low"], abs=1e-10)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # "not reached" warns; the NaN is checked below
            tip = ps.tipping_point(est, key)
        if sens[key]["tipping_point"] is None:
            assert np.isnan(tip)
        else:
            assert sens[key]["tipping_point"] == pytest.approx(tip, abs=1e-8)


def test_complier_section_has_every_parameter_its_effect_depends_on(card, complier):
    frame, _ = card
    _, results = complier
    sens = results["sensitivity"]
    assert [k for k in sens if k in ("pi_difference", "pi_difference_doomed", "harmed_ratio")] == [
        "pi_difference",
        "pi_difference_doomed",
        "harmed_ratio",
    ]
    _check_against_api(results, _estimator(frame, "complier"))
    # The descriptions in the study's words: arm, intermediate level, the two strata.
    doomed = sens["pi_difference_doomed"]
    assert doomed["description"].startswith(
        "Mean outcome under control of the protected (complier) men minus that of the doomed "
        "(never-takers) with the same covariates"
    )
    assert doomed["cell"] == "men in the control arm ('nearc4 = 0') with 'college = no degree'"
    assert sens["pi_difference"]["cell"] == (
        "men in the treatment arm ('nearc4 = 1') with 'college = degree'"
    )
    # The complier score is (p1 - p0)/(1 - xi) in every row: the harmed ratio alone does not
    # move the effect (docs/guide/derivations/strata.md section 7).
    assert sens["harmed_ratio"]["tipping_status"] == "unchanged"
    assert "does not move with this parameter alone" in sens["harmed_ratio"]["note"]
    # Source: the outcome's SD over every man, computed here (the scale of the grid).
    assert doomed["outcome_sd"] == pytest.approx(frame["lwage"].std(ddof=1), rel=1e-12)


def test_never_taker_section_refuses_nothing_and_shows_only_its_cells(card, never_taker):
    frame, _ = card
    _, results = never_taker
    sens = results["sensitivity"]
    assert "pi_difference" not in sens  # the never-takers have no intermediate-1 cell
    assert {"pi_difference_doomed", "harmed_ratio"} <= set(sens)
    _check_against_api(results, _estimator(frame, "never_taker"))
    assert sens["pi_difference_doomed"]["tipping_status"] == "reached"


def test_results_follow_the_schema(complier, never_taker):
    for _, results in (complier, never_taker):
        jsonschema.validate(results, report.schema())


def test_html_figure_and_tables(complier, never_taker):
    for out, results in (complier, never_taker):
        html = (out / "report.html").read_text()
        section = html[html.index('<section id="sensitivity">') :]
        section = section[: section.index("</section>")]
        assert "always-survivor stratum only" not in section
        for key in ("pi_difference", "pi_difference_doomed"):
            if key in results["sensitivity"]:
                record = results["sensitivity"][key]
                assert record["description"].replace("'", "&#39;") in section
        assert "sensitivity.png" in results["figures"]
        assert (out / "sensitivity.png").stat().st_size > 0
        assert 'alt="Sensitivity analysis"' in section
        tables = manuscript_tables(results)
        assert "sensitivity_ignorability_doomed" in tables
        assert "sensitivity_monotonicity" in tables
        assert ("sensitivity_ignorability" in tables) == ("pi_difference" in results["sensitivity"])
        assert (
            "principal ignorability among men in the control arm" in (out / "tables.md").read_text()
        )
        caption = tables["sensitivity_ignorability_doomed"].caption
        assert caption.startswith(f"Sensitivity of the effect in the {results['stratum']['label']}")
        assert "men in the control arm" in caption


def test_no_covariates_closed_form(card, tmp_path_factory):
    # Source: without covariates the principal scores are the arms' intermediate shares and the
    # cell regressions are cell means; the mixture identities of each cell give, by hand,
    # complier mean under treatment = mean(Y | T=1, S=1) + delta p0 / p1 and under control
    # = mean(Y | T=0, S=0) + delta_0 (1 - p1) / (1 - p0); never-taker mean under control
    # = mean(Y | T=0, S=0) - delta_0 (p1 - p0) / (1 - p0) (under treatment the cell is pure).
    frame, _ = card
    T, S, Y = frame["nearc4"], (frame["educ"] >= 16).astype(int), frame["lwage"]
    p1, p0 = S[T == 1].mean(), S[T == 0].mean()
    m11, m00, m10 = (
        Y[(T == 1) & (S == 1)].mean(),
        Y[(T == 0) & (S == 0)].mean(),
        Y[(T == 1) & (S == 0)].mean(),
    )
    out, results = _run(card, tmp_path_factory, "complier", covariates=False)
    html = " ".join((out / "report.html").read_text().split())
    assert "the two cells the complier (protected) stratum belongs to" in html
    assert "the arms&#39; survivor means" not in html
    sens = results["sensitivity"]
    for row in sens["pi_difference"]["grid"]:
        assert row["effect"] == pytest.approx(m11 + row["value"] * p0 / p1 - m00, abs=1e-8)
    for row in sens["pi_difference_doomed"]["grid"]:
        expected = m11 - (m00 + row["value"] * (1 - p1) / (1 - p0))
        assert row["effect"] == pytest.approx(expected, abs=1e-8)
    assert sens["harmed_ratio"]["tipping_status"] == "unchanged"
    _, results = _run(card, tmp_path_factory, "never_taker", covariates=False)
    for row in results["sensitivity"]["pi_difference_doomed"]["grid"]:
        expected = m10 - (m00 - row["value"] * (p1 - p0) / (1 - p0))
        assert row["effect"] == pytest.approx(expected, abs=1e-8)
    # Constant scores: a harmed stratum of any size rescales every score alike.
    assert results["sensitivity"]["harmed_ratio"]["tipping_status"] == "unchanged"


def test_decreasing_direction_names_the_control_arm_as_mixed(tmp_path):
    # Under decreasing monotonicity the control arm mixes always-survivors and harmed units
    # among those with intermediate 1, the treated arm the harmed and the doomed among those
    # with intermediate 0.
    data = ps.datasets.make_intermediate(800, stratum="harmed", monotonicity="decreasing",
                                         random_state=3)  # fmt: skip
    frame = pd.DataFrame(data.X[:, :2], columns=["x1", "x2"]).assign(
        t=data.treatment, s=data.intermediate, y=data.y)  # fmt: skip
    roles = report.ColumnRoles(outcome="y", treatment="t", survival="s", covariates=("x1", "x2"))
    options = report.AnalysisOptions(stratum="harmed", monotonicity="decreasing")
    analysis = report.analyze_frame(frame, roles, options, out_dir=tmp_path)
    sens = analysis.results["sensitivity"]
    assert sens["pi_difference"]["cell"].startswith("units in the control arm")
    assert sens["pi_difference_doomed"]["cell"].startswith("units in the treatment arm")
    assert "harmed units minus that of the always-survivors" in sens["pi_difference"]["description"]
    est = ps.MultiplyRobust(stratum="harmed", monotonicity="decreasing").fit(
        frame[["x1", "x2"]], frame["y"], treatment=frame["t"], intermediate=frame["s"]
    )
    _check_against_api(analysis.results, est)
    jsonschema.validate(json.loads((tmp_path / "results.json").read_text()), report.schema())


def test_manuscript_results_table_names_the_stratum(complier):
    _, results = complier
    table = manuscript_tables(results)["results"]
    groups = set(table.data["group"])
    assert "Effect in the complier (protected) stratum" in groups
    assert "Survivor average causal effect" not in groups
    assert table.footnote[0].startswith("Effect: the mean difference in lwage")


def test_missing_outcomes_at_random(card, tmp_path):
    # Source: the same estimator through the Python API; 12% of the wages blanked at random
    # (invented) so that units with intermediate 0 lack outcomes too.
    frame, _ = card
    blanked = frame.assign(
        lwage=frame["lwage"].mask(np.random.default_rng(3).random(len(frame)) < 0.12)
    )
    path = tmp_path / "card_missing.csv"
    blanked.to_csv(path, index=False)
    code = main(["analyze", str(path), "--outcome", "lwage", "--treatment", "nearc4",
                 "--intermediate", "college", "--survived-value", "degree", "--covariates",
                 *COVARIATES, "--stratum", "never_taker", "--missing", "at_random", "--quiet",
                 "--out", str(tmp_path / "o")])  # fmt: skip
    assert code == 0
    results = json.loads((tmp_path / "o" / "results.json").read_text())
    S = (blanked["educ"] >= 16).astype(int)
    est = ps.MultiplyRobust(stratum="never_taker", missing="at_random").fit(
        blanked[COVARIATES].astype(float), blanked["lwage"], treatment=blanked["nearc4"],
        intermediate=S)  # fmt: skip
    _check_against_api(results, est)
    jsonschema.validate(results, report.schema())
