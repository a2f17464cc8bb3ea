"""Estimators of the survivor average causal effect (SACE).

Each class is a thin scikit-learn estimator over the shared machinery: validation, the nuisance
layer (:mod:`pscore_strata.nuisance`), one method of :data:`pscore_strata.estimands.METHODS`
(``method``: its formula, whether it reads the outcome models, how its standard error is
obtained) and the shared fit and result logic (:mod:`._base`).
"""

from __future__ import annotations

from .._results import POINT
from ..nuisance._sandwich import flexible_model_reason
from ._base import SurvivorEffectEstimator
from ._display import EstimatorDisplay
from ._heterogeneity import ConditionalEffectMixin

__all__ = ["PrincipalScoreWeighting", "OutcomeRegression", "MultiplyRobust"]

_COMMON_PARAMETERS = """
    covariates : str or None, default=None
        The covariates as a formula over the DataFrame ``X`` given to :meth:`fit`, in the
        formulaic library's grammar: ``"age + severity + C(site) + bs(bmi, 4)"`` (``C()``
        categorical, ``bs()`` B-spline, ``a:b`` interaction, ``np.log(a)``). The design is
        learned at fit (``design_``: levels, knots; no intercept, categorical terms coded
        against their first level) and applied to the ``X`` of :meth:`predict_proba` and
        :meth:`predict_effect`. ``None``: ``X`` is the design itself. Needs the ``formula``
        extra.
    treatment_model : estimator, float in (0, 1) or None, default=None
        Model of ``P(T=1|X)``: a scikit-learn classifier or pipeline, or a known randomization
        probability. ``None`` is unpenalized logistic regression.
    survival_model : estimator, PrincipalScoreModel or None, default=None
        Classifier for ``P(S=1|T=t,X)``, cloned and fitted in each arm. ``None`` is unpenalized
        logistic regression. A :class:`~pscore_strata.PrincipalScoreModel` (same
        ``monotonicity``) is instead fitted once on both arms and gives both survival
        probabilities as sums of its stratum probabilities, so they never contradict
        monotonicity; ``predict_proba`` then returns its scores.
    monotonicity : {"increasing", "decreasing"}, default="increasing"
        ``"increasing"``: treatment can only help survival (no harmed units);
        ``"decreasing"``: it can only harm survival (no protected units).
    stratum : str, default="always_survivor"
        The principal stratum whose effect is estimated: ``"always_survivor"`` (the SACE),
        ``"protected"`` and ``"doomed"`` under ``monotonicity="increasing"``, ``"harmed"`` and
        ``"doomed"`` under ``"decreasing"``. The noncompliance names ``"always_taker"``,
        ``"complier"`` and ``"never_taker"`` are the always-survivor, protected and doomed
        strata (increasing monotonicity: no defiers). Strata other than the always-survivors
        need the outcome of units whose intermediate (``survival``) is 0, so they are refused
        under truncation by death. Their effect is identified under principal ignorability in
        mean form for each observed cell that mixes two strata: with increasing monotonicity,
        ``E[Y(1) | always_survivor, X] = E[Y(1) | protected, X]`` (treated, intermediate 1;
        needed by the always-survivor and protected strata) and
        ``E[Y(0) | protected, X] = E[Y(0) | doomed, X]`` (control, intermediate 0; needed by the
        protected and doomed strata); with decreasing monotonicity,
        ``E[Y(0) | always_survivor, X] = E[Y(0) | harmed, X]`` and
        ``E[Y(1) | harmed, X] = E[Y(1) | doomed, X]``. Formulas and sources:
        docs/guide/derivations/strata.md.
    scale : {"difference", "ratio", "odds_ratio"}, default="difference"
        Scale of the effect. Ratio scales need positive (``"ratio"``) or binary
        (``"odds_ratio"``) outcomes; their intervals are computed on the log scale.
    n_folds : int or None, default=None
        K-fold cross-fitting of every nuisance model (folds stratified by treatment x
        survival); ``None`` fits on all rows.
    random_state : int, RandomState or None, default=None
        Seeds the folds and the bootstrap, and every nuisance learner whose own
        ``random_state`` is left at ``None`` (a random forest, say), so two fits with the same
        value agree. Learners with a ``random_state`` of their own keep it.
    missing : {"error", "at_random"}, default="error"
        ``"error"`` refuses NaN survival (status unknown: lost to follow-up) and NaN outcomes of
        survivors. ``"at_random"`` assumes both are missing at random given X within each arm
        (follow-up independent of survival and outcome given X and arm; response among
        survivors independent of the outcome given X and arm), fits a follow-up model
        ``c_t(X)`` on each arm's rows and a response model ``r_t(X)`` among each arm's known
        survivors, and weights every observed residual by the inverse probability of being
        observed (docs/guide/derivations/missing-data.md). An arm with nothing missing gets no such
        model. With a ``stratum`` other than the always-survivors (the outcome exists for every
        unit) a NaN outcome of a unit with intermediate 0 is not observed either, and a
        response model ``r_t0(X)`` is fitted among each arm's known units with intermediate 0.
    response_model : classifier or None, default=None
        Model for ``r_t`` (outcome observed among known survivors; cloned per arm); ``None`` is
        unpenalized logistic regression. Used only when outcomes are missing.
    follow_up_model : classifier or None, default=None
        Model for ``c_t`` (survival status known; cloned per arm); ``None`` is unpenalized
        logistic regression. Used only when survival statuses are missing.
"""


