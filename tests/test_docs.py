"""The documentation site builds with warnings as errors, links resolve, and a browser renders it.

The site is built once per test session from a copy of ``docs/``, ``examples/`` and the package
(so the checkout is left untouched and nothing cached from an earlier build is reused), exactly
as CI builds it: ``python -m sphinx -W -b html``. External references: Chromium's rendering of
the pages (headless screenshot) and the HTML itself (every internal href/src must name an
existing file and, with a fragment, an existing id). With ``PSCORE_STRATA_DOCS_HTML=<dir>`` the
tests check a site already built there instead of building one.
"""

import importlib
import importlib.util
import json
import os
import pkgutil
import shutil
import subprocess
import sys
import tempfile
import time
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote, urlsplit

import numpy as np
import pytest

import pscore_strata

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = sorted(p.stem for p in (ROOT / "examples").glob("*.py") if not p.name.startswith("_"))
NEEDED = ("sphinx", "numpydoc", "sphinx_gallery", "pydata_sphinx_theme", "myst_parser")


def _build(workdir):
    source = workdir / "src"
    skip = shutil.ignore_patterns("_build", "auto_examples", "generated", "__pycache__",
                                  "sg_execution_times.rst")  # fmt: skip
    for part in ("docs", "examples", "pscore_strata"):
        shutil.copytree(ROOT / part, source / part, ignore=skip)
    out = workdir / "html"
    # One OpenMP thread: the gallery's fast settings fit small data, where threads only contend.
    env = {**os.environ, "OMP_NUM_THREADS": "1", "MPLBACKEND": "agg",
           "PYTHONPATH": str(source)}  # fmt: skip
    started = time.perf_counter()
    result = subprocess.run(
        [sys.executable, "-m", "sphinx", "-W", "--keep-going", "-q", "-b", "html",
         str(source / "docs"), str(out)],
        capture_output=True, text=True, timeout=900, cwd=source, env=env,
    )  # fmt: skip
    return {"returncode": result.returncode, "stderr": result.stderr[-20000:],
            "out": str(out), "seconds": time.perf_counter() - started}  # fmt: skip


@pytest.fixture(scope="session")
def site(tmp_path_factory):
    missing = [name for name in NEEDED if importlib.util.find_spec(name) is None]
    if missing:
        pytest.skip(f"documentation tools not installed ({', '.join(missing)}): "
                    "pip install '.[docs]'")  # fmt: skip
    built = os.environ.get("PSCORE_STRATA_DOCS_HTML")
    if built:
        # A site CI has just built with ``sphinx -W`` (see .ci/run): check it, do not rebuild.
        if not (Path(built) / "index.html").is_file():
            pytest.fail(f"PSCORE_STRATA_DOCS_HTML={built} holds no built site (index.html)")
        return {"returncode": 0, "stderr": "", "out": str(Path(built).resolve()), "seconds": 0.0}
    # Under pytest-xdist every worker has this fixture; the first one builds, the others wait
    # for its record in the shared temporary directory.
    worker = os.environ.get("PYTEST_XDIST_WORKER")
    shared = tmp_path_factory.getbasetemp()
    shared = shared.parent if worker else shared
    record, lock = shared / "docs_build.json", shared / "docs_build.lock"
    try:
        os.close(os.open(lock, os.O_CREAT | os.O_EXCL))
    except FileExistsError:
        pass
    else:
        try:
            built = _build(shared / "docs_site")
        except Exception as error:  # recorded, so that waiting workers fail instead of hanging
            built = {"returncode": -1, "stderr": repr(error), "out": "", "seconds": 0.0}
        record.write_text(json.dumps(built))
        return built
    deadline = time.monotonic() + 900
    while not record.exists():
        if time.monotonic() > deadline:
            pytest.fail("timed out waiting for another worker's documentation build")
        time.sleep(1)
    return json.loads(record.read_text())


@pytest.fixture(scope="session")
def html(site):
    assert site["returncode"] == 0, "sphinx -W failed:\n" + site["stderr"]
    return Path(site["out"])


