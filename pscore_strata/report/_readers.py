"""Reading a data file as it arrives: CSV (comma or semicolon), Parquet, Stata, SAS and SPSS.

Every reader is pandas' own (``read_csv``, ``read_parquet``, ``read_stata``, ``read_sas``,
``read_spss``; the last needs pyreadstat). A problem raises ``InputError`` with one line that
names the file and says what to do.
"""

from __future__ import annotations

import csv
from pathlib import Path

import pandas as pd

from . import _file_checks

__all__ = ["READERS", "read_table", "csv_dialect"]

#: File suffix -> (kind shown in messages, reader name).
READERS = {
    ".csv": "csv",
    ".txt": "csv",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".dta": "stata",
    ".sas7bdat": "sas",
    ".sav": "spss",
    ".zsav": "spss",
}
_SUFFIXES = ".csv, .parquet, .dta (Stata), .sas7bdat (SAS) or .sav (SPSS)"
_SAMPLE_BYTES = 64 * 1024


def csv_dialect(path):
    """Separator and decimal mark of a CSV file, from its first lines.

    Semicolon-separated files (where the comma is the decimal mark) are common where that
    convention holds; ``csv.Sniffer`` picks the separator among ``,;\\t|`` and the decimal mark
    is a comma when the separator is not and numbers such as ``3,5`` appear.
    """
    with open(path, encoding="utf-8", errors="replace", newline="") as handle:
        sample = handle.read(_SAMPLE_BYTES)
    lines = sample.splitlines()[:50]
    if len(lines) > 1 and len(sample) == _SAMPLE_BYTES:
        lines = lines[:-1]  # the last line may be cut
    text = "\n".join(lines)
    try:
        separator = csv.Sniffer().sniff(text, delimiters=",;\t|").delimiter
    except csv.Error:
        separator = ","
    decimal = "."
    if separator != ",":
        import re

        body = "\n".join(lines[1:])
        if re.search(r"(^|[;\t|])-?\d+,\d+([;\t|]|$)", body, flags=re.MULTILINE):
            decimal = ","
    return separator, decimal


def _read_csv(path, input_error=_file_checks.FileProblem):
    _file_checks.check_not_binary(path, input_error)
    separator, decimal = csv_dialect(path)
    _file_checks.check_duplicated_names(
        path, _file_checks.csv_header(path, separator), input_error
    )
    try:
        frame = pd.read_csv(path, sep=separator, decimal=decimal)
        if _file_checks.extra_fields(path, frame, input_error):
            # Every row ends with empty fields (trailing separators): read them as the header says.
            frame = pd.read_csv(path, sep=separator, decimal=decimal, index_col=False)
    except UnicodeDecodeError as error:
        raise input_error(_file_checks.not_utf8(path, error)) from None
    return frame


def _read(kind, path):
    if kind == "csv":
        return _read_csv(path)
    if kind == "parquet":
        import pyarrow.parquet as pq

        try:
            names = pq.read_schema(path).names
        except Exception:  # not readable as Parquet: the reader below says so
            names = []
        _file_checks.check_duplicated_names(path, names, _file_checks.FileProblem)
        return pd.read_parquet(path)
    if kind == "stata":
        # Value labels become categories, as the analyst sees them in Stata.
        return _with_value_labels(pd.read_stata(path, convert_categoricals=True), path, kind)
    if kind == "sas":
        # The encoding recorded in the file decodes its text (older files: bytes, decoded below).
        frame = pd.read_sas(path, format="sas7bdat", encoding="infer")
        return _decode_bytes(frame)
    return _with_value_labels(pd.read_spss(path, convert_categoricals=True), path, kind)


def _with_value_labels(frame, path, kind):
    """Record each column's value labels (code -> label) in ``frame.attrs["value_labels"]``.

    The readers turn labelled columns into categories of their labels; an ordinal outcome
    needs the codes back (its levels) and the labels for the report. Read with pyreadstat's
    metadata-only pass; without pyreadstat no labels are recorded.
    """
    try:
        import pyreadstat
    except ImportError:
        return frame
    reader = pyreadstat.read_dta if kind == "stata" else pyreadstat.read_sav
    try:
        _, meta = reader(str(path), metadataonly=True)
    except Exception:  # unreadable metadata: the columns are still usable as read
        return frame
    frame.attrs["value_labels"] = {
        str(column): {float(code): str(label) for code, label in labels.items()}
        for column, labels in meta.variable_value_labels.items()
        if column in frame.columns
    }
    return frame


def _decode_bytes(frame):
    """SAS text columns may arrive as bytes; decode them so they compare as text."""
    frame = frame.copy()
    for column in frame.columns:
        values = frame[column]
        if values.dtype == object and values.map(lambda v: isinstance(v, bytes)).any():
            frame[column] = values.map(
                lambda v: v.decode("utf-8", errors="replace") if isinstance(v, bytes) else v
            )
    return frame


def read_table(path, input_error=ValueError):
    """Read a data file into a DataFrame (the readers above, chosen by suffix)."""
    path = Path(path)
    _file_checks.check_data_path(path, input_error)
    kind = READERS.get(path.suffix.lower())
    if kind is None:
        raise input_error(
            f"DATA file '{path.name}' has type '{path.suffix or '(none)'}'; give a {_SUFFIXES} "
            "file."
        )
    if not path.is_file():
        raise input_error(f"DATA file '{path}' does not exist; check the path.")
    try:
        frame = _read(kind, path)
    except _file_checks.FileProblem as error:
        raise input_error(str(error)) from None
    except ImportError as error:
        need = {"parquet": "pyarrow", "spss": "pyreadstat"}.get(kind, "pandas' optional readers")
        raise input_error(
            f"Reading {kind} files needs {need} ({error}); pip install {need} (or, from a "
            "checkout, pip install '.[report]')."
        ) from None
    except Exception as error:  # the readers raise many types; all mean "not a readable table"
        first_line = str(error).splitlines()[0] if str(error) else type(error).__name__
        raise input_error(
            f"DATA file '{path.name}' could not be read as {kind}: {first_line}"
        ) from None
    _file_checks.check_duplicated_names(path, list(frame.columns), input_error)
    _file_checks.check_rows_read(path, frame, kind, input_error)
    return frame
