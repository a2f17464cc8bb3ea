"""Input checking: user data in, a small immutable container out.

Every error message a user can meet while handing data to the library is written here, so the
wording stays consistent: the message names the argument, says what was expected, shows what was
found and says what to do.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ._checked_once import checking_once, once
from ._features import check_features, reject_sparse
from ._vectors import (
    MISSING_AT_RANDOM_ASSUMPTION,
    binary_indicator,
    is_missing,
    is_real,
    numbers_or_missing,
    one_dimensional,
)

__all__ = [
    "TruncationData",
    "check_truncation_data",
    "check_level",
    "check_features",
    "intermediate_alias",
]

# Probabilities this close to 0 or 1 make weights explode; the threshold is common practice.
EXTREME_PROBABILITY = 0.01


@dataclass(frozen=True)
class TruncationData:
    """Validated analysis data.

    Attributes
    ----------
    X : ndarray or DataFrame or None
        Covariates exactly as handed to the nuisance models (never modified). ``None`` when the
        analysis is unadjusted.
    n_features : int
    outcome : ndarray of float
        A copy of ``y`` with ``NaN`` wherever ``survival == 0``.
    treatment, survival : ndarray of int8
    sample_weight : ndarray of float
        All ones when the caller gave none.
    groups : ndarray or None
        Cluster labels for cluster-robust standard errors.
    weighted : bool
        Whether the caller supplied ``sample_weight``.
    binary_outcome : bool
        Whether every observed outcome is 0 or 1.
    status_known, outcome_observed : ndarray of int8 or None
        With ``missing="at_random"`` and something missing: ``C`` (survival status known) and
        ``R`` (outcome observed: a survivor with known status and a value); ``survival`` is 0
        where the status is unknown. ``None`` when nothing is missing.
    """

    X: object
    n_features: int
    outcome: np.ndarray
    treatment: np.ndarray
    survival: np.ndarray
    sample_weight: np.ndarray
    groups: np.ndarray | None
    weighted: bool
    binary_outcome: bool
    feature_names: tuple = field(default=())
    status_known: np.ndarray | None = None
    outcome_observed: np.ndarray | None = None

    @property
    def n_samples(self):
        return self.treatment.shape[0]

    def take(self, rows):
        """A new container holding the given row positions (used by resampling)."""
        X = self.X
        if X is not None:
            X = X.iloc[rows] if isinstance(X, pd.DataFrame) else X[rows]
        return TruncationData(
            X=X,
            n_features=self.n_features,
            outcome=self.outcome[rows],
            treatment=self.treatment[rows],
            survival=self.survival[rows],
            sample_weight=self.sample_weight[rows],
            groups=None if self.groups is None else self.groups[rows],
            weighted=self.weighted,
            binary_outcome=self.binary_outcome,
            feature_names=self.feature_names,
            status_known=None if self.status_known is None else self.status_known[rows],
            outcome_observed=None if self.outcome_observed is None else self.outcome_observed[rows],
        )

    def with_weights(self, sample_weight):
        """A new container with other row weights (used by weight-perturbing bootstraps)."""
        return TruncationData(
            X=self.X,
            n_features=self.n_features,
            outcome=self.outcome,
            treatment=self.treatment,
            survival=self.survival,
            sample_weight=np.asarray(sample_weight, dtype=float),
            groups=self.groups,
            weighted=True,
            binary_outcome=self.binary_outcome,
            feature_names=self.feature_names,
            status_known=self.status_known,
            outcome_observed=self.outcome_observed,
        )


def check_truncation_data(
    X, y, treatment, survival, sample_weight=None, groups=None, models=(None, None, None),
    missing="error", *, stratum=None, survival_name="survival",
):  # fmt: skip
    """Validate the inputs of every ``fit`` and return a :class:`TruncationData`.

    Inside :func:`~._checked_once.checked_once` (several estimators fitted by the library on
    the same inputs) the same objects with the same options are validated once.
    """
    if not checking_once():
        return _check_truncation_data(X, y, treatment, survival, sample_weight, groups, models,
                                      missing, stratum=stratum, survival_name=survival_name)
    # The models matter only as a set (does each encode text columns?): repeats count once.
    distinct = {id(model): model for model in models}.values()
    objects = (X, y, treatment, survival, sample_weight, groups, *distinct)
    options = (missing, stratum, survival_name)
    return once("truncation data", objects, options, lambda: _check_truncation_data(
        X, y, treatment, survival, sample_weight, groups, models, missing, stratum=stratum,
        survival_name=survival_name))  # fmt: skip


def _check_truncation_data(
    X, y, treatment, survival, sample_weight=None, groups=None, models=(None, None, None),
    missing="error", *, stratum=None, survival_name="survival",
):  # fmt: skip
    """The checks of :func:`check_truncation_data`.

    ``missing="at_random"`` accepts NaN survival (status unknown) and NaN outcomes of survivors
    (not observed); ``"error"`` refuses them with a message naming the option. ``stratum`` (a
    stratum other than the always-survivors) keeps the outcomes of units with intermediate 0,
    which its formulas use, and refuses NaN there: under truncation by death only the
    always-survivor effect exists. ``survival_name`` is the argument name used in messages.
    """
    all_outcomes = stratum is not None
    check_choice(missing, "missing", ("error", "at_random"))
    treatment = binary_indicator(treatment, "treatment")
    survival = binary_indicator(survival, survival_name, allow_missing=missing == "at_random")
    status_known = None
    if survival.dtype.kind == "f":
        status_known = (~np.isnan(survival)).astype(np.int8)
        survival = np.nan_to_num(survival).astype(np.int8)
    n = treatment.shape[0]
    if survival.shape[0] != n:
        raise ValueError(
            f"`treatment` has {n} rows but `survival` has {survival.shape[0]}; they must match."
        )
    outcome = one_dimensional(y, "y")
    if outcome.shape[0] != n:
        raise ValueError(
            f"`y` has {outcome.shape[0]} rows but `treatment` has {n}; they must match."
        )
    outcome = _outcome_values(outcome, survival, status_known, all_outcomes)
    if status_known is not None:
        contradicting = np.flatnonzero((status_known == 0) & ~np.isnan(outcome.astype(float)))
        if contradicting.size:
            raise ValueError(
                f"`y` is observed for {contradicting.size} row(s) whose `survival` is unknown "
                f"(NaN), at row positions {contradicting[:5].tolist()}. An outcome exists only "
                "for survivors: set survival to 1 for those rows if they survived, or blank y."
            )
    outcome = np.where((survival == 1) | all_outcomes, outcome.astype(float), np.nan)
    # With a stratum other than the always-survivors the outcome exists for every unit: under
    # missing="at_random" a NaN outcome of a unit whose intermediate is known is one not
    # observed, whatever its intermediate (docs/guide/derivations/missing-data.md, section 5).
    every_outcome = all_outcomes and missing == "at_random"
    if all_outcomes and not every_outcome:
        _check_outcomes_exist(outcome, survival, stratum, survival_name)
    can_respond = (survival == 1) | every_outcome
    if status_known is not None:
        can_respond = can_respond & (status_known == 1)
    unobserved = np.flatnonzero(np.isnan(outcome) & can_respond)
    outcome_observed = None
    if unobserved.size and missing == "at_random":
        outcome_observed = (can_respond & ~np.isnan(outcome)).astype(np.int8)
    elif unobserved.size:
        raise ValueError(
            f"`y` is missing (NaN) for {unobserved.size} survivor(s) (survival == 1), at row "
            f"positions {unobserved[:5].tolist()}{' ...' if unobserved.size > 5 else ''}. Pass "
            "missing=\"at_random\" to the estimator to model response, which assumes "
            f"{MISSING_AT_RANDOM_ASSUMPTION}; otherwise impute the outcome or remove those rows "
            "deliberately."
        )
    if status_known is not None and outcome_observed is None:
        outcome_observed = can_respond.astype(np.int8)
    if outcome_observed is not None and status_known is None:
        status_known = np.ones(n, dtype=np.int8)
    if np.isinf(outcome).any():
        raise ValueError("`y` contains infinite values among survivors; fix them before fitting.")
    _check_squares(outcome[~np.isnan(outcome)], "y", "rescale it (for example to thousands)")

    if X is not None:
        reject_sparse(X)
    if X is not None and len(X) != n:
        raise ValueError(f"`X` has {len(X)} rows but `treatment` has {n}; they must match.")
    X, n_features, names = check_features(X, models)

    if sample_weight is None:
        weights = np.ones(n)
        weighted = False
    else:
        weights = numbers_or_missing(one_dimensional(sample_weight, "sample_weight"),
                                      "sample_weight").astype(float)  # fmt: skip
        if weights.shape[0] != n:
            raise ValueError(
                f"`sample_weight` has {weights.shape[0]} rows but `treatment` has {n}."
            )
        if not np.isfinite(weights).all() or (weights < 0).any():
            bad = np.flatnonzero(~np.isfinite(weights) | (weights < 0))
            raise ValueError(
                f"`sample_weight` must be finite and non-negative; {bad.size} value(s) are not, "
                f"at row positions {bad[:5].tolist()}."
            )
        if weights.max() <= 0:
            raise ValueError("`sample_weight` sums to zero; at least one row needs weight > 0.")
        # Estimates do not depend on the weights' scale: mean one keeps sums and squares of
        # 1e300 or 1e-300 weights finite and non-zero.
        weights = weights / weights.max()
        weights = weights / weights.mean()
        weighted = True

    if groups is not None:
        groups = one_dimensional(groups, "groups")
        if groups.shape[0] != n:
            raise ValueError(f"`groups` has {groups.shape[0]} rows but `treatment` has {n}.")
        if pd.isna(groups).any():
            raise ValueError(
                f"`groups` has {int(pd.isna(groups).sum())} missing cluster label(s); give every "
                "row a cluster."
            )
        check_cluster_count(groups)

    known = np.ones(n, dtype=bool) if status_known is None else status_known == 1
    for arm, label in ((1, "treated"), (0, "control")):
        in_arm = (treatment == arm) & (weights > 0)
        if not in_arm.any():
            emptied = " with `sample_weight` > 0" if (treatment == arm).any() else ""
            raise ValueError(
                f"The {label} arm (treatment == {arm}) has no units{emptied}; the effect needs "
                "both arms." + (" Every row of that arm has weight 0: give some of them a "
                                "positive weight." if emptied else "")
            )  # fmt: skip
        if outcome_observed is not None:
            _check_observed_arm(in_arm, known, survival, outcome_observed, label)
        in_arm = in_arm & known
        survivors = int(survival[in_arm].sum())
        if survivors == 0:
            raise ValueError(
                f"The {label} arm has no survivors (survival == 1); the survivor average causal "
                "effect is not estimable without outcomes in both arms."
            )
        if survivors == in_arm.sum():
            raise ValueError(
                f"The {label} arm has no deaths (every survival == 1); the survival model cannot "
                "be fitted in that arm. If nobody can die, estimate an ordinary average effect "
                "instead."
            )

    observed = outcome[((survival == 1) | all_outcomes) & ~np.isnan(outcome)]
    binary = bool(np.all((observed == 0) | (observed == 1)))
    return TruncationData(
        X=X,
        n_features=n_features,
        outcome=outcome,
        treatment=treatment,
        survival=survival,
        sample_weight=weights,
        groups=groups,
        weighted=weighted,
        binary_outcome=binary,
        feature_names=names,
        status_known=status_known,
        outcome_observed=outcome_observed,
    )


def _check_observed_arm(in_arm, known, survival, outcome_observed, label):
    if not (in_arm & known).any():
        raise ValueError(
            f"No unit of the {label} arm has a known survival status; survival cannot be "
            "modelled in that arm."
        )
    if not (in_arm & (outcome_observed == 1)).any():
        raise ValueError(
            f"No survivor of the {label} arm has an observed outcome; the outcome cannot be "
            "modelled in that arm."
        )


def _check_outcomes_exist(outcome, survival, stratum, name):
    missing = np.flatnonzero((survival == 0) & np.isnan(outcome))
    if missing.size:
        raise ValueError(
            f"`y` is missing (NaN or not numeric) for {missing.size} unit(s) with `{name}` == 0, "
            f"at row positions {missing[:5].tolist()}{' ...' if missing.size > 5 else ''}. The "
            f"effect in the {stratum!r} stratum needs the outcomes of those units. When the "
            "outcome does not exist for them (truncation by death), only the always-survivor "
            "effect exists: use stratum='always_survivor'."
        )


def _outcome_values(outcome, survival, status_known, all_outcomes=False):
    """``y`` as floats. Non-survivors' values are ignored: text, '' or missing markers there
    become NaN; a survivor's value must be a number."""
    if outcome.dtype.kind in "biuf":
        return outcome.astype(float)
    may_hold = (survival == 1) | (status_known == 0 if status_known is not None else False)
    may_hold = may_hold | all_outcomes
    values = np.full(outcome.shape[0], np.nan)
    bad = []
    for i in np.flatnonzero(may_hold):
        v = outcome[i]
        if is_real(v):
            values[i] = float(v)
        elif not is_missing(v) and survival[i] == 1:
            bad.append(i)
    if bad:
        raise TypeError(
            f"`y` must be numeric for every survivor (survival == 1); {len(bad)} survivor(s) "
            f"have non-numeric values such as {[outcome[i] for i in bad[:5]]} at row position(s) "
            f"{[int(i) for i in bad[:5]]}. Non-survivors' values are ignored (they may be text, "
            "'' or missing); convert the survivors' outcomes to numbers."
        )
    return values


