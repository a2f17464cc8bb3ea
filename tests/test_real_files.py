"""Files as they arrive: text-coded arms and survival, Stata / SAS / SPSS files, semicolon CSV,
date covariates and categorical covariates with many levels.

External references: the same analysis on the 0/1-coded file (every number must agree), and
files written by pandas (Stata) and pyreadstat (SPSS, SAS) read back through pandas' readers.
"""

import json

import numpy as np
import pandas as pd
import pytest

from pscore_strata import report
from pscore_strata.cli import main
from pscore_strata.datasets import DEMO_ROLES, load_demo
from pscore_strata.report._coding import DataWarning

ROLES = DEMO_ROLES
COVARIATES = ["age", "female", "severity_score", "comorbidities", "pf_ratio"]


def small_demo():
    return load_demo().iloc[:700].reset_index(drop=True)


def args(path, out, *extra):
    return [
        "analyze", str(path), "--outcome", ROLES["outcome"], "--treatment", ROLES["treatment"],
        "--survival", ROLES["survival"], "--covariates", *COVARIATES, "--categorical", "site",
        "--out", str(out), "--quiet", *extra,
    ]  # fmt: skip


def numbers(results):
    """The numbers that must not depend on how the file was coded or stored."""
    keep = ("effect", "std_error", "ci_low", "ci_high", "mean_treated", "mean_control")
    out = [e[k] for e in results["estimates"] for k in keep]
    out += [results["bounds"]["lower"], results["bounds"]["upper"]]
    return out + [results["naive_survivor_contrast"]["estimate"]]


@pytest.fixture(scope="module")
def coded_run(tmp_path_factory):
    """The 0/1-coded CSV through the command line: the reference for every other format."""
    root = tmp_path_factory.mktemp("coded")
    small_demo().to_csv(root / "coded.csv", index=False)
    assert main(args(root / "coded.csv", root / "out")) == 0
    return json.loads((root / "out" / "results.json").read_text())


def test_text_coded_csv_equals_the_coded_run(coded_run, tmp_path, capsys):
    frame = small_demo()
    frame[ROLES["treatment"]] = frame[ROLES["treatment"]].map({1: "program", 0: "usual"})
    frame[ROLES["survival"]] = frame[ROLES["survival"]].map({1: "yes", 0: "no"})
    frame.to_csv(tmp_path / "text.csv", index=False)
    code = main(args(tmp_path / "text.csv", tmp_path / "out", "--treated-value", "program",
                     "--survived-value", "yes"))  # fmt: skip
    assert code == 0, capsys.readouterr().err
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert numbers(results) == pytest.approx(numbers(coded_run), rel=1e-12)
    words = results["wording"]
    assert (words["treated_arm"], words["control_arm"]) == ("program", "usual")
    assert (words["survived_level"], words["event_level"]) == ("yes", "no")
    html = (tmp_path / "out" / "report.html").read_text()
    # The other level is named in the report, next to the column.
    assert f"{ROLES['treatment']} = usual" in html and f"{ROLES['survival']} = no" in html


def test_text_coded_column_without_its_value_gets_advice(tmp_path, capsys):
    frame = small_demo()
    frame[ROLES["treatment"]] = frame[ROLES["treatment"]].map({1: "program", 0: "usual"})
    frame.to_csv(tmp_path / "text.csv", index=False)
    assert main(args(tmp_path / "text.csv", tmp_path / "out")) == 2
    err = capsys.readouterr().err
    assert "--treated-value" in err and "program, usual" in err


@pytest.mark.parametrize(
    "value, message", [("programme", "does not occur"), ("usual", None)]
)  # fmt: skip
def test_treated_value_checks(value, message):
    frame = small_demo()
    frame[ROLES["treatment"]] = frame[ROLES["treatment"]].map({1: "program", 0: "usual"})
    roles = report.ColumnRoles(outcome=ROLES["outcome"], treatment=ROLES["treatment"],
                               survival=ROLES["survival"], covariates=("age",))  # fmt: skip
    if message:
        with pytest.raises(report.InputError, match=message):
            report.prepare_data(frame, roles, treated_value=value)
    else:
        # Naming the other level flips the arms: the indicator is its complement.
        data = report.prepare_data(frame, roles, treated_value=value)
        np.testing.assert_array_equal(data.treatment, 1 - small_demo()[ROLES["treatment"]])
        assert data.levels["treatment"] == ("usual", "program")


