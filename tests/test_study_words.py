"""The report reads right for any study: its words, one name per stratum, one format per
quantity, readable sensitivity values, whole figures and a demo that does not contradict itself.

External references: the demo's data card and its generating script (simulated truth), the
matplotlib renderer's extents of the drawn artists, and the text the report is built from.
"""

import json
import re

import matplotlib
import numpy as np
import pandas as pd
import pytest

matplotlib.use("Agg")

import pscore_strata as ps  # noqa: E402
from pscore_strata.cli import main  # noqa: E402
from pscore_strata.datasets import DEMO_ROLES, DEMO_TRUE_EFFECT, load_demo  # noqa: E402
from pscore_strata.datasets._demo import DEMO_CARD, demo_path  # noqa: E402
from pscore_strata.report._format import count, number  # noqa: E402
from pscore_strata.report._sections import readable_step  # noqa: E402


def workplace_frame(n=900, seed=5):
    """An invented workplace programme: employment at 12 months truncates productivity."""
    data = ps.datasets.make_truncation(n, random_state=seed)
    frame = pd.DataFrame({"age": 40 + 8 * data.X[:, 0], "tenure": 5 + 2 * data.X[:, 1]})
    frame["arm"] = np.where(data.treatment == 1, "program", "usual")
    frame["employed_12mo"] = np.where(data.survival == 1, "yes", "no")
    frame["productivity"] = data.y
    return frame


@pytest.fixture(scope="module")
def workplace(tmp_path_factory):
    root = tmp_path_factory.mktemp("workplace")
    workplace_frame().to_csv(root / "workplace.csv", index=False)
    code = main(["analyze", str(root / "workplace.csv"), "--outcome", "productivity",
                 "--treatment", "arm", "--treated-value", "program", "--survival",
                 "employed_12mo", "--survived-value", "yes", "--event-name", "job loss",
                 "--unit-name", "worker", "--covariates", "age", "tenure", "--quiet",
                 "--out", str(root / "out")])  # fmt: skip
    assert code == 0
    html = (root / "out" / "report.html").read_text()
    results = json.loads((root / "out" / "results.json").read_text())
    return html, results


def visible_text(html):
    return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", html))


def test_report_speaks_the_study_words(workplace):
    html, results = workplace
    text = visible_text(html)
    for word in ("patient", "death", "Death", "die "):
        assert word not in text, word
    for phrase in ("job loss", "workers", "program", "usual", "arm = usual",
                   "employed_12mo = no", "individual worker"):  # fmt: skip
        assert phrase in text, phrase
    assert results["wording"]["event"] == "job loss"
    assert results["estimand"]["intercurrent_event"].startswith("Job loss ('employed_12mo = no')")


def test_text_slips_are_gone(workplace):
    html, _ = workplace
    text = visible_text(html)
    assert "ICH E9(R1) estimand attributes" not in text
    assert "interval_end" not in text
    assert "Imbens-Manski (covers" not in text and "Imbens-Manski interval (it covers" in text
    assert not re.search(r"-0\.0+(?!\d)", text)
    # One name per stratum: the field's four, never "helped".
    assert "helped" not in text.lower()
    assert "protected" in text and "always-survivor" in text


def test_one_format_per_quantity(workplace):
    html, results = workplace
    for row in results["diagnostics"]["weights"]:
        # Effective sample sizes and row counts are whole numbers with separators, everywhere.
        shown = f'{count(row["effective_sample_size"])} of {count(row["n_rows"])}'
        assert f'<td class="num">{shown}' in html
    assert count(1796.6) == "1,797" and number(-0.0001) == "0.000" and number(-0.02) == "-0.020"


def test_sensitivity_grid_is_readable_and_tipping_point_has_units(workplace, capsys):
    html, results = workplace
    sens = results["sensitivity"]["pi_difference"]
    sd, step = sens["outcome_sd_survivors"], sens["grid_step"]
    assert step == readable_step(sd)
    # A round step (1, 2 or 5 times a power of ten) near a tenth of the outcome SD.
    mantissa = step / 10 ** np.floor(np.log10(step))
    assert mantissa in (1.0, 2.0, 5.0) and 0.05 * sd <= step <= 0.2 * sd
    values = np.array([g["value"] for g in sens["grid"]])
    np.testing.assert_allclose(values / step, np.round(values / step), atol=1e-9)
    assert 0.0 in values
    tip = sens["tipping_point"]
    if tip is not None:
        shown = f"{number(tip)} productivity units"
        assert shown in visible_text(html)
        from pscore_strata.report._console import print_key_results

        print_key_results(results, ".")
        assert shown in capsys.readouterr().out  # the same digits on screen and in the report
    harmed = results["sensitivity"]["harmed_ratio"]
    assert harmed["informative_max"] == harmed["grid"][-1]["value"] <= 0.95


def test_monotonicity_table_sits_beside_principal_ignorability(workplace):
    html, _ = workplace
    assert "Monotonicity: selected values" in html
    assert "Principal ignorability: selected values" in html