class _Page(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.links, self.images = set(), [], []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        for key in ("id", "name"):
            if attrs.get(key):
                self.ids.add(attrs[key])
        for key in ("href", "src"):
            if attrs.get(key):
                self.links.append(attrs[key])
        if tag == "img" and attrs.get("src"):
            self.images.append(attrs["src"])


def _parse(path):
    page = _Page()
    page.feed(path.read_text(encoding="utf-8"))
    return page


@pytest.mark.slow
def test_site_builds_with_warnings_as_errors(site):
    assert site["returncode"] == 0, "sphinx -W failed:\n" + site["stderr"]
    print(f"documentation built in {site['seconds']:.0f} s")


def test_internal_links_resolve(html):
    # Files under _static are theme assets (templates among them), not pages.
    pages = {path: _parse(path) for path in html.rglob("*.html") if "_static" not in path.parts}
    assert len(pages) > 40
    broken = []
    for path, page in pages.items():
        for link in page.links:
            parts = urlsplit(link)
            if parts.scheme or parts.netloc or link.startswith(("mailto:", "javascript:")):
                continue  # external: not checked offline
            target = path if not parts.path else (path.parent / unquote(parts.path)).resolve()
            if target.is_dir():
                target = target / "index.html"
            if not target.exists():
                broken.append(f"{path.relative_to(html)}: {link} (no such file)")
                continue
            fragment = unquote(parts.fragment)
            if fragment and target.suffix == ".html":
                ids = pages[target].ids if target in pages else _parse(target).ids
                if fragment not in ids:
                    broken.append(f"{path.relative_to(html)}: {link} (no such anchor)")
    assert not broken, f"{len(broken)} broken internal links, e.g.:\n" + "\n".join(broken[:20])


def _public_names():
    names = {f"pscore_strata.{n}" for n in pscore_strata.__all__
             if not n.startswith("_") and not isinstance(getattr(pscore_strata, n), type(os))}
    top = {n: getattr(pscore_strata, n) for n in pscore_strata.__all__}
    for info in pkgutil.iter_modules(pscore_strata.__path__):
        if not info.ispkg or info.name.startswith("_"):
            continue
        module = importlib.import_module(f"pscore_strata.{info.name}")
        for name in getattr(module, "__all__", []):
            obj = getattr(module, name)
            if not (callable(obj) or isinstance(obj, type)):
                continue  # constants are listed on the family page
            if name in top and top[name] is obj:
                continue
            names.add(f"pscore_strata.{info.name}.{name}")
    return sorted(names)


def test_every_public_class_and_function_has_a_page(html):
    pages = html / "api" / "generated"
    missing = [n for n in _public_names() if not (pages / f"{n}.html").exists()]
    assert not missing, f"no API page for {missing}"
    page = (html / "api" / "generated" / "pscore_strata.MultiplyRobust.html").read_text()
    # numpydoc rendered the sections, and the inherited methods are documented.
    for text in ("Parameters", "Attributes", "References", "conf_int", "effect_by", "summary"):
        assert text in page


def test_every_example_is_a_gallery_page_with_figures(html):
    for stem in EXAMPLES:
        page = html / "auto_examples" / f"{stem}.html"
        assert page.exists(), f"examples/{stem}.py has no gallery page"
        figures = [s for s in _parse(page).images if f"sphx_glr_{stem}_0" in s]
        assert figures, f"the gallery page of examples/{stem}.py shows no figure"
    assert not (html / "auto_examples" / "_common.html").exists()


def test_guide_pages_render_math_and_link_the_cautions(html):
    guide = html / "guide"
    names = ("problem", "assumptions", "cautions", "estimators", "stratum-model", "inference",
             "small-trials", "diagnostics", "separation", "bounds-sensitivity", "planning",
             "missing-data", "distributions", "ordinal-bounded", "survey-designs", "cli-report",
             "results-json", "reporting-checklist", "simulation", "performance", "glossary",
             "derivations/bounds-sensitivity", "derivations/missing-data",
             "derivations/distributions", "derivations/stratum-model")  # fmt: skip
    for name in names:
        assert (guide / f"{name}.html").exists(), name
    for name in ("bounds-sensitivity", "missing-data", "distributions", "stratum-model"):
        derivation = (guide / "derivations" / f"{name}.html").read_text()
        assert 'class="math' in derivation and "mathjax" in derivation.lower(), name
        assert "\\frac" in derivation or "\\sum" in derivation, name  # TeX for MathJax
        # The practical page links its derivation.
        assert f"derivations/{name}.html" in (guide / f"{name}.html").read_text(), name
    # The cautions stand in full on one page, and the pages that interpret results link to it.
    cautions = (guide / "cautions.html").read_text().lower()
    for words in ("latent", "cannot be tested", "individual patients", "statistician",
                  "protocol"):  # fmt: skip
        assert words in cautions, words
    for name in ("problem", "assumptions", "bounds-sensitivity", "cli-report", "diagnostics",
                 "missing-data", "stratum-model"):  # fmt: skip
        assert 'href="cautions.html' in (guide / f"{name}.html").read_text(), name
    index = (html / "index.html").read_text().lower()
    assert "individual patients" in index and "latent" in index
    assert "guide/cautions.html" in index


def test_guide_references_no_design_notes_outside_the_repository():
    # DESIGN.md lives outside the repository; the guide must stand on its own.
    sources = sorted((ROOT / "docs").rglob("*.md")) + sorted((ROOT / "docs").rglob("*.rst"))
    offending = [str(p.relative_to(ROOT)) for p in sources
                 if "_build" not in p.parts and "DESIGN.md" in p.read_text()]  # fmt: skip
    assert not offending


def _chromium():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.mark.parametrize("page", ["index.html", "auto_examples/demo_analysis.html"])
def test_chromium_renders_the_site(html, page):
    browser = _chromium()
    if browser is None:
        reason = "chromium not found on PATH (apt-get install chromium); screenshot not taken"
        print(reason)
        pytest.skip(reason)
    with tempfile.TemporaryDirectory() as profile:
        shot = Path(profile) / "screenshot.png"
        subprocess.run(
            [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
             "--no-first-run", "--disable-background-networking", "--disable-component-update",
             "--disable-sync", f"--user-data-dir={profile}", f"--screenshot={shot}",
             "--window-size=1280,1600", (html / page).resolve().as_uri()],
            capture_output=True, timeout=180, check=False,
        )  # fmt: skip
        assert shot.is_file(), "chromium wrote no screenshot"
        import matplotlib.image

        pixels = matplotlib.image.imread(shot)[..., :3]
    assert pixels.shape[:2] == (1600, 1280)
    # A blank or unstyled error page is nearly one colour; the site has text, code and figures.
    assert float(np.std(pixels)) > 0.05
    assert len(np.unique(pixels.reshape(-1, 3), axis=0)) > 50
