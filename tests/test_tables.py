"""Manuscript tables: every format read back by an independent reader (python-docx, a parser of the
booktabs tabular, a pipe-table parser) equals the numbers at the printed precision; the LaTeX
compiles with booktabs when pdflatex is installed; bad arguments get clear errors."""

import shutil
import subprocess

import numpy as np
import pandas as pd
import pytest
from _table_readers import read_docx, read_latex, read_markdown

from pscore_strata.tables import Table, format_cell, write_tables

CAPTION = "Effects & 95% CI_{x} <by> ~ method"


@pytest.fixture
def frame():
    return pd.DataFrame(
        {
            "block": ["Main", "Main", "Sensitivity"],
            "method": ["weighting", "multiply | robust", "δ = 0.5, ξ ≥ 0"],
            "effect": [0.12345, -0.00004, -1.5],
            "interval": [(0.0123, 0.2412), (-0.2, 0.1), (np.nan, 1.0)],
            "share": [0.4567, 0.5, np.nan],
            "n": [1200, 30, 5],
        }
    )


@pytest.fixture
def table(frame):
    return Table(
        frame,
        caption=CAPTION,
        footnote=["CI: confidence interval at 95%.", "Estimates assume $monotonicity$."],
        formats={"effect": ".3f", "interval": ".2f", "share": ".1%"},
        labels={"effect": "SACE", "interval": "95% CI"},
        group_column="block",
        label="tab:effects",
    )


def _expected(frame):
    """The cells as printed, built here from the frame with Python's own format()."""
    rows = []
    for block, group in frame.groupby("block", sort=False):
        rows.append([block] * 5)
        for _, r in group.iterrows():
            low, high = r["interval"]
            interval = "—" if np.isnan(low) else f"{low:.2f} to {high:.2f}"
            share = "—" if np.isnan(r["share"]) else f"{100 * r['share']:.1f}%"
            effect = f"{r['effect']:.3f}".replace("-0.000", "0.000")
            rows.append([r["method"], effect, interval, share, f"{r['n']:,d}"])
    return ["method", "SACE", "95% CI", "share", "n"], rows


@pytest.mark.parametrize("fmt", ["docx", "tex", "md"])
def test_tables_read_back_equal_the_numbers(tmp_path, frame, table, fmt):
    path = write_tables([table], tmp_path / f"t.{fmt}")
    if fmt == "docx":
        found = read_docx(path)
    elif fmt == "tex":
        found = read_latex(path.read_text())
    else:
        found = read_markdown(path.read_text())
    assert list(found) == [CAPTION]
    header, rows = found[CAPTION]
    assert (header, rows) == _expected(frame)
    # The printed digits are the numbers rounded (the reference is numpy's rounding).
    printed = [float(r[1]) for r in rows if r[0] != r[1]]
    np.testing.assert_allclose(printed, np.round(frame["effect"], 3), atol=0)


def test_footnote_and_caption_in_every_format(tmp_path, table):
    import docx

    write_tables(table, tmp_path / "t.docx")
    paragraphs = [p.text for p in docx.Document(str(tmp_path / "t.docx")).paragraphs]
    assert paragraphs[:3] == [CAPTION, *table.footnote]
    md = table.to_markdown()
    assert md.rstrip().endswith("Estimates assume $monotonicity$.")
    tex = table.to_latex()
    assert r"Estimates assume \$monotonicity\$." in tex and r"\label{tab:effects}" in tex


def test_html_escapes_every_text(frame):
    evil = "<script>alert(1)</script>"
    html = Table(frame.assign(method=evil), caption=evil, footnote=evil).to_html()
    assert "<script>" not in html and html.count("&lt;script&gt;") == 5


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="pdflatex not installed")
def test_latex_compiles_with_booktabs(tmp_path, table):
    # The reference is the TeX engine itself: the fragment, \input into a minimal document,
    # compiles without error (halt-on-error stops at the first one).
    write_tables([table, table], tmp_path / "tables.tex")
    (tmp_path / "paper.tex").write_text(
        "\\documentclass{article}\n\\usepackage{booktabs}\n\\begin{document}\n"
        "\\input{tables.tex}\n\\end{document}\n"
    )
    run = subprocess.run(
        ["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "paper.tex"],
        cwd=tmp_path, capture_output=True, text=True, timeout=120,
    )  # fmt: skip
    assert run.returncode == 0, run.stdout[-2000:]
    assert (tmp_path / "paper.pdf").stat().st_size > 1000


def test_format_cell_rules():
    assert format_cell(-0.0004) == "0.000"
    assert format_cell(-0.0004, ".1%") == "0.0%"
    assert format_cell(12345) == "12,345"
    assert format_cell(np.int64(7)) == "7"
    assert format_cell(3.0, "d") == "3"
    assert format_cell(None) == format_cell(np.nan) == format_cell(pd.NA) == "—"
    assert format_cell((0.1, 0.25), ".2f") == "0.10 to 0.25"
    assert format_cell(0.5, lambda v: f"<{v}>") == "<0.5>"
    assert format_cell(True) == "yes"
    assert format_cell(float("inf")) == "∞"


def test_index_becomes_a_column_and_data_is_not_mutated(frame):
    indexed = frame.set_index("method")
    before = indexed.copy()
    table = Table(indexed, caption="x")
    assert table.columns[0] == "method"
    pd.testing.assert_frame_equal(indexed, before)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"caption": ""}, "caption"),
        ({"formats": {"nope": ".3f"}}, "`formats` names columns"),
        ({"group_column": "nope"}, "`group_column`"),
        ({"align": {"n": "centre"}}, "`align`"),
    ],
)
def test_bad_arguments_are_named(frame, kwargs, message):
    kwargs = {"caption": "x", **kwargs}
    with pytest.raises(ValueError, match=message):
        Table(frame, **kwargs)


def test_bad_data_paths_and_formats(tmp_path, table):
    with pytest.raises(TypeError, match="`data` must be a pandas DataFrame"):
        Table({"a": [1]}, caption="x")
    with pytest.raises(ValueError, match="cannot tell the table format"):
        table.write(tmp_path / "t.xlsx")
    with pytest.raises(ValueError, match="`format` must be one of"):
        table.render("rtf")
    with pytest.raises(FileNotFoundError, match="does not exist"):
        table.write(tmp_path / "missing" / "t.md")
    with pytest.raises(TypeError, match="`tables` must be a Table"):
        write_tables([], tmp_path / "t.md")


def test_docstring_examples_run():
    import doctest

    import pscore_strata.tables as tables

    for name in tables.__all__:
        obj = getattr(tables, name)
        for test in doctest.DocTestFinder().find(obj, name):
            result = doctest.DocTestRunner().run(test)
            assert result.failed == 0, name
