"""The Word writer of a :class:`Table` (python-docx, imported on first use).

The layout is the one journals ask for: caption above, three horizontal rules (above and below the
header, under the last row), no vertical rules, notes in a smaller font under the table.
"""

from __future__ import annotations

__all__ = ["add_table"]

_RULE_THICK, _RULE_THIN = "12", "6"  # eighths of a point


def _docx():
    try:
        import docx
    except ImportError as error:  # pragma: no cover - the test extra installs it
        raise ImportError(
            "Writing Word tables needs python-docx: pip install python-docx (or, from a "
            "checkout of pscore_strata, pip install '.[report]')."
        ) from error
    return docx


def _rule(element, edge, size):
    from docx.oxml import OxmlElement
    from docx.oxml.ns import qn

    rule = OxmlElement(f"w:{edge}")
    rule.set(qn("w:val"), "single")
    rule.set(qn("w:sz"), size)
    rule.set(qn("w:space"), "0")
    rule.set(qn("w:color"), "000000")
    element.append(rule)


def _cell_rules(cell, **edges):
    from docx.oxml import OxmlElement

    properties = cell._tc.get_or_add_tcPr()
    borders = OxmlElement("w:tcBorders")
    for edge, size in edges.items():
        _rule(borders, edge, size)
    properties.append(borders)


def _write(cell, text, align, *, bold=False, italic=False, size=None):
    from docx.enum.text import WD_ALIGN_PARAGRAPH

    paragraph = cell.paragraphs[0]
    paragraph.alignment = WD_ALIGN_PARAGRAPH.RIGHT if align == "right" else WD_ALIGN_PARAGRAPH.LEFT
    paragraph.paragraph_format.space_after = 0
    run = paragraph.add_run(text)
    run.bold, run.italic = bold, italic
    if size is not None:
        run.font.size = size


def add_table(table, document=None):
    """Append ``table`` (caption, table, notes) to ``document`` and return the document."""
    docx = _docx()
    from docx.shared import Pt

    document = docx.Document() if document is None else document
    caption = document.add_paragraph(style="Caption")
    caption.add_run(table.caption)
    caption.paragraph_format.keep_with_next = True
    rows = table.rows()
    header, aligns = table.header(), table.alignments()
    grid = document.add_table(rows=1 + len(rows), cols=len(header))
    grid.autofit = True
    size = Pt(10)
    for j, (text, align) in enumerate(zip(header, aligns, strict=True)):
        cell = grid.rows[0].cells[j]
        _write(cell, text, align, bold=True, size=size)
        _cell_rules(cell, top=_RULE_THICK, bottom=_RULE_THIN)
    for i, (kind, content) in enumerate(rows, start=1):
        cells = grid.rows[i].cells
        if kind == "group":
            merged = cells[0].merge(cells[-1]) if len(cells) > 1 else cells[0]
            _write(merged, content, "left", italic=True, size=size)
        else:
            for cell, text, align in zip(cells, content, aligns, strict=True):
                _write(cell, text, align, size=size)
    for cell in grid.rows[-1].cells:
        _cell_rules(cell, bottom=_RULE_THICK)
    for note in table.footnote:
        paragraph = document.add_paragraph()
        run = paragraph.add_run(note)
        run.font.size = Pt(9)
        paragraph.paragraph_format.space_after = Pt(2)
    document.add_paragraph()
    return document