def test_demo_does_not_contradict_its_monotonicity(tmp_path):
    # Source: the generator (monotonicity holds for every invented patient, survival logistic in
    # each arm), so the default models must not raise the monotonicity warning.
    frame = load_demo()
    X = pd.get_dummies(frame[DEMO_ROLES["covariates"]], columns=["site"], drop_first=True,
                       dtype=float)  # fmt: skip
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error", ps.MonotonicityWarning)
        est = ps.MultiplyRobust().fit(X, frame[DEMO_ROLES["outcome"]],
                                      treatment=frame[DEMO_ROLES["treatment"]],
                                      survival=frame[DEMO_ROLES["survival"]])  # fmt: skip
    assert not [w for w in ps.diagnostic_warnings(est) if w.startswith("Monotonicity")]
    card = demo_path(DEMO_CARD).read_text()
    # The card's count of crossing rows is the one the report prints.
    assert f"cross in {est.n_monotonicity_violations_} of {len(frame)} rows" in card
    assert f"True SACE: {DEMO_TRUE_EFFECT} points" in card
    assert abs(est.effect_ - DEMO_TRUE_EFFECT) < 3 * est.std_error_


def test_monotonicity_counts_agree_wherever_printed():
    # Simulated data with a large harmed stratum, so that the fitted arms cross often.
    data = ps.datasets.make_truncation(1500, harmed_ratio=0.9, random_state=0)
    import warnings

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        est = ps.PrincipalScoreWeighting(n_bootstrap=0).fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )
    messages = [str(w.message) for w in caught if issubclass(w.category, ps.MonotonicityWarning)]
    diagnostic = [w for w in ps.diagnostic_warnings(est) if w.startswith("Monotonicity: for")]
    assert messages and diagnostic
    counts = re.findall(r"(\d+) of (\d+) rows .*?\((\d+) rows are reversed", messages[0])
    assert counts and re.findall(r"(\d+) of (\d+) rows .*?\((\d+) rows are reversed",
                                 diagnostic[0]) == counts  # fmt: skip
    assert int(counts[0][2]) == est.n_monotonicity_violations_


def _inside(figure, artist):
    renderer = figure.canvas.get_renderer()
    box = artist.get_window_extent(renderer)
    whole = figure.bbox
    return (box.x0 >= whole.x0 - 0.5 and box.y0 >= whole.y0 - 0.5 and box.x1 <= whole.x1 + 0.5
            and box.y1 <= whole.y1 + 0.5)  # fmt: skip


def test_contour_figure_is_whole():
    data = ps.datasets.make_truncation(1200, random_state=0)
    est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                  survival=data.survival)  # fmt: skip
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ax = ps.plotting.plot_sensitivity_contour(est)
    figure = ax.figure
    figure.canvas.draw()
    footer = [t for t in ax.texts if "latent" in t.get_text()]
    marker = [line for line in ax.lines if line.get_label() == "both assumptions hold"]
    assert footer and marker and not marker[0].get_clip_on()
    assert _inside(figure, footer[0]) and _inside(figure, marker[0])
    assert "helped" not in ax.get_xlabel() + ax.get_ylabel()


def test_harmed_ratio_plot_stops_where_the_data_stop_informing():
    data = ps.datasets.make_truncation(1200, random_state=0)
    est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                  survival=data.survival)  # fmt: skip
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ax = ps.plotting.plot_sensitivity(est, "harmed_ratio")
        full = ps.sensitivity_grid(est, harmed_ratio=np.linspace(0, 0.9, 46))
    shown = ax.lines[0].get_xdata()
    # Source: the grid's own count of rows whose always-survivor score is clipped at zero.
    clipped = full.set_index("harmed_ratio")["n_rows_clipped"]
    assert (clipped.loc[clipped.index <= shown.max() + 1e-9] <= 0.05 * est.n_samples_).all()
    assert shown.max() < 0.9 or (clipped <= 0.05 * est.n_samples_).all()


def test_unit_plurals_arm_names_and_demo_defaults(tmp_path):
    from pscore_strata.report._wording import plural

    assert [plural(w) for w in ("patient", "county", "day", "box")] == [
        "patients", "counties", "days", "boxes"
    ]  # fmt: skip
    frame = workplace_frame(400)
    frame["arm"] = (frame["arm"] == "program").astype(int)
    frame["employed_12mo"] = (frame["employed_12mo"] == "yes").astype(int)
    path = tmp_path / "w.csv"
    frame.to_csv(path, index=False)
    code = main(["analyze", str(path), "--outcome", "productivity", "--treatment", "arm",
                 "--survival", "employed_12mo", "--covariates", "age", "--unit-name",
                 "person/people", "--arm-names", "coaching", "no coaching", "--quiet",
                 "--out", str(tmp_path / "o")])  # fmt: skip
    assert code == 0
    results = json.loads((tmp_path / "o" / "results.json").read_text())
    words = results["wording"]
    assert (words["unit"], words["units"]) == ("person", "people")
    assert (words["treated_arm"], words["control_arm"]) == ("coaching", "no coaching")
    assert words["treated_condition"] == "arm = 1" and words["event"] == "death"
    assert main(["demo", "--out", str(tmp_path / "demo"), "--quiet"]) == 0
    demo = json.loads((tmp_path / "demo" / "results.json").read_text())["wording"]
    assert demo["unit"] == "patient" and demo["treated_arm"] == "protective ventilation"