class PrincipalScoreWeighting(EstimatorDisplay, SurvivorEffectEstimator):
    __doc__ = f"""SACE by principal score weighting (normalized weights).

    Under monotonicity and principal ignorability, the treated survivors are reweighted by
    ``p0(X) / (pi(X) p1(X))`` and the control survivors by ``1 / (1 - pi(X))`` so that both
    represent the always-survivors (Ding & Lu 2017; Jo & Stuart 2009).

    Parameters
    ----------{_COMMON_PARAMETERS}
    n_bootstrap : int, default=200
        Resamples of the refitting bootstrap, the fallback for the standard error when a model
        is one the sandwich formula does not cover (it needs unpenalized logistic or linear
        regressions, alone or after fixed transformers, fitted on all rows): every model is
        then refitted in each resample (rows resampled within arms, clusters if given) and
        ``std_error_method_`` is ``"bootstrap"``. ``0`` skips it (the standard error then
        ignores nuisance estimation).
    n_jobs : int or None, default=None
        Parallel bootstrap workers (joblib); the resamples do not depend on it.

    Attributes
    ----------
    identification : str
        ``"point"`` (class attribute): the assumptions identify the effect itself, estimated
        by ``effect_``. :class:`~pscore_strata.TrimmingBounds` has ``"bounds"``; code that treats
        the two differently reads this, not which attributes exist.
    effect_ : float
        The effect in the target stratum on the chosen scale (the survivor average causal
        effect by default).
    stratum_ : str
        The target stratum's name (aliases resolved: ``"complier"`` gives ``"protected"``).
    std_error_ : float
    mean_treated_, mean_control_ : float
        The target stratum's means under treatment and under control.
    influence_ : ndarray of shape (n_samples,)
        Per-row influence values of ``effect_``.
    std_error_method_ : str
    repeat_estimates_ : pandas.DataFrame
        Effect, means and standard errors of each cross-fitting repeat (one row unless
        ``n_repeats > 1``).
    classes_ : ndarray of str
        Principal strata allowed by the monotonicity setting.
    principal_scores_ : ndarray of shape (n_samples, 3)
    nuisance_ : NuisanceFit
        Per-row predictions and fitted models (of the repeat closest to the median).
    training_data_ : TruncationData
        The validated training data without ``X``.
    n_monotonicity_violations_ : int
    n_clusters_ : int or None
        Number of clusters in ``groups`` (``None`` without them); below 30 the intervals use
        Student's t with ``n_clusters_ - 1`` degrees of freedom.
    design_ : FormulaDesign
        Only with ``covariates``: the learned design (``feature_names``, ``variables``,
        ``transform(X)``).

    See Also
    --------
    OutcomeRegression, MultiplyRobust

    References
    ----------
    Ding, P. & Lu, J. (2017). Principal stratification analysis using principal scores. JRSSB 79.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> est = ps.PrincipalScoreWeighting().fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> abs(est.effect_ - data.true_effect) < 4 * est.std_error_
    True
    """

    method = "weighting"  # the key of its record in pscore_strata.estimands.METHODS
    identification = POINT

    def __init__(
        self,
        *,
        covariates=None,
        treatment_model=None,
        survival_model=None,
        monotonicity="increasing",
        stratum="always_survivor",
        scale="difference",
        n_folds=None,
        n_bootstrap=200,
        random_state=None,
        n_jobs=None,
        missing="error",
        response_model=None,
        follow_up_model=None,
    ):
        self.covariates = covariates
        self.treatment_model = treatment_model
        self.survival_model = survival_model
        self.monotonicity = monotonicity
        self.stratum = stratum
        self.scale = scale
        self.n_folds = n_folds
        self.n_bootstrap = n_bootstrap
        self.random_state = random_state
        self.n_jobs = n_jobs
        self.missing = missing
        self.response_model = response_model
        self.follow_up_model = follow_up_model


