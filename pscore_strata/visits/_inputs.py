"""The visit matrices: outcomes and survival, one column per visit, checked and made consistent.

Survival over visits is monotone: a unit recorded dead at a visit is dead at every later one. Rows
that contradict this are refused, naming them. Unknown entries are left unknown (never deduced
from the recorded ones), since the missing-at-random analysis of each visit needs the known
statuses not to depend on survival.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

__all__ = ["VisitData", "check_visits", "POPULATIONS"]

POPULATIONS = ("each", "last")

# Row labels shown in an error message; more are counted, not listed.
_SHOWN_ROWS = 10


@dataclass(frozen=True)
class VisitData:
    """Outcomes and survival per visit, after the checks.

    Attributes
    ----------
    labels : list
        Visit labels, in time order (the columns of a DataFrame ``y``, else 1..K).
    outcome : list of K ndarrays of shape (n,)
        The caller's values per visit, each column with its own dtype (copies; text is left
        for the estimator to judge).
    survival : ndarray of shape (n, K) of float
        1 alive, 0 dead, NaN unknown (a copy).
    notes : list of str
    """

    labels: list
    outcome: np.ndarray
    survival: np.ndarray
    notes: list = field(default_factory=list)

    @property
    def n_visits(self):
        return len(self.labels)

    def columns(self, k, population):
        """``(y, survival)`` of visit ``k`` for a single-visit fit of ``population``.

        "each": visit k's own survival. "last": survival to the last visit, with the outcome of
        a unit whose last-visit status is unknown blanked (it enters as lost to follow-up).
        """
        y = self.outcome[k]
        if population == "each":
            return y, self.survival[:, k]
        last = self.survival[:, -1]
        unknown = np.isnan(last)
        if unknown.any():
            y = np.where(unknown, np.nan, y)
        return y, last


def _matrix(values, name):
    if isinstance(values, pd.DataFrame):
        return values, list(values.columns), values.index
    if isinstance(values, pd.Series):
        raise ValueError(
            f"`{name}` must be two-dimensional, one column per visit in time order; got a "
            "Series (one visit). For a single visit, fit the estimator directly."
        )
    if values is None:
        raise ValueError(f"`{name}` is required: one column per visit, in time order.")
    array = np.asarray(values)
    if array.ndim != 2:
        raise ValueError(
            f"`{name}` must be two-dimensional (rows = units, columns = visits in time order); "
            f"got an array of shape {array.shape}."
        )
    return array, None, None


def _survival_values(array):
    """Survival as floats (NaN unknown); anything but 0, 1 and missing is refused."""
    frame = pd.DataFrame(array)
    try:
        numbers = frame.apply(pd.to_numeric, errors="raise").to_numpy(dtype=float)
    except (TypeError, ValueError):
        found = pd.unique(pd.Series(array.ravel()).dropna())[:10]
        raise TypeError(
            f"`survival` must be numeric 0/1 per visit (NaN where unknown); found values "
            f"{list(found)}. Recode it as 1 (alive) / 0 (dead)."
        ) from None
    found = np.unique(numbers[~np.isnan(numbers)])
    if not np.all(np.isin(found, [0, 1])):
        raise ValueError(
            f"`survival` must contain only 0 (dead), 1 (alive) and NaN (unknown) at each "
            f"visit; found values {found[:10].tolist()}. Recode it as 1/0."
        )
    return numbers


def _name_rows(rows, index):
    shown = rows[:_SHOWN_ROWS]
    names = [index[i] for i in shown] if index is not None else [int(i) for i in shown]
    where = "index labels" if index is not None else "row positions"
    more = f" and {rows.size - shown.size} more" if rows.size > shown.size else ""
    return f"{where} {names}{more}"


def check_visits(y, survival):
    """Validate the visit matrices of :func:`pscore_strata.visit_effects`.

    Returns
    -------
    VisitData
    """
    outcome, outcome_labels, outcome_index = _matrix(y, "y")
    if isinstance(outcome, pd.DataFrame):
        columns = [outcome.iloc[:, k].to_numpy(copy=True) for k in range(outcome.shape[1])]
    else:
        columns = [outcome[:, k].copy() for k in range(outcome.shape[1])]
    status, survival_labels, survival_index = _matrix(survival, "survival")
    if outcome.shape != status.shape:
        raise ValueError(
            f"`y` has shape {outcome.shape} but `survival` has {status.shape}; give one survival "
            "column for each outcome column (the same visits, in the same order)."
        )
    n_visits = outcome.shape[1]
    if n_visits < 2:
        raise ValueError(
            f"`y` and `survival` have {n_visits} visit column(s); visit_effects needs at least "
            "two. For one visit, fit the estimator directly."
        )
    labels = outcome_labels or survival_labels or list(range(1, n_visits + 1))
    if len(set(map(str, labels))) != n_visits:
        raise ValueError(f"The visit labels (columns of `y`) must be distinct; got {labels}.")
    index = outcome_index if outcome_index is not None else survival_index
    status = _survival_values(np.asarray(status))

    known_dead = np.isclose(status, 0.0)
    known_alive = np.isclose(status, 1.0)
    # A recorded death followed by a recorded survival breaks the order of time.
    dead_before = np.cumsum(known_dead, axis=1) > 0
    broken = np.flatnonzero(np.any(known_alive & dead_before, axis=1))
    if broken.size:
        raise ValueError(
            f"`survival` is not monotone over visits for {broken.size} row(s) "
            f"({_name_rows(broken, index)}): each is recorded dead (0) at a visit and alive (1) "
            "at a later one. Survival must stay 0 after a death; correct those rows (a "
            "data-entry error, or a visit recorded in the wrong column) before the analysis."
        )
    notes = []
    unknown_after_death = int(np.sum(np.isnan(status) & dead_before))
    if unknown_after_death:
        # Not filled in: under missing at random a status is unknown whether or not the unit is
        # alive; carrying deaths forward would make the known statuses depend on survival.
        notes.append(
            f"{unknown_after_death} survival entries are unknown (NaN) after a recorded death "
            "and are treated as unknown (missing at random). If those units are known to be "
            "dead, record 0 there."
        )
    return VisitData(labels=list(labels), outcome=columns, survival=status, notes=notes)