def test_three_levels_are_refused():
    frame = small_demo()
    frame.loc[:5, ROLES["survival"]] = 2
    roles = report.ColumnRoles(outcome=ROLES["outcome"], treatment=ROLES["treatment"],
                               survival=ROLES["survival"])  # fmt: skip
    with pytest.raises(report.InputError, match="exactly two levels"):
        report.prepare_data(frame, roles, survived_value=1)


def test_semicolon_csv_with_decimal_commas(coded_run, tmp_path):
    small_demo().to_csv(tmp_path / "semi.csv", index=False, sep=";", decimal=",")
    assert main(args(tmp_path / "semi.csv", tmp_path / "out")) == 0
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert numbers(results) == pytest.approx(numbers(coded_run), rel=1e-12)


def _write(kind, frame, path):
    if kind == "dta":
        frame.to_stata(path, write_index=False)
        return
    pyreadstat = pytest.importorskip("pyreadstat")
    if kind == "sav":
        pyreadstat.write_sav(frame, path)
    else:
        if not hasattr(pyreadstat, "write_sas7bdat"):
            pytest.skip("this pyreadstat cannot write .sas7bdat (write_sas7bdat needs 1.3.8)")
        pyreadstat.write_sas7bdat(frame, path)


@pytest.mark.parametrize("kind", ["dta", "sav", "sas7bdat"])
def test_statistical_package_files_round_trip(kind, coded_run, tmp_path):
    # Stata through pandas' writer, SPSS and SAS through pyreadstat's; read back by pandas'
    # read_stata / read_spss / read_sas.
    path = tmp_path / f"registry.{kind}"
    _write(kind, small_demo(), path)
    assert main(args(path, tmp_path / "out")) == 0
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert numbers(results) == pytest.approx(numbers(coded_run), rel=1e-9)


@pytest.mark.parametrize("suffix", [".sas7bdat", ".dta", ".sav"])
def test_unreadable_statistical_file_is_one_clear_line(suffix, tmp_path, capsys):
    path = tmp_path / f"broken{suffix}"
    path.write_bytes(b"this is not a data file" * 20)
    assert main(args(path, tmp_path / "out")) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and f"broken{suffix}" in err and "could not be read" in err


@pytest.mark.parametrize("as_text", [True, False])
def test_date_covariates_are_refused_with_advice(as_text):
    frame = small_demo()
    dates = pd.Timestamp("2021-01-01") + pd.to_timedelta(np.arange(len(frame)) % 185, unit="D")
    frame["enrolled"] = dates.strftime("%Y-%m-%d") if as_text else dates
    for categorical in ((), ("enrolled",)):
        roles = report.ColumnRoles(outcome=ROLES["outcome"], treatment=ROLES["treatment"],
                                   survival=ROLES["survival"], covariates=("age", "enrolled"),
                                   categorical=categorical)  # fmt: skip
        with pytest.raises(report.InputError, match="days since a reference date") as error:
            report.prepare_data(frame, roles)
        assert "enrolled" in str(error.value) and "--categorical" not in str(error.value)


def test_the_advice_for_dates_works():
    # Following the message's recipe gives a numeric covariate the analysis accepts.
    frame = small_demo()
    offsets = pd.to_timedelta(np.arange(len(frame)) % 185, unit="D")
    frame["enrolled"] = (pd.Timestamp("2021-01-01") + offsets).strftime("%Y-%m-%d")
    days = pd.to_datetime(frame["enrolled"]) - pd.Timestamp("2020-01-01")
    frame["enrolled_days"] = days.dt.days
    roles = report.ColumnRoles(outcome=ROLES["outcome"], treatment=ROLES["treatment"],
                               survival=ROLES["survival"], covariates=("age", "enrolled_days"))
    data = report.prepare_data(frame, roles)
    assert list(data.design.columns) == ["age", "enrolled_days"]


def test_many_levels_warn_with_the_count():
    frame = small_demo()
    frame["ward"] = [f"ward{i % 60:02d}" for i in range(len(frame))]
    roles = report.ColumnRoles(outcome=ROLES["outcome"], treatment=ROLES["treatment"],
                               survival=ROLES["survival"], covariates=("age",),
                               categorical=("ward",))  # fmt: skip
    with pytest.warns(DataWarning, match="'ward' has 60 levels"):
        data = report.prepare_data(frame, roles)
    assert data.design.shape[1] == 1 + 59
    assert any("60 levels" in m for m in data.messages)
    # 50 levels or fewer: no warning.
    frame["ward"] = [f"ward{i % 50:02d}" for i in range(len(frame))]
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error", DataWarning)
        report.prepare_data(frame, roles)
