"""A table for a manuscript: cells, column formats, a caption and a footnote, in one object.

The writers (Word, LaTeX, Markdown, HTML) all read the same formatted cells, so a number prints
with the same digits in every format.
"""

from __future__ import annotations

import math
import numbers
import pathlib
import re
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

__all__ = ["Table", "FORMATS", "format_cell"]

FORMATS = ("docx", "tex", "md", "html")
_EXTENSIONS = {".docx": "docx", ".tex": "tex", ".md": "md", ".html": "html", ".htm": "html"}
_NEGATIVE_ZERO = re.compile(r"-(?=[0.,]+%?$)")


def format_cell(value, spec=None, *, missing="—", separator=" to "):
    """The text of one cell.

    Parameters
    ----------
    value : object
        A number, a string, ``None``/NaN (printed as ``missing``) or a pair ``(low, high)``
        (an interval, printed as ``low`` ``separator`` ``high``, each end with ``spec``).
    spec : str or callable, optional
        A format specification (``".3f"``, ``".1%"``, ``",d"``) or a function of the value
        returning its text. By default floats get three decimals and integers thousands separators.
    missing : str, default="—"
    separator : str, default=" to "

    Returns
    -------
    str
        A number that rounds to zero prints without a sign ("0.000", not "-0.000").
    """
    if isinstance(value, tuple | list) and len(value) == 2:
        low, high = (format_cell(v, spec, missing=missing) for v in value)
        return missing if missing in (low, high) else f"{low}{separator}{high}"
    if value is None or (isinstance(value, numbers.Real) and math.isnan(value)):
        return missing
    if value is pd.NA or value is pd.NaT:
        return missing
    if callable(spec):
        return str(spec(value))
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    if isinstance(value, numbers.Integral) and spec is None:
        return f"{int(value):,d}"
    if isinstance(value, numbers.Real):
        if math.isinf(value):
            return "∞" if value > 0 else "-∞"
        if spec is None:
            spec = ".3f"
        if spec.endswith(("d", "n")) and float(value).is_integer():
            value = int(value)
        return _NEGATIVE_ZERO.sub("", format(value, spec))
    return str(value)


