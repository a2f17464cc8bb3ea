"""Terminals and notebooks: summary() prints whole and is still a DataFrame; fitted estimators,
bounds and bootstrap results show a result card (estimate, interval, SE method, warnings) parsed
back with Python's HTML parser and rendered by headless Chromium; est.to_table() read back."""

import html.parser
import shutil
import subprocess
import tempfile

import numpy as np
import pandas as pd
import pytest
from _table_readers import read_docx, read_latex, read_markdown

import pscore_strata as ps
from pscore_strata.tables import SummaryTable, number_text


@pytest.fixture(scope="module")
def data():
    return ps.datasets.make_truncation(600, random_state=3)


@pytest.fixture(scope="module")
def fitted(data):
    return ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                   survival=data.survival)  # fmt: skip


class _Text(html.parser.HTMLParser):
    """The visible text of an HTML fragment, and its tags."""

    def __init__(self):
        super().__init__()
        self.text, self.tags = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)

    def handle_data(self, data):
        if data.strip():
            self.text.append(data.strip())


def _parse(fragment):
    parser = _Text()
    parser.feed(fragment)
    return " ".join(parser.text), parser.tags


def test_summary_prints_whole_and_is_a_dataframe(fitted):
    table = fitted.summary()
    assert isinstance(table, pd.DataFrame) and isinstance(table, SummaryTable)
    with pd.option_context("display.width", 30, "display.max_columns", 2, "display.max_rows", 2):
        text = str(table)
    assert "..." not in text.split("Notes:")[0]
    for name in [*table.columns, *table.index]:
        assert name in text, name
    assert "95% confidence intervals" in text and "latent" in text
    plain = table.to_frame()
    assert type(plain) is pd.DataFrame and plain.attrs["notes"] == table.attrs["notes"]
    pd.testing.assert_frame_equal(plain, pd.DataFrame(table))
    # Scripts keep working: columns, rows, arithmetic give plain pandas objects.
    assert float(table.loc["SACE (difference)", "estimate"]) == fitted.effect_
    assert type(table[["estimate"]] * 2) is pd.DataFrame


def test_printed_numbers_are_the_summary_rounded(fitted):
    table = fitted.summary()
    line = next(r for r in str(table).splitlines() if r.startswith("SACE"))
    printed = [float(v) for v in line.split()[2:6]]
    np.testing.assert_allclose(printed, table.iloc[0, :4].astype(float).round(4), atol=1e-12)


def test_fitted_estimator_card(fitted):
    bundle = fitted._repr_mimebundle_()
    assert bundle["text/html"] == fitted._repr_html_()
    text, tags = _parse(fitted._repr_html_())
    low, high = fitted.conf_int(0.95)
    for expected in (number_text(fitted.effect_), f"{number_text(low)} to {number_text(high)}",
                     fitted.std_error_method_, "latent", "Full summary"):  # fmt: skip
        assert expected in text, expected
    assert "details" in tags and "table" in tags


def test_unfitted_estimator_keeps_scikit_learns_display():
    est = ps.PrincipalScoreWeighting()
    assert "sk-" in est._repr_html_()  # scikit-learn's estimator diagram
    assert "text/html" in est._repr_mimebundle_()


def test_card_lists_the_diagnostic_warnings(data):
    # Treatment nearly determined by the first covariate: poor overlap must be shown.
    X = data.X.copy()
    treatment = (X[:, 0] + 0.05 * np.random.default_rng(0).normal(size=len(X)) > 0).astype(int)
    with pytest.warns(ps.OverlapWarning):
        est = ps.PrincipalScoreWeighting(n_bootstrap=0).fit(
            X, data.y, treatment=treatment, survival=data.survival)
    warnings = ps.diagnostic_warnings(est)
    assert warnings
    text, _ = _parse(est._repr_html_())
    assert "Warnings" in text and _parse(warnings[0])[0][:60] in text


def test_bounds_and_bootstrap_cards(data, fitted):
    bounds = ps.TrimmingBounds().fit(data.X, data.y, treatment=data.treatment,
                                     survival=data.survival)  # fmt: skip
    text, _ = _parse(bounds._repr_html_())
    assert f"{number_text(bounds.lower_)} to {number_text(bounds.upper_)}" in text
    assert isinstance(bounds.summary(), SummaryTable)
    assert "sk-" in ps.TrimmingBounds()._repr_html_()
    boot = ps.bootstrap(ps.OutcomeRegression(), data.X, data.y, treatment=data.treatment,
                        survival=data.survival, n_resamples=20, random_state=0)  # fmt: skip
    text, _ = _parse(boot._repr_html_())
    low, high = boot.conf_int(0.95)
    assert number_text(boot.estimate) in text and f"{number_text(low)} to" in text
    assert "20 of 20" in text


@pytest.mark.parametrize("fmt", ["docx", "tex", "md"])
def test_to_table_reads_back(fitted, tmp_path, fmt):
    path = fitted.to_table(path=tmp_path / f"summary.{fmt}")
    reader = {"docx": read_docx, "tex": lambda p: read_latex(p.read_text()),
              "md": lambda p: read_markdown(p.read_text())}[fmt]  # fmt: skip
    (caption, (header, rows)), = reader(path).items()
    assert caption == "MultiplyRobust: survivor average causal effect"
    assert header == ["Quantity", "Estimate", "SE", "95% CI", "Standard error"]
    summary = fitted.summary()
    for row, (name, record) in zip(rows, summary.iterrows(), strict=True):
        assert row[0] == name
        # Printed with three decimals: within half a unit of the last digit.
        assert abs(float(row[1]) - record["estimate"]) <= 5e-4 + 1e-12
        low, high = (float(v) for v in row[3].split(" to "))
        assert abs(low - record["ci_low"]) <= 5e-4 + 1e-12
        assert abs(high - record["ci_high"]) <= 5e-4 + 1e-12
    assert isinstance(fitted.to_table(), ps.tables.Table)
    assert fitted.to_table("tex").startswith("% Needs \\usepackage{booktabs}")


def test_chromium_renders_the_card(fitted, tmp_path):
    browser = next((shutil.which(n) for n in ("chromium", "chromium-browser", "google-chrome")
                    if shutil.which(n)), None)  # fmt: skip
    if browser is None:
        pytest.skip("chromium not found on PATH (apt-get install chromium)")
    page = tmp_path / "card.html"
    page.write_text(f"<!DOCTYPE html><meta charset='utf-8'><body>{fitted._repr_html_()}")
    shot = tmp_path / "card.png"
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run([browser, "--headless", "--no-sandbox", "--disable-gpu",
                        f"--user-data-dir={profile}", f"--screenshot={shot}",
                        "--window-size=800,400", page.resolve().as_uri()],
                       capture_output=True, timeout=120, check=False)  # fmt: skip
    import matplotlib.image

    pixels = matplotlib.image.imread(shot)[..., :3]
    assert pixels.shape[:2] == (400, 800) and float(np.std(pixels)) > 0.02
