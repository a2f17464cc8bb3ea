"""Follow-up and response models for data missing at random (``missing="at_random"``).

Monotone coarsening of the full data ``(X, T, S, Y)``: the survival status is known (``C = 1``)
or not, and a survivor with known status has an observed outcome (``R = 1``) or not. Under
missingness at random given X within each arm, two more nuisance functions identify everything:

- follow-up ``c_t(X) = P(C=1 | T=t, X)``, fitted on every row of arm t;
- response ``r_t(X) = P(R=1 | T=t, S=1, C=1, X)``, fitted among the arm's known survivors;
  for the strata other than the always-survivors (whose formulas use the outcomes of units with
  intermediate 0) also ``r_t0(X) = P(R=1 | T=t, S=0, C=1, X)``, among the arm's known units
  with intermediate 0.

An arm in which nothing is missing gets no model: its probability is exactly 1 (a logistic fit
on a constant target would separate perfectly). The derivation of the estimators that use these
models is in docs/guide/derivations/missing-data.md.
"""

from __future__ import annotations

import numpy as np

from .._validation import EXTREME_PROBABILITY
from .._warnings import warn_at_caller
from ..exceptions import OverlapWarning
from ._models import ConstantModel, fit_predict

__all__ = ["fit_missingness", "missingness_counts", "model_cells", "model_key"]

_LABELS = {"follow_up": "follow-up (status known)", "response": "response (outcome observed)"}


def _cells(data, arm):
    """Fitting rows and 0/1 targets of the two models in one arm (full-sample masks)."""
    in_arm = data.treatment == arm
    known = data.status_known == 1
    survivors = in_arm & known & (data.survival == 1)
    return {
        "follow_up": (in_arm, data.status_known.astype(float)),
        "response": (survivors, data.outcome_observed.astype(float)),
    }


def model_cells(data, zero_cells=False):
    """``{(kind, key): (mask, target)}`` of every model; ``key`` is the arm, or ``(arm, 0)``
    for the response model among the arm's known units with intermediate 0 (``zero_cells``:
    the strata other than the always-survivors use those units' outcomes)."""
    cells = {}
    for arm in (0, 1):
        for kind, cell in _cells(data, arm).items():
            cells[(kind, arm)] = cell
        if zero_cells:
            zero = (data.treatment == arm) & (data.status_known == 1) & (data.survival == 0)
            cells[("response", (arm, 0))] = (zero, data.outcome_observed.astype(float))
    return cells


def model_key(kind, key):
    """The key of a fitted model: ``(kind, arm)`` or ``(kind, arm, 0)``."""
    return (kind, key) if not isinstance(key, tuple) else (kind, *key)


def fit_missingness(data, model, splits, design, parametric_builder, zero_cells=False):
    """Fit the follow-up and response models per arm (per fold when cross-fitted).

    Parameters
    ----------
    data : TruncationData
        With ``status_known`` and ``outcome_observed`` set.
    model : classifier or dict
        Cloned for each model, arm and fold; a dict ``{"follow_up": ..., "response": ...}``
        gives each kind its own model.
    splits : list of (train, test) row-position arrays
    design : ndarray or None
        Numeric design for the sandwich; ``parametric_builder`` is called only when it is used.
    parametric_builder : callable or None
        ``(design, mask, target, prediction, slope, weights) -> ParametricFit``; ``None`` skips
        the sandwich pieces.
    zero_cells : bool, default=False
        Also fit the response model among each arm's known units with intermediate 0 (stored
        under ``predictions["response"][(arm, 0)]`` and ``("response", arm, 0)``).

    Returns
    -------
    predictions : dict
        ``{"follow_up": {0: c0, 1: c1}, "response": {0: r0, 1: r1}}``, per row.
    fitted : dict
        Fitted models keyed ``("follow_up", t)``, ``("response", t)`` (a list per fold); absent
        where the model was not fitted.
    parametric : dict
        :class:`ParametricFit` per fitted model (empty when ``parametric_builder`` is None).
    """
    n, w = data.n_samples, data.sample_weight
    predictions = {"follow_up": {}, "response": {}}
    fitted, parametric = {}, {}
    for (kind, key), (mask, target) in model_cells(data, zero_cells).items():
        rows = mask & (w > 0)
        if np.all(target[rows] == 1):
            predictions[kind][key] = np.ones(n)
            continue
        values = np.empty(n)
        name = model_key(kind, key)
        fitted[name] = []
        for train, test in splits:
            fit_rows = train[mask[train]]
            if np.unique(target[fit_rows]).size < 2:
                # A fold whose rows are all observed: the share is 1 there, not a separated fit.
                model_fit = ConstantModel(target[fit_rows].mean())
                values[test] = model_fit.predict(np.empty(test.size))
            else:
                model_fit, values[test] = fit_predict(
                    model[kind] if isinstance(model, dict) else model, data.X, target,
                    fit_rows, test, w, data.weighted, True,
                )
            fitted[name].append(model_fit)
        predictions[kind][key] = values
        if parametric_builder is not None:
            parametric[name] = parametric_builder(
                design, mask, target, values, values * (1 - values), w
            )
    _warn_small(predictions, data)
    return predictions, fitted, parametric


