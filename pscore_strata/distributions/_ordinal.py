"""``ordinal_comparison``: binary and ordinal outcomes among always-survivors.

For an outcome with integer levels ``k``, the always-survivor distribution over the levels under
each arm is ``p_t(k) = F_t(k) - F_t(k - 1)`` (:mod:`._paths`), and

    theta = P(Y1 > Y0) + P(Y1 = Y0) / 2,   Y1 ~ p_1, Y0 ~ p_0 drawn independently

is the probability that a treated always-survivor drawn at random has a better level than an
independently drawn control always-survivor, ties counted half (the probabilistic index or
probability of superiority; for two independent samples it is the Mann-Whitney ``U / (n1 n0)``).
It compares the two marginal distributions; it is not the share of always-survivors whose own
level improves, which depends on the joint law of ``(Y(1), Y(0))`` and is not identified.
Its influence values follow by the delta method from those of the level probabilities.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .._validation import check_choice, check_level
from ..inference._standard_errors import estimator_dof, influence_std_error, reference_quantile
from ._cdf import _method_note, caution, stratum_notes
from ._conditional import MAX_LEVELS
from ._paths import cdf_path, outcome_rows, prepare

__all__ = ["ordinal_comparison", "OrdinalComparison", "superiority"]


def superiority(p1, p0, better="higher"):
    """``theta`` and its gradients in ``p1`` and ``p0`` (levels in increasing order)."""
    k = p1.size
    index = np.arange(k)
    # a[i, j]: score of a treated level i against a control level j.
    difference = index[:, None] - index[None, :]
    wins = difference > 0 if better == "higher" else difference < 0
    a = wins + 0.5 * (index[:, None] == index[None, :])
    return float(p1 @ a @ p0), a @ p0, a.T @ p1


@dataclass
class OrdinalComparison:
    """Always-survivor level distributions and the probability of a better level.

    Attributes
    ----------
    levels : DataFrame
        Per level: ``treated``, ``control`` (probabilities), their standard errors, the
        ``difference`` (treated - control) with ``std_error_difference`` and a normal interval
        (``ci_low_difference``, ``ci_high_difference``).
    probability, std_error, ci_low, ci_high : float
        ``P(Y1 better than Y0) + P(tie)/2`` for independent draws from the two always-survivor
        distributions, with its standard error and normal interval (clipped to [0, 1]).
    influence : ndarray of shape (n_rows,)
    better : str
    level : float
        Level of the intervals.
    notes : list of str
    """

    levels: pd.DataFrame
    probability: float
    std_error: float
    ci_low: float
    ci_high: float
    influence: np.ndarray = field(repr=False)
    better: str = "higher"
    level: float = 0.95
    notes: list = field(default_factory=list)


def ordinal_comparison(estimator, *, X=None, better="higher", level=0.95, cdf_model=None):
    """Compare the always-survivor distributions of a binary or ordinal outcome.

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
        Fitted on an outcome whose survivor values are integers (at most 20 levels).
    X : array-like, optional
        The covariates the estimator was fitted with (outcome regression and multiply robust).
    better : {"higher", "lower"}, default="higher"
        Which end of the scale is the better outcome.
    level : float, default=0.95
    cdf_model : classifier, optional
        As in :func:`survivor_distribution`.

    Returns
    -------
    OrdinalComparison

    Examples
    --------
    >>> import numpy as np, pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> y = np.clip(np.round(data.y), -1, 3)  # a five-level score
    >>> est = ps.PrincipalScoreWeighting().fit(
    ...     data.X, y, treatment=data.treatment, survival=data.survival)
    >>> result = ps.ordinal_comparison(est)
    >>> bool(result.probability > 0.5)
    True
    """
    check_choice(better, "better", ("higher", "lower"))
    level = check_level(level)
    prepared = prepare(estimator, X, cdf_model)
    data = prepared.data
    levels = np.unique(data.outcome[outcome_rows(prepared)]) + 0.0  # no -0.0 level
    if levels.size > MAX_LEVELS or not np.all(levels == np.round(levels)):
        raise ValueError(
            f"`ordinal_comparison` needs an outcome with integer levels (at most {MAX_LEVELS}); "
            f"the survivors' outcome has {levels.size} distinct values"
            f"{'' if np.all(levels == np.round(levels)) else ', not all integers'}. Code the "
            "levels as integers, or use ps.quantile_effects for a continuous outcome."
        )
    if levels.size < 2:
        raise ValueError("The survivors' outcome takes one value only: nothing to compare.")
    path = cdf_path(prepared, levels)
    probabilities, influences = {}, {}
    for arm in ("treated", "control"):
        cdf = getattr(path, arm)
        cdf[-1] = 1.0  # every always-survivor has a level at or below the largest one
        probabilities[arm] = np.diff(np.concatenate([[0.0], cdf]))
        infl = np.asarray(getattr(path, f"influence_{arm}"))  # at most 20 levels: explicit
        infl[:, -1] = 0.0
        influences[arm] = np.diff(np.column_stack([np.zeros(infl.shape[0]), infl]), axis=1)
    theta, gradient_treated, gradient_control = superiority(
        probabilities["treated"], probabilities["control"], better
    )
    influence = influences["treated"] @ gradient_treated + influences["control"] @ gradient_control
    w, groups = data.sample_weight, data.groups
    se = influence_std_error(influence, w, groups)
    z = reference_quantile(level, estimator_dof(estimator))  # t with few clusters
    table = pd.DataFrame({
        "level": levels,
        "treated": probabilities["treated"],
        "control": probabilities["control"],
        "difference": probabilities["treated"] - probabilities["control"],
        "std_error_treated": influence_std_error(influences["treated"], w, groups),
        "std_error_control": influence_std_error(influences["control"], w, groups),
        "std_error_difference": influence_std_error(
            influences["treated"] - influences["control"], w, groups),
    })  # fmt: skip
    table["ci_low_difference"] = table["difference"] - z * table["std_error_difference"]
    table["ci_high_difference"] = table["difference"] + z * table["std_error_difference"]
    always = prepared.stratum == "always_survivor"
    member = "always-survivor" if always else f"{prepared.words} unit"
    members = "always-survivors" if always else f"{prepared.words} units"
    notes = [
        f"probability: chance that a treated {member} drawn at random has a {better} "
        f"level than an independently drawn control {member}, ties counted half. It "
        f"compares the two marginal distributions; it is not the share of {members} "
        "whose own level improves (not identified). 0.5 means no difference in this sense.",
        _method_note(prepared, estimator).replace("CDFs: ", "Level shares: from the CDFs of ", 1),
        *stratum_notes(prepared, estimator.monotonicity),
        caution(prepared),
    ]
    return OrdinalComparison(
        levels=table, probability=theta, std_error=se,
        ci_low=float(max(0.0, theta - z * se)), ci_high=float(min(1.0, theta + z * se)),
        influence=influence, better=better, level=level, notes=notes,
    )  # fmt: skip
