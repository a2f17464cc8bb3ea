"""Bootstrap resamples that could not be estimated: counted, described, and a refusal.

A resample can lose every death (or every survivor) of an arm, so its survival model cannot be
fitted; the replicates that remain then describe a selected subset of resamples. Up to
``MAX_FAILURE_SHARE`` of them are left out with a warning that counts them; beyond it no
bootstrap interval is given.
"""

from __future__ import annotations

import re

import pandas as pd

from .._warnings import warn_at_caller
from ..exceptions import BootstrapFailureError

__all__ = ["MAX_FAILURE_SHARE", "BootstrapFailureError", "describe_failures", "failure_reasons"]

#: Share of failed resamples beyond which the bootstrap interval is refused (common practice:
#: a few failures among hundreds are noise; many mean the resampling changes the design).
MAX_FAILURE_SHARE = 0.01


def failure_reasons(failures):
    """Failure messages counted, most frequent first (one clause each, no trailing period)."""
    # The first sentence of each message says what the resample lacked ("The treated arm has no
    # deaths"); the advice after it is written for a full-sample fit.
    first = [re.split(r"(?<=[a-z)])(\. |; )", str(f).split(": ", 1)[-1].strip())[0].rstrip(".")
             for f in failures]  # fmt: skip
    first = [text[:1].lower() + text[1:] for text in first]
    counts = pd.Series(first, dtype=object).value_counts()
    return {str(reason): int(count) for reason, count in counts.items()}


def describe_failures(failures, n_resamples):
    """``"k of N resamples (x%) could not be estimated: j: reason; ..."``."""
    reasons = failure_reasons(failures)
    listed = "; ".join(f"{count}: {reason}" for reason, count in list(reasons.items())[:3])
    return (
        f"{len(failures)} of {n_resamples} bootstrap resamples ({len(failures) / n_resamples:.1%})"
        f" could not be estimated ({listed})"
    )


def _check_failures(failures, n_resamples):
    if not failures:
        return
    message = describe_failures(failures, n_resamples)
    if len(failures) / n_resamples > MAX_FAILURE_SHARE:
        raise BootstrapFailureError(
            f"{message}. With more than {MAX_FAILURE_SHARE:.0%} of the resamples failing, the "
            "replicates would describe a selected subset of resamples (those that kept deaths "
            "and survivors in every arm), so no bootstrap interval is given. Use "
            "method='multiplier' (no refits), merge sparse clusters or covariate levels, or "
            "rely on the influence-function or sandwich interval.",
            len(failures), n_resamples, failure_reasons(failures), message,
        )  # fmt: skip
    warn_at_caller(f"{message}. They are left out of the replicates.", RuntimeWarning)


