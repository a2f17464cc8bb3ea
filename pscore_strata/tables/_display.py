"""How results show in a terminal and a notebook: a summary frame that prints whole, and the HTML
card of a fitted object (estimate, interval, how the standard error was obtained, warnings)."""

from __future__ import annotations

import html
import textwrap

import numpy as np
import pandas as pd

from ._table import Table

__all__ = ["SummaryTable", "NotebookDisplay", "result_card", "number_text"]

_WIDTH = 100
_CARD_STYLE = (
    "font-family:inherit;max-width:760px;border:1px solid #c9d3dc;border-radius:6px;"
    "padding:10px 14px;margin:4px 0;background:#fbfcfd"
)


class SummaryTable(pd.DataFrame):
    """A summary that prints whole and is still a pandas DataFrame.

    ``print(table)`` shows every row and column (pandas' display limits do not apply), the
    interval level and the notes; in a notebook it renders as an HTML table with the notes
    under it. Indexing, arithmetic and every DataFrame method work as usual and return plain
    DataFrames; :meth:`to_frame` gives a plain copy (``attrs`` included) for scripts, and
    :meth:`to_table` a manuscript :class:`Table`.

    Parameters
    ----------
    data : pandas.DataFrame
        The table; its ``attrs`` (``"notes"``, ``"scale"``) are kept.
    title : str, optional
        First line of the printed summary and caption of :meth:`to_table`.
    level : float, optional
        Confidence level of the ``ci_low`` / ``ci_high`` columns.

    Examples
    --------
    >>> import pandas as pd
    >>> from pscore_strata.tables import SummaryTable
    >>> frame = pd.DataFrame({"estimate": [1.5], "ci_low": [0.5], "ci_high": [2.5]},
    ...                      index=pd.Index(["SACE"], name="quantity"))
    >>> frame.attrs["notes"] = ["An illustration."]
    >>> print(SummaryTable(frame, title="Example", level=0.9))
    Example (90% confidence intervals)
              estimate  ci_low  ci_high
    quantity
    SACE        1.5000  0.5000   2.5000
    <BLANKLINE>
    Notes:
    - An illustration.
    """

    # pandas keeps these through copy(); derived frames (slices, arithmetic) are plain.
    _metadata = ["title", "level"]

    def __init__(self, data=None, *args, title=None, level=None, **kwargs):
        attrs = dict(getattr(data, "attrs", {}) or {})
        super().__init__(data, *args, **kwargs)
        self.attrs.update(attrs)
        self.title = title
        self.level = level

    @property
    def _constructor(self):
        return pd.DataFrame

    def to_frame(self):
        """A plain DataFrame copy, ``attrs`` (the notes) included.

        Returns
        -------
        pandas.DataFrame
        """
        frame = pd.DataFrame(self, copy=True)
        frame.attrs = dict(self.attrs)
        return frame

    @property
    def notes(self):
        """The notes (``attrs["notes"]``) as a list of str."""
        return list(self.attrs.get("notes", []))

    def _heading(self):
        title = self.title or "Summary"
        if self.level is not None and "ci_low" in self.columns:
            title += f" ({self.level:.0%} confidence intervals)"
        return title

    def __repr__(self):
        with pd.option_context("display.max_rows", None, "display.max_columns", None,
                               "display.width", None, "display.max_colwidth", None):  # fmt: skip
            body = pd.DataFrame(self).to_string(float_format=_four_decimals)
        lines = [self._heading(), *(line.rstrip() for line in body.splitlines())]
        if self.notes:
            lines += ["", "Notes:"]
            for note in self.notes:
                lines += textwrap.wrap(note, _WIDTH, initial_indent="- ", subsequent_indent="  ")
        return "\n".join(lines)

    __str__ = __repr__

    def to_table(self, format=None, path=None, *, caption=None):
        """The summary as a manuscript table (intervals as one column, notes as the footnote).

        Parameters
        ----------
        format : {"docx", "tex", "md", "html"}, optional
            Render the table: text for ``"tex"``, ``"md"``, ``"html"``, a python-docx
            ``Document`` for ``"docx"``. With ``path`` it is the file's format (by default
            its extension's).
        path : str or path-like, optional
            Write the table there and return the path.
        caption : str, optional
            By default the summary's title.

        Returns
        -------
        Table, str, docx.Document or pathlib.Path
            The :class:`Table` when neither ``format`` nor ``path`` is given.
        """
        frame = pd.DataFrame(self).copy()
        labels = {"estimate": "Estimate", "std_error": "SE",
                  "std_error_method": "Standard error"}  # fmt: skip
        if {"ci_low", "ci_high"} <= set(frame.columns):
            position = frame.columns.get_loc("ci_low")
            name = f"{self.level:.0%} CI" if self.level is not None else "CI"
            pairs = zip(frame["ci_low"], frame["ci_high"], strict=True)
            intervals = [None if pd.isna(lo) or pd.isna(hi) else (lo, hi) for lo, hi in pairs]
            frame = frame.drop(columns=["ci_low", "ci_high"])
            frame.insert(position, name, intervals)
        if frame.index.name:
            labels[frame.index.name] = frame.index.name.replace("_", " ").capitalize()
        floats = {c: ".3f" for c in frame.columns if frame[c].dtype.kind == "f" or
                  any(isinstance(v, tuple) for v in frame[c])}  # fmt: skip
        known = {k: v for k, v in labels.items() if k in frame.columns or k == frame.index.name}
        table = Table(frame, caption or self.title or "Summary", footnote=self.notes,
                      formats=floats, labels=known)
        if path is not None:
            return table.write(path, format)
        return table if format is None else table.render(format)

    def _repr_html_(self):
        return self.to_table().to_html()


