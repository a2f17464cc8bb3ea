"""The result of a bootstrap: its replicates, and the intervals they give.

Intervals are asked for as from every result of the package: :meth:`BootstrapResult.conf_int`
returns ``(low, high)`` for the effect, whether the replicates are of a point estimate or of
bounds (``identification``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._results import BOUNDS, POINT
from .._validation import check_choice, check_level
from ..tables import SummaryTable
from ._display import BootstrapDisplay
from ._intervals import bca_interval, percentile_interval
from ._standard_errors import (
    imbens_manski_critical_value,
    normal_interval,
    reference_distribution,
)

__all__ = ["BootstrapResult"]


class BootstrapResult(BootstrapDisplay):
    """Replicates of a bootstrap and the intervals they give.

    With one statistic (``"effect"``) ``estimate`` and ``std_error`` are floats; with bounds
    (``"lower"``, ``"upper"``) they are Series. :meth:`conf_int` returns ``(low, high)`` in both
    cases, as the estimators and :class:`~pscore_strata.TrimmingBounds` do: for bounds an
    interval for the partially identified effect. :meth:`statistic_intervals` gives one
    interval per statistic.

    Attributes
    ----------
    identification : {"point", "bounds"}
        What was bootstrapped: a point estimate of the effect, or bounds on it.
    estimate : float or Series
        The point estimate from the full data.
    replicates : DataFrame
        One row per successful replicate (index: replicate number), one column per statistic.
    std_error : float or Series
        Standard deviation of the replicates (``ddof=1``).
    n_resamples, n_failed : int
        Replicates asked for, and replicates whose fit failed (left out).
    method : str
    acceleration : float or Series
        BCa acceleration per statistic (given, or a function computed on first use).
    dof : int or None
        Degrees of freedom of the ``"normal"`` interval's t reference (few clusters).
    notes : list of str
    """

    def __init__(self, *, estimate, replicates, n_resamples, n_failed, method, acceleration, notes,
                 dof=None):  # fmt: skip
        self._estimate = estimate
        self._dof = dof
        self.replicates = replicates
        self.n_resamples = n_resamples
        self.n_failed = n_failed
        self.method = method
        self.notes = notes
        self._acceleration = acceleration

    def _unwrap(self, series):
        return float(series.iloc[0]) if len(series) == 1 else series

    @property
    def estimate(self):
        return self._unwrap(self._estimate)

    @property
    def std_error(self):
        return self._unwrap(self.replicates.std(ddof=1))

    @property
    def acceleration(self):
        """BCa acceleration per statistic (from jackknife refits, computed on first use)."""
        if callable(self._acceleration):
            self._acceleration = np.asarray(self._acceleration(), dtype=float)
        return self._unwrap(pd.Series(self._acceleration, index=self._estimate.index))

    @property
    def identification(self):
        """``"bounds"`` when the statistics are bounds (``lower``, ``upper``), else ``"point"``."""
        return BOUNDS if tuple(self._estimate.index) == ("lower", "upper") else POINT

    def conf_int(self, level=0.95, kind="percentile", coverage="effect"):
        """Confidence interval for the effect at ``level``: ``(low, high)``, for bounds too.

        For a point estimate, the interval of its replicates. For bounds the effect is only
        known to lie in ``[lower, upper]``; the interval runs from the low end of the lower
        bound's interval to the high end of the upper bound's, each at the level that gives
        the coverage asked for, so it has the shape, and the meaning, of
        :meth:`TrimmingBounds.conf_int <pscore_strata.TrimmingBounds.conf_int>`.

        Parameters
        ----------
        level : float, default=0.95
            Confidence level, strictly between 0 and 1.
        kind : {"percentile", "bca", "normal"}, default="percentile"
            ``"bca"`` corrects the percentiles for bias and skewness (Efron 1987); for the
            resample method its acceleration needs one refit per jackknife block.
            ``"normal"`` is ``estimate +/- z * std_error``; with fewer than 30 clusters in
            ``groups``, ``z`` is the quantile of Student's t with ``G - 1`` degrees of freedom.
        coverage : {"effect", "identified_set"}, default="effect"
            Bounds only. ``"effect"`` covers the true effect with probability ``level``
            (Imbens & Manski 2004): each end uses the two-sided level ``2 Phi(c) - 1`` with
            ``c`` the Imbens-Manski critical value from the bootstrap standard errors, between
            ``2 level - 1`` (wide bounds: one end at a time can be missed) and ``level``
            (bounds that meet). With ``kind="normal"`` this is the Imbens-Manski interval with
            bootstrap standard errors. ``"identified_set"`` covers the whole set at once: each
            end at ``level`` (union bound), wider.

        Returns
        -------
        (low, high) : tuple of float
        """
        level = check_level(level)
        check_choice(coverage, "coverage", ("effect", "identified_set"))
        if self.identification == POINT:
            low, high = self._intervals(level, kind)
            return float(low[0]), float(high[0])
        each = level
        if coverage == "effect":
            se = self.replicates.std(ddof=1)
            width = float(self._estimate["upper"] - self._estimate["lower"])
            c = imbens_manski_critical_value(width, se["lower"], se["upper"], level, self._dof)
            # c = 0 (a level below one half with wide bounds) puts each end at its median.
            each = max(2.0 * float(reference_distribution(self._dof).cdf(c)) - 1.0, 1e-12)
        low, high = self._intervals(each, kind)
        return float(low[0]), float(high[1])

    def statistic_intervals(self, level=0.95, kind="percentile"):
        """One confidence interval per statistic (for bounds: one for each bound).

        Parameters
        ----------
        level : float, default=0.95
            Confidence level of each interval, strictly between 0 and 1.
        kind : {"percentile", "bca", "normal"}, default="percentile"
            As in :meth:`conf_int`.

        Returns
        -------
        pandas.DataFrame
            Index: the statistics (``effect``, or ``lower`` and ``upper``); columns ``low`` and
            ``high``.
        """
        low, high = self._intervals(check_level(level), kind)
        return pd.DataFrame({"low": low, "high": high}, index=self._estimate.index)

    def _intervals(self, level, kind):
        check_choice(kind, "kind", ("percentile", "bca", "normal"))
        if kind == "percentile":
            return percentile_interval(self.replicates.to_numpy(), level)
        if kind == "bca":
            acceleration = np.atleast_1d(self.acceleration)
            return bca_interval(
                self.replicates.to_numpy(), self._estimate.to_numpy(), acceleration, level
            )
        se = self.replicates.std(ddof=1)
        return np.transpose(
            [normal_interval(e, s, level, dof=self._dof)
             for e, s in zip(self._estimate, se, strict=True)]  # fmt: skip
        )

    def summary(self, level=0.95, kind="percentile"):
        """One row per statistic: estimate, standard error and interval; notes in ``attrs``.

        Parameters
        ----------
        level : float, default=0.95
            Level of each statistic's interval.
        kind : {"percentile", "bca", "normal"}, default="percentile"
            As in :meth:`conf_int`.

        Returns
        -------
        SummaryTable
            A pandas DataFrame: index the statistics, columns ``estimate``, ``std_error``,
            ``ci_low``, ``ci_high`` (each statistic's own interval, as in
            :meth:`statistic_intervals`) and ``n_replicates``; ``attrs["notes"]``.
        """
        interval = self.statistic_intervals(level, kind)
        table = pd.DataFrame(
            {
                "estimate": self._estimate,
                "std_error": self.replicates.std(ddof=1),
                "ci_low": interval["low"],
                "ci_high": interval["high"],
                "n_replicates": len(self.replicates),
            }
        )
        table.index.name = "statistic"
        effect_note = []
        if self.identification == BOUNDS:
            low, high = self.conf_int(level, kind)
            effect_note = [
                f"ci_low and ci_high bound each bound; conf_int({level:g}) gives the interval for "
                f"the effect itself, [{low:.4g}, {high:.4g}] (Imbens-Manski: it covers the "
                "effect wherever it lies between the bounds)."
            ]
        table.attrs["notes"] = [
            *self.notes,
            f"{level:.0%} {kind} interval from {len(self.replicates)} replicates.",
            *effect_note,
            "The always-survivor stratum is latent and the assumptions behind these numbers "
            "(monotonicity and, for point estimates, principal ignorability) cannot be tested "
            "from the data; the bootstrap measures sampling error only. Do not base decisions "
            "about individual patients on them; follow the study protocol and local "
            "regulation, and have a qualified statistician review the analysis.",
        ]
        return SummaryTable(table, title="Bootstrap", level=level)

    def __repr__(self):
        # What an analyst wants at a glance: each statistic's estimate, SE and 95% percentile
        # interval (the default of conf_int), then how the replicates were drawn.
        if len(self.replicates) >= 2:
            interval = self.statistic_intervals(0.95, kind="percentile")
            se = self.replicates.std(ddof=1)
            parts = [
                f"{name}={self._estimate[name]:.4g} (SE {se[name]:.3g}, 95% percentile CI "
                f"{interval.loc[name, 'low']:.4g} to {interval.loc[name, 'high']:.4g})"
                for name in self._estimate.index
            ]
        else:
            parts = [f"{name}={self._estimate[name]:.4g}" for name in self._estimate.index]
        return (
            f"BootstrapResult({', '.join(parts)}; method={self.method!r}, "
            f"n_resamples={self.n_resamples}, n_failed={self.n_failed})"
        )
