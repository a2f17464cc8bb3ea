"""Writing one or several tables to a file."""

from __future__ import annotations

import pathlib

from ._table import as_tables, check_folder, check_format

__all__ = ["write_tables"]


def write_tables(tables, path, format=None, *, title=None):
    """Write tables, one after the other, into one Word, LaTeX, Markdown or HTML file.

    Parameters
    ----------
    tables : Table, sequence of Table or dict of Table
        In the order they are printed.
    path : str or path-like
        The file; its folder must exist.
    format : {"docx", "tex", "md", "html"}, optional
        By default taken from the extension of ``path``.
    title : str, optional
        A heading written before the first table (Word, Markdown and HTML).

    Returns
    -------
    pathlib.Path
        The file written.

    Notes
    -----
    The LaTeX file is a fragment for ``\\input``: one ``table`` float per table, each needing
    ``\\usepackage{booktabs}``; it has no preamble.

    Examples
    --------
    >>> import pandas as pd, tempfile, pathlib
    >>> from pscore_strata.tables import Table, write_tables
    >>> table = Table(pd.DataFrame({"n": [120]}), caption="Sample size")
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> write_tables([table], folder / "tables.md").name
    'tables.md'
    """
    tables = as_tables(tables)
    path = pathlib.Path(path)
    format = check_format(format, path)
    check_folder(path)
    if format == "docx":
        from ._docx import _docx

        document = _docx().Document()
        if title:
            document.add_heading(title, level=1)
        for table in tables:
            table.to_docx(document)
        document.save(str(path))
        return path
    parts = [table.render(format) for table in tables]
    if format == "md":
        text = (f"# {title}\n\n" if title else "") + "\n".join(parts)
    elif format == "tex":
        text = "\n".join(parts)
    else:
        import html

        heading = f"<h1>{html.escape(title)}</h1>\n" if title else ""
        text = heading + "\n".join(parts) + "\n"
    path.write_text(text, encoding="utf-8")
    return path
