"""--tables and --formula on the command line, as a new user runs them on an open dataset: the
NSW job-training experiment (LaLonde 1986; Dehejia & Wahba 1999) shipped by the causaldata
package, where having no earnings in 1978 truncates the 1978 earnings. The tables read back equal
results.json at the printed precision; the formula's design equals the one built by hand;
the plain cases (no covariates, a tiny arm, text-coded columns) and the user errors."""

import json

import numpy as np
import pandas as pd
import pytest
from _table_readers import read_docx, read_latex, read_markdown

import pscore_strata as ps
from pscore_strata.cli import main

causaldata = pytest.importorskip("causaldata")
FORMULA = "age + educ + C(black) + C(hisp) + marr + nodegree + bs(re75, 3)"


@pytest.fixture(scope="module")
def nsw(tmp_path_factory):
    frame = causaldata.nsw_mixtape.load_pandas().data.copy()
    frame["employed78"] = (frame["re78"] > 0).astype(int)
    frame["earnings78"] = frame["re78"].where(frame["re78"] > 0)
    frame["arm"] = np.where(frame["treat"] == 1, "training", "no training")  # text-coded
    path = tmp_path_factory.mktemp("nsw") / "nsw.csv"
    frame.to_csv(path, index=False)
    return frame, path


def _run(path, out, *extra):
    return main(["analyze", str(path), "--outcome", "earnings78", "--treatment", "arm",
                 "--treated-value", "training", "--survival", "employed78", "--quiet",
                 "--out", str(out), *extra])  # fmt: skip


@pytest.fixture(scope="module")
def analysed(nsw, tmp_path_factory):
    _, path = nsw
    out = tmp_path_factory.mktemp("report")
    code = _run(path, out, "--formula", FORMULA, "--tables", "docx,tex,md",
                "--unit-name", "worker", "--event-name", "no earnings in 1978",
                "--arm-names", "job training", "no training")  # fmt: skip
    assert code == 0
    return out, json.loads((out / "results.json").read_text())


def test_tables_are_written_and_agree_with_results_json(analysed):
    out, results = analysed
    primary = next(e for e in results["estimates"] if e["primary"])
    found = {
        "docx": read_docx(out / "tables.docx"),
        "tex": read_latex((out / "tables.tex").read_text()),
        "md": read_markdown((out / "tables.md").read_text()),
    }
    captions = [list(tables) for tables in found.values()]
    assert captions[0] == captions[1] == captions[2]
    assert captions[0][0].startswith("Effect of job training versus no training on earnings78")
    for tables in found.values():
        header, rows = tables[captions[0][0]]
        row = next(r for r in rows if r[0] == f"{primary['label']} (primary)")
        # Earnings in dollars above 1,000: printed without decimals, within half a dollar.
        assert abs(float(row[1].replace(",", "")) - primary["effect"]) <= 0.5
        low, high = (float(v.replace(",", "")) for v in row[3].split(" to "))
        assert abs(low - primary["ci_low"]) <= 0.5 and abs(high - primary["ci_high"]) <= 0.5


def test_formula_design_equals_the_hand_built_one(nsw, analysed):
    frame, _ = nsw
    _, results = analysed
    assert results["columns"]["formula"] == FORMULA
    # The same analysis through the Python API on the design built by patsy (statsmodels'
    # formula engine), intercept dropped: the primary estimate agrees.
    import patsy

    design = patsy.dmatrix(FORMULA, frame, return_type="dataframe").drop(columns="Intercept")
    est = ps.MultiplyRobust(random_state=0).fit(
        design.to_numpy(), frame["earnings78"].to_numpy(),
        treatment=(frame["arm"] == "training").astype(int).to_numpy(),
        survival=frame["employed78"].to_numpy(),
    )  # fmt: skip
    primary = next(e for e in results["estimates"] if e["primary"])
    # patsy orders the columns differently: the logistic fits reach the same optimum within
    # the solver's tolerance, not to the last digit.
    assert primary["effect"] == pytest.approx(est.effect_, rel=1e-6)
    balance = {b["covariate"] for b in results["diagnostics"]["balance"]}
    assert "C(black)[T.1]" in balance and "bs(re75, 3)[3]" in balance


def test_plain_cases(nsw, tmp_path):
    frame, path = nsw
    # No covariates at all.
    assert _run(path, tmp_path / "none", "--tables", "md") == 0
    assert (tmp_path / "none" / "tables.md").is_file()
    # A tiny arm: 12 treated rows.
    treated = frame.index[frame["arm"] == "training"][:12]
    small = pd.concat([frame.loc[treated], frame[frame["arm"] == "no training"]])
    small_path = tmp_path / "small.csv"
    small.to_csv(small_path, index=False)
    assert _run(small_path, tmp_path / "tiny", "--formula", "age + educ", "--tables", "tex") == 0
    text = (tmp_path / "tiny" / "tables.tex").read_text()
    assert r"\toprule" in text and "12" in (tmp_path / "tiny" / "report.html").read_text()


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--tables", "pdf"], "--tables takes a comma-separated list of docx, tex, md"),
        (["--tables", ""], "--tables takes"),
        (["--formula", "age + nope"], "--formula 'age + nope' names unknown column(s) nope"),
        (["--formula", "age", "--covariates", "educ"], "leave out --covariates"),
        (["--formula", "earnings78 ~ age"], "right-hand side only"),
        (["--formula", "age + C(educ"], "cannot build --formula"),
    ],
)
def test_user_errors(nsw, tmp_path, capsys, extra, message):
    _, path = nsw
    assert _run(path, tmp_path / "out", *extra) == 2
    err = capsys.readouterr().err
    assert message in err, err
    assert not (tmp_path / "out" / "report.html").exists()
