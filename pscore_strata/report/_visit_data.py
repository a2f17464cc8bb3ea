"""The columns of repeated visits: several ``--outcome`` columns with as many ``--survival``.

Each visit's columns are coded by the same rules as the main outcome and survival columns (the
main analysis uses the last visit). A visit's outcome is missing only for a unit alive at that
visit; under ``--missing at_random`` blank outcomes and blank statuses are analysed, not dropped.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import _coding

__all__ = [
    "VisitColumns", "visit_pairs", "check_visit_roles", "visit_missing_rows", "prepare_visits",
]


@dataclass(frozen=True)
class VisitColumns:
    """One visit: its label (the outcome column's name), its columns and coded arrays."""

    label: str
    outcome_column: str
    survival_column: str
    outcome: np.ndarray
    survival: np.ndarray


def check_visit_roles(roles, input_error):
    """The visit columns must be distinct, and none may be the treatment or a covariate."""
    if not roles.visits:
        return
    named = [c for pair in roles.visits for c in pair]
    twice = sorted({str(c) for c in named if named.count(c) > 1})
    if twice:
        raise input_error(
            f"The visit columns ({', '.join(map(repr, twice))}) are named more than once; give "
            "each visit its own --outcome and --survival column."
        )
    clash = [c for c in named if c == roles.treatment or c in roles.all_covariates()]
    if clash:
        raise input_error(
            f"Visit column(s) {', '.join(map(repr, clash))} are also the treatment or a "
            "covariate; covariates must be measured before treatment."
        )


def visit_pairs(outcomes, survivals, population):
    """``(outcome, survival)`` column pairs of repeated visits (``()`` for one visit), from the
    command line's repeated --outcome and --survival options."""
    if len(outcomes) != len(survivals):
        raise ValueError(
            f"--outcome {len(outcomes)} times but --survival {len(survivals)} times: for "
            "repeated visits give one --survival column per --outcome column, in the same "
            "(time) order."
        )
    if len(outcomes) == 1:
        if population is not None:
            raise ValueError(
                "--visit-population needs several visits: repeat --outcome and --survival "
                "once per visit, in time order."
            )
        return ()
    return tuple(zip(outcomes, survivals, strict=True))


def _alive(values, survived_value):
    if survived_value is None:
        return (pd.to_numeric(values, errors="coerce") == 1).to_numpy()
    return _coding.matches_level(values, survived_value).fillna(False).to_numpy()


def visit_missing_rows(frame, roles, modelled, survived_value):
    """Per earlier-visit column, the rows whose value is missing where it should exist.

    An outcome is missing only for a unit alive at its visit. Columns in ``modelled``
    (``--missing at_random``) are not counted: their blanks are analysed.
    """
    counts, incomplete = {}, np.zeros(len(frame), dtype=bool)
    for outcome, survival in roles.visits[:-1]:  # the last visit is the main analysis's
        alive = _alive(frame[survival], survived_value)
        for column, missing in ((survival, frame[survival].isna().to_numpy()),
                                (outcome, frame[outcome].isna().to_numpy() & alive)):  # fmt: skip
            if modelled and column in (outcome, survival):
                continue
            if missing.any():
                counts[column] = int(missing.sum())
                incomplete |= missing
    return counts, incomplete


def prepare_visits(used, roles, *, allow_blank, survived_value, coded_indicator, input_error,
                   row_labels=None):  # fmt: skip
    """The coded visits of the analysed rows, in the order given (``()`` for one visit).

    Survival must be monotone over visits; rows that break it are refused by their labels in
    the data file (``row_labels``: the analysed rows' index in the frame as read).
    """
    from ..visits._inputs import check_visits

    visits = []
    for outcome_column, survival_column in roles.visits:
        survival, _ = coded_indicator(used, survival_column, "--survival", survived_value,
                                      allow_blank=allow_blank)  # fmt: skip
        outcome = pd.to_numeric(used[outcome_column], errors="coerce")
        bad = outcome.isna() & used[outcome_column].notna() & (survival == 1)
        if bad.any():
            raise input_error(
                f"--outcome column '{outcome_column}' must be numeric for units alive at its "
                f"visit; found values such as {used.loc[bad, outcome_column].iloc[0]!r}."
            )
        visits.append(VisitColumns(
            label=str(outcome_column), outcome_column=str(outcome_column),
            survival_column=str(survival_column), outcome=outcome.to_numpy(dtype=float),
            survival=np.asarray(survival, dtype=float),
        ))  # fmt: skip
    if visits:
        index = used.index if row_labels is None else row_labels
        status = pd.DataFrame({v.label: v.survival for v in visits}, index=index)
        try:
            check_visits(status, status)
        except ValueError as error:
            columns = ", ".join(v.survival_column for v in visits)
            raise input_error(f"--survival columns ({columns}): {error}") from None
    return tuple(visits)
