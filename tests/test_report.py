"""The written report: schema validity, escaping of user text, self-containment, and how a
browser renders it (headless Chromium screenshot).

External references: the JSON Schema specification (validated by the jsonschema library), the
PNG file signature, and Chromium's rendering of the page.
"""

import base64
import json
import re
import shutil
import subprocess
import tempfile

import jsonschema
import numpy as np
import pytest

from pscore_strata import report
from pscore_strata.datasets import DEMO_ROLES, load_demo

EVIL = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """The demo data with a covariate whose name is markup, analysed and written once."""
    frame = load_demo().rename(columns={"pf_ratio": EVIL})
    roles = report.ColumnRoles(
        outcome=DEMO_ROLES["outcome"],
        treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"],
        covariates=("age", "female", "severity_score", "comorbidities", EVIL),
        categorical=("site",),
    )
    out = tmp_path_factory.mktemp("report")
    analysis = report.analyze_frame(frame, roles, out_dir=out, source=f"{EVIL}.csv")
    return out, analysis


def test_results_validate_against_the_schema(written):
    out, analysis = written
    schema = report.schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    results = json.loads((out / "results.json").read_text())
    jsonschema.validate(results, schema, cls=jsonschema.Draft202012Validator)
    assert results["schema_version"] == report.SCHEMA_VERSION
    assert results == json.loads(json.dumps(analysis.results))


def test_schema_rejects_a_broken_file(written):
    out, _ = written
    results = json.loads((out / "results.json").read_text())
    del results["estimates"][0]["effect"]
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(results, report.schema(), cls=jsonschema.Draft202012Validator)


def test_user_text_is_escaped(written):
    out, _ = written
    html = (out / "report.html").read_text()
    assert EVIL not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "<script" not in html  # the report runs no script at all


def test_report_is_self_contained(written):
    out, analysis = written
    html = (out / "report.html").read_text()
    assert not re.search(r"(src|href)=\"(https?:|//)", html)
    images = re.findall(r'src="data:image/png;base64,([^"]+)"', html)
    # Estimates, balance, overlap, weights, principal scores, survivor outcomes, calibration,
    # sensitivity and the two distribution figures.
    assert len(images) == len(analysis.results["figures"]) == 10
    for encoded, name in zip(images, analysis.results["figures"], strict=True):
        png = base64.b64decode(encoded)
        assert png[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification)
        assert (out / name).read_bytes() == png


def test_report_states_estimand_and_cautions(written):
    out, _ = written
    html = (out / "report.html").read_text()
    for text in ("ICH E9(R1)", "Population", "Intercurrent event", "principal stratum strategy",
                 "Population-level summary", "latent", "cannot be tested", "individual unit",
                 "qualified statistician", "Bounds that drop principal ignorability",
                 "Sensitivity analysis", "Diagnostics"):  # fmt: skip
        assert text in html, text


def test_unavailable_parts_render(written):
    _, analysis = written
    results = json.loads(json.dumps(analysis.results))
    for part in ("bounds", "sensitivity", "diagnostics"):
        results[part] = {"available": False, "reason": f"{part} missing for this test"}
    jsonschema.validate(results, report.schema(), cls=jsonschema.Draft202012Validator)
    html = report.render_html(results, [])
    assert "bounds missing for this test" in html and "sensitivity missing" in html


def test_caller_frame_is_not_modified():
    frame = load_demo()
    before = frame.copy()
    roles = report.ColumnRoles(
        outcome=DEMO_ROLES["outcome"], treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"], covariates=("age",), categorical=("site",),
    )  # fmt: skip
    report.prepare_data(frame, roles)
    assert frame.equals(before)


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


def test_chromium_renders_the_report(written):
    browser = _chromium()
    if browser is None:
        reason = "chromium not found on PATH (apt-get install chromium); screenshot not taken"
        print(reason)
        pytest.skip(reason)
    out, _ = written
    shot = out / "screenshot.png"
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run(
            [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
             "--no-first-run", "--disable-background-networking", "--disable-component-update",
             "--disable-sync", f"--user-data-dir={profile}", f"--screenshot={shot}",
             "--window-size=1200,3000", (out / "report.html").resolve().as_uri()],
            capture_output=True, timeout=180, check=False,
        )  # fmt: skip
    assert shot.is_file(), "chromium wrote no screenshot"
    import matplotlib.image

    pixels = matplotlib.image.imread(shot)[..., :3]
    assert pixels.shape[:2] == (3000, 1200)
    # A blank page is one colour; the report has text, tables and figures.
    assert float(np.std(pixels)) > 0.05
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 50


def test_report_opens_with_the_glance_and_folds_long_sections(written):
    from pscore_strata.report._format import number
    from pscore_strata.report._glance import FOLDED

    out, analysis = written
    results = analysis.results
    html = (out / "report.html").read_text()
    glance = html[html.index('<section id="summary"'):html.index("</section>")]
    primary = next(e for e in results["estimates"] if e["primary"])
    tip = results["sensitivity"]["pi_difference"]["tipping_point"]
    for text in ("At a glance", number(primary["effect"]), number(results["bounds"]["lower"]),
                 number(tip) if tip is not None else "not reached", "always-survivor share",
                 "latent", "individual unit"):  # fmt: skip
        assert text in glance, text
    pattern = r'<details class="fold">\s*<summary>(.*?)</summary>\s*<section id="([\w-]+)"'
    folds = re.findall(pattern, html, flags=re.S)
    folded = [n.replace("_", "-") for n in report._html.SECTIONS if n in FOLDED]
    assert [name for _, name in folds] == folded
    summaries = {name: text for text, name in folds}
    # The diagnostics headline restates the largest weighted |SMD| of results.json.
    largest = max(abs(b["smd_treated_vs_control"]) for b in results["diagnostics"]["balance"])
    assert f"Largest weighted |SMD| {number(largest)}" in summaries["diagnostics"]
    # The results themselves stay open.
    assert not {"estimates", "bounds", "assumptions", "cautions"} & set(summaries)


def _pages(pdf):
    # Page objects of a PDF file (ISO 32000: each page dictionary has /Type /Page).
    return len(re.findall(rb"/Type\s*/Page[^s]", pdf.read_bytes()))


def test_printing_unfolds_every_section(written, tmp_path):
    browser = _chromium()
    if browser is None:
        pytest.skip("chromium not found on PATH (apt-get install chromium)")
    out, _ = written
    html = (out / "report.html").read_text()
    opened = tmp_path / "opened.html"
    opened.write_text(html.replace('<details class="fold">', '<details class="fold" open>'))
    pdfs = {}
    for name, page in (("folded", out / "report.html"), ("opened", opened)):
        pdfs[name] = tmp_path / f"{name}.pdf"
        with tempfile.TemporaryDirectory() as profile:
            subprocess.run(
                [browser, "--headless", "--no-sandbox", "--disable-gpu", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update",
                 f"--user-data-dir={profile}", "--no-pdf-header-footer",
                 f"--print-to-pdf={pdfs[name]}", page.resolve().as_uri()],
                capture_output=True, timeout=180, check=False,
            )  # fmt: skip
    # The print stylesheet shows the folded sections: as many pages as with every one open.
    assert _pages(pdfs["folded"]) == _pages(pdfs["opened"]) > 3
