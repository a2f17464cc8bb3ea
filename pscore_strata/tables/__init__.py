"""Tables for manuscripts: one :class:`Table` (cells, column formats, caption, footnote) written
as Word (python-docx), LaTeX (a booktabs ``tabular``), Markdown (pipe table) or HTML.

Every format prints the same formatted cells, so the digits agree between a Word file, a LaTeX
paper and the report. python-docx is imported only when a Word file is written.
"""

from ._display import NotebookDisplay, SummaryTable, number_text, result_card
from ._files import write_tables
from ._table import FORMATS, Table, format_cell
from ._text import latex_escape

__all__ = [
    "Table",
    "write_tables",
    "format_cell",
    "latex_escape",
    "FORMATS",
    "SummaryTable",
    "NotebookDisplay",
    "result_card",
    "number_text",
]
