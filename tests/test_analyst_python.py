"""The analyst in Python: labelled principal scores, a readable bootstrap result, notebook
progress, the route from a fitted analysis to the report, subgroups, and the whole report in a
browser.

External references: the command line run on the same file (the Python route must give the
same numbers), ``effect_by`` called directly, tqdm's own ``tqdm.auto`` class, and Chromium's
rendering of the page.
"""

import json
import re
import shutil
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.cli import main
from pscore_strata.datasets import DEMO_ROLES, load_demo

README = Path(__file__).resolve().parents[1] / "README.md"
COVARIATES = ["age", "female", "severity_score", "comorbidities", "pf_ratio"]


def test_predict_proba_is_labelled_for_a_dataframe():
    data = ps.datasets.make_truncation(600, random_state=0)
    X = pd.DataFrame(data.X, columns=[f"x{j}" for j in range(data.X.shape[1])],
                     index=pd.RangeIndex(100, 700))  # fmt: skip
    est = ps.OutcomeRegression().fit(X, data.y, treatment=data.treatment, survival=data.survival)
    scores = est.predict_proba(X)
    assert isinstance(scores, pd.DataFrame)
    assert list(scores.columns) == list(est.classes_) and scores.index.equals(X.index)
    np.testing.assert_allclose(scores.to_numpy(), est.principal_scores_)
    np.testing.assert_allclose(scores.sum(axis=1), 1.0)
    assert isinstance(est.predict_proba(X.to_numpy()), np.ndarray)
    assert list(est.predict(X)) == list(scores.idxmax(axis=1))


def test_bootstrap_result_repr_shows_estimate_se_and_interval():
    data = ps.datasets.make_truncation(500, random_state=0)
    est = ps.MultiplyRobust()
    result = ps.bootstrap(est, data.X, data.y, treatment=data.treatment, survival=data.survival,
                          n_resamples=30, random_state=0)  # fmt: skip
    text = repr(result)
    low, high = result.conf_int(0.95)
    assert f"effect={result.estimate:.4g}" in text
    assert f"SE {result.std_error:.3g}" in text
    assert f"95% percentile CI {low:.4g} to {high:.4g}" in text


def test_progress_bar_is_tqdm_auto_in_a_notebook(monkeypatch):
    from tqdm.auto import tqdm as auto_tqdm

    from pscore_strata.inference import _tasks as _influence

    monkeypatch.setattr(_influence, "_in_notebook", lambda: True)
    bar = _influence._progress_bar(None, 10, "bootstrap")
    try:
        assert isinstance(bar, auto_tqdm)
    finally:
        bar.close()
    monkeypatch.setattr(_influence, "_in_notebook", lambda: False)
    monkeypatch.setattr(_influence, "_stderr_is_terminal", lambda: False)
    assert _influence._progress_bar(None, 10, "bootstrap") is None


def test_sensitivity_plots_reachable_from_plotting():
    assert callable(ps.plotting.plot_sensitivity)
    assert callable(ps.plotting.plot_sensitivity_contour)
    assert ps.report.write_report is report.write_report


def workplace_frame(n=900, seed=5):
    data = ps.datasets.make_truncation(n, random_state=seed)
    frame = pd.DataFrame({"age": 40 + 8 * data.X[:, 0], "tenure": 5 + 2 * data.X[:, 1]})
    frame["region"] = np.array(["north", "south", "east"])[np.arange(n) % 3]
    frame["arm"] = np.where(data.treatment == 1, "program", "usual")
    frame["employed_12mo"] = np.where(data.survival == 1, "yes", "no")
    frame["productivity"] = data.y
    return frame


def test_readme_python_route_writes_the_cli_report(tmp_path, monkeypatch):
    frame = workplace_frame()
    frame.to_csv(tmp_path / "workplace.csv", index=False)
    text = README.read_text()
    bash = re.search(r"```bash\n(pscore-strata analyze workplace\.csv.*?)```", text, re.S).group(1)
    cli_args = bash.replace("\\\n", " ").split()[1:]
    cli_args[1] = str(tmp_path / "workplace.csv")
    cli_args[cli_args.index("--out") + 1] = str(tmp_path / "cli")
    quoted = " ".join(cli_args)
    cli_args = [a.strip('"') for a in re.findall(r'"[^"]*"|\S+', quoted)]
    assert main([*cli_args, "--quiet"]) == 0
    block = re.search(r"The same report from Python.*?```python\n(.*?)```", text, re.S).group(1)
    monkeypatch.chdir(tmp_path)
    namespace = {"frame": frame}
    exec(compile(block, "README report route", "exec"), namespace)
    from_cli = json.loads((tmp_path / "cli" / "results.json").read_text())
    from_python = json.loads((tmp_path / "report" / "results.json").read_text())
    for key in ("estimates", "bounds", "sensitivity", "subgroups", "wording", "diagnostics"):
        assert from_python[key] == from_cli[key], key
    html = (tmp_path / "report" / "report.html").read_text()
    assert "within each value of\n    <code>region</code>" in html and "job loss" in html


