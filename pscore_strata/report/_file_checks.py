"""Checks of the command line's files, made before any work: the data file and the outputs.

A data file is refused, with one line naming it and saying what to do, when it is a directory,
empty, has a header but no rows, is not UTF-8 text, names a column twice (pandas would rename
the second copy ``age.1`` and the first would be analysed without a word), or has rows with more
fields than its header names (pandas would shift the columns). Output paths are checked before
the analysis runs, so a wrong ``--out`` costs nothing and leaves nothing half-written.
"""

from __future__ import annotations

import csv
import os
from pathlib import Path

from ..exceptions import FileProblem

__all__ = [
    "FileProblem",
    "check_data_path",
    "check_not_binary",
    "not_utf8",
    "csv_header",
    "extra_fields",
    "check_duplicated_names",
    "check_rows_read",
    "check_output_dir",
    "check_output_file",
    "write_atomic",
]

_SAMPLE_BYTES = 64 * 1024


def check_data_path(path, input_error):
    """Refuse a DATA path that is a directory (a missing file is the readers' message)."""
    if Path(path).is_dir():
        raise input_error(f"DATA '{path}' is a directory; give the data file inside it.")


def check_not_binary(path, input_error):
    """Refuse an empty text file, or one holding NUL bytes (binary, or UTF-16 text)."""
    with open(path, "rb") as handle:
        sample = handle.read(_SAMPLE_BYTES)
    if not sample.strip():
        raise input_error(
            f"DATA file '{Path(path).name}' is empty; it needs a header line naming the columns "
            "and one line per unit."
        )
    if b"\x00" in sample:
        raise input_error(
            f"DATA file '{Path(path).name}' is not CSV text (it holds binary or UTF-16 bytes); "
            "save it as UTF-8 CSV, or give a Parquet, Stata, SAS or SPSS file its own suffix."
        )


def not_utf8(path, error):
    """The message for a CSV file that is not UTF-8 (a ``UnicodeDecodeError`` while reading)."""
    return (
        f"DATA file '{Path(path).name}' is not UTF-8 text (byte 0x{error.object[error.start]:02x} "
        f"at position {error.start}); save it as UTF-8 (e.g. 'CSV UTF-8' in a spreadsheet "
        "program) and retry."
    )


def csv_header(path, separator):
    """The raw fields of a CSV file's header line (its first non-blank line), as written."""
    with open(path, encoding="utf-8-sig", errors="replace", newline="") as handle:
        for row in csv.reader(handle, delimiter=separator):
            if any(field.strip() for field in row):
                return row
    return []


def check_duplicated_names(path, names, input_error):
    """Refuse a file whose header names a column twice (blank names are not names)."""
    positions = {}
    for position, name in enumerate(names, start=1):
        if str(name).strip():
            positions.setdefault(str(name), []).append(position)
    twice = {name: where for name, where in positions.items() if len(where) > 1}
    if twice:
        listed = "; ".join(
            f"'{name}' (columns {', '.join(map(str, where))})" for name, where in twice.items()
        )
        raise input_error(
            f"DATA file '{Path(path).name}' names a column more than once: {listed}. Rename the "
            "copies so each column has its own name (otherwise one copy would be analysed "
            "without a word)."
        )


def check_rows_read(path, frame, kind, input_error):
    """Refuse a table with no rows, and a CSV read as one column (separator not recognised)."""
    name = Path(path).name
    if len(frame) == 0:
        raise input_error(
            f"DATA file '{name}' has column names ({', '.join(map(str, frame.columns[:8]))}"
            f"{' ...' if len(frame.columns) > 8 else ''}) but no data rows; give the file with "
            "one row per unit."
        )
    if kind == "csv" and frame.shape[1] == 1:
        raise input_error(
            f"DATA file '{name}' was read as a single column '{frame.columns[0]}': its "
            "separator was not recognised (a comma, semicolon, tab or | is). Save it with one "
            "of those separators."
        )


def extra_fields(path, frame, input_error):
    """How many trailing separators end every row; refuse rows that carry more data fields.

    pandas reads rows with more fields than the header by turning the first fields into the
    index, which shifts every column one place. Returns the number of empty trailing fields
    (the file is then re-read without them) or 0 when the rows match the header.
    """
    extra = frame.index.nlevels if not _default_index(frame) else 0
    if extra and frame.iloc[:, -extra:].isna().all().all():
        return extra
    if extra:
        raise input_error(
            f"DATA file '{Path(path).name}' has rows with {extra} more field(s) than its header "
            "names, so the columns would shift; give every column a name in the header (or "
            "remove the extra separators)."
        )
    return 0


def _default_index(frame):
    import pandas as pd

    return isinstance(frame.index, pd.RangeIndex) and frame.index.start == 0


def _existing_ancestor(path):
    parent = path
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    return parent


def check_output_dir(out, option, input_error):
    """Refuse ``--out`` for a report directory that is a file or lies under a file."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise input_error(
            f"{option} '{out}' is an existing file; give a directory for the report (it is "
            "created if needed), or move the file away."
        )
    _check_parent(out, option, input_error)


def check_output_file(out, option, input_error):
    """Refuse ``--out`` for a data file that is a directory or lies under a file."""
    out = Path(out)
    if out.is_dir():
        raise input_error(
            f"{option} '{out}' is a directory; give a file name, e.g. '{out / 'data.csv'}'."
        )
    _check_parent(out, option, input_error)


def _check_parent(out, option, input_error):
    parent = _existing_ancestor(out.parent)
    if not parent.is_dir():
        raise input_error(
            f"{option} '{out}' lies under '{parent}', which is a file, not a directory; choose "
            "another path."
        )
    if not os.access(parent, os.W_OK):
        raise input_error(f"{option} '{out}': '{parent}' is not writable; choose another path.")


def write_atomic(out, write):
    """Write a file through ``write(temporary_path)`` and rename it into place.

    A failed or interrupted write leaves the previous file (or none), never half a file.
    Returns True when an existing file was replaced.
    """
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    replaced = out.exists()
    temporary = out.with_name(f".{out.name}.tmp")
    try:
        write(temporary)
        os.replace(temporary, out)
    finally:
        temporary.unlink(missing_ok=True)
    return replaced
