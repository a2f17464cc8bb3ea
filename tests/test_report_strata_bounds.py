"""The report's trimming bounds for a stratum other than the always-survivors (--stratum).

Data: Card (1995), "Using geographic variation in college proximity to estimate the return to
schooling", shipped by causaldata as ``close_college`` (growing up near a four-year college as
the treatment, a college degree as the intermediate, log wage as the outcome, observed for every
man). Sources of the checks: the public ``TrimmingBounds(stratum=...)`` fitted here on the same
data (the report must compute nothing else), and without covariates the trimming construction of
Zhang & Rubin (2003) and Lee (2009) written out by hand with numpy.
"""

import json

import numpy as np
import pytest

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.cli import main
from pscore_strata.report._manuscript import manuscript_tables

causaldata = pytest.importorskip("causaldata")
jsonschema = pytest.importorskip("jsonschema")
COVARIATES = ["black", "smsa", "south"]
RUNS = [("complier", True), ("complier", False), ("never_taker", True), ("never_taker", False)]


@pytest.fixture(scope="module")
def runs(card, tmp_path_factory):
    _, path = card
    done = {}
    for stratum, covariates in RUNS:
        out = tmp_path_factory.mktemp(f"bounds_{stratum}_{covariates}")
        extra = ["--covariates", *COVARIATES] if covariates else []
        code = main(["analyze", str(path), "--outcome", "lwage", "--treatment", "nearc4",
                     "--intermediate", "college", "--survived-value", "degree", *extra,
                     "--stratum", stratum, "--unit-name", "man/men", "--tables", "md",
                     "--quiet", "--out", str(out)])  # fmt: skip
        assert code == 0
        done[stratum, covariates] = out, json.loads((out / "results.json").read_text())
    return done


def _bounds(frame, stratum, covariates):
    S = (frame["college"] == "degree").astype(int)
    X = frame[COVARIATES].astype(float) if covariates else None
    return ps.TrimmingBounds(stratum=stratum).fit(X, frame["lwage"], treatment=frame["nearc4"],
                                                  intermediate=S)  # fmt: skip


@pytest.mark.parametrize(("stratum", "covariates"), RUNS)
def test_report_bounds_equal_the_python_api(card, runs, stratum, covariates):
    frame, _ = card
    _, results = runs[stratum, covariates]
    record = results["bounds"]
    bounds = _bounds(frame, stratum, covariates)
    low, high = bounds.conf_int(results["settings"]["level"])
    for key, expected in (("lower", bounds.lower_), ("upper", bounds.upper_),
                          ("std_error_lower", bounds.std_error_lower_),
                          ("std_error_upper", bounds.std_error_upper_),
                          ("ci_low", low), ("ci_high", high),
                          ("trimming_share", bounds.trimming_share_)):  # fmt: skip
        assert record[key] == pytest.approx(expected, abs=1e-10), key
    for arm in ("treated", "control"):
        assert record["trimming_shares"][arm] == pytest.approx(
            bounds.trimming_shares_[arm], abs=1e-10)  # fmt: skip
    cells = bounds.cells_.iloc[0]
    treated, control = record["arms"]
    assert (treated["arm"], control["arm"]) == ("treated", "control")
    # Increasing monotonicity: the treated arm is the mixed one.
    for arm, role in ((treated, "mixed"), (control, "pure")):
        assert arm["stratum_share"] == pytest.approx(cells[f"share_{role}"], abs=1e-10)
        assert arm["trimmed_share"] == pytest.approx(1 - cells[f"share_{role}"], abs=1e-10)
        assert arm["mean_lower"] == pytest.approx(cells[f"{role}_mean_lower"], abs=1e-10)
        assert arm["mean_upper"] == pytest.approx(cells[f"{role}_mean_upper"], abs=1e-10)
    # The bounds are built from the arms' mean bounds.
    assert record["lower"] == pytest.approx(treated["mean_lower"] - control["mean_upper"],
                                            abs=1e-10)  # fmt: skip
    assert record["upper"] == pytest.approx(treated["mean_upper"] - control["mean_lower"],
                                            abs=1e-10)  # fmt: skip
    assert record["lower"] <= record["upper"]
    assert record["ci_low"] < record["lower"] and record["ci_high"] > record["upper"]


def _trimmed(values, keep):
    """Means of the lowest and the highest ``keep`` share of ``values``; the value at the cut
    counts with the fraction of it that fits (written out here, not the library's code)."""
    values = np.sort(np.asarray(values, dtype=float))
    n = values.size
    target = keep * n
    whole = int(np.floor(target))
    fraction = target - whole

    def end(sorted_values):
        total = sorted_values[:whole].sum()
        if fraction > 0:
            total += fraction * sorted_values[whole]
        return total / target

    return end(values), end(values[::-1])


