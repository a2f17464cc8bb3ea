"""Bootstrap inference for any estimator: refit resamples, or perturb influence values.

Both methods draw every replicate from its own :class:`numpy.random.SeedSequence` child, so a
given ``random_state`` gives the same replicates for any ``n_jobs`` and any joblib backend
(threads, processes, or a ``dask.distributed`` cluster through ``joblib.parallel_config``).
"""

from __future__ import annotations

import inspect
import os
import warnings

import numpy as np
import pandas as pd
from joblib import delayed
from sklearn.base import clone

from .._validation import check_choice, check_level, intermediate_alias
from .._warnings import warn_at_caller
from ..tables import SummaryTable
from ._display import BootstrapDisplay
from ._failures import _check_failures, failure_reasons
from ._intervals import bca_interval, influence_acceleration, percentile_interval
from ._refits import Inputs, influence_matrix, refit_block, refit_jackknife_acceleration, statistics
from ._resampling import multiplier_contributions, multiplier_draws, spawn_seeds
from ._standard_errors import normal_interval, reference_dof
from ._tasks import run_tasks

__all__ = ["bootstrap", "BootstrapResult"]

_RESAMPLE_TASKS = 100  # tasks per run: enough to balance workers and move a progress bar
_MULTIPLIER_BLOCK = 250  # replicates per multiplier task


