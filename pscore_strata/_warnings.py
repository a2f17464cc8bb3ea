"""Warnings attributed to the user's code: the first frame outside the package."""

from __future__ import annotations

import os
import sys
import warnings

__all__ = ["warn_at_caller"]


_PACKAGE = os.path.dirname(os.path.abspath(__file__)) + os.sep


def warn_at_caller(message, category=UserWarning):
    """Issue a warning attributed to the first line outside pscore_strata (the user's call).

    However deep inside the library the warning arises (a fit, a bootstrap replicate, a
    report section), its file and line number are then those of the code that called the
    library, as for a warning raised by the called function itself.

    Parameters
    ----------
    message : str
        The warning's text.
    category : type, default=UserWarning
        The warning class.

    Returns
    -------
    None
    """
    frame, level = sys._getframe(1), 2
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(_PACKAGE):
        frame, level = frame.f_back, level + 1
    warnings.warn(message, category, stacklevel=level)
