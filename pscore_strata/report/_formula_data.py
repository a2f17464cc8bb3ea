"""--formula in the report's preparation step: the checks of the formula against the data file,
and the design of the analysed rows (formulaic, through ``pscore_strata._formula``)."""

from __future__ import annotations

import pandas as pd

from .._formula import FormulaDesign, check_formula, variables_in
from . import _coding

__all__ = ["check_formula_option", "formula_design"]


def check_formula_option(frame, roles, input_error):
    """Refuse a --formula that cannot be used, before any work: with --covariates, a
    malformed formula, or one naming a column the file lacks."""
    if roles.formula is None:
        return
    if roles.covariates or roles.categorical:
        raise input_error(
            "--formula gives the covariates itself: leave out --covariates and --categorical "
            "(write C(column) in the formula for a categorical column)."
        )
    try:
        check_formula(roles.formula, "--formula")
    except (TypeError, ValueError) as error:
        raise input_error(str(error)) from None
    unknown = [name for name in variables_in(roles.formula) if name not in frame.columns]
    if unknown:
        raise input_error(
            f"--formula {roles.formula!r} names unknown column(s) {', '.join(unknown)}. "
            f"Available columns: {', '.join(map(str, frame.columns))}."
        )


def formula_design(used, roles, input_error):
    """The --formula design of the analysed rows; balance is checked on its columns."""
    _coding.check_dates(used[list(roles.all_covariates())], input_error)
    try:
        design = FormulaDesign(roles.formula, "--formula").fit_transform(used)
    except (TypeError, ValueError) as error:
        raise input_error(str(error)) from None
    text = [c for c in roles.all_covariates() if not pd.api.types.is_numeric_dtype(used[c])]
    messages = tuple(_coding.many_levels_messages(used, text))
    return design, design, messages
