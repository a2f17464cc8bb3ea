"""The text writers of a :class:`Table`: Markdown pipe tables, LaTeX booktabs, HTML."""

from __future__ import annotations

import html as _html
import re

__all__ = ["markdown", "latex", "html", "latex_escape"]

# Characters that pdfLaTeX with the default encodings cannot print as typed.
_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
    "<": "$<$",
    ">": "$>$",
    "—": "---",
    "–": "--",
    "−": "$-$",
    "≥": r"$\geq$",
    "≤": r"$\leq$",
    "±": r"$\pm$",
    "×": r"$\times$",
    "∞": r"$\infty$",
    "…": r"\ldots{}",
    "α": r"$\alpha$",
    "δ": r"$\delta$",
    "ε": r"$\varepsilon$",
    "ξ": r"$\xi$",
    "τ": r"$\tau$",
    "π": r"$\pi$",
    "μ": r"$\mu$",
    "χ": r"$\chi$",
    "²": r"$^2$",
}
_LATEX_PATTERN = re.compile("|".join(re.escape(k) for k in _LATEX_SPECIAL))
# A minus sign before a number (not a hyphen inside a word or a range such as 18-65).
_NUMBER_MINUS = re.compile(r"(?<![\w.)])-(?=[\d.∞])")


def latex_escape(text):
    """Text as pdfLaTeX prints it: special characters escaped, minus signs in math mode.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    text = _NUMBER_MINUS.sub("−", str(text))
    return _LATEX_PATTERN.sub(lambda m: _LATEX_SPECIAL[m.group(0)], text)


def latex(table):
    columns = "".join("r" if a == "right" else "l" for a in table.alignments())
    width = len(table.columns)
    lines = [
        "% Needs \\usepackage{booktabs} in the preamble.",
        "\\begin{table}[htbp]",
        "\\centering",
        f"\\caption{{{latex_escape(table.caption)}}}",
    ]
    if table.label:
        lines.append(f"\\label{{{table.label}}}")
    lines += [
        f"\\begin{{tabular}}{{{columns}}}",
        "\\toprule",
        " & ".join(latex_escape(h) for h in table.header()) + " \\\\",
        "\\midrule",
    ]
    first = True
    for kind, content in table.rows():
        if kind == "group":
            if not first:
                lines.append("\\addlinespace")
            heading = f"\\textit{{{latex_escape(content)}}}"
            lines.append(f"\\multicolumn{{{width}}}{{l}}{{{heading}}} \\\\")
        else:
            lines.append(" & ".join(latex_escape(c) for c in content) + " \\\\")
        first = False
    lines += ["\\bottomrule", "\\end{tabular}"]
    if table.footnote:
        lines += [
            "\\par\\smallskip",
            "\\begin{minipage}{\\linewidth}\\footnotesize",
            "\\par\n".join(latex_escape(note) for note in table.footnote),
            "\\end{minipage}",
        ]
    lines.append("\\end{table}")
    return "\n".join(lines) + "\n"


def _md_escape(text):
    return str(text).replace("|", "\\|").replace("\n", " ")


def markdown(table):
    header = [_md_escape(h) for h in table.header()]
    body = []
    for kind, content in table.rows():
        if kind == "group":
            body.append([f"**{_md_escape(content)}**"] + [""] * (len(header) - 1))
        else:
            body.append([_md_escape(c) for c in content])
    widths = [max(3, len(h), *(len(r[j]) for r in body)) for j, h in enumerate(header)]
    aligns = table.alignments()

    def line(cells):
        padded = [
            c.rjust(w) if a == "right" else c.ljust(w)
            for c, w, a in zip(cells, widths, aligns, strict=True)
        ]
        return "| " + " | ".join(padded) + " |"

    rule = [(":" + "-" * (w + 1)) if a == "left" else ("-" * (w + 1) + ":")
            for w, a in zip(widths, aligns, strict=True)]  # fmt: skip
    lines = [f"Table: {_md_escape(table.caption)}", "", line(header), "|" + "|".join(rule) + "|"]
    lines += [line(r) for r in body]
    if table.footnote:
        lines.append("")
        lines += [f"{note}\n" if i < len(table.footnote) - 1 else note
                  for i, note in enumerate(table.footnote)]  # fmt: skip
    return "\n".join(lines) + "\n"


def html(table):
    esc = _html.escape
    aligns = table.alignments()
    width = len(table.columns)
    ident = f' id="{esc(table.label)}"' if table.label else ""
    out = [f'<table class="ps-table"{ident}>', f"<caption>{esc(table.caption)}</caption>"]
    out.append("<thead><tr>")
    out += [f'<th scope="col" style="text-align:{a}">{esc(h)}</th>'
            for h, a in zip(table.header(), aligns, strict=True)]  # fmt: skip
    out.append("</tr></thead><tbody>")
    for kind, content in table.rows():
        if kind == "group":
            out.append(f'<tr class="ps-group"><th colspan="{width}" scope="rowgroup" '
                       f'style="text-align:left">{esc(content)}</th></tr>')  # fmt: skip
        else:
            cells = "".join(f'<td style="text-align:{a}">{esc(c)}</td>'
                            for c, a in zip(content, aligns, strict=True))  # fmt: skip
            out.append(f"<tr>{cells}</tr>")
    out.append("</tbody>")
    if table.footnote:
        notes = "".join(f"<p>{esc(n)}</p>" for n in table.footnote)
        out.append(f'<tfoot><tr><td colspan="{width}">{notes}</td></tr></tfoot>')
    out.append("</table>")
    return "\n".join(out)