def test_no_covariates_trimming_by_hand(card, runs):
    # Without covariates the principal scores are the arms' intermediate shares p1, p0: the
    # compliers are (p1 - p0) / p1 of the treated men with a degree and (p1 - p0) / (1 - p0) of
    # the control men without one; the never-takers all of the treated men without a degree
    # and (1 - p1) / (1 - p0) of the control men without one.
    frame, _ = card
    T, S, Y = frame["nearc4"], (frame["college"] == "degree").astype(int), frame["lwage"]
    p1, p0 = S[T == 1].mean(), S[T == 0].mean()
    treated_degree, control_none = Y[(T == 1) & (S == 1)], Y[(T == 0) & (S == 0)]
    low_1, high_1 = _trimmed(treated_degree, (p1 - p0) / p1)
    low_0, high_0 = _trimmed(control_none, (p1 - p0) / (1 - p0))
    record = runs["complier", False][1]["bounds"]
    assert record["lower"] == pytest.approx(low_1 - high_0, abs=1e-8)
    assert record["upper"] == pytest.approx(high_1 - low_0, abs=1e-8)
    assert record["arms"][0]["stratum_share"] == pytest.approx((p1 - p0) / p1, abs=1e-10)
    assert record["arms"][1]["stratum_share"] == pytest.approx((p1 - p0) / (1 - p0), abs=1e-10)
    record = runs["never_taker", False][1]["bounds"]
    mean_1 = Y[(T == 1) & (S == 0)].mean()
    low_0, high_0 = _trimmed(control_none, (1 - p1) / (1 - p0))
    assert record["lower"] == pytest.approx(mean_1 - high_0, abs=1e-8)
    assert record["upper"] == pytest.approx(mean_1 - low_0, abs=1e-8)
    assert record["trimming_shares"]["treated"] == 0.0
    assert record["arms"][0]["strata_in_cell"] == ["doomed (never-takers)"]


@pytest.mark.parametrize(("stratum", "covariates"), RUNS)
def test_results_follow_the_schema(runs, stratum, covariates):
    jsonschema.validate(runs[stratum, covariates][1], report.schema())


def test_cells_worded_for_the_study(runs):
    _, results = runs["complier", True]
    treated, control = results["bounds"]["arms"]
    assert treated["cell"] == "men in the treatment arm ('nearc4 = 1') with 'college = degree'"
    assert treated["strata_in_cell"] == ["always-survivors (always-takers)",
                                         "protected (compliers)"]  # fmt: skip
    assert control["cell"] == "men in the control arm ('nearc4 = 0') with 'college = no degree'"
    assert control["strata_in_cell"] == ["protected (compliers)", "doomed (never-takers)"]
    assert "complier (protected) stratum" in results["bounds"]["interval"]
    notes = " ".join(results["bounds"]["notes"])
    assert "quantile effects are computed for the always-survivor stratum only" in notes
    assert "exclusion restriction" in notes
    # The assumptions list no longer says that the bounds are missing.
    ignorability = next(a for a in results["assumptions"] if a["name"] == "Principal ignorability")
    assert "trimming bounds drop it" in ignorability["checked_by"]


@pytest.mark.parametrize(("stratum", "covariates"), RUNS)
def test_html_and_tables_show_the_bounds(runs, stratum, covariates):
    out, results = runs[stratum, covariates]
    html = (out / "report.html").read_text()
    section = html[html.index('<section id="bounds">') :]
    section = section[: section.index("</section>")]
    assert "could not be computed" not in section
    assert f"the effect in the {results['stratum']['label']} stratum lies between" in section
    for arm in results["bounds"]["arms"]:
        assert arm["cell"].replace("'", "&#39;") in section
    assert "Imbens-Manski interval" in section
    assert "always-survivor stratum only" in section  # the quantile bounds' note
    glance = html[html.index('id="summary"') : html.index('id="summary"') + 3000]
    assert "Bounds without principal ignorability" in glance and "not available" not in glance
    tables = manuscript_tables(results)
    assert "Bounds (lower to upper)" in tables["results"].data["Analysis"].tolist()
    assert "always-survivor stratum is latent" not in (out / "tables.md").read_text()
    assert results["figures"] and (out / "estimates.png").stat().st_size > 0


def test_always_taker_name_gives_the_always_survivor_bounds(card, tmp_path):
    frame, path = card
    code = main(["analyze", str(path), "--outcome", "lwage", "--treatment", "nearc4",
                 "--intermediate", "college", "--survived-value", "degree", "--covariates",
                 *COVARIATES, "--stratum", "always_taker", "--quiet", "--out",
                 str(tmp_path)])  # fmt: skip
    assert code == 0
    results = json.loads((tmp_path / "results.json").read_text())
    bounds = _bounds(frame, "always_survivor", True)
    record = results["bounds"]
    assert record["lower"] == pytest.approx(bounds.lower_, abs=1e-10)
    assert record["upper"] == pytest.approx(bounds.upper_, abs=1e-10)
    treated, control = record["arms"]
    assert treated["stratum_share"] == pytest.approx(
        bounds.cells_["always_survivor_share"].iloc[0], abs=1e-10)  # fmt: skip
    assert control["strata_in_cell"] == ["always-survivors (always-takers)"]
    assert control["mean_lower"] == control["mean_upper"]
    jsonschema.validate(results, report.schema())
