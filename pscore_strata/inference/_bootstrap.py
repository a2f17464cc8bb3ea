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

from .._validation import check_choice, intermediate_alias
from .._warnings import warn_at_caller
from ._failures import _check_failures, failure_reasons
from ._intervals import influence_acceleration
from ._refits import Inputs, influence_matrix, refit_block, refit_jackknife_acceleration, statistics
from ._resampling import multiplier_contributions, multiplier_draws, spawn_seeds
from ._result import BootstrapResult
from ._standard_errors import (
    reference_dof,
)
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
        After ``fit`` it must be a point estimate (``identification`` ``"point"``, or an
        ``effect_``: one statistic, ``"effect"``) or bounds (``"bounds"``, or ``lower_`` and
        ``upper_``: two statistics, ``"lower"`` and ``"upper"``). Clones get
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
        ``identification``, ``estimate``, ``replicates``, ``std_error``,
        ``conf_int(level, kind)``, ``statistic_intervals(level, kind)``, ``n_failed``,
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
