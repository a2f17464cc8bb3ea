"""Separation of a binary nuisance model within an arm: detection and the warning text.

A logistic model is (quasi-)completely separated when some covariate level or region predicts
the arm's 0/1 target perfectly (every treated death in one level, say). The maximum-likelihood
coefficients then run off to infinity: the fitted probabilities of those rows reach 0 or 1
(unpenalized solvers stop with coefficients of +-20 or more), and the sandwich, which assumes a
finite maximum, is not to be trusted there (Albert & Anderson 1984, Biometrika 71; the
penalized remedy: Firth 1993, Biometrika 80).

Detection, on the rows each model was fitted on (arm by arm):

- some fitted probabilities lie within :data:`CERTAIN` of 0 or 1, and
- a covariate is named when it is an indicator one of whose levels holds only one value of
  the target (the separating level), or when its fitted coefficient exceeds
  :data:`LARGE_COEFFICIENT` in absolute value.

Fitted probabilities that extreme without a named covariate (a continuous covariate with an
outlying value, say) are left to the overlap warnings.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._warnings import warn_at_caller

__all__ = ["CERTAIN", "LARGE_COEFFICIENT", "separation_findings", "separation_message"]

#: A fitted probability this close to 0 or 1 is a perfect prediction.
CERTAIN = 1e-6
#: A logistic coefficient this large (per unit of the column as fitted) is one that ran off.
LARGE_COEFFICIENT = 10.0

_TARGETS = {
    "treatment": ("treatment", "treated", "in the control arm"),
    "survival": ("survival", "survived", "died"),
    "follow_up": ("follow-up", "had a known status", "were lost to follow-up"),
    "response": ("response", "had an observed outcome", "had a missing outcome"),
}


def _columns(X):
    if isinstance(X, pd.DataFrame):
        return [str(c) for c in X.columns], X.to_numpy(dtype=float, na_value=np.nan)
    array = np.asarray(X, dtype=float)
    return [f"x{j}" for j in range(array.shape[1])], array


def _coefficients(model):
    """The last step's ``coef_`` (one row), or None for models without coefficients."""
    last = model.steps[-1][1] if hasattr(model, "steps") else model
    coef = getattr(last, "coef_", None)
    if coef is None:
        return None
    coef = np.asarray(coef, dtype=float)
    return coef[0] if coef.ndim == 2 and coef.shape[0] == 1 else None


def separation_findings(X, target, predicted, model, names=None):
    """Covariates that separate ``target`` on the fitting rows, or ``None`` if not separated.

    Parameters
    ----------
    X : DataFrame or ndarray of shape (n_rows, n_features)
        The fitting rows' covariates, as the model saw them.
    target : ndarray of shape (n_rows,)
        The 0/1 target.
    predicted : ndarray of shape (n_rows,)
        The fitted probability of 1 on those rows.
    model : fitted classifier, optional
        Its coefficients (``coef_``, also the last step of a pipeline) flag runaway columns.
    names : sequence of str, optional
        Column names (default: those of ``X``).

    Returns
    -------
    dict or None
        ``{"n_certain": int, "n_rows": int, "covariates": [(name, text), ...],
        "largest": float or None}``, or ``None`` when no fitted probability is within
        :data:`CERTAIN` of 0 or 1 or no covariate is implicated.
    """
    predicted = np.asarray(predicted, dtype=float)
    certain = (predicted < CERTAIN) | (predicted > 1 - CERTAIN)
    if X is None or not certain.any():
        return None
    columns, values = _columns(X)
    names = list(names) if names is not None else columns
    target = np.asarray(target, dtype=float)
    found = {}
    for j, name in enumerate(names):
        column = values[:, j]
        levels = np.unique(column[~np.isnan(column)])
        if levels.size == 2 and set(levels) <= {0.0, 1.0}:
            for level in levels:
                rows = column == level
                outcomes = np.unique(target[rows])
                if rows.sum() >= 1 and outcomes.size == 1 and certain[rows].any():
                    found[name] = (level, outcomes[0], int(rows.sum()))
    coef = None if model is None else _coefficients(model)
    runaway = {}
    if coef is not None and coef.size == len(names):
        large = np.flatnonzero(np.abs(coef) >= LARGE_COEFFICIENT)
        runaway = {names[j]: float(coef[j]) for j in large}
    implicated = list(dict.fromkeys([*found, *runaway]))
    if not implicated:
        return None
    return {
        "n_certain": int(certain.sum()),
        "n_rows": int(certain.size),
        "covariates": [(name, found.get(name), runaway.get(name)) for name in implicated],
        "largest": max(runaway.values(), key=abs) if runaway else None,
    }


def separation_message(kind, arm, findings):
    """The warning text: the model, the arm, the covariate(s), what it means and what to do."""
    label, one, zero = _TARGETS[kind]
    described = []
    for name, level, coefficient in findings["covariates"][:4]:
        if level is not None:
            value, outcome, count = level
            described.append(
                f"{name} = {value:g} ({count} rows, all {one if outcome == 1 else zero})"
            )
        else:
            described.append(f"{name} (coefficient {coefficient:+.1f})")
    where = "" if arm is None else f" in the {'treated' if arm == 1 else 'control'} arm"
    return (
        f"Separation in the {label} model{where}: " + "; ".join(described) + ". "
        f"{'This covariate predicts' if len(described) == 1 else 'Together they predict'} "
        f"{label} perfectly there, so {findings['n_certain']} of {findings['n_rows']} rows "
        f"have fitted probabilities within {CERTAIN:g} of 0 or 1 and the coefficients run off "
        "towards infinity. The estimate leans on that artefact and its sandwich standard error "
        "is not to be trusted. Merge or drop the level, use a penalized model (e.g. "
        "LogisticRegression(C=1.0)), or run the unadjusted analysis (no covariates)."
    )


def _rows_of(X, rows):
    return X.iloc[rows] if hasattr(X, "iloc") else np.asarray(X)[rows]


def separation_checks(data, result, known_probability, strata=False):
    """``(kind, arm, rows, target, predicted, model)`` for every binary model of a fit."""
    T, S, w = data.treatment, data.survival, data.sample_weight
    known = np.ones(data.n_samples, bool) if data.status_known is None else data.status_known == 1
    first = {key: models[0] for key, models in result.models.items() if models}
    if not known_probability:
        yield ("treatment", None, w > 0, T, result.treatment_probability, first["treatment"])
    for arm in (1, 0):
        model = first.get(("survival", arm))
        if model is not None and not strata:
            rows = (T == arm) & known & (w > 0)
            yield ("survival", arm, rows, S, result.survival[arm], model)
        if result.missingness is None:
            continue
        for kind, rows, target in (
            ("follow_up", (T == arm) & (w > 0), data.status_known),
            ("response", (T == arm) & known & (S == 1) & (w > 0), data.outcome_observed),
        ):
            model = first.get((kind, arm))
            if model is not None:
                yield (kind, arm, rows, target, result.missingness[kind][arm], model)


def warn_separation(data, result, known_probability, category, strata=False):
    """Warn once per separated model (``category``); return the messages."""

    if data.X is None or data.n_features == 0:
        return []
    messages = []
    for kind, arm, rows, target, predicted, model in separation_checks(
        data, result, known_probability, strata
    ):
        rows = np.flatnonzero(rows)
        findings = separation_findings(
            _rows_of(data.X, rows), np.asarray(target, float)[rows], predicted[rows], model,
            names=data.feature_names or None,
        )  # fmt: skip
        if findings is not None:
            messages.append(separation_message(kind, arm, findings))
            warn_at_caller(messages[-1], category)
    return messages
