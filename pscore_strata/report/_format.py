"""One text format per kind of quantity, shared by the HTML report and the command line."""

from __future__ import annotations

import re

__all__ = ["number", "percent", "interval", "count"]


def number(value, digits=3):
    """Readable fixed-point text: more digits for small values, thousands separators for big.

    A value that rounds to zero prints without a sign ("0.000", not "-0.000").
    """
    if value is None:
        return "n/a"
    size = abs(value)
    if size >= 1000:
        text = f"{value:,.0f}"
    elif size >= 100:
        text = f"{value:,.1f}"
    else:
        text = f"{value:.{digits}f}"
    return text[1:] if re.fullmatch(r"-[0.,]+", text) else text


def percent(value):
    if value is None:
        return "n/a"
    text = f"{100 * value:.1f}%"
    return text[1:] if text == "-0.0%" else text


def interval(low, high):
    if low is None or high is None:
        return "not available"
    return f"{number(low)} to {number(high)}"


def count(value):
    """Counts and effective sample sizes: whole numbers with thousands separators."""
    return "n/a" if value is None else f"{value:,.0f}"
