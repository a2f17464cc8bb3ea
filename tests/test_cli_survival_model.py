"""``--survival-model arm-wise|strata`` and the demo's choice of survival model, end to end.

External references: the Python API fitted the same way (the report must show the API's
numbers), statsmodels GLM (binomial) log-likelihoods of the arm-wise survival models, the
stratum model's own maximized log-likelihood, AIC computed by hand (Akaike 1974), scikit-learn's
``calibration_curve`` for the calibration gaps, and the JSON Schema (jsonschema library).
"""

import json
import warnings

import jsonschema
import numpy as np
import pytest
import statsmodels.api as sm
from sklearn.calibration import calibration_curve

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.cli import main
from pscore_strata.datasets import DEMO_ROLES, load_demo

COVARIATES = ["age", "female", "severity_score", "comorbidities", "pf_ratio"]


def _roles():
    return report.ColumnRoles(
        outcome=DEMO_ROLES["outcome"], treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"], covariates=tuple(COVARIATES), categorical=("site",),
    )  # fmt: skip


@pytest.fixture(scope="module")
def prepared():
    return report.prepare_data(load_demo(), _roles())


@pytest.fixture(scope="module")
def strata_run(tmp_path_factory):
    data_dir = tmp_path_factory.mktemp("data")
    path = data_dir / "registry.csv"
    load_demo().to_csv(path, index=False)
    out = tmp_path_factory.mktemp("report")
    args = [
        "analyze", str(path), "--outcome", DEMO_ROLES["outcome"],
        "--treatment", DEMO_ROLES["treatment"], "--survival", DEMO_ROLES["survival"],
        "--covariates", *COVARIATES, "--categorical", "site", "--out", str(out), "--quiet",
        "--survival-model", "strata",
    ]  # fmt: skip
    import contextlib
    import io

    stdout = io.StringIO()
    with contextlib.redirect_stdout(stdout), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        status = main(args)
    return status, stdout.getvalue(), out, json.loads((out / "results.json").read_text())