def bootstrap(
    estimator,
    X,
    y,
    *,
    treatment,
    survival=None,
    intermediate=None,
    n_resamples=999,
    method="resample",
    multiplier="rademacher",
    stratify=True,
    groups=None,
    sample_weight=None,
    n_jackknife_groups=25,
    n_jobs=None,
    random_state=None,
    progress=None,
):
    """Bootstrap distribution of an estimator's survivor average causal effect (or bounds).

    Parameters
    ----------
    estimator : estimator
        Unfitted template (it is cloned, never modified), e.g. :class:`PrincipalScoreWeighting`.
        After ``fit`` it must expose ``effect_`` (one statistic, ``"effect"``) or ``lower_`` and
        ``upper_`` (two statistics, ``"lower"`` and ``"upper"``, as bounds do). Clones get
        ``n_bootstrap=0`` where that parameter exists, so no bootstrap runs inside another.
    X, y, treatment, survival : array-like
        As in the estimator's ``fit``.
    intermediate : array-like, optional
        ``survival`` under its general name (give exactly one of the two).
    n_resamples : int, default=999
    method : {"resample", "multiplier"}, default="resample"
        ``"resample"`` redraws rows and refits every model (valid for any learner).
        ``"multiplier"`` refits nothing: each replicate adds ``sum_i xi_i w_i IF_i / sum w`` to
        the estimate, with the fitted ``influence_`` values and random multipliers ``xi``.
    multiplier : {"rademacher", "gaussian"}, default="rademacher"
        Law of the multipliers (``method="multiplier"`` only). Rademacher signs are the faster.
    stratify : bool, default=True
        Resample within each arm, keeping the arm sizes fixed (a randomized design's sampling).
    groups : array-like of shape (n_samples,), optional
        Cluster labels: whole clusters are resampled (within arms if each cluster lies in one
        arm), and the multiplier method draws one multiplier per cluster. At least two
        clusters are needed; with fewer than 30 the estimator warns (:class:`FewClustersWarning`)
        and the ``"normal"`` interval uses Student's t with ``G - 1`` degrees of freedom.
    sample_weight : array-like of shape (n_samples,), optional
        Passed to every fit; resampled rows keep their weights.
    n_jackknife_groups : int, default=25
        Leave-one-group-out blocks per stratum for the BCa acceleration of the resample method
        (refits run only when a BCa interval is asked for). Strata with fewer units are
        jackknifed one unit at a time.
    n_jobs : int or None, default=None
        joblib workers; ``None`` follows the active ``joblib.parallel_config``.
    random_state : int, SeedSequence, Generator or None, default=None
        Root of the per-replicate seeds. Model parameters named ``random_state`` that are left
        at ``None`` are seeded per replicate too, so refits are reproducible.
    progress : bool or None, default=None
        Show a tqdm progress bar. ``None`` shows one only when standard error is a terminal and
        the run lasts more than a few seconds.

    Returns
    -------
    BootstrapResult
        ``estimate``, ``replicates``, ``std_error``, ``conf_int(level, kind)``, ``n_failed``,
        ``summary()``.

    Raises
    ------
    RuntimeError
        When more than 1% of the resamples cannot be fitted.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> result = ps.bootstrap(ps.PrincipalScoreWeighting(), data.X, data.y,
    ...     treatment=data.treatment, survival=data.survival, method="multiplier",
    ...     n_resamples=500, random_state=0)
    >>> low, high = result.conf_int(0.95, kind="percentile")
    >>> bool(low < data.true_effect < high)
    True
    """
    _check_params(
        estimator, n_resamples, method, multiplier, stratify, progress, n_jackknife_groups
    )
    survival, _ = intermediate_alias(survival, intermediate)
    inputs = Inputs(X, y, treatment, survival, sample_weight, groups)
    template = clone(estimator)
    if "n_bootstrap" in template.get_params(deep=False):
        template.set_params(n_bootstrap=0)
    fitted = inputs.fit(clone(template), point=True)
    names, estimate = statistics(fitted)
    seeds = spawn_seeds(random_state, n_resamples + 1)
    seeds, jackknife_seed = seeds[:-1], seeds[-1]
    notes = []
    if method == "multiplier":
        contributions = multiplier_contributions(
            influence_matrix(fitted, names, inputs.n), inputs.sample_weight, inputs.groups
        )
        blocks = [
            seeds[i : i + _MULTIPLIER_BLOCK] for i in range(0, n_resamples, _MULTIPLIER_BLOCK)
        ]
        draws = run_tasks(
            (delayed(multiplier_draws)(contributions, block, multiplier) for block in blocks),
            [len(b) for b in blocks],
            n_jobs,
            progress,
            "multiplier bootstrap",
        )
        values = estimate + np.vstack(draws)
        failures = []
        acceleration = influence_acceleration(contributions)
        if "ignored" in str(getattr(fitted, "std_error_method_", "")):
            notes.append(
                "The influence values ignore the estimation of the nuisance models, and so do "
                "these replicates; use method='resample' for an interval that accounts for it."
            )
            warn_at_caller(notes[-1], UserWarning)
    else:
        size = -(-n_resamples // _RESAMPLE_TASKS)
        blocks = [seeds[i : i + size] for i in range(0, n_resamples, size)]
        parent = os.getpid()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # thousands of refits repeat the point fit's warnings
            results = run_tasks(
                (
                    delayed(refit_block)(template, *inputs.arrays, block, stratify, parent)
                    for block in blocks
                ),
                [len(b) for b in blocks],
                n_jobs,
                progress,
                "bootstrap refits",
            )
        results = [r for block in results for r in block]
        failures = [message for _, message in results if message is not None]
        values = np.array([v if v is not None else np.full(len(names), np.nan) for v, _ in results])
        acceleration = None
    _check_failures(failures, n_resamples)
    replicates = pd.DataFrame(values, columns=list(names))
    replicates.index.name = "replicate"
    if failures:
        replicates = replicates[np.isfinite(values).all(axis=1)]  # failed fits gave NaN rows

    def jackknife():
        return refit_jackknife_acceleration(
            template, inputs, jackknife_seed, stratify, n_jackknife_groups, n_jobs
        )

    return BootstrapResult(
        estimate=pd.Series(estimate, index=list(names)),
        dof=reference_dof(None if inputs.groups is None else pd.unique(inputs.groups).size),
        replicates=replicates,
        n_resamples=n_resamples,
        n_failed=len(failures),
        method=method if method == "resample" else f"multiplier ({multiplier})",
        acceleration=acceleration if acceleration is not None else jackknife,
        notes=_describe(method, stratify, groups is not None, failures, notes),
    )


class BootstrapResult(BootstrapDisplay):
    """Replicates of a bootstrap and the intervals they give.

    With one statistic (``"effect"``) ``estimate`` and ``std_error`` are floats and
    :meth:`conf_int` returns ``(low, high)``; with several (bounds: ``"lower"``, ``"upper"``)
    they are Series and :meth:`conf_int` returns a DataFrame with columns ``low`` and ``high``.

    Attributes
    ----------
    estimate : float or Series
        The point estimate from the full data.
    replicates : DataFrame
        One row per successful replicate (index: replicate number), one column per statistic.
    std_error : float or Series
        Standard deviation of the replicates (``ddof=1``).
    n_resamples, n_failed : int
        Replicates asked for, and replicates whose fit failed (left out).
    method : str
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

    def conf_int(self, level=0.95, kind="percentile"):
        """Confidence interval(s) at ``level``.

        Parameters
        ----------
        level : float, default=0.95
        kind : {"percentile", "bca", "normal"}, default="percentile"
            ``"bca"`` corrects the percentiles for bias and skewness (Efron 1987); for the
            resample method its acceleration needs one refit per jackknife block.
            ``"normal"`` is ``estimate +/- z * std_error``; with fewer than 30 clusters in
            ``groups``, ``z`` is the quantile of Student's t with ``G - 1`` degrees of freedom.
        """
        level = check_level(level)
        check_choice(kind, "kind", ("percentile", "bca", "normal"))
        names = self._estimate.index
        if kind == "percentile":
            low, high = percentile_interval(self.replicates.to_numpy(), level)
        elif kind == "bca":
            acceleration = np.atleast_1d(self.acceleration)
            low, high = bca_interval(
                self.replicates.to_numpy(), self._estimate.to_numpy(), acceleration, level
            )
        else:
            se = self.replicates.std(ddof=1)
            low, high = np.transpose(
                [normal_interval(e, s, level, dof=self._dof)
                 for e, s in zip(self._estimate, se, strict=True)]  # fmt: skip
            )
        if len(names) == 1:
            return float(low[0]), float(high[0])
        return pd.DataFrame({"low": low, "high": high}, index=names)

    def summary(self, level=0.95, kind="percentile"):
        """One row per statistic: estimate, standard error and interval; notes in ``attrs``."""
        interval = self.conf_int(level, kind)
        if isinstance(interval, tuple):
            interval = pd.DataFrame([interval], columns=["low", "high"], index=self._estimate.index)
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
        table.attrs["notes"] = [
            *self.notes,
            f"{level:.0%} {kind} interval from {len(self.replicates)} replicates.",
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
            interval = self.conf_int(0.95, kind="percentile")
            if isinstance(interval, tuple):
                interval = pd.DataFrame([interval], columns=["low", "high"],
                                        index=self._estimate.index)  # fmt: skip
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


def _describe(method, stratify, clustered, failures, extra):
    if method == "multiplier":
        text = (
            "Multiplier bootstrap: each replicate perturbs the estimate by randomly weighted "
            "influence values (no refits)"
        )
        text += ", one multiplier per cluster." if clustered else "."
    else:
        where = ""
        if stratify:
            where = " within each arm" + (" (if every cluster lies in one arm)" * clustered)
        text = (
            f"Resample bootstrap: {'whole clusters' if clustered else 'rows'} drawn with "
            f"replacement{where}, every model refitted."
        )
    notes = [text, *extra]
    if failures:
        reasons = "; ".join(f"{count}: {reason}" for reason, count in
                            list(failure_reasons(failures).items())[:3])  # fmt: skip
        notes.append(
            f"{len(failures)} resamples could not be estimated and are left out ({reasons})."
        )
    return notes


def _check_params(estimator, n_resamples, method, multiplier, stratify, progress, n_groups):
    if isinstance(estimator, type):
        raise TypeError(
            f"`estimator` must be an estimator instance; got the class {estimator.__name__}. "
            f"Pass {estimator.__name__}() (with its settings) instead."
        )
    if not (hasattr(estimator, "fit") and hasattr(estimator, "get_params")):
        raise TypeError(
            f"`estimator` must be a scikit-learn style estimator with fit and get_params; got "
            f"{type(estimator).__name__}."
        )
    parameters = inspect.signature(estimator.fit).parameters
    open_keywords = any(p.kind is inspect.Parameter.VAR_KEYWORD for p in parameters.values())
    if not (open_keywords or {"treatment", "survival"} <= set(parameters)):
        raise TypeError(
            f"`estimator` must estimate a survivor average causal effect (or its bounds), with "
            f"fit(X, y, treatment=..., survival=...); {type(estimator).__name__}.fit takes no "
            "`treatment` and `survival`. Pass PrincipalScoreWeighting(), OutcomeRegression(), "
            "MultiplyRobust() or TrimmingBounds()."
        )
    for value, name, low in ((n_resamples, "n_resamples", 2), (n_groups, "n_jackknife_groups", 2)):
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
            raise ValueError(f"`{name}` must be an integer >= {low}; got {value!r}.")
    check_choice(method, "method", ("resample", "multiplier"))
    check_choice(multiplier, "multiplier", ("rademacher", "gaussian"))
    if not isinstance(stratify, bool | np.bool_):
        raise ValueError(f"`stratify` must be True or False; got {stratify!r}.")
    if progress not in (None, True, False):
        raise ValueError(f"`progress` must be None (automatic), True or False; got {progress!r}.")
