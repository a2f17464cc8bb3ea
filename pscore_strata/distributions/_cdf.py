"""``survivor_distribution``: always-survivor CDFs per arm with pointwise and uniform bands."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .._validation import check_level
from ..estimands._strata import ignorability_statement
from ..inference._resampling import gaussian_draws, spawn_seeds
from ..inference._standard_errors import estimator_dof, reference_quantile
from ._expansion import expansion_covariance
from ._paths import cdf_path, outcome_rows, prepare

__all__ = ["survivor_distribution", "SurvivorDistribution", "default_values", "observed_survivors",
           "CAUTION", "caution"]

# Default evaluation points (the grid): every distinct survivor outcome up to this many, else this
# many at evenly spaced ranks of the pooled survivor outcomes. The covariance of the band costs
# O(values^2) memory and O(n_rows x bases^2 + values^2 x bases) time (``_expansion``).
MAX_DEFAULT_VALUES = 200

CAUTION = (
    "The always-survivor stratum is latent and principal ignorability and monotonicity are "
    "untestable; these distributions describe a group, not any individual, and must not guide "
    "individual decisions. Interpret them under the study protocol, local regulation and with a "
    "qualified statistician."
)


def caution(prepared):
    """:data:`CAUTION`, worded for the target stratum of ``prepared``."""
    if prepared.stratum == "always_survivor":
        return CAUTION
    return CAUTION.replace("always-survivor", prepared.words, 1)


def stratum_notes(prepared, monotonicity):
    """For a stratum other than the always-survivors, the assumption its distributions need."""
    if prepared.stratum == "always_survivor":
        return []
    return [
        "Distributions: principal ignorability is needed for the indicators 1{Y <= v} at "
        "every v (the strata sharing a cell have the same outcome distribution given X, not "
        "only the same mean). " + ignorability_statement(prepared.stratum, monotonicity)
    ]


def observed_survivors(data):
    """Rows whose outcome is observed: survivors (with missing data, of known status who
    responded)."""
    rows = data.survival == 1
    if data.outcome_observed is not None:
        rows = rows & (data.outcome_observed == 1)
    return rows


def default_values(data, limit=MAX_DEFAULT_VALUES, rows=None):
    """The distinct observed survivor outcomes (``limit`` of them at evenly spaced ranks);
    ``rows``: those of these rows instead of the survivors (another stratum's cells)."""
    y = np.sort(data.outcome[observed_survivors(data) if rows is None else rows])
    distinct = y[np.concatenate([[True], y[1:] != y[:-1]])] if y.size else y  # np.unique's rule
    if distinct.size <= limit:
        return distinct
    ranks = np.round(np.linspace(0, y.size - 1, limit)).astype(int)
    return np.unique(y[ranks])


def check_values(values, name="values"):
    try:
        array = np.asarray(values, dtype=float).ravel()
    except (TypeError, ValueError):
        raise ValueError(f"`{name}` must be outcome values (numbers); got {values!r}.") from None
    if array.size == 0:
        raise ValueError(f"`{name}` is empty; give at least one outcome value.")
    if not np.all(np.isfinite(array)):
        raise ValueError(f"`{name}` must be finite numbers; got {values!r}.")
    return np.unique(array)


@dataclass
class SurvivorDistribution:
    """Always-survivor CDFs under each arm at ``values``, with standard errors and bands.

    Attributes
    ----------
    values : ndarray
    treated, control : ndarray
        ``P(Y(t) <= v | always-survivor)`` for ``t = 1, 0`` (the estimator's stratum in place
        of the always-survivors when it was fitted for another).
    std_error_treated, std_error_control : ndarray
    band_critical_treated, band_critical_control : float
        Multiplier-bootstrap quantile of ``max_v |F*(v) - F(v)| / se(v)``: the simultaneous band
        is ``F(v) +/- critical x se(v)``.
    naive_treated, naive_control : ndarray
        Empirical CDFs of the survivors (the stratum's cell) in each arm (sample-weighted, no
        principal score weights): what a survivor-only comparison shows, biased when treatment
        changes who survives.
    influence_treated, influence_control : array-like of shape (n_rows, n_values)
        Influence values in factored form (:class:`~pscore_strata.distributions._expansion.
        Expansion`): ``np.asarray`` gives the explicit matrix, ``[:, j]`` one column.
    level : float
    method : str
    notes : list of str
    dof : int or None
        Degrees of freedom of the pointwise intervals' t reference (fewer than 30 clusters:
        ``G - 1``); ``None``: the normal reference.
    stratum : str
        The principal stratum of the distributions (the estimator's ``stratum_``).
    """

    values: np.ndarray
    treated: np.ndarray
    control: np.ndarray
    std_error_treated: np.ndarray
    std_error_control: np.ndarray
    band_critical_treated: float
    band_critical_control: float
    naive_treated: np.ndarray
    naive_control: np.ndarray
    influence_treated: object = field(repr=False)
    influence_control: object = field(repr=False)
    level: float = 0.95
    method: str = ""
    notes: list = field(default_factory=list)
    dof: int | None = None
    stratum: str = "always_survivor"

    def to_frame(self):
        """One row per value: estimates, standard errors, pointwise intervals, bands, naive CDFs.

        Returns
        -------
        pandas.DataFrame
            Columns ``value``, ``treated``, ``control`` and their standard errors, pointwise
            interval ends and band ends at ``level``, and the naive survivor-only CDFs.
        """
        z = reference_quantile(self.level, self.dof)
        table = {"value": self.values}
        for arm in ("treated", "control"):
            estimate = getattr(self, arm)
            se = getattr(self, f"std_error_{arm}")
            critical = getattr(self, f"band_critical_{arm}")
            table[arm] = estimate
            table[f"{arm}_std_error"] = se
            table[f"{arm}_ci_low"] = np.clip(estimate - z * se, 0, 1)
            table[f"{arm}_ci_high"] = np.clip(estimate + z * se, 0, 1)
            table[f"{arm}_band_low"] = np.clip(estimate - critical * se, 0, 1)
            table[f"{arm}_band_high"] = np.clip(estimate + critical * se, 0, 1)
        table["naive_treated"] = self.naive_treated
        table["naive_control"] = self.naive_control
        frame = pd.DataFrame(table)
        frame.attrs["notes"] = list(self.notes)
        return frame


def _band_critical(covariance, standard_errors, level, n_draws, random_state):
    """``level`` quantile of the sup-t statistic over the values (multiplier bootstrap).

    The Gaussian multiplier draws come from the ``values x values`` covariance of the
    influence values, so memory is values x draws, never rows x values x draws.
    """
    # A value where the CDF is pinned at 0 or 1 has no variance; its standard error is then
    # rounding noise (a cumulative sum's), and noise over noise would decide the band.
    keep = standard_errors > 1e-6 * np.max(standard_errors, initial=0.0)
    if not keep.any():
        return float("nan")
    draws = gaussian_draws(covariance[np.ix_(keep, keep)], spawn_seeds(random_state, n_draws))
    sup = np.max(np.abs(draws) / standard_errors[keep], axis=1)
    return float(np.quantile(sup, level))


def naive_cdf(prepared, values, arm):
    """Weighted empirical CDF of the arm's observed survivors (of the stratum's cell in the arm)
    at sorted ``values``."""
    data = prepared.data
    rows = outcome_rows(prepared, arm)
    y, w = data.outcome[rows], data.sample_weight[rows]
    order = np.argsort(y, kind="stable")
    cumulative = np.concatenate([[0.0], np.cumsum(w[order])])
    return cumulative[np.searchsorted(y[order], values, side="right")] / w.sum()


def survivor_distribution(estimator, values=None, *, X=None, level=0.95, cdf_model=None,
                          n_draws=2000, random_state=0):  # fmt: skip
    """Always-survivor outcome distribution under each arm, from a fitted SACE estimator.

    Replacing ``Y`` by ``1{Y <= v}`` in the estimator's always-survivor mean gives
    ``F_t(v) = P(Y(t) <= v | always-survivor)`` (Ding & Lu 2017 for weighting; Jiang, Yang &
    Ding 2022 for the multiply robust form). Weighting gives the weighted empirical CDFs of each
    arm's survivors with the estimator's weights. Outcome regression and the multiply robust
    estimator need a conditional CDF model: distribution regression, one classifier per
    threshold of a grid (see :mod:`pscore_strata.distributions._conditional`), fitted on ``X``
    with the estimator's cross-fitting folds setting. Every estimate is monotonized by
    rearrangement (Chernozhukov, Fernandez-Val & Galichon 2010). The treatment and survival
    predictions are the estimator's own (with ``n_repeats > 1``, those of the repeat closest to
    the median); no such model is refitted. Methods and checks:
    ``docs/guide/derivations/distributions.md``.

    For an estimator fitted with another ``stratum`` (the outcome exists for every unit), these
    are that stratum's distributions: each arm's CDF from the stratum's cell in that arm
    (weighting reweights the cell as for the mean; the conditional CDF models are fitted among
    the arm's units in the cell), under principal ignorability for every ``1{Y <= v}``.

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
    values : array-like of float, optional
        Outcome values at which to evaluate the CDFs. Default: the distinct observed survivor
        outcomes (at most 200 of them, at evenly spaced ranks).
    X : array-like, optional
        The covariates the estimator was fitted with; required by outcome regression and the
        multiply robust estimator (not by weighting).
    level : float, default=0.95
        Level of the pointwise intervals and of the simultaneous band.
    cdf_model : classifier, optional
        Classifier of the conditional CDF models; ``None`` is unpenalized logistic regression,
        whose estimation the outcome regression's standard errors then include (M-estimation).
    n_draws : int, default=2000
        Multiplier-bootstrap draws (Gaussian multipliers of the influence values; one per
        cluster with ``groups``) for the simultaneous band.
    random_state : int or None, default=0
        Seeds the multiplier draws.

    Returns
    -------
    SurvivorDistribution

    References
    ----------
    Ding, P. & Lu, J. (2017). Principal stratification analysis using principal scores. JRSSB 79.
    Chernozhukov, V., Fernandez-Val, I. & Galichon, A. (2010). Quantile and probability curves
    without crossing. Econometrica 78.
    Chernozhukov, V., Fernandez-Val, I. & Melly, B. (2013). Inference on counterfactual
    distributions. Econometrica 81 (uniform bands by multiplier bootstrap).

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> est = ps.PrincipalScoreWeighting().fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> dist = ps.survivor_distribution(est, values=[0.0, 1.0, 2.0])
    >>> bool(dist.treated[1] < dist.control[1])  # Y(1) is shifted up by the effect
    True
    """
    level = check_level(level)
    if isinstance(n_draws, bool) or not isinstance(n_draws, int | np.integer) or n_draws < 100:
        raise ValueError(f"`n_draws` must be an integer >= 100; got {n_draws!r}.")
    prepared = prepare(estimator, X, cdf_model)
    data = prepared.data
    values = (default_values(data, rows=outcome_rows(prepared)) if values is None
              else check_values(values))  # fmt: skip
    path = cdf_path(prepared, values)
    w, groups = data.sample_weight, data.groups
    se, critical = {}, {}
    for arm in ("treated", "control"):
        covariance = expansion_covariance(getattr(path, f"influence_{arm}"), w, groups)
        se[arm] = np.sqrt(np.clip(np.diag(covariance), 0.0, None))
        critical[arm] = _band_critical(covariance, se[arm], level, n_draws, random_state)
    notes = [_method_note(prepared, estimator), *stratum_notes(prepared, estimator.monotonicity),
             caution(prepared)]  # fmt: skip
    return SurvivorDistribution(
        values=values, treated=path.treated, control=path.control,
        std_error_treated=se["treated"], std_error_control=se["control"],
        band_critical_treated=critical["treated"], band_critical_control=critical["control"],
        naive_treated=naive_cdf(prepared, values, 1),
        naive_control=naive_cdf(prepared, values, 0),
        influence_treated=path.influence_treated, influence_control=path.influence_control,
        level=level, method=prepared.method, notes=notes, dof=estimator_dof(estimator),
        stratum=prepared.stratum,
    )  # fmt: skip


def _method_note(prepared, estimator):
    sandwich = prepared.oriented.parametric is not None
    if prepared.method == "weighting":
        cells = ("survivors" if prepared.stratum == "always_survivor" else
                 f"units in the {prepared.words} stratum's cell")  # fmt: skip
        how = f"weighted empirical CDFs of each arm's {cells} with the principal score weights"
    else:
        c = prepared.conditional
        grid = (f"{c.thresholds.size} observed levels" if c.discrete
                else f"{c.thresholds.size} thresholds at survivor-outcome quantiles")  # fmt: skip
        kind = "outcome regression" if prepared.method == "regression" else "multiply robust"
        how = (f"{kind} with a conditional CDF model (distribution regression, "
               f"{prepared.cdf_model_name}, on {grid})")  # fmt: skip
        if prepared.method == "regression":
            sandwich = sandwich and c.parametric is not None
    if prepared.method == "robust":
        errors = "standard errors from the efficient influence function"
    elif sandwich:
        errors = "standard errors include the estimation of the default models (M-estimation)"
    else:
        errors = "standard errors treat the fitted models as known"
    return f"CDFs: {how}, rearranged to be monotone; {errors}."