def test_strata_option_reaches_every_estimator(strata_run, prepared):
    status, stdout, out, results = strata_run
    assert status == 0
    jsonschema.validate(results, report.schema(), cls=jsonschema.Draft202012Validator)
    assert results["schema_version"] == report.SCHEMA_VERSION == "1.4.0"
    assert results["settings"]["survival_model"] == "strata"
    chosen = results["survival_model"]
    assert (chosen["model"], chosen["chosen_by"], chosen["comparison"]) == ("strata", "option",
                                                                            None)  # fmt: skip
    # The Python API with the stratum model, fitted the same way: the same numbers.
    data = prepared
    for record in results["estimates"]:
        est = getattr(ps, record["estimator"])(
            survival_model=ps.PrincipalScoreModel(), random_state=0
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est.fit(data.design, data.outcome, treatment=data.treatment, survival=data.survival)
        assert record["effect"] == pytest.approx(est.effect_, rel=1e-10)
        if record["method"] == "robust":
            check = ps.survival_fit_check(est)
    assert results["diagnostics"]["n_monotonicity_violations"] == 0  # by construction
    fit_check = results["model_checks"]["fit_check"]
    assert fit_check["survival_model"] == "strata"
    tests = {t["arm"]: t for t in fit_check["tests"]}
    for arm in ("treated", "control"):
        assert tests[arm]["statistic"] == pytest.approx(check.attrs["tests"][arm]["statistic"])
        assert tests[arm]["df"] == check.attrs["tests"][arm]["df"]
    both = tests["both"]
    assert f"chi-square {both['statistic']:.2f} on {both['df']} df, p = {both['p_value']:.3f}" in (
        stdout
    )
    assert "stratum model (--survival-model strata)" in stdout
    html = (out / "report.html").read_text()
    for text in ("Principal scores from the stratum model", "Goodness of fit of the survival side",
                 "principal scores from the stratum model", "Hosmer-Lemeshow"):  # fmt: skip
        assert text in html, text


def test_calibration_gaps_are_scikit_learns(strata_run, prepared):
    _, _, _, results = strata_run
    # The report's groups bin the rows as calibration_curve(strategy="quantile") does.
    est = ps.MultiplyRobust(survival_model=ps.PrincipalScoreModel(), random_state=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est.fit(prepared.design, prepared.outcome, treatment=prepared.treatment,
                survival=prepared.survival)  # fmt: skip
    for record in results["model_checks"]["calibration"]:
        arm = 1 if record["arm"] == "treated" else 0
        rows = prepared.treatment == arm
        observed, predicted = calibration_curve(
            prepared.survival[rows], est.nuisance_.survival[arm][rows], n_bins=10,
            strategy="quantile",
        )  # fmt: skip
        assert record["max_bin_gap"] == pytest.approx(np.max(np.abs(observed - predicted)))


def test_demo_pre_specifies_the_better_fitting_survival_model(tmp_path, capsys, prepared):
    assert main(["demo", "--out", str(tmp_path), "--quiet"]) == 0
    stdout = capsys.readouterr().out
    results = json.loads((tmp_path / "results.json").read_text())
    jsonschema.validate(results, report.schema(), cls=jsonschema.Draft202012Validator)
    # The demo pre-specifies the stratum model; by_fit (from Python) still compares both sides.
    assert results["survival_model"]["chosen_by"] == "option"
    roles = report.ColumnRoles(
        outcome=DEMO_ROLES["outcome"], treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"], covariates=tuple(DEMO_ROLES["covariates"]),
        categorical=tuple(DEMO_ROLES["categorical"]),
    )  # fmt: skip
    analysis = report.analyze_frame(load_demo(), roles,
                                    report.AnalysisOptions(survival_model="by_fit"),
                                    source="demo")  # fmt: skip
    chosen = analysis.results["survival_model"]
    assert chosen["chosen_by"] == "fit" and chosen["criterion"] == "aic"
    # Independent fits of the two survival sides on the demo's design.
    data, design = prepared, np.asarray(prepared.design, dtype=float)
    arm_wise = 0.0
    for arm in (0, 1):
        rows = data.treatment == arm
        glm = sm.GLM(data.survival[rows], sm.add_constant(design[rows]),
                     family=sm.families.Binomial()).fit()  # fmt: skip
        arm_wise += glm.llf
    strata = ps.PrincipalScoreModel().fit(design, treatment=data.treatment, survival=data.survival)
    k = 2 * (design.shape[1] + 1)  # both sides: two intercept + slope vectors
    aic = {"arm-wise": 2 * k - 2 * arm_wise, "strata": 2 * k - 2 * strata.log_likelihood_}
    by_model = {c["model"]: c for c in chosen["comparison"]}
    for name in aic:
        assert by_model[name]["n_parameters"] == k
        assert by_model[name]["aic"] == pytest.approx(aic[name], rel=1e-6)
    # The model the demo pre-specifies is the one the AIC prefers on the demo registry.
    assert chosen["model"] == min(aic, key=aic.get) == "strata"
    assert results["settings"]["survival_model"] == chosen["model"]
    assert results["survival_model"]["model"] == "strata"
    best, other = sorted(aic.values())
    assert f"AIC {best:.1f} against {other:.1f}" in chosen["reason"]
    assert "Principal scores from the stratum model" in stdout and "Chosen by fit" not in stdout


def test_unknown_survival_model_is_refused(tmp_path, capsys, prepared):
    with pytest.raises(SystemExit) as stop:
        main(["analyze", "x.csv", "--outcome", "y", "--treatment", "t", "--survival", "s",
              "--survival-model", "joint"])  # fmt: skip
    assert stop.value.code == 2
    assert "--survival-model" in capsys.readouterr().err
    options = report.AnalysisOptions(survival_model="joint")
    with pytest.raises(ValueError, match="`survival_model` must be one of arm-wise, strata"):
        report.run_analysis(prepared, _roles(), options)


def test_boosting_keeps_the_multinomial_stratum_model():
    options = report.AnalysisOptions(learner="boosting", survival_model="strata",
                                     monotonicity="decreasing")  # fmt: skip
    for method in ("weighting", "regression", "robust"):
        est = report.build_estimator(method, options, 2000)
        assert isinstance(est.survival_model, ps.PrincipalScoreModel)
        assert est.survival_model.estimator is None  # multinomial logistic, no EM on boosting
        assert est.survival_model.monotonicity == est.monotonicity == "decreasing"
        assert type(est.treatment_model).__name__ == "HistGradientBoostingClassifier"
        assert est.n_folds == 5
    arm_wise = report.build_estimator("robust", report.AnalysisOptions(learner="boosting"), 2000)
    assert type(arm_wise.survival_model).__name__ == "HistGradientBoostingClassifier"
