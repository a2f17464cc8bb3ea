"""Input checks done once when one analysis fits several estimators on the same inputs.

:func:`pscore_strata.fit_estimators` and the report fit three estimators (and the bounds) on
the same arrays. Each ``fit`` validates its inputs and fingerprints them, and at a million rows
every repetition costs tens of milliseconds. Inside :func:`checked_once` (entered by those
callers only, around fits of their own, where nothing can change the inputs in between) a
check of the very same objects with the same options returns the first result. Outside it, or
for any other object, every call does the work, as a user's separate fits always do.
"""

from __future__ import annotations

import contextlib
import contextvars

__all__ = ["checked_once", "once", "checking_once"]

_MEMO = contextvars.ContextVar("pscore_strata_checked_once", default=None)
# Kept entries per block: the analysis' own inputs, not every bootstrap resample or subgroup.
_KEPT = 8


@contextlib.contextmanager
def checked_once():
    """Within the block, :func:`once` computes each check of the same objects once."""
    if _MEMO.get() is not None:  # nested: the outer block's memo serves
        yield
        return
    token = _MEMO.set({})
    try:
        yield
    finally:
        _MEMO.reset(token)


def checking_once():
    """Whether a :func:`checked_once` block is active (callers skip :func:`once` otherwise, so
    that a user's error traceback shows no extra frames)."""
    return _MEMO.get() is not None


def once(kind, objects, options, compute):
    """``compute()``, or its earlier result for the same ``kind``, ``objects`` (compared by
    identity) and ``options`` (compared by equality) inside a :func:`checked_once` block."""
    memo = _MEMO.get()
    if memo is None:
        return compute()
    key = (kind, tuple(id(o) for o in objects), options)
    if key in memo:
        return memo[key][0]
    value = compute()
    if len(memo) >= _KEPT:
        memo.pop(next(iter(memo)))
    # The objects are held with the value, so that their ids cannot be reused meanwhile.
    memo[key] = (value, tuple(objects))
    return value
