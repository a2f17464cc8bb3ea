"""The three SACE estimators from one fit of the nuisance models."""

from __future__ import annotations

from .._checked_once import checked_once
from ..estimands._methods import METHODS
from . import _estimators

__all__ = ["fit_estimators"]


def fit_estimators(X, y, *, treatment, survival=None, intermediate=None, sample_weight=None,
                   groups=None, covariates=None,
                   treatment_model=None, survival_model=None, outcome_model=None,
                   monotonicity="increasing", stratum="always_survivor", scale="difference",
                   n_folds=None, n_repeats=1, n_bootstrap=200, random_state=None, n_jobs=None,
                   missing="error", response_model=None, follow_up_model=None):  # fmt: skip
    """Fit the weighting, outcome regression and multiply robust estimators on one model fit.

    The five nuisance models (treatment, survival per arm, outcome per arm) are fitted once,
    by the multiply robust estimator, and handed to the other two with ``nuisance=``; the
    results are identical to three separate fits. Every parameter of the three estimators is
    taken here and passed on to each estimator that has it.

    Parameters
    ----------
    X, y, treatment, survival, intermediate, sample_weight, groups
        As in :meth:`PrincipalScoreWeighting.fit` (exactly one of ``survival`` and
        ``intermediate``).
    covariates : str or None, default=None
        A covariate formula over the DataFrame ``X`` (as in :class:`MultiplyRobust`): the
        design is learned once and every estimator applies it.
    treatment_model, survival_model, outcome_model, monotonicity, stratum, scale, n_folds, \
random_state
        As in :class:`MultiplyRobust`, shared by all three.
    n_repeats : int, default=1
        Repeats of cross-fitting with independent fold splits (needs ``n_folds``), as in
        :class:`MultiplyRobust`. The weighting and regression estimators read the same repeats'
        models, so all three effects are medians over the same fold splits.
    n_bootstrap : int, default=200
        The refitting bootstrap each estimator falls back on when its analytic standard error
        does not account for the models (weighting and regression: models outside the
        sandwich; multiply robust: flexible learners without ``n_folds``); it refits the models
        in each resample. ``0`` never bootstraps.
    n_jobs : int or None, default=None
        Parallel workers of that bootstrap (joblib).
    missing, response_model, follow_up_model
        As in :class:`MultiplyRobust`: ``missing="at_random"`` fits the follow-up and response
        models once, shared by all three estimators.

    Returns
    -------
    dict
        ``{"weighting": PrincipalScoreWeighting, "regression": OutcomeRegression,
        "robust": MultiplyRobust}``, fitted.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> fits = ps.fit_estimators(data.X, data.y, treatment=data.treatment,
    ...                          survival=data.survival)
    >>> sorted(fits)
    ['regression', 'robust', 'weighting']
    >>> fits["weighting"].std_error_method_
    'sandwich'
    """
    given = dict(covariates=covariates, treatment_model=treatment_model,
                 survival_model=survival_model, outcome_model=outcome_model,
                 monotonicity=monotonicity, stratum=stratum, scale=scale, n_folds=n_folds,
                 n_bootstrap=n_bootstrap, random_state=random_state, n_jobs=n_jobs,
                 missing=missing, response_model=response_model,
                 follow_up_model=follow_up_model)  # fmt: skip
    arguments = dict(treatment=treatment, survival=survival, intermediate=intermediate,
                     sample_weight=sample_weight, groups=groups)  # fmt: skip
    # Every method of the registry; the one that reads the most models (the outcome models,
    # with an orthogonal formula) fits them, the others share its fit.
    methods = sorted(METHODS.values(), key=lambda m: (not m.uses_outcome_model, not m.orthogonal))
    estimators = {}
    for method in methods:
        cls = getattr(_estimators, method.estimator)
        names = cls._get_param_names()
        estimators[method.name] = cls(**{k: v for k, v in given.items() if k in names})
    first = estimators[methods[0].name]
    first.set_params(n_repeats=n_repeats)
    with checked_once():  # the same inputs: validated and fingerprinted once
        first.fit(X, y, **arguments)
        # Every repeat's models (one fit without n_repeats): the others take medians over them.
        shared = first._repeat_fits if len(first._repeat_fits) > 1 else first.nuisance_
        for method in methods[1:]:
            estimator = estimators[method.name]
            if covariates is not None:
                # The design learned by the first fit, applied (not learned again) by the others.
                estimator._given_design = first.design_
            estimator.fit(X, y, nuisance=shared, **arguments)
    return {name: estimators[name] for name in METHODS}