class OutcomeRegression(EstimatorDisplay, ConditionalEffectMixin, SurvivorEffectEstimator):
    __doc__ = f"""SACE by outcome regression: ``mu_t = E[p0(X) m_t(X)] / E[p0(X)]``.

    Relies on correct survival and outcome models; the treatment model is used only for the
    stratum shares reported in :meth:`summary`.

    Parameters
    ----------{_COMMON_PARAMETERS}
    outcome_model : estimator or None, default=None
        Model of ``E[Y|T=t,S=1,X]``, fitted per arm among survivors. ``None`` is linear
        regression (logistic regression for a 0/1 outcome). A classifier's predicted
        probability is used as the mean.
    n_bootstrap : int, default=200
        The refitting bootstrap fallback, as in :class:`PrincipalScoreWeighting`.
    n_jobs : int or None, default=None
        Parallel bootstrap workers (joblib), as in :class:`PrincipalScoreWeighting`.

    Attributes
    ----------
    identification, effect_, std_error_, mean_treated_, mean_control_, influence_
        As in :class:`PrincipalScoreWeighting`; likewise every other attribute.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, effect_heterogeneity=0.5, random_state=0)
    >>> est = ps.OutcomeRegression().fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> est.predict_effect(data.X[:3]).round(1)  # truth 1 + 0.5 x2
    array([0.9, 1.8, 1.2])
    """

    method = "regression"
    identification = POINT
    _treatment_enters_estimate = False

    def __init__(
        self,
        *,
        covariates=None,
        treatment_model=None,
        survival_model=None,
        outcome_model=None,
        monotonicity="increasing",
        stratum="always_survivor",
        scale="difference",
        n_folds=None,
        n_bootstrap=200,
        random_state=None,
        n_jobs=None,
        missing="error",
        response_model=None,
        follow_up_model=None,
    ):
        self.covariates = covariates
        self.treatment_model = treatment_model
        self.survival_model = survival_model
        self.outcome_model = outcome_model
        self.monotonicity = monotonicity
        self.stratum = stratum
        self.scale = scale
        self.n_folds = n_folds
        self.n_bootstrap = n_bootstrap
        self.random_state = random_state
        self.n_jobs = n_jobs
        self.missing = missing
        self.response_model = response_model
        self.follow_up_model = follow_up_model


