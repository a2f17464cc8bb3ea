"""Columns as they arrive in real files: text-coded arms and survival, dates, many levels.

The analysis needs 0/1 treatment and survival indicators and numeric covariates. A text-coded
indicator ("program"/"usual", "yes"/"no") is accepted when the caller names the level that
means 1 (``--treated-value`` / ``treated_value=``, ``--survived-value`` /
``survived_value=``); the other level is recorded so the report can name it. Dates are refused
with advice that works; a categorical covariate with many levels is analysed with a warning.
"""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd

__all__ = ["MANY_LEVELS", "DataWarning", "indicator", "check_dates", "many_levels_messages",
           "matches_level"]  # fmt: skip

#: More levels than this make one-hot coding costly and unstable (common practice).
MANY_LEVELS = 50
_DATE_LIKE = re.compile(
    r"^\s*(\d{4}[-/.]\d{1,2}[-/.]\d{1,2}|\d{1,2}[-/.]\d{1,2}[-/.]\d{2,4})([ T]\d{1,2}:\d{2}.*)?\s*$"
)


class DataWarning(UserWarning):
    """Something in the data the analysis proceeds with but the analyst should see."""


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


def indicator(frame, column, option, value, input_error):
    """A 0/1 indicator and its two level names ``(level of 1, level of 0)``.

    Without ``value`` the column must hold 0/1 (or booleans); with it, exactly two distinct
    values, one of which is ``value``.
    """
    python = {"--treatment": "treated_value", "--survival": "survived_value"}[option]
    value_option = {"--treatment": "--treated-value", "--survival": "--survived-value"}[option]
    values = frame[column]
    if value is None:
        if values.dtype == bool:
            return values.to_numpy(dtype=np.int8), ("True", "False")
        numeric = pd.to_numeric(values, errors="coerce")
        if numeric.isna().any() or not numeric.isin([0, 1]).all():
            shown, found = _shown(values)
            hint = (f"; name the level that means 1 with {value_option} {found[0]} "
                    f"(Python: {python}=)") if len(found) == 2 else ". Recode it first"  # fmt: skip
            raise input_error(
                f"{option} column '{column}' must hold 0/1 values (1 = treated / survived) or "
                f"two levels; found {shown}{hint}."
            )
        return numeric.to_numpy(dtype=np.int8), ("1", "0")
    shown, found = _shown(values)
    one = matches_level(values, value)
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
        warnings.warn(message, DataWarning, stacklevel=3)
    return messages
