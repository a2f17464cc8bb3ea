"""The command line end to end: analyze, demo, simulate, and every user error.

External references: the demo registry's true SACE (simulated truth, DEMO_TRUE_EFFECT), survivor
means and survival shares recomputed directly with pandas, and the Python API fitted the same way
(the report must show exactly the API's numbers).
"""

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.assumptions import TrimmingBounds, tipping_point
from pscore_strata.cli import main
from pscore_strata.datasets import DEMO_ROLES, DEMO_TRUE_EFFECT, load_demo

ROLES = DEMO_ROLES
COVARIATES = ["age", "female", "severity_score", "comorbidities", "pf_ratio"]


def run_cli(*args):
    return subprocess.run(
        [sys.executable, "-m", "pscore_strata", *map(str, args)],
        capture_output=True,
        text=True,
        timeout=300,
    )


def analyze_args(path, out, *extra):
    return [
        "analyze", path, "--outcome", ROLES["outcome"], "--treatment", ROLES["treatment"],
        "--survival", ROLES["survival"], "--covariates", *COVARIATES, "--categorical", "site",
        "--out", out, *extra,
    ]  # fmt: skip


def design(frame):
    return pd.get_dummies(
        frame[COVARIATES + ["site"]], columns=["site"], drop_first=True, dtype=float
    ).astype(float)