def _warn_small(predictions, data):
    messages = []
    cells = model_cells(data, zero_cells=(1, 0) in predictions["response"])
    order = [(kind, arm) for kind in ("follow_up", "response") for arm in (1, 0)]
    order += [key for key in cells if key not in order]
    for kind, key in order:
        mask = cells[(kind, key)][0]
        arm = key if not isinstance(key, tuple) else key[0]
        count = int(np.sum(predictions[kind][key][mask] < EXTREME_PROBABILITY))
        if count:
            among = " among units with intermediate 0" if isinstance(key, tuple) else ""
            messages.append(
                f"{count} row(s) have a fitted {_LABELS[kind]} probability under "
                f"{'treatment' if arm else 'control'}{among} below {EXTREME_PROBABILITY}"
            )
    if messages:
        warn_at_caller(
            "; ".join(messages)
            + ". Inverse-probability-of-observation weights built from them are unstable: check "
            "which units are lost or do not respond, simplify the response model, or restrict "
            "the population.",
            OverlapWarning)


def missingness_counts(data):
    """Counts and weighted shares of unknown status and missing outcomes, by arm.

    Returns
    -------
    list of dict
        One record per arm: ``arm``, ``n``, ``n_status_unknown``, ``share_status_unknown``
        (of the arm), ``n_known_survivors``, ``n_outcome_missing`` and
        ``share_outcome_missing`` (of the known survivors); when the outcomes of units with
        intermediate 0 are used (strata other than the always-survivors), also
        ``n_known_intermediate_0``, ``n_outcome_missing_intermediate_0`` and
        ``share_outcome_missing_intermediate_0``.
    """
    w = data.sample_weight
    known = np.ones(data.n_samples, bool) if data.status_known is None else data.status_known == 1
    observed = (
        data.survival == 1 if data.outcome_observed is None else data.outcome_observed == 1
    )
    # Outcomes of units with intermediate 0 count only when the analysis uses them (another
    # stratum than the always-survivors: some are observed).
    zero_outcomes = bool(np.any(observed & (data.survival == 0)))
    records = []
    for arm, label in ((1, "treated"), (0, "control")):
        in_arm = data.treatment == arm
        survivors = in_arm & known & (data.survival == 1)
        missing_outcome = survivors & ~observed
        if zero_outcomes:
            zero = in_arm & known & (data.survival == 0)
            extra = {
                "n_known_intermediate_0": int(zero.sum()),
                "n_outcome_missing_intermediate_0": int(np.sum(zero & ~observed)),
                "share_outcome_missing_intermediate_0": float(
                    np.sum(w * (zero & ~observed)) / max(np.sum(w * zero), np.finfo(float).tiny)
                ),
            }
        else:
            extra = {}
        records.append({
            "arm": label,
            "n": int(in_arm.sum()),
            "n_status_unknown": int(np.sum(in_arm & ~known)),
            "share_status_unknown": float(np.sum(w * (in_arm & ~known)) / np.sum(w * in_arm)),
            "n_known_survivors": int(survivors.sum()),
            "n_outcome_missing": int(missing_outcome.sum()),
            "share_outcome_missing": float(
                np.sum(w * missing_outcome) / max(np.sum(w * survivors), np.finfo(float).tiny)
            ),
            **extra,
        })  # fmt: skip
    return records


#: Fewer observed survivor outcomes than this in an arm and a few rows carry its mean.
FEW_OUTCOMES = 5


def few_outcomes_message(data):
    """The warning text when an arm has fewer than ``FEW_OUTCOMES`` observed survivor outcomes.

    With one such row, that row alone is the arm's always-survivor mean: the trimming bounds
    coincide and the standard error describes the models, not the one row's chance.
    """
    observed = (
        data.survival == 1 if data.outcome_observed is None else data.outcome_observed == 1
    )
    parts = []
    for arm, label in ((1, "treated"), (0, "control")):
        count = int(np.sum(observed & (data.treatment == arm) & (data.sample_weight > 0)))
        if 0 < count < FEW_OUTCOMES:
            carried = ("one row carries the arm's always-survivor mean (the bounds then "
                       "coincide)") if count == 1 else f"{count} rows carry its mean"  # fmt: skip
            parts.append(f"the {label} arm has {count} survivor(s) with an observed outcome: "
                         f"{carried}")  # fmt: skip
    if not parts:
        return None
    return (
        "; ".join(parts).capitalize()
        + ". Standard errors and intervals this small are not reliable (large-sample "
        "approximations). Report the counts, and treat the estimate as descriptive."
    )