def test_by_column_gives_effect_by_subgroups(tmp_path):
    frame = load_demo()
    path = tmp_path / "demo.csv"
    frame.to_csv(path, index=False)
    code = main(["analyze", str(path), "--outcome", DEMO_ROLES["outcome"], "--treatment",
                 DEMO_ROLES["treatment"], "--survival", DEMO_ROLES["survival"], "--covariates",
                 *COVARIATES, "--categorical", "site", "--by", "site", "--quiet",
                 "--out", str(tmp_path / "o")])  # fmt: skip
    assert code == 0
    results = json.loads((tmp_path / "o" / "results.json").read_text())
    roles = report.ColumnRoles(outcome=DEMO_ROLES["outcome"], treatment=DEMO_ROLES["treatment"],
                               survival=DEMO_ROLES["survival"], covariates=tuple(COVARIATES),
                               categorical=("site",))  # fmt: skip
    data = report.prepare_data(frame, roles)
    est = report.build_estimator("robust", report.AnalysisOptions())
    est.fit(data.design, data.outcome, treatment=data.treatment, survival=data.survival)
    direct = est.effect_by(frame["site"].to_numpy())
    rows = results["subgroups"]["rows"]
    assert [r["label"] for r in rows] == list(direct["label"])
    np.testing.assert_allclose([r["effect"] for r in rows], direct["effect"], rtol=1e-10)
    np.testing.assert_allclose([r["ci_low"] for r in rows], direct["ci_low"], rtol=1e-10)
    assert "subgroups.png" in results["figures"]


def test_by_refuses_too_many_groups(tmp_path, capsys):
    frame = load_demo()
    path = tmp_path / "demo.csv"
    frame.to_csv(path, index=False)
    code = main(["analyze", str(path), "--outcome", DEMO_ROLES["outcome"], "--treatment",
                 DEMO_ROLES["treatment"], "--survival", DEMO_ROLES["survival"], "--covariates",
                 "age", "--by", "age", "--quiet", "--out", str(tmp_path / "o")])  # fmt: skip
    assert code == 2
    assert "--by column 'age' has" in capsys.readouterr().err


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        if shutil.which(name):
            return shutil.which(name)
    return None


def test_whole_report_screenshot(tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("chromium not found on PATH (apt-get install chromium); screenshot not taken")
    out = tmp_path / "report"
    assert main(["demo", "--out", str(out), "--quiet"]) == 0
    # The long sections are folded (<details>); open them all to see every section laid out.
    opened = out / "opened.html"
    html = (out / "report.html").read_text()
    assert '<details class="fold">' in html
    opened.write_text(html.replace('<details class="fold">', '<details class="fold" open>'))
    shot = tmp_path / "whole.png"
    # Taller than the report, so the screenshot holds all of it; drawn at half scale, which
    # keeps software rasterization of the long page quick.
    width, height, scale = 1200, 12000, 0.5
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run(
            [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
             "--no-first-run", "--disable-background-networking", "--disable-component-update",
             "--disable-sync", "--hide-scrollbars", f"--user-data-dir={profile}",
             f"--force-device-scale-factor={scale}", f"--screenshot={shot}",
             f"--window-size={width},{height}",
             opened.resolve().as_uri()],
            capture_output=True, timeout=180, check=False,
        )  # fmt: skip
    assert shot.is_file(), "chromium wrote no screenshot"
    import matplotlib.image

    pixels = matplotlib.image.imread(shot)[..., :3]
    assert pixels.shape[:2] == (int(height * scale), int(width * scale))
    inked = np.flatnonzero((pixels < 0.9).any(axis=(1, 2))) / scale
    # The whole page fits (blank margin below the footer), and it is long: every section and
    # all figures (principal scores, outcomes, calibration, sensitivity...) are laid out.
    assert inked.max() < height - 200
    assert inked.max() > 7000
    # Nothing is cut at the right edge: the page is no wider than the window.
    assert not (pixels[:, -20:] < 0.9).any()
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 50