def _check_squares(values, name, remedy):
    """Variances need squared sums: refuse values whose squares overflow double precision."""
    if values.size:
        with np.errstate(over="ignore"):
            # Margin 100: influence values can be several times the values themselves.
            total = 100.0 * np.sum(np.square(values))
        if not np.isfinite(total):
            raise ValueError(
                f"`{name}` has values as large as {np.max(np.abs(values)):.3g}, whose squares "
                f"overflow double precision (standard errors would be infinite); {remedy}."
            )


def check_cluster_count(groups):
    """Cluster-robust errors need at least two clusters; returns the number of clusters."""
    n_clusters = pd.unique(np.asarray(groups)).size
    if n_clusters < 2:
        raise ValueError(
            f"`groups` has {n_clusters} cluster; cluster-robust standard errors need at least "
            "two (with one, the variance between clusters cannot be estimated). Drop `groups` "
            "or give the real cluster labels."
        )
    return n_clusters


def check_level(level):
    """Validate a confidence level."""
    if not isinstance(level, int | float) or not 0 < level < 1:
        raise ValueError(f"`level` must be a number strictly between 0 and 1; got {level!r}.")
    return float(level)


def check_choice(value, name, allowed):
    if value not in allowed:
        raise ValueError(f"`{name}` must be one of {list(allowed)}; got {value!r}.")
    return value


def intermediate_alias(survival, intermediate):
    """``(values, name)`` of the binary post-treatment variable given as exactly one of the two."""
    if (survival is None) == (intermediate is None):
        raise TypeError(
            "Pass exactly one of `survival` and `intermediate` (the same 0/1 post-treatment "
            "variable under two names); got " + ("both." if survival is not None else "neither.")
        )
    return (survival, "survival") if intermediate is None else (intermediate, "intermediate")
