"""Repeated cross-fitting: one fold split per repeat, results combined by medians.

A single random fold split adds noise that does not vanish in finite samples; Chernozhukov et al.
(2018, Econometrics Journal 21, section 3.4) repeat the split and report the median estimate with
the variance ``median_r(SE_r^2 + (est_r - median)^2)``, which also counts the spread between
splits.
"""

from __future__ import annotations

import numpy as np

from ..inference._resampling import spawn_seeds

__all__ = ["repeat_seeds", "median_aggregate", "check_repeats"]


def check_repeats(n_repeats, n_folds):
    """Validate ``n_repeats`` against ``n_folds``."""
    if not isinstance(n_repeats, int | np.integer) or isinstance(n_repeats, bool) or n_repeats < 1:
        raise ValueError(f"`n_repeats` must be an integer >= 1; got {n_repeats!r}.")
    if n_repeats > 1 and n_folds is None:
        raise ValueError(
            f"`n_repeats={n_repeats}` repeats the cross-fitting split, but `n_folds` is None "
            "(models fitted on all rows, so every repeat would be identical). Set `n_folds` "
            "(for example n_folds=5) or use n_repeats=1."
        )
    return int(n_repeats)


def repeat_seeds(random_state, n_repeats):
    """Fold-split seeds: ``random_state`` itself for one repeat, independent children otherwise."""
    if n_repeats == 1:
        return [random_state]
    return [int(child.generate_state(1)[0]) for child in spawn_seeds(random_state, n_repeats)]


def median_aggregate(estimates, std_errors):
    """Median estimate and its standard error over repeats (axis 0).

    Returns
    -------
    (estimate, std_error) : floats or arrays
    """
    estimates = np.asarray(estimates, dtype=float)
    std_errors = np.asarray(std_errors, dtype=float)
    center = np.median(estimates, axis=0)
    variance = np.median(std_errors**2 + (estimates - center) ** 2, axis=0)
    return center, np.sqrt(variance)
