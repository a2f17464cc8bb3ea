"""Sphinx configuration of the pscore_strata documentation site.

Build from the repository root with warnings as errors:

    python -m sphinx -W -b html docs docs/_build/html

The API pages are generated at build time from the docstrings (autosummary stubs under
``docs/api/generated/``, never committed), and the gallery executes every ``examples/*.py``
with the fast setting (``PSCORE_STRATA_FAST=1``) into ``docs/auto_examples/``.
"""

import importlib.util
import os
import sys
from pathlib import Path

DOCS = Path(__file__).resolve().parent
ROOT = DOCS.parent
# Document the source tree beside this file, not whatever copy happens to be installed.
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(DOCS))
# Before sphinx-gallery imports and runs the example scripts: small samples, few resamples.
os.environ["PSCORE_STRATA_FAST"] = "1"
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MPLBACKEND", "agg")

from _api_pages import write_api_pages  # noqa: E402
from _gallery import TightFigures  # noqa: E402

import pscore_strata  # noqa: E402

project = "pscore_strata"
author = "pscore_strata developers"
copyright = "pscore_strata developers, BSD-3-Clause"  # noqa: A001
version = release = pscore_strata.__version__

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.autosummary",
    "sphinx.ext.mathjax",
    "numpydoc",
    "sphinx_gallery.gen_gallery",
    "myst_parser",
]
# MathJax copied into the site (the `docs` extra installs it), so formulas render offline too;
# without the package, Sphinx's default MathJax from its CDN.
if importlib.util.find_spec("sphinx-mathjax-offline") is not None:
    extensions.append("sphinx-mathjax-offline")

source_suffix = {".rst": "restructuredtext", ".md": "markdown"}
root_doc = "index"
templates_path = ["_templates"]
exclude_patterns = ["_build", "_templates", "README.md", "**/README.txt"]

# MyST Markdown pages (the derivations) write math as $...$ and $$...$$.
myst_enable_extensions = ["dollarmath", "amsmath", "colon_fence", "deflist"]
myst_heading_anchors = 3

# The API reference: one page per public class and function, from the numpydoc docstrings.
write_api_pages(DOCS / "api" / "generated")
autosummary_generate = True
autosummary_imported_members = True
autodoc_default_options = {"member-order": "bysource"}
autodoc_typehints = "none"
numpydoc_show_class_members = False
numpydoc_class_members_toctree = False
numpydoc_attributes_as_param_list = True
numpydoc_validation_checks = set()

# The gallery: every examples/*.py except helpers whose name starts with "_".
sphinx_gallery_conf = {
    "examples_dirs": str(ROOT / "examples"),
    "gallery_dirs": "auto_examples",
    "filename_pattern": r"(^|/)[^_/][^/]*\.py$",
    "ignore_pattern": r"(^|/)_[^/]*\.py$",
    "write_computation_times": False,
    "within_subsection_order": "_gallery.ReadingOrder",
    "download_all_examples": False,
    "remove_config_comments": True,
    "show_memory": False,
    "show_signature": False,
    "min_reported_time": 1_000_000,
    "abort_on_example_error": True,
    "matplotlib_animations": False,
    "image_scrapers": (TightFigures(),),
    "capture_repr": (),
    "reference_url": {},
}

html_theme = "pydata_sphinx_theme"
html_title = f"pscore_strata {version}"
html_static_path = []
html_show_sourcelink = False
html_theme_options = {
    "navbar_align": "left",
    "show_toc_level": 2,
    "secondary_sidebar_items": ["page-toc"],
    "footer_start": ["copyright"],
    "footer_end": [],
    "navigation_with_keys": False,
}
html_context = {"default_mode": "light"}


def _skip_foreign_members(app, what, name, obj, skip, options):
    """Leave out members inherited from scikit-learn, numpy or the standard library.

    ``get_params``/``set_params`` and the metadata-routing helpers are scikit-learn's own and are
    documented there; ``Warning.with_traceback`` and the like are Python's.
    """
    target = getattr(obj, "fget", None) or getattr(obj, "func", None) or obj
    module = getattr(target, "__module__", None) or ""
    owner = getattr(getattr(obj, "__objclass__", None), "__module__", "") or ""
    if not module.startswith("pscore_strata") and not owner.startswith("pscore_strata"):
        if what in ("class", "exception"):
            return True
    return skip


def setup(app):
    app.connect("autodoc-skip-member", _skip_foreign_members)