class MultiplyRobust(EstimatorDisplay, ConditionalEffectMixin, SurvivorEffectEstimator):
    __doc__ = f"""SACE by the multiply robust estimator of Jiang, Yang & Ding (2022).

    Built on the efficient influence function: consistent when any two of the treatment,
    survival and outcome models are correct, and locally efficient when all three are. Use
    ``n_folds`` (cross-fitting) with flexible learners, so that they are never evaluated on the
    rows they were fitted on. Standard errors come from the influence values.

    Parameters
    ----------{_COMMON_PARAMETERS}
    outcome_model : estimator or None, default=None
        As in :class:`OutcomeRegression`.
    n_repeats : int, default=1
        Repeats of cross-fitting with independent fold splits (needs ``n_folds``). The effect
        is the median over repeats and its variance the median of
        ``SE_r^2 + (effect_r - median)^2`` (Chernozhukov et al. 2018).
    n_bootstrap : int, default=200
        Resamples of the refitting bootstrap, the fallback for the standard error when the
        influence values alone do not account for the fitted models: a flexible learner (any
        model other than scikit-learn's linear models, alone or after fixed transformers) fitted
        on all rows (``n_folds=None``), whose fitted values follow the noise of the rows they
        are evaluated on. Every model is then refitted in each resample (rows resampled within
        arms, clusters if given) and ``std_error_method_`` is ``"bootstrap"``. With parametric
        models or ``n_folds`` the influence function is used and no bootstrap runs; ``0``
        keeps the influence-function standard error in every case. The same parameter, with
        the same fallback role, as in :class:`PrincipalScoreWeighting`.
    n_jobs : int or None, default=None
        Parallel bootstrap workers (joblib), as in :class:`PrincipalScoreWeighting`.

    Attributes
    ----------
    identification, effect_, std_error_, mean_treated_, mean_control_, influence_
        As in :class:`PrincipalScoreWeighting`; likewise every other attribute. With
        ``n_repeats > 1``, ``influence_`` and ``nuisance_`` are those of the repeat whose effect
        is closest to the median, and ``repeat_estimates_`` holds every repeat.

    References
    ----------
    Jiang, Z., Yang, S. & Ding, P. (2022). Multiply robust estimation of causal effects under
    principal ignorability. JRSSB 84.
    Chernozhukov, V. et al. (2018). Double/debiased machine learning for treatment and
    structural parameters. The Econometrics Journal 21.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, random_state=0)
    >>> est = ps.MultiplyRobust(n_folds=5, n_repeats=3, random_state=0).fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> abs(est.effect_ - data.true_effect) < 4 * est.std_error_
    True
    >>> est.effect_by(data.X[:, 0] > 0)["label"].tolist()
    [False, True]
    """

    method = "robust"
    identification = POINT

    def __init__(
        self,
        *,
        covariates=None,
        treatment_model=None,
        survival_model=None,
        outcome_model=None,
        monotonicity="increasing",
        stratum="always_survivor",
        scale="difference",
        n_folds=None,
        n_repeats=1,
        n_bootstrap=200,
        random_state=None,
        n_jobs=None,
        missing="error",
        response_model=None,
        follow_up_model=None,
    ):
        self.covariates = covariates
        self.treatment_model = treatment_model
        self.survival_model = survival_model
        self.outcome_model = outcome_model
        self.monotonicity = monotonicity
        self.stratum = stratum
        self.scale = scale
        self.n_folds = n_folds
        self.n_repeats = n_repeats
        self.n_bootstrap = n_bootstrap
        self.random_state = random_state
        self.n_jobs = n_jobs
        self.missing = missing
        self.response_model = response_model
        self.follow_up_model = follow_up_model

    def _std_error_method(self, nuisance):
        # The efficient influence function carries the nuisance fits' error unless a flexible
        # learner was fitted and evaluated on the same rows (flexible_model_reason).
        if self.n_bootstrap > 0 and flexible_model_reason(self) is not None:
            return "bootstrap"
        return "influence function"

    def _fallback_reason(self):
        return (
            "the influence values account for the fitted models only when they are parametric "
            f"or cross-fitted, and here {flexible_model_reason(self)}"
        )
