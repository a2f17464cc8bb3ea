"""Independent readers of the written tables: each parses a file back into header and body cells
without using the writer's code (python-docx for Word, a small parser of the booktabs tabular,
a pipe-table parser), so a test can compare the files with the numbers they came from."""

from __future__ import annotations

import re

import docx


def read_docx(path):
    """{caption: (header, rows)} for every table of a Word file (caption = paragraph before)."""
    document = docx.Document(str(path))
    found, caption, tables = {}, None, iter(document.tables)
    for child in document.element.body.iterchildren():
        tag = child.tag.rsplit("}", 1)[-1]
        if tag == "p":
            text = "".join(node.text or "" for node in child.iter() if node.tag.endswith("}t"))
            caption = text or caption
        elif tag == "tbl":
            rows = [[cell.text for cell in row.cells] for row in next(tables).rows]
            found[caption] = (rows[0], rows[1:])
    return found


_UNESCAPE = [
    (r"\textbackslash{}", "\\"), (r"\&", "&"), (r"\%", "%"), (r"\$", "$"), (r"\#", "#"),
    (r"\_", "_"), (r"\{", "{"), (r"\}", "}"), (r"\textasciitilde{}", "~"),
    (r"\textasciicircum{}", "^"), ("$<$", "<"), ("$>$", ">"), ("$-$", "-"), ("---", "—"),
    ("--", "–"), (r"$\geq$", "≥"), (r"$\leq$", "≤"), (r"$\pm$", "±"), (r"$\times$", "×"),
    (r"$\infty$", "∞"), (r"\ldots{}", "…"), (r"$\alpha$", "α"), (r"$\delta$", "δ"),
    (r"$\varepsilon$", "ε"), (r"$\xi$", "ξ"), (r"$\tau$", "τ"), (r"$\pi$", "π"),
    (r"$\mu$", "μ"), (r"$\chi$", "χ"), (r"$^2$", "²"),
]


def _latex_text(cell):
    cell = cell.strip()
    group = re.fullmatch(r"\\multicolumn\{\d+\}\{l\}\{\\textit\{(.*)\}\}", cell)
    if group:
        cell = group.group(1)
    for code, char in _UNESCAPE:
        cell = cell.replace(code, char)
    return cell


def read_latex(text):
    """{caption: (header, rows)} for every booktabs tabular in a LaTeX fragment."""
    found = {}
    for match in re.finditer(
        r"\\caption\{(.*?)\}\n.*?\\begin\{tabular\}\{([lrc]+)\}\n\\toprule\n(.*?)\n\\midrule\n"
        r"(.*?)\\bottomrule\n\\end\{tabular\}",
        text,
        flags=re.S,
    ):
        caption, spec, head, body = match.groups()
        width = len(spec)
        header = [_latex_text(c) for c in head.removesuffix(" \\\\").split(" & ")]
        assert len(header) == width, (header, spec)
        rows = []
        for line in body.splitlines():
            if line == "\\addlinespace":
                continue
            assert line.endswith(" \\\\"), line
            cells = [_latex_text(c) for c in line[:-3].split(" & ")]
            if len(cells) == 1:
                cells = cells * width  # a group heading spans the row, as Word's merged cell
            assert len(cells) == width, (cells, spec)
            rows.append(cells)
        found[_latex_text(caption)] = (header, rows)
    return found


def read_markdown(text):
    """{caption: (header, rows)} for every pipe table preceded by a "Table: caption" line."""
    found = {}
    lines = text.splitlines()
    for i, line in enumerate(lines):
        if not line.startswith("Table: "):
            continue
        j = i + 1
        while not lines[j].startswith("|"):
            j += 1
        block = []
        while j < len(lines) and lines[j].startswith("|"):
            block.append(lines[j])
            j += 1
        parse = [[c.strip().replace("\\|", "|") for c in re.split(r"(?<!\\)\|", row)[1:-1]]
                 for row in block]  # fmt: skip
        assert all(re.fullmatch(r":?-{3,}:?", c) for c in parse[1]), parse[1]
        rows = []
        for cells in parse[2:]:
            bold = re.fullmatch(r"\*\*(.*)\*\*", cells[0])
            if bold and not any(cells[1:]):
                cells = [bold.group(1)] * len(cells)
            rows.append(cells)
        found[line.removeprefix("Table: ")] = (parse[0], rows)
    return found
