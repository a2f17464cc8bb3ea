"""Every interval the command line and the report print comes from a standard error that
accounts for the fitted nuisance models; the others are bootstrapped or withheld with a reason.

External references: each fitted estimator's own ``std_error_method_`` (what its standard error
ignores), and :func:`ps.bootstrap` run directly with the same seed.
"""

import json

import numpy as np
import pandas as pd
import pytest
from threadpoolctl import threadpool_limits

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.cli import main
from pscore_strata.report._console import print_key_results
from pscore_strata.report._honesty import HONEST_METHODS, accounts_for_nuisance, honest_estimates

IGNORES = "influence function (nuisance ignored)"


def frame_of(data):
    frame = pd.DataFrame(data.X[:, :3], columns=["x1", "x2", "x3"])
    frame["treatment"], frame["survival"], frame["outcome"] = (
        data.treatment, data.survival, data.y
    )  # fmt: skip
    return frame


ROLES = report.ColumnRoles(outcome="outcome", treatment="treatment", survival="survival",
                           covariates=("x1", "x2", "x3"))  # fmt: skip


def printed_interval_methods(analysis, capsys, tmp_path):
    """(label, has an interval) for each estimator line the command line prints."""
    print_key_results(analysis.results, tmp_path)
    lines = capsys.readouterr().out.splitlines()
    shown = {}
    for record in analysis.results["estimates"]:
        line = next(x for x in lines if x.strip().startswith(record["label"]))
        shown[record["method"]] = " CI " in line
    return shown


def assert_every_printed_interval_is_honest(analysis, shown):
    for record in analysis.results["estimates"]:
        fitted = analysis.estimators[record["method"]]
        own_method = fitted.std_error_method_
        assert record["std_error_method"] == own_method
        has_interval = record["ci_low"] is not None
        assert shown[record["method"]] == has_interval
        if has_interval:
            # Either the estimator's own SE accounts for the nuisance fits, or the report
            # replaced it by a refitting bootstrap.
            assert own_method in HONEST_METHODS or record["interval_source"].startswith(
                "bootstrap"
            ), (record["method"], own_method)
        else:
            assert record["interval_note"].startswith("interval not available")
            assert record["std_error"] is None


def test_boosting_prints_no_interval_that_ignores_the_fitted_models(capsys, tmp_path):
    data = ps.datasets.make_scenario("nonlinear", 400, random_state=3)
    options = report.AnalysisOptions(learner="boosting", folds=2, method="weighting")
    # One OpenMP thread: small boosting fits on a shared machine (oversubscription).
    with threadpool_limits(1):
        analysis = report.analyze_frame(frame_of(data), ROLES, options)
    methods = {m: e.std_error_method_ for m, e in analysis.estimators.items()}
    # The situation of the issue: the secondary estimators' SEs ignore the boosting fits.
    assert methods["weighting"] == methods["regression"] == IGNORES
    assert methods["robust"] == "influence function"
    shown = printed_interval_methods(analysis, capsys, tmp_path)
    assert shown == {"weighting": False, "regression": False, "robust": True}
    assert_every_printed_interval_is_honest(analysis, shown)
    # Bounds and sensitivity intervals rest on the same rule.
    assert analysis.results["bounds"]["ci_low"] is None
    assert analysis.results["sensitivity"]["interval_note"].startswith("intervals and tipping")
    grid = analysis.results["sensitivity"]["pi_difference"]["grid"]
    assert all(g["ci_low"] is None for g in grid)
    html = report.render_html({**analysis.results, "figures": []}, [])
    assert "interval not available" in html


def test_default_models_keep_their_sandwich_intervals(capsys, tmp_path):
    data = ps.datasets.make_truncation(1500, random_state=0)
    analysis = report.analyze_frame(frame_of(data), ROLES)
    shown = printed_interval_methods(analysis, capsys, tmp_path)
    assert all(shown.values())
    assert_every_printed_interval_is_honest(analysis, shown)
    assert {r["interval_source"] for r in analysis.results["estimates"]} == {
        "sandwich", "influence function"
    }  # fmt: skip


def test_dishonest_interval_is_replaced_by_the_refitting_bootstrap():
    data = ps.datasets.make_truncation(600, random_state=1)
    frame = frame_of(data)
    options = report.AnalysisOptions(bootstrap=30, seed=4)
    analysis = report.analyze_frame(frame, ROLES, options)
    record = dict(next(r for r in analysis.results["estimates"] if r["method"] == "regression"))
    record.update(std_error_method=IGNORES, primary=False)  # as a boosting fit would report
    prepared = report.prepare_data(frame, ROLES)
    from pscore_strata.report._analysis import _Collector

    honest_estimates([record], _Collector(None), options, prepared)
    direct = ps.bootstrap(report.build_estimator("regression", options), prepared.design,
                          prepared.outcome, treatment=prepared.treatment,
                          survival=prepared.survival, n_resamples=30, random_state=4)  # fmt: skip
    assert record["interval_source"].startswith("bootstrap (30 resamples")
    assert record["std_error"] == pytest.approx(direct.std_error, rel=1e-12)
    assert (record["ci_low"], record["ci_high"]) == pytest.approx(direct.conf_int(0.95))
    assert accounts_for_nuisance(record["interval_source"])


def test_few_bootstrap_resamples_warn(tmp_path, capsys):
    data = ps.datasets.make_truncation(400, random_state=2)
    path = tmp_path / "d.csv"
    frame_of(data).to_csv(path, index=False)
    code = main(["analyze", str(path), "--outcome", "outcome", "--treatment", "treatment",
                 "--survival", "survival", "--covariates", "x1", "--bootstrap", "20",
                 "--quiet", "--out", str(tmp_path / "o")])  # fmt: skip
    assert code == 0
    assert "percentile intervals need more resamples" in capsys.readouterr().err
    results = json.loads((tmp_path / "o" / "results.json").read_text())
    assert any("percentile intervals need more resamples" in w for w in results["warnings"])
    assert np.isfinite(results["bootstrap"]["ci_low"])


def test_bounds_interval_from_the_refitting_bootstrap_when_the_models_are_not_glms():
    from dataclasses import replace

    from pscore_strata.assumptions import imbens_manski_interval
    from pscore_strata.report._analysis import _Collector
    from pscore_strata.report._honesty import honest_bounds
    from pscore_strata.report._sections import bounds_section

    data = ps.datasets.make_truncation(500, random_state=6)
    prepared = report.prepare_data(frame_of(data), ROLES)
    options = report.AnalysisOptions(bootstrap=12, seed=2)
    record, bounds = bounds_section(_Collector(None), options, prepared)
    # As with --learner boosting (the default models keep the rerun cheap):
    as_boosting = replace(options, learner="boosting")
    withheld = honest_bounds(dict(record), bounds, _Collector(None), replace(as_boosting,
                             bootstrap=0), prepared)  # fmt: skip
    assert withheld["ci_low"] is None and withheld["interval_note"].startswith("interval not")
    booted = honest_bounds(dict(record), bounds, _Collector(None), as_boosting, prepared)
    direct = ps.bootstrap(bounds, prepared.design, prepared.outcome,
                          treatment=prepared.treatment, survival=prepared.survival,
                          n_resamples=12, random_state=2)  # fmt: skip
    se = direct.std_error
    assert booted["std_error_lower"] == pytest.approx(se["lower"], rel=1e-12)
    expected = imbens_manski_interval(bounds.lower_, bounds.upper_, se["lower"], se["upper"], 0.95)
    assert (booted["ci_low"], booted["ci_high"]) == pytest.approx(expected)
