"""Checks of one-dimensional inputs (outcome, treatment, survival, weights, groups): one value
per row, real numbers, no dates, 0/1 indicators. Their error messages name the argument and say
what to do (the rest of the input checks are in :mod:`._validation`)."""

from __future__ import annotations

import numbers

import numpy as np
import pandas as pd

__all__ = ["one_dimensional", "holds_dates", "is_missing", "numbers_or_missing", "is_real",
           "as_vector", "binary_indicator", "MISSING_AT_RANDOM_ASSUMPTION"]  # fmt: skip

MISSING_AT_RANDOM_ASSUMPTION = (
    "missing at random given X within each arm: whether the survival status is known does not "
    "depend on survival or the outcome, and whether a survivor's outcome is observed does not "
    "depend on the outcome, once X and the arm are fixed"
)


def one_dimensional(values, name):
    array = as_vector(values, name)
    if array.dtype.kind == "c":
        raise TypeError(
            f"`{name}` has complex values (dtype {array.dtype}); pass real numbers. Taking the "
            "real part silently would drop the imaginary part."
        )
    if array.dtype.kind in "mM" or holds_dates(array):
        raise TypeError(
            f"`{name}` holds dates or durations (dtype {array.dtype}), which would be read as "
            "nanoseconds. Convert them to numbers in the unit you mean, for example days: "
            "(end - start) / pd.Timedelta(days=1)."
        )
    return array


def holds_dates(array):
    if array.dtype.kind != "O" or array.size == 0:
        return False
    first = next((v for v in array if not is_missing(v)), None)
    return isinstance(first, pd.Timestamp | pd.Timedelta | np.datetime64 | np.timedelta64)


def is_missing(value):
    return value is None or (not isinstance(value, str) and bool(pd.isna(value)))


def numbers_or_missing(array, name):
    """An object array of real numbers (and missing markers) as floats; text is refused."""
    if array.dtype.kind not in "OUS":
        return array
    bad = [i for i, v in enumerate(array) if not (is_missing(v) or is_real(v))]
    if bad:
        raise TypeError(
            f"`{name}` must be numeric; found non-numeric value(s) such as "
            f"{[array[i] for i in bad[:5]]} at row position(s) {bad[:5]}. Convert it to numbers "
            "first (for example with pandas.to_numeric)."
        )
    return np.array([np.nan if is_missing(v) else float(v) for v in array], dtype=float)


def is_real(value):
    return isinstance(value, numbers.Real) and not isinstance(value, str)


def as_vector(values, name):
    if values is None:
        raise ValueError(f"`{name}` is required: pass one value per row of X.")
    if isinstance(values, pd.DataFrame):
        if values.shape[1] != 1:
            raise ValueError(
                f"`{name}` must be one-dimensional; got a DataFrame with {values.shape[1]} "
                "columns. Pass a single column (a Series)."
            )
        values = values.iloc[:, 0]
    if isinstance(values, pd.Series):
        values = values.to_numpy()
    array = np.asarray(values)
    if array.ndim == 2 and 1 in array.shape:
        array = array.ravel()
    if array.ndim != 1:
        raise ValueError(f"`{name}` must be one-dimensional; got an array of shape {array.shape}.")
    return array


def binary_indicator(values, name, allow_missing=False):
    array = one_dimensional(values, name)
    if array.dtype.kind == "O" and all(is_missing(v) or is_real(v) for v in array):
        # Python ints or bools, pandas nullable integers or booleans (pd.NA): NaN floats.
        array = np.array([np.nan if is_missing(v) else float(v) for v in array], dtype=float)
    if array.dtype.kind in "OUS" or isinstance(array.dtype, pd.CategoricalDtype):
        found = pd.unique(array)[:10]
        raise TypeError(
            f"`{name}` must be numeric 0/1 (or boolean); found values {list(found)}. "
            "Recode it as 1/0 before fitting."
        )
    if array.dtype.kind == "f" and np.isnan(array).any():
        count = int(np.isnan(array).sum())
        if allow_missing:
            found = np.unique(array[~np.isnan(array)])
            if not np.all(np.isin(found, [0, 1])):
                raise ValueError(
                    f"`{name}` must contain only 0, 1 and NaN (unknown); found values "
                    f"{found[:10].tolist()}. Recode it as 1/0."
                )
            return array
        if name == "survival":
            raise ValueError(
                f"`survival` has {count} missing value(s) (NaN): survival status unknown "
                "(lost to follow-up). Pass missing=\"at_random\" to the estimator to model "
                f"follow-up, which assumes {MISSING_AT_RANDOM_ASSUMPTION}; otherwise resolve "
                "those rows first."
            )
        raise ValueError(
            f"`{name}` has {count} missing value(s) (NaN). Every row needs a known 0/1 {name}; "
            "drop or resolve those rows first."
        )
    if array.dtype.kind == "b" or np.all((array == 0) | (array == 1)):
        return array.astype(np.int8)
    found = np.unique(array)
    if not np.all(np.isin(found, [0, 1])):
        raise ValueError(
            f"`{name}` must contain only 0 and 1; found values {found[:10].tolist()}"
            f"{' ...' if found.size > 10 else ''}. Recode it as 1/0."
        )
    return array.astype(np.int8)
