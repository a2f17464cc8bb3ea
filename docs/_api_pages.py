"""Write the API reference pages from the packages' ``__all__`` lists at build time.

One page per subpackage (family), each an autosummary table whose stubs Sphinx generates, so a
public name added to any ``__all__`` (or a new subpackage) gets its page without editing the
docs. A name exported at the top level is documented once, as ``pscore_strata.<name>``; the
others under their subpackage. Nothing written here is committed (see .gitignore).
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import shutil
import textwrap
from pathlib import Path

import pscore_strata

# Reading order of the families; a subpackage missing here is appended alphabetically.
ORDER = ["estimators", "assumptions", "distributions", "inference", "diagnostics", "plotting",
         "datasets", "simulation", "nuisance", "report", "tables", "exceptions"]  # fmt: skip


def _families():
    # Every public subpackage, and the one public top-level module (the warning and error
    # classes, pscore_strata.exceptions).
    names = [m.name for m in pkgutil.iter_modules(pscore_strata.__path__)
             if (m.ispkg or m.name == "exceptions") and not m.name.startswith("_")]  # fmt: skip
    return sorted(names, key=lambda n: (ORDER.index(n) if n in ORDER else len(ORDER), n))


def _top_level():
    return {name: getattr(pscore_strata, name) for name in pscore_strata.__all__
            if not name.startswith("_") and not inspect.ismodule(getattr(pscore_strata, name))}


def _qualified(family, name, obj, top):
    if name in top and top[name] is obj:
        return f"pscore_strata.{name}"
    return f"pscore_strata.{family}.{name}"


def _summary_line(module):
    doc = inspect.getdoc(module) or ""
    return doc.split("\n\n")[0].replace("\n", " ").strip()


def _body(module):
    doc = inspect.getdoc(module) or ""
    parts = doc.split("\n\n", 1)
    return parts[1].strip() if len(parts) > 1 else ""


def _table(names):
    # Relative to ``.. currentmodule:: pscore_strata`` (autosummary prefixes the current module).
    lines = [".. autosummary::", "   :toctree: .", "   :nosignatures:", ""]
    lines += [f"   {n.removeprefix('pscore_strata.')}" for n in names]
    return "\n".join(lines) + "\n"


def _family_page(family, top, documented):
    module = importlib.import_module(f"pscore_strata.{family}")
    callables, data = [], []
    for name in getattr(module, "__all__", []):
        obj = getattr(module, name)
        if inspect.ismodule(obj):
            continue
        qualified = _qualified(family, name, obj, top)
        documented.add(id(obj))
        (callables if inspect.isclass(obj) or callable(obj) else data).append((qualified, obj))
    title = f"``pscore_strata.{family}``"
    text = [title, "=" * len(title), "", f".. module:: pscore_strata.{family}", "",
            ".. currentmodule:: pscore_strata", "", _summary_line(module), ""]
    body = _body(module)
    if body:
        text += [body, ""]
    classes = [q for q, o in callables if inspect.isclass(o)]
    functions = [q for q, o in callables if not inspect.isclass(o)]
    if classes:
        text += ["Classes", "-------", "", _table(classes)]
    if functions:
        text += ["Functions", "---------", "", _table(functions)]
    if data:
        text += ["Constants", "---------", ""]
        for qualified, obj in data:
            value = repr(obj)
            if len(value) > 300:
                value = (f"a {type(obj).__name__} "
                         "(see :func:`pscore_strata.datasets.list_scenarios`)")
            else:
                value = f"``{value}``"
            text += [f"``{qualified}``", textwrap.indent(value, "   "), ""]
    return "\n".join(text)


def _cli_page():
    from pscore_strata.cli import build_parser

    parser = build_parser()
    text = ["Command line: ``pscore-strata``", "================================", "",
            "The help text of each command, as the installed program prints it "
            "(see the :doc:`command-line guide </guide/cli-report>`).", ""]  # fmt: skip
    sections = [("pscore-strata", parser)]
    for action in parser._subparsers._group_actions if parser._subparsers else []:
        sections += [(f"pscore-strata {name}", sub) for name, sub in action.choices.items()]
    for title, sub in sections:
        sub.prog = title
        text += [f"``{title}``", "-" * (len(title) + 4), "", "::", ""]
        text += [textwrap.indent(sub.format_help(), "   "), ""]
    return "\n".join(text)


def write_api_pages(out_dir):
    """Write the family pages, ``cli.rst`` and ``families.inc`` into ``out_dir`` (recreated)."""
    out_dir = Path(out_dir)
    shutil.rmtree(out_dir, ignore_errors=True)
    out_dir.mkdir(parents=True)
    top = _top_level()
    documented = set()
    pages = []
    for family in _families():
        (out_dir / f"{family}.rst").write_text(_family_page(family, top, documented))
        pages.append(family)
    leftovers = [f"pscore_strata.{n}" for n, o in top.items()
                 if id(o) not in documented and n != "__version__"]  # fmt: skip
    if leftovers:
        title = "``pscore_strata`` (top level)"
        (out_dir / "toplevel.rst").write_text(
            "\n".join([title, "=" * len(title), "", ".. currentmodule:: pscore_strata", "",
                       _table(leftovers)])
        )
        pages.insert(0, "toplevel")
    (out_dir / "cli.rst").write_text(_cli_page())
    pages.append("cli")
    # Included by api/index.rst (".inc" is not a source suffix, so it is not a page itself).
    index = [".. toctree::", "   :maxdepth: 1", "   :hidden:", ""]
    index += [f"   generated/{p}" for p in pages] + [""]
    for page in pages:
        if page in ("toplevel", "cli"):
            summary = {"toplevel": "names exported at the top level only",
                       "cli": "the ``pscore-strata`` command and its options"}[page]  # fmt: skip
        else:
            summary = _summary_line(importlib.import_module(f"pscore_strata.{page}"))
        index.append(f"- :doc:`generated/{page}` — {summary}")
    (out_dir / "families.inc").write_text("\n".join(index) + "\n")
    return pages