class NotebookDisplay:
    """Mixin for results shown in notebooks: a fitted object displays as its result card.

    A subclass sets ``_fitted_attribute`` (present once fitted) and defines ``_card()``
    returning HTML (see :func:`result_card`). Before fitting, a scikit-learn estimator keeps
    scikit-learn's own display (its parameter diagram).
    """

    _fitted_attribute = "effect_"

    def _card(self):  # pragma: no cover - the three result mixins define it
        # The hook a subclass fills (estimators, bounds, bootstrap results all do).
        raise NotImplementedError(
            f"{type(self).__name__} must define _card() returning its result card's HTML"
        )

    def _is_fitted_for_display(self):
        return hasattr(self, self._fitted_attribute)

    @property
    def _repr_html_(self):
        # A property, as scikit-learn's: notebooks call what it returns.
        if self._is_fitted_for_display():
            return self._card
        return super()._repr_html_

    def _repr_mimebundle_(self, **kwargs):
        if self._is_fitted_for_display():
            return {"text/plain": repr(self), "text/html": self._card()}
        return super()._repr_mimebundle_(**kwargs)


def _four_decimals(value):
    return f"{value:.4f}"


def result_card(title, fields, *, warnings=(), notes=(), details=None):
    """The HTML card of a fitted object.

    Parameters
    ----------
    title : str
        First line, in bold.
    fields : sequence of (str, str)
        Label and already formatted value, one line each (estimate, interval, SE method).
    warnings : sequence of str, optional
        Shown in a highlighted list.
    notes : sequence of str, optional
        Shown in a muted font under the fields (the cautions).
    details : str, optional
        HTML folded under "Full summary" (for example a summary table's HTML).

    Returns
    -------
    str
        HTML with every given text escaped (``details`` is inserted as it is).
    """
    esc = html.escape
    rows = "".join(
        f'<tr><th style="text-align:left;padding:2px 12px 2px 0;font-weight:600">{esc(label)}'
        f'</th><td style="text-align:left;padding:2px 0">{esc(value)}</td></tr>'
        for label, value in fields
    )
    parts = [f'<div class="ps-result" style="{_CARD_STYLE}">',
             f'<div style="font-weight:bold;margin-bottom:4px">{esc(title)}</div>',
             f'<table style="border-collapse:collapse">{rows}</table>']  # fmt: skip
    if warnings:
        items = "".join(f"<li>{esc(w)}</li>" for w in warnings)
        parts.append('<div style="background:#fff4e0;border-left:4px solid #d99a1e;'
                     'padding:4px 10px;margin-top:6px"><strong>Warnings</strong>'
                     f'<ul style="margin:2px 0 2px 16px;padding:0">{items}</ul></div>')  # fmt: skip
    for note in notes:
        parts.append(f'<p style="color:#5b6673;font-size:90%;margin:6px 0 0">{esc(note)}</p>')
    if details:
        parts.append(f"<details><summary>Full summary</summary>{details}</details>")
    parts.append("</div>")
    return "\n".join(parts)


def number_text(value, digits=3):
    """A number for a card: ``digits`` decimals (fewer above 100), "n/a" when not finite.

    Parameters
    ----------
    value : float or None
    digits : int, default=3

    Returns
    -------
    str
    """
    if value is None or not np.isfinite(value):
        return "n/a"
    size = abs(value)
    places = digits if size < 100 else (1 if size < 1000 else 0)
    text = f"{value:,.{places}f}"
    return text[1:] if text.lstrip("-0.,") == "" and text.startswith("-") else text
