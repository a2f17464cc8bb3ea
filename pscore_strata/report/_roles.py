"""The roles of the columns, and the analysed data they give (the containers of an analysis).

:func:`~._data.prepare_data` fills a :class:`PreparedData` from a table and its
:class:`ColumnRoles`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .._formula import variables_in

__all__ = ["ColumnRoles", "PreparedData"]


@dataclass(frozen=True)
class ColumnRoles:
    """Which column plays which part in the analysis.

    Attributes
    ----------
    outcome, treatment, survival : str
        Column names of the outcome, the treatment and the survival (intermediate) indicator.
    covariates, categorical : tuple of str, default=()
        Covariate columns; categorical ones are one-hot coded (and added if unlisted).
    cluster, weights : str or None, default=None
        Columns of cluster labels and of sample weights.
    by : str or None, default=None
        Subgroup column (``--by``): effects within each of its values.
    formula : str or None, default=None
        ``--formula``: the covariates as a formula (formulaic's grammar).
    visits : tuple of (str, str), default=()
        Repeated visits: ``(outcome, survival)`` column pairs in time order; the last pair is
        the outcome and survival above, which the main analysis uses (report/_visit_data.py).
    """

    outcome: str
    treatment: str
    survival: str
    covariates: tuple = ()
    categorical: tuple = ()
    cluster: str | None = None
    weights: str | None = None
    by: str | None = None
    formula: str | None = None
    visits: tuple = ()

    def all_covariates(self):
        """Covariates in the order given, categorical columns included (added if unlisted);
        with a formula, the columns it names.

        Returns
        -------
        tuple of str
        """
        if self.formula is not None:
            return tuple(variables_in(self.formula))
        listed = list(self.covariates)
        return tuple(listed + [c for c in self.categorical if c not in listed])

    def used_columns(self):
        """Every column the analysis reads, each once, in the order of the roles.

        Returns
        -------
        list of str
        """
        named = [self.outcome, self.treatment, self.survival, *self.all_covariates()]
        named += [c for c in (self.cluster, self.weights, self.by) if c is not None]
        named += [c for pair in self.visits for c in pair]
        return list(dict.fromkeys(named))

    def as_dict(self):
        """The roles as the report's JSON records them (visits aside).

        Returns
        -------
        dict
        """
        return {
            "outcome": self.outcome,
            "treatment": self.treatment,
            "survival": self.survival,
            "covariates": list(self.all_covariates()),
            "categorical": list(self.categorical),
            "cluster": self.cluster,
            "weights": self.weights,
            "by": self.by,
            "formula": self.formula,
        }


@dataclass(frozen=True)
class PreparedData:
    """The analysed rows: covariates (raw and model-ready) and the role arrays.

    Attributes
    ----------
    frame : pandas.DataFrame
        The analysed rows of the used columns (a copy).
    covariates : pandas.DataFrame or None
        Raw covariates, categoricals as read.
    design : pandas.DataFrame or None
        Model-ready covariates: categoricals one-hot coded (first level dropped).
    outcome, treatment, survival : ndarray of shape (n_rows,)
    groups, sample_weight : ndarray of shape (n_rows,) or None
    n_rows_read, n_rows_dropped : int
    missing_counts : dict
        Rows dropped for a missing value, by column.
    levels : dict
        Level names as read: ``{"treatment": (treated, control), "survival": (survived,
        event)}``.
    messages : tuple of str
        Data warnings, also shown in the report.
    visits : tuple
        ``VisitColumns`` of repeated visits (report/_visit_data.py).
    """

    frame: pd.DataFrame
    covariates: pd.DataFrame | None
    design: pd.DataFrame | None
    outcome: np.ndarray
    treatment: np.ndarray
    survival: np.ndarray
    groups: np.ndarray | None
    sample_weight: np.ndarray | None
    n_rows_read: int
    n_rows_dropped: int
    missing_counts: dict = field(default_factory=dict)
    levels: dict = field(default_factory=dict)
    messages: tuple = ()
    visits: tuple = ()