@pytest.fixture(scope="module")
def demo_csv(tmp_path_factory):
    path = tmp_path_factory.mktemp("data") / "registry.csv"
    load_demo().to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def analyzed(demo_csv, tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    result = run_cli(*analyze_args(demo_csv, out, "--cluster", "site"))
    return result, out, json.loads((out / "results.json").read_text())


def test_analyze_end_to_end(analyzed):
    result, out, results = analyzed
    assert result.returncode == 0, result.stderr
    assert "Traceback" not in result.stderr
    for name in ["report.html", "results.json", *results["figures"]]:
        assert (out / name).is_file()
    assert "estimator ..." in result.stderr  # progress goes to standard error
    primary = results["estimates"][0]
    assert primary["primary"] and primary["method"] == "robust"
    assert f"{primary['effect']:.3f}" in result.stdout
    assert "statistician" in result.stdout


@pytest.mark.filterwarnings("ignore::pscore_strata.MonotonicityWarning")
def test_results_equal_the_python_api(analyzed):
    _, _, results = analyzed
    frame = load_demo()
    X, groups = design(frame), frame["site"].to_numpy()
    y, t, s = frame[ROLES["outcome"]], frame[ROLES["treatment"]], frame[ROLES["survival"]]
    fitted = {}
    for record in results["estimates"]:
        cls = getattr(ps, record["estimator"])
        est = cls(random_state=0).fit(X, y, treatment=t, survival=s, groups=groups)
        fitted[record["method"]] = est
        assert record["effect"] == est.effect_
        assert record["std_error"] == est.std_error_
        assert (record["ci_low"], record["ci_high"]) == est.conf_int(0.95)
    bounds = TrimmingBounds().fit(X, y, treatment=t, survival=s, groups=groups)
    assert (results["bounds"]["lower"], results["bounds"]["upper"]) == (
        bounds.lower_,
        bounds.upper_,
    )
    tip = tipping_point(fitted["robust"], "pi_difference")
    assert results["sensitivity"]["pi_difference"]["tipping_point"] == tip


def test_results_match_truth_and_direct_counts(analyzed):
    _, _, results = analyzed
    frame = load_demo()
    # Simulated truth of the invented registry (data card): the SACE is exactly 4.
    for record in results["estimates"]:
        assert abs(record["effect"] - DEMO_TRUE_EFFECT) < 4 * record["std_error"]
    # Direct pandas computation of the naive survivor contrast and of the arm summaries.
    survivors = frame[frame[ROLES["survival"]] == 1]
    means = survivors.groupby(ROLES["treatment"])[ROLES["outcome"]].mean()
    naive = results["naive_survivor_contrast"]["estimate"]
    assert naive == pytest.approx(means[1] - means[0], rel=1e-12)
    shares = frame.groupby(ROLES["treatment"])[ROLES["survival"]].mean()
    arms = {a["arm"]: a for a in results["data_overview"]["arms"]}
    assert arms["treated"]["survival_share"] == pytest.approx(shares[1], rel=1e-12)
    assert arms["control"]["n"] == int((frame[ROLES["treatment"]] == 0).sum())
    assert results["data_overview"]["n_clusters"] == frame["site"].nunique()


def test_demo_command(tmp_path):
    result = run_cli("demo", "--out", tmp_path / "report", "--quiet")
    assert result.returncode == 0, result.stderr
    assert (tmp_path / "report" / "report.html").is_file()
    assert "true SACE of +4.0" in result.stdout
    assert result.stderr == ""  # --quiet


def test_simulate_then_analyze(tmp_path):
    path = tmp_path / "sim.csv"
    result = run_cli("simulate", "linear", "--n", 3000, "--out", path, "--seed", 1)
    assert result.returncode == 0, result.stderr
    frame = pd.read_csv(path)
    assert len(frame) == 3000
    assert frame.loc[frame["survival"] == 0, "outcome"].isna().all()
    truth = ps.datasets.make_scenario("linear", 3000, random_state=1).true_effect
    assert f"{truth:.4f}" in result.stdout
    out = tmp_path / "out"
    code = main(["analyze", str(path), "--outcome", "outcome", "--treatment", "treatment",
                 "--survival", "survival", "--covariates", *[f"x{j}" for j in range(1, 6)],
                 "--out", str(out), "--quiet", "--method", "weighting"])  # fmt: skip
    assert code == 0
    results = json.loads((out / "results.json").read_text())
    primary = results["estimates"][0]
    assert primary["method"] == "weighting"
    # Simulated truth of the "linear" scenario.
    assert abs(primary["effect"] - truth) < 4 * primary["std_error"]


def test_boosting_learner_parquet_weights(tmp_path, capsys):
    frame = load_demo().iloc[:800].copy()
    frame["w"] = np.where(frame["age"] > 60, 2.0, 1.0)
    path = tmp_path / "data.parquet"
    frame.to_parquet(path)
    out = tmp_path / "out"
    # One OpenMP thread: boosting fits on a few hundred rows gain nothing from more, and a busy
    # shared machine makes them far slower (oversubscription).
    with threadpool_limits(1):
        code = main(analyze_args(str(path), str(out), "--learner", "boosting", "--folds", "2",
                                 "--weights", "w", "--quiet"))  # fmt: skip
    assert code == 0, capsys.readouterr().err
    results = json.loads((out / "results.json").read_text())
    assert results["settings"]["learner"] == "boosting"
    assert results["settings"]["folds"] == 2
    assert results["columns"]["weights"] == "w"
    robust = results["estimates"][0]
    assert robust["std_error_method"] == "influence function"
    # Reference: statsmodels DescrStatsW (weighted mean and SD of the treated survivors).
    from statsmodels.stats.weightstats import DescrStatsW

    treated = frame[(frame[ROLES["treatment"]] == 1) & (frame[ROLES["survival"]] == 1)]
    stats = DescrStatsW(treated[ROLES["outcome"]].to_numpy(), weights=treated["w"].to_numpy())
    arm = {a["arm"]: a for a in results["data_overview"]["arms"]}["treated"]
    assert arm["outcome_mean_survivors"] == pytest.approx(stats.mean, rel=1e-12)
    # DescrStatsW divides by sum(w); the report's SD by sum(w) - sum(w^2)/sum(w) (unbiased for
    # reliability weights, the ordinary n - 1 for unit weights).
    w = treated["w"].to_numpy()
    correction = np.sqrt(w.sum() / (w.sum() - np.sum(w**2) / w.sum()))
    assert arm["outcome_sd_survivors"] == pytest.approx(stats.std * correction, rel=1e-10)


def test_bootstrap_option(tmp_path, demo_csv):
    out = tmp_path / "out"
    code = main(analyze_args(str(demo_csv), str(out), "--bootstrap", "20", "--quiet",
                             "--method", "weighting"))  # fmt: skip
    assert code == 0
    boot = json.loads((out / "results.json").read_text())["bootstrap"]
    assert boot["n_resamples"] == 20
    assert boot["ci_low"] < boot["estimate"] < boot["ci_high"]


# -- user errors: one line on standard error, exit status 2, no traceback ----------------------


def assert_one_line_error(result):
    assert result.returncode == 2
    assert "Traceback" not in result.stderr
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    return lines[0]


def test_unknown_column_lists_available(demo_csv, tmp_path):
    result = run_cli("analyze", demo_csv, "--outcome", "score", "--treatment", ROLES["treatment"],
                     "--survival", ROLES["survival"], "--out", tmp_path, "--quiet")  # fmt: skip
    line = assert_one_line_error(result)
    assert "--outcome 'score'" in line
    assert "Available columns: patient_id, age," in line


def test_missing_values_are_counted(tmp_path, capsys):
    frame = load_demo()
    frame.loc[[0, 1, 2], "age"] = np.nan
    survivor = frame.index[(frame[ROLES["survival"]] == 1) & (frame.index > 10)][0]
    frame.loc[survivor, ROLES["outcome"]] = np.nan
    path = tmp_path / "gaps.csv"
    frame.to_csv(path, index=False)
    assert main(analyze_args(str(path), str(tmp_path / "o"), "--quiet")) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1
    assert "Missing values in 4 of 2000 rows" in err
    assert "'age' 3" in err and f"'{ROLES['outcome']}' 1 (survivors only)" in err
    assert "--drop-incomplete" in err


def test_drop_incomplete_reports_count(tmp_path, capsys):
    frame = load_demo()
    frame.loc[[0, 1, 2], "pf_ratio"] = np.nan
    path = tmp_path / "gaps.csv"
    frame.to_csv(path, index=False)
    out = tmp_path / "o"
    assert main(analyze_args(str(path), str(out), "--quiet", "--drop-incomplete")) == 0
    assert "Dropped 3 incomplete row(s)" in capsys.readouterr().err
    overview = json.loads((out / "results.json").read_text())["data_overview"]
    assert overview["n_rows_dropped"] == 3 and overview["n_rows_analyzed"] == 1997
    assert overview["missing_values"] == {"pf_ratio": 3}
    assert "3 incomplete rows dropped" in (out / "report.html").read_text()


def test_missing_outcome_of_non_survivors_is_not_incomplete(tmp_path):
    # The demo registry has no outcome for every patient who died; that is truncation.
    frame = load_demo()
    assert frame[ROLES["outcome"]].isna().sum() == (frame[ROLES["survival"]] == 0).sum()
    data = report.prepare_data(
        frame,
        report.ColumnRoles(
            outcome=ROLES["outcome"], treatment=ROLES["treatment"], survival=ROLES["survival"]
        ),
    )
    assert data.n_rows_dropped == 0


@pytest.mark.parametrize(
    "name, message",
    [("data.xlsx", "type '.xlsx'; give a .csv, .parquet, .dta (Stata)"),
     ("absent.csv", "does not exist")],
)  # fmt: skip
def test_bad_file(tmp_path, name, message):
    path = tmp_path / name
    if name.endswith(".xlsx"):
        path.write_bytes(b"not a table")
    result = run_cli(*analyze_args(path, tmp_path / "o", "--quiet"))
    assert message in assert_one_line_error(result)


@pytest.mark.parametrize(
    "change, extra, message",
    [
        (lambda f: f.assign(protective_ventilation=f["protective_ventilation"] + 1), [],
         "--treatment column 'protective_ventilation' must hold 0/1 values"),
        (lambda f: f, ["--covariates", "age", "site"],
         "Covariate(s) site are not numeric; list them with --categorical"),
        (lambda f: f, ["--folds", "1"], "--folds must be at least 2"),
        (lambda f: f, ["--bootstrap", "1"], "--bootstrap must be 0 (no bootstrap) or at least 2"),
        (lambda f: f.assign(w=-1.0), ["--weights", "w"], "non-negative numbers"),
        (lambda f: f.assign(w=0.0), ["--weights", "w"], "is zero in every analysed row"),
        (lambda f: f, ["--covariates", "alive_6mo"], "also the outcome, treatment or survival"),
    ],
)  # fmt: skip
def test_option_errors(tmp_path, capsys, change, extra, message):
    path = tmp_path / "d.csv"
    change(load_demo()).to_csv(path, index=False)
    args = ["analyze", str(path), "--outcome", ROLES["outcome"], "--treatment",
            ROLES["treatment"], "--survival", ROLES["survival"], "--out", str(tmp_path / "o"),
            "--quiet", *extra]  # fmt: skip
    assert main(args) == 2
    err = capsys.readouterr().err
    assert message in err and len(err.strip().splitlines()) == 1


def test_demo_bootstrap_error_names_the_option(tmp_path, capsys):
    assert main(["demo", "--bootstrap", "-3", "--quiet", "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "--bootstrap must be 0 (no bootstrap) or at least 2" in err
    assert len(err.strip().splitlines()) == 1


def test_simulate_errors(tmp_path, capsys):
    assert main(["simulate", "no_such", "--out", str(tmp_path / "a.csv")]) == 2
    assert "Available: linear, nonlinear" in capsys.readouterr().err
    assert main(["simulate", "linear", "--out", str(tmp_path / "a.txt")]) == 2
    assert "must end in .csv or .parquet" in capsys.readouterr().err


def test_argument_errors_are_one_line():
    result = run_cli("analyze", "x.csv", "--method", "magic")
    line = assert_one_line_error(result)
    assert "invalid choice: 'magic'" in line and "--help" in line


def test_few_clusters_are_named_with_the_t_reference(analyzed):
    # The demo registry has 5 sites: the intervals above equal the estimators' conf_int, which
    # uses Student's t with G - 1 = 4 degrees of freedom under fewer than 30 clusters.
    _, out, results = analyzed
    assert results["data_overview"]["n_clusters"] == 5
    html = " ".join((out / "report.html").read_text().split())
    assert "t reference with 4 degrees of freedom (G - 1)" in html
