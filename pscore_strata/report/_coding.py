"""Columns as they arrive in real files: text-coded arms and survival, dates, many levels.

The analysis needs 0/1 treatment and survival indicators and numeric covariates. A text-coded
indicator ("program"/"usual", "yes"/"no") is accepted when the caller names the level that
means 1 (``--treated-value`` / ``treated_value=``, ``--survived-value`` /
``survived_value=``); the other level is recorded so the report can name it. Dates are refused
with advice that works; a categorical covariate with many levels is analysed with a warning.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from .._warnings import warn_at_caller
from ..exceptions import DataWarning

__all__ = ["MANY_LEVELS", "DataWarning", "indicator", "check_dates", "many_levels_messages",
           "matches_level", "level_hint", "check_identifiers", "separated_numbers",
           "labelled_outcome"]  # fmt: skip

#: More levels than this make one-hot coding costly and unstable (common practice).
MANY_LEVELS = 50
_DATE_LIKE = re.compile(
    r"^\s*(\d{4}[-/.]\d{1,2}[-/.]\d{1,2}|\d{1,2}[-/.]\d{1,2}[-/.]\d{2,4})([ T]\d{1,2}:\d{2}.*)?\s*$"
)


def _shown(values, limit=6):
    found = sorted(pd.unique(values.dropna()).tolist(), key=str)
    return ", ".join(map(str, found[:limit])) + (" ..." if len(found) > limit else ""), found


def matches_level(values, level):
    """Rows equal to ``level``; text ``level`` (from the command line) also matches numbers."""
    values = pd.Series(values)
    if values.dtype == bool or pd.api.types.is_numeric_dtype(values):
        try:
            return values == float(level)
        except (TypeError, ValueError):
            return values.astype(str) == str(level)
    return values.astype("string").str.strip() == str(level).strip()


_VALUE_OPTIONS = {"--treatment": ("--treated-value", "treated_value"),
                  "--survival": ("--survived-value", "survived_value")}


def level_hint(message, values, option):
    """``message`` plus, for a two-level column, how to name the level that means 1."""
    _, found = _shown(values)
    if len(found) != 2:
        return message
    value_option, python = _VALUE_OPTIONS[option]
    return (f"{message.rstrip('.')}; or, to keep its two levels, name the one that means 1 "
            f"with {value_option} {found[0]} (Python: {python}=).")  # fmt: skip


def indicator(frame, column, option, value, input_error, allow_blank=False):
    """A 0/1 indicator from a column with two levels, ``value`` meaning 1.

    Returns the indicator (float with NaN for blanks when ``allow_blank``, the status-unknown
    rows of ``--missing at_random``) and the level names ``(value, other level)``.
    """
    value_option, _ = _VALUE_OPTIONS[option]
    values = frame[column]
    shown, found = _shown(values)
    one = matches_level(values, value).fillna(False)
    if not one.any():
        raise input_error(
            f"{value_option} '{value}' does not occur in {option} column '{column}'; its values "
            f"are {shown}."
        )
    if len(found) != 2:
        raise input_error(
            f"{option} column '{column}' must hold exactly two levels when {value_option} is "
            f"given; found {len(found)}: {shown}."
        )
    other = next(str(level) for level in found if not matches_level(pd.Series([level]), value)[0])
    blank = values.isna().to_numpy()
    if blank.any() and allow_blank:
        return np.where(blank, np.nan, one.to_numpy(dtype=float)), (str(value), other)
    return one.to_numpy(dtype=np.int8), (str(value), other)


def check_dates(covariates, input_error):
    """Refuse date and datetime covariates (as dtypes or as date-like text)."""
    dated = []
    for name in covariates.columns:
        values = covariates[name]
        if pd.api.types.is_datetime64_any_dtype(values) or isinstance(
            values.dtype, pd.PeriodDtype
        ):
            dated.append(name)
            continue
        if values.dtype == object or pd.api.types.is_string_dtype(values):
            sample = values.dropna().astype(str).head(200)
            if len(sample) and sample.map(lambda v: bool(_DATE_LIKE.match(v))).all():
                dated.append(name)
    if dated:
        listed = ", ".join(f"'{c}'" for c in dated)
        first = dated[0]
        raise input_error(
            f"Covariate(s) {listed} hold dates, which neither a number nor a category "
            "describes well (one-hot coding makes one column per distinct date). Derive a "
            "number first, for example days since a reference date (pandas: "
            f"(pd.to_datetime(df['{first}']) - pd.Timestamp('2020-01-01')).dt.days, or the "
            "year), and list that column instead, or leave the date out."
        )


# "11,234.5" / "1,234" (comma thousands) and "11.234,5" / "1 234,5" (dot or space thousands,
# decimal comma).
_SEPARATED = re.compile(r"^[-+]?\d{1,3}(?:([,. ])\d{3})+(?:(?!\1)[.,]\d+)?$")


def check_identifiers(covariates, categorical, input_error):
    """Refuse a categorical covariate with a level for (nearly) every row: an identifier."""
    n_rows = len(covariates)
    for name in categorical:
        n_levels = int(covariates[name].nunique(dropna=True))
        if n_rows >= 4 and n_levels > n_rows / 2:
            raise input_error(
                f"--categorical column '{name}' has {n_levels} distinct values in {n_rows} rows: "
                "it looks like an identifier, not a covariate (one-hot coding would give nearly "
                "every row its own column, and the models could not be fitted). Leave it out; if "
                "rows share it as a site or family, pass it as --cluster."
            )


def separated_numbers(covariates, names):
    """Text columns that are numbers written with thousands separators: name -> example."""
    found = {}
    for name in names:
        values = covariates[name]
        if pd.api.types.is_numeric_dtype(values):
            continue
        sample = values.dropna().astype(str).str.strip().head(200)
        if len(sample) and sample.map(lambda v: bool(_SEPARATED.match(v))).all():
            found[name] = sample.iloc[0]
    return found


def many_levels_messages(covariates, categorical):
    """Warn (and return the messages) for categorical covariates with many levels."""
    messages = []
    for name in categorical:
        n_levels = int(covariates[name].nunique(dropna=True))
        if n_levels > MANY_LEVELS:
            messages.append(
                f"Categorical covariate '{name}' has {n_levels} levels (more than "
                f"{MANY_LEVELS}): one-hot coding adds {n_levels - 1} columns, which slows every "
                "fit and makes the models unstable. Consider grouping rare levels, or a "
                "numeric summary of it."
            )
    for message in messages:
        warn_at_caller(message, DataWarning)
    return messages


def labelled_outcome(frame, column, name, input_error):
    """A Stata/SPSS outcome read as its value labels: back to its codes, with the labels.

    Returns the column (codes where labels were read) and ``{code: label}`` or ``None``.
    """
    labels = (frame.attrs.get("value_labels") or {}).get(name)
    if not labels or not isinstance(column.dtype, pd.CategoricalDtype):
        return column, None
    codes = {label: code for code, label in labels.items()}
    unknown = [v for v in column.dropna().unique() if str(v) not in codes]
    if unknown:
        raise input_error(
            f"--outcome column '{name}' holds labels without a code in the file's value labels "
            f"({unknown[0]!r}); recode it as numbers."
        )
    values = column.astype(object).map(lambda v: codes[str(v)] if pd.notna(v) else np.nan)
    return values.astype(float), {float(code): str(label) for code, label in labels.items()}
