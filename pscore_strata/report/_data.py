"""Reading a data file and turning its columns into the arrays an analysis needs.

Every problem a user can cause from the command line (a wrong column name, missing values, an
unreadable file) raises :class:`InputError` with a one-line message that names the option and
says what to do.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..exceptions import InputError
from . import _coding, _readers
from ._formula_data import check_formula_option, formula_design
from ._roles import ColumnRoles, PreparedData
from ._visit_data import check_visit_roles, prepare_visits, visit_missing_rows

__all__ = [
    "InputError", "ColumnRoles", "PreparedData", "read_table", "prepare_data", "check_folds",
]


def read_table(path):
    """Read a data file into a DataFrame: CSV (comma- or semicolon-separated), Parquet, Stata
    ``.dta``, SAS ``.sas7bdat`` or SPSS ``.sav`` (pandas' readers; SPSS needs
    pyreadstat).

    Parameters
    ----------
    path : str or pathlib.Path
        The format follows the file's extension.

    Returns
    -------
    pandas.DataFrame
    """
    return _readers.read_table(path, InputError)


def _check_columns(frame, roles):
    check_formula_option(frame, roles, InputError)
    available = [str(c) for c in frame.columns]
    options = {
        "--outcome": [o for o, _ in roles.visits] or [roles.outcome],
        "--treatment": [roles.treatment],
        "--survival": [s for _, s in roles.visits] or [roles.survival],
        "--covariates": list(roles.covariates),
        "--categorical": list(roles.categorical),
        "--cluster": [roles.cluster] if roles.cluster else [],
        "--weights": [roles.weights] if roles.weights else [],
        "--by": [roles.by] if roles.by else [],
    }
    for option in ("--covariates", "--categorical"):
        twice = sorted({str(n) for n in options[option] if options[option].count(n) > 1})
        if twice:
            raise InputError(
                f"{option} lists {', '.join(map(repr, twice))} more than once; list each column "
                "once."
            )
    unknown = [
        f"{option} '{name}'"
        for option, names in options.items()
        for name in names
        if name not in frame.columns
    ]
    if unknown:
        raise InputError(
            f"Unknown column(s): {', '.join(unknown)}. Available columns: {', '.join(available)}."
        )
    key = [roles.outcome, roles.treatment, roles.survival]
    if len(set(key)) < 3:
        raise InputError("--outcome, --treatment and --survival must name three different columns.")
    clash = [c for c in roles.all_covariates() if c in key]
    if clash:
        raise InputError(
            f"Covariate(s) {', '.join(clash)} are also the outcome, treatment or survival column; "
            "covariates must be measured before treatment."
        )
    check_visit_roles(roles, InputError)


def _indicator(frame, column, option, allow_blank=False):
    values = frame[column]
    if values.dtype == bool:
        return values.to_numpy(dtype=np.int8)
    numeric = pd.to_numeric(values, errors="coerce")
    found = sorted(pd.unique(values.dropna()).tolist(), key=str)
    if allow_blank and values.isna().any():
        # Blank = status unknown (--missing at_random); anything else must still be 0/1.
        known = numeric[values.notna()]
        if not (known.notna().all() and known.isin([0, 1]).all()):
            shown = ", ".join(map(str, found[:6])) + (" ..." if len(found) > 6 else "")
            raise InputError(
                f"{option} column '{column}' must hold 0/1 values or blanks (unknown); found "
                f"{shown}. Recode it first."
            )
        return numeric.to_numpy(dtype=float)
    if numeric.isna().any() or not numeric.isin([0, 1]).all():
        shown = ", ".join(map(str, found[:6])) + (" ..." if len(found) > 6 else "")
        raise InputError(
            f"{option} column '{column}' must hold 0/1 values (1 = treated / survived); found "
            f"{shown}. Recode it first."
        )
    return numeric.to_numpy(dtype=np.int8)


def _check_clusters(values, column):
    # One cluster leaves a cluster-robust standard error nothing to vary over (0 / 0).
    levels = pd.unique(values.dropna())
    if len(levels) < 2:
        shown = f"the single value {str(levels[0])!r}" if len(levels) else "no values"
        raise InputError(
            f"--cluster column '{column}' holds {shown} in the analysed rows; cluster-robust "
            "standard errors need at least two clusters. Name the column that identifies the "
            "clusters, or leave out --cluster."
        )


def check_folds(data, options):
    """Refuse cross-fitting folds that outnumber the rows of a treatment x survival cell.

    The folds are stratified on treatment x survival (``nuisance/_fit.py``), so every fold
    holds each cell only when the cell has at least as many rows as there are folds.
    """
    from ._options import model_settings

    _, folds = model_settings(options, len(data.treatment))
    if folds is None:
        return
    treated, control = data.levels.get("treatment", ("1", "0"))
    survived, event = data.levels.get("survival", ("1", "0"))
    cells = pd.DataFrame({
        "treatment": np.where(data.treatment == 1, treated, control),
        "survival": np.where(np.isnan(data.survival.astype(float)), "unknown",
                             np.where(data.survival == 1, survived, event)),
    }).value_counts()  # fmt: skip
    (arm, status), smallest = cells.idxmin(), int(cells.min())
    if smallest >= folds:
        return
    if options.folds is None:
        chosen = f"--learner {options.learner} cross-fits with {folds} folds by default,"
    else:
        chosen = f"--folds {folds} asks for"
    fix = (f"pass --folds {smallest} or fewer" if smallest >= 2 else
           "that is too few to cross-fit; use --learner linear without --folds")  # fmt: skip
    raise InputError(
        f"{chosen} more folds than the smallest treatment x survival cell has rows (--treatment "
        f"'{arm}' with --survival '{status}': {smallest} row(s)); every fold needs rows of each "
        f"cell: {fix}."
    )


def _coded_indicator(frame, column, option, value, allow_blank=False):
    """A 0/1 indicator and its level names ``(level of 1, level of 0)``.

    ``value`` names the level that means 1 in a column coded otherwise (text, for example);
    without it the column must hold 0/1 (:func:`_indicator`).
    """
    if value is not None:
        return _coding.indicator(frame, column, option, value, InputError, allow_blank)
    try:
        indicator = _indicator(frame, column, option, allow_blank)
    except InputError as error:
        raise InputError(_coding.level_hint(str(error), frame[column], option)) from None
    return indicator, ("True", "False") if frame[column].dtype == bool else ("1", "0")


def _missing_rows(frame, roles, modelled=(), survived_value=None):
    """Per column, the rows that make a unit incomplete (outcome counts only for survivors).

    Columns in ``modelled`` (survival and outcome under ``--missing at_random``) are counted
    apart: their blanks are analysed, not dropped.
    """
    if survived_value is None:
        survived = pd.to_numeric(frame[roles.survival], errors="coerce") == 1
    else:
        survived = _coding.matches_level(frame[roles.survival], survived_value).fillna(False)
    counts, incomplete = {}, np.zeros(len(frame), dtype=bool)
    earlier_visits = {c for pair in roles.visits[:-1] for c in pair}  # _visit_data counts them
    for column in roles.used_columns():
        if column in modelled or column in earlier_visits:
            continue
        missing = frame[column].isna().to_numpy()
        if column == roles.outcome:
            # A non-survivor has no outcome by definition: that is truncation, not missingness.
            missing = missing & survived.to_numpy()
        if missing.any():
            counts[column] = int(missing.sum())
            incomplete |= missing
    return counts, incomplete


def prepare_data(frame, roles, *, drop_incomplete=False, missing="error", treated_value=None,
                 survived_value=None):
    """Check the columns and build the analysis arrays; the caller's frame is not modified.

    Parameters
    ----------
    frame : DataFrame
    roles : ColumnRoles
    drop_incomplete : bool, default=False
        Drop rows with a missing value in a used column (an outcome is missing only for a
        survivor). Otherwise such rows raise :class:`InputError` with the counts per column.
    missing : {"error", "at_random"}, default="error"
        ``"at_random"`` keeps blank survival (status unknown) and blank outcomes of survivors
        (not observed) for the estimators' ``missing="at_random"``; other blanks are treated as
        above.
    treated_value, survived_value : scalar or str, optional
        The level of a text-coded (or otherwise coded) treatment / survival column that means
        1 (treated / survived); the column must then hold exactly two levels, and the other
        one is recorded in ``levels`` for the report. ``None``: the column holds 0/1. These
        live here, in the report's preparation step, because the estimators take 0/1 arrays
        (recode there with ``(column == "program").astype(int)``).

    Returns
    -------
    PreparedData
    """
    _check_columns(frame, roles)
    n_read = len(frame)
    modelled = (roles.survival, roles.outcome) if missing == "at_random" else ()
    counts, incomplete = _missing_rows(frame, roles, modelled, survived_value)
    if roles.visits:
        visit_counts, visit_incomplete = visit_missing_rows(frame, roles, modelled, survived_value)
        counts.update(visit_counts)
        incomplete |= visit_incomplete
    if counts and not drop_incomplete:
        truncated = {roles.outcome, *(o for o, _ in roles.visits)}
        listed = ", ".join(
            f"'{c}' {n}" + (" (survivors only)" if c in truncated else "")
            for c, n in counts.items()
        )
        outcome_columns = {roles.survival, roles.outcome, *(c for p in roles.visits for c in p)}
        modelable = [c for c in counts if c in outcome_columns]
        hint = (
            f" Blank {' and '.join(modelable)} values can instead be analysed with --missing "
            "at_random (blank survival = status unknown, blank outcome of a survivor = not "
            "observed), which assumes they are missing at random given the covariates within "
            "each arm."
        ) if modelable else ""
        raise InputError(
            f"Missing values in {int(incomplete.sum())} of {n_read} rows: {listed}. Impute them "
            f"first, or pass --drop-incomplete to analyse complete rows only.{hint}"
        )
    used = frame.loc[~incomplete, roles.used_columns()].copy()
    used = used.reset_index(drop=True)
    if len(used) == 0:
        raise InputError("No complete rows are left to analyse; check the missing values.")
    treatment, treatment_levels = _coded_indicator(
        used, roles.treatment, "--treatment", treated_value
    )
    survival, survival_levels = _coded_indicator(
        used, roles.survival, "--survival", survived_value, allow_blank=bool(modelled)
    )
    messages = ()
    outcome_column, outcome_labels = _coding.labelled_outcome(
        frame, used[roles.outcome], roles.outcome, InputError
    )
    outcome = pd.to_numeric(outcome_column, errors="coerce")
    bad = outcome.isna() & used[roles.outcome].notna()
    if bad.any():
        raise InputError(
            f"--outcome column '{roles.outcome}' must be numeric; found values such as "
            f"{used.loc[bad, roles.outcome].iloc[0]!r}."
        )
    covariates = design = None
    names = roles.all_covariates()
    if roles.formula is not None:
        covariates, design, messages = formula_design(used, roles, InputError)
    elif names:
        covariates = used[list(names)]
        _coding.check_dates(covariates, InputError)
        _coding.check_identifiers(covariates, roles.categorical, InputError)
        messages = tuple(_coding.many_levels_messages(covariates, roles.categorical))
        text = [
            c
            for c in names
            if c not in roles.categorical and not pd.api.types.is_numeric_dtype(covariates[c])
        ]
        separated = _coding.separated_numbers(covariates, text)
        if separated:
            name, example = next(iter(separated.items()))
            raise InputError(
                f"Covariate(s) {', '.join(separated)} hold numbers written with thousands "
                f"separators (e.g. {example!r} in '{name}'), which are read as text. Save the "
                "file with plain numbers (no thousands separators; a decimal point, or a "
                "decimal comma in a semicolon-separated file), or in Python read it with "
                "pandas.read_csv(..., thousands=',') and write it back."
            )
        if text:
            raise InputError(
                f"Covariate(s) {', '.join(text)} are not numeric; list them with --categorical "
                "to one-hot code them."
            )
        design = pd.get_dummies(
            covariates, columns=list(roles.categorical), drop_first=True, dtype=float
        ).astype(float)
    weights = None
    if roles.weights is not None:
        weights = pd.to_numeric(used[roles.weights], errors="coerce").to_numpy(dtype=float)
        if np.isnan(weights).any() or (weights < 0).any() or not np.isfinite(weights).all():
            raise InputError(f"--weights column '{roles.weights}' must hold non-negative numbers.")
        if weights.sum() <= 0:
            raise InputError(
                f"--weights column '{roles.weights}' is zero in every analysed row; at least one "
                "row needs a positive weight."
            )
    visits = prepare_visits(
        used, roles, allow_blank=bool(modelled), survived_value=survived_value,
        coded_indicator=_coded_indicator, input_error=InputError,
        row_labels=frame.index[~incomplete],
    )  # fmt: skip
    groups = None if roles.cluster is None else used[roles.cluster].to_numpy()
    if groups is not None:
        _check_clusters(used[roles.cluster], roles.cluster)
    return PreparedData(
        frame=used,
        covariates=covariates,
        design=design,
        outcome=outcome.to_numpy(dtype=float),
        treatment=treatment,
        survival=survival,
        groups=groups,
        sample_weight=weights,
        n_rows_read=n_read,
        n_rows_dropped=int(incomplete.sum()),
        missing_counts=counts,
        levels={"treatment": treatment_levels, "survival": survival_levels,
                "outcome": outcome_labels},
        messages=messages,
        visits=visits,
    )