class Table:
    """A table ready for a manuscript: written as Word, LaTeX (booktabs), Markdown or HTML.

    Parameters
    ----------
    data : pandas.DataFrame
        The cells; a named or non-default index becomes the first column. Cells may be numbers,
        strings, missing values or ``(low, high)`` pairs (intervals). The frame is copied.
    caption : str
        Printed above the table ("Table: ..." in Markdown, ``\\caption`` in LaTeX).
    footnote : str or sequence of str, optional
        Notes printed under the table, one paragraph each (the assumptions, abbreviations).
    formats : mapping, optional
        Column name -> format specification (``".3f"``, ``".1%"``, ``",d"``) or a function of
        the cell value returning its text. Columns not named get :func:`format_cell`'s defaults.
    labels : mapping, optional
        Column name -> header text (by default the column name).
    group_column : str, optional
        A column whose values head blocks of rows: each new value becomes a full-width row and
        the column itself is not printed.
    align : mapping, optional
        Column name -> ``"left"`` or ``"right"``. By default numeric and interval columns are
        right-aligned, the others left-aligned.
    missing : str, default="—"
        Text of a missing cell.
    label : str, optional
        Cross-reference key (``\\label`` in LaTeX, the ``id`` in HTML).

    See Also
    --------
    write_tables : several tables in one file.

    Examples
    --------
    >>> import pandas as pd
    >>> from pscore_strata.tables import Table
    >>> frame = pd.DataFrame({"method": ["weighting"], "SACE": [0.1234], "CI": [(0.01, 0.24)]})
    >>> table = Table(frame, caption="Effects", footnote="CI: 95% confidence interval.")
    >>> print(table.to_markdown())
    Table: Effects
    <BLANKLINE>
    | method    |  SACE |             CI |
    |:----------|------:|---------------:|
    | weighting | 0.123 | 0.010 to 0.240 |
    <BLANKLINE>
    CI: 95% confidence interval.
    <BLANKLINE>
    """

    def __init__(self, data, caption, *, footnote=(), formats=None, labels=None,
                 group_column=None, align=None, missing="—", label=None):  # fmt: skip
        if not isinstance(data, pd.DataFrame):
            raise TypeError(
                f"Table: `data` must be a pandas DataFrame, got {type(data).__name__}; build one "
                "with pd.DataFrame(...) first."
            )
        if not isinstance(caption, str) or not caption.strip():
            raise ValueError(f"Table: `caption` must be a non-empty string, got {caption!r}.")
        frame = data.copy()
        if not isinstance(frame.index, pd.RangeIndex) or frame.index.name is not None:
            frame = frame.reset_index()
        frame.columns = [str(c) for c in frame.columns]
        self.data = frame
        self.caption = caption.strip()
        self.footnote = (footnote,) if isinstance(footnote, str) else tuple(footnote)
        self.formats = self._by_column("formats", formats)
        self.labels = self._by_column("labels", labels)
        self.align = self._by_column("align", align)
        bad = {k: v for k, v in self.align.items() if v not in ("left", "right")}
        if bad:
            raise ValueError(f"Table: `align` takes 'left' or 'right' per column, got {bad}.")
        if group_column is not None and group_column not in frame.columns:
            raise ValueError(
                f"Table: `group_column` {group_column!r} is not a column; the columns are "
                f"{list(frame.columns)}."
            )
        self.group_column = group_column
        self.missing = missing
        self.label = label

    def _by_column(self, name, mapping):
        mapping = dict(mapping or {})
        unknown = sorted(set(map(str, mapping)) - set(self.data.columns))
        if unknown:
            raise ValueError(
                f"Table: `{name}` names columns that are not in the table: {unknown}; the columns "
                f"are {list(self.data.columns)}."
            )
        return {str(k): v for k, v in mapping.items()}

    # -- what every writer reads --------------------------------------------------------------

    @property
    def columns(self):
        """The printed columns (all but ``group_column``)."""
        return [c for c in self.data.columns if c != self.group_column]

    def header(self):
        """Header texts of the printed columns.

        Returns
        -------
        list of str
        """
        return [str(self.labels.get(c, c)) for c in self.columns]

    def alignments(self):
        """``"left"`` or ``"right"`` per printed column.

        Returns
        -------
        list of str
        """
        return [self.align.get(c) or self._default_align(c) for c in self.columns]

    def _default_align(self, column):
        values = [v for v in self.data[column] if not _is_missing(v)]
        numeric = values and all(
            isinstance(v, numbers.Real | tuple | list) and not isinstance(v, bool) for v in values
        )
        return "right" if numeric else "left"

    def cell(self, row, column):
        """The text of the cell at position ``row`` of ``column``.

        Parameters
        ----------
        row : int
            Row position in ``data``.
        column : str
            A column of ``data``.

        Returns
        -------
        str
        """
        value = self.data[column].iloc[row]
        return format_cell(value, self.formats.get(column), missing=self.missing)

    def rows(self):
        """The body: ``("group", text)`` for a group heading, ``("row", [texts])`` otherwise.

        Returns
        -------
        list of tuple
        """
        body, current = [], object()
        for i in range(len(self.data)):
            if self.group_column is not None:
                group = self.data[self.group_column].iloc[i]
                if i == 0 or group != current:
                    body.append(("group", format_cell(group, missing=self.missing)))
                    current = group
            body.append(("row", [self.cell(i, c) for c in self.columns]))
        return body

    # -- writers ------------------------------------------------------------------------------

    def to_markdown(self):
        """Pipe table with a "Table: caption" line and the footnote under it.

        Returns
        -------
        str
        """
        from ._text import markdown

        return markdown(self)

    def to_latex(self):
        """A ``table`` float around a booktabs ``tabular`` (needs ``\\usepackage{booktabs}``).

        Returns
        -------
        str
        """
        from ._text import latex

        return latex(self)

    def to_html(self):
        """A ``<table>`` with ``<caption>`` and a ``<tfoot>`` footnote; every text is escaped.

        Returns
        -------
        str
        """
        from ._text import html

        return html(self)

    def to_docx(self, document=None):
        """Append the table to a python-docx ``Document`` (a new one by default) and return it.

        Parameters
        ----------
        document : docx.Document, optional
            The document to append to (needs python-docx).

        Returns
        -------
        docx.Document
        """
        from ._docx import add_table

        return add_table(self, document)

    def render(self, format):
        """The table as text (``"tex"``, ``"md"``, ``"html"``) or a Document (``"docx"``).

        Parameters
        ----------
        format : {"tex", "md", "html", "docx"}

        Returns
        -------
        str or docx.Document
        """
        format = check_format(format)
        return {"tex": self.to_latex, "md": self.to_markdown, "html": self.to_html,
                "docx": self.to_docx}[format]()  # fmt: skip

    def write(self, path, format=None):
        """Write the table to ``path``; the format comes from its extension unless given.

        Parameters
        ----------
        path : str or pathlib.Path
        format : {"tex", "md", "html", "docx"}, optional
            ``None``: from the extension of ``path``.

        Returns
        -------
        pathlib.Path
        """
        path = pathlib.Path(path)
        format = check_format(format, path)
        check_folder(path)
        if format == "docx":
            self.to_docx().save(str(path))
        else:
            path.write_text(self.render(format), encoding="utf-8")
        return path

    def _repr_html_(self):
        return self.to_html()

    def __repr__(self):
        return f"Table({self.caption!r}, {len(self.data)} rows x {len(self.columns)} columns)"


def _is_missing(value):
    if isinstance(value, tuple | list):
        return False
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def check_format(format, path=None):
    """The format name from ``format`` or from the extension of ``path``."""
    if format is None and path is not None:
        suffix = pathlib.Path(path).suffix.lower()
        if suffix not in _EXTENSIONS:
            raise ValueError(
                f"cannot tell the table format from the file name {str(path)!r}: use one of the "
                f"extensions {sorted(_EXTENSIONS)} or pass format= (one of {list(FORMATS)})."
            )
        return _EXTENSIONS[suffix]
    if format not in FORMATS:
        raise ValueError(f"`format` must be one of {list(FORMATS)}, got {format!r}.")
    return format


def check_folder(path):
    if not path.parent.is_dir():
        raise FileNotFoundError(
            f"the folder {str(path.parent)!r} for the table file does not exist; create it first."
        )


def as_tables(tables) -> Sequence[Table]:
    if isinstance(tables, Table):
        return [tables]
    if isinstance(tables, Mapping):
        tables = list(tables.values())
    tables = list(tables)
    bad = [type(t).__name__ for t in tables if not isinstance(t, Table)]
    if bad or not tables:
        raise TypeError(
            "`tables` must be a Table or a non-empty sequence (or dict) of Table objects; got "
            f"{bad or 'nothing'}."
        )
    return tables

