"""Estimators of the survivor average causal effect (SACE).

Each class is a thin scikit-learn estimator over the shared machinery: validation, the nuisance
layer (:mod:`pscore_strata.nuisance`) and one estimand formula (:mod:`pscore_strata._formulas`).
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from sklearn.base import BaseEstimator
from sklearn.utils.validation import check_is_fitted

from . import _formulas
from ._validation import check_choice, check_features, check_truncation_data
from .inference import influence_std_error, normal_interval, spawn_seeds, stratified_resample
from .nuisance import MonotonicityWarning, fit_nuisance, predict_models

__all__ = ["PrincipalScoreWeighting", "OutcomeRegression", "MultiplyRobust"]

_SCALES = ("difference", "ratio", "odds_ratio")
_SCALE_LABELS = {"difference": "difference", "ratio": "ratio", "odds_ratio": "odds ratio"}


class _SurvivorEffectEstimator(BaseEstimator):
    """Shared fit logic. Subclasses set ``_formula`` and ``_uses_outcome_model``."""

    _uses_outcome_model = False

    # -- fitting -----------------------------------------------------------------------------
    def _models(self):
        """The models that will see X (for input checks that depend on them)."""
        used = (self.treatment_model, self.survival_model)
        return used + ((self.outcome_model,) if self._uses_outcome_model else ())

    def _check_params(self):
        check_choice(self.monotonicity, "monotonicity", ("increasing", "decreasing"))
        check_choice(self.scale, "scale", _SCALES)
        n_bootstrap = getattr(self, "n_bootstrap", 0)
        if not isinstance(n_bootstrap, int | np.integer) or n_bootstrap < 0:
            raise ValueError(f"`n_bootstrap` must be a non-negative integer; got {n_bootstrap!r}.")

    def _fit_nuisance(self, data):
        return fit_nuisance(
            data,
            self.treatment_model,
            self.survival_model,
            getattr(self, "outcome_model", None),
            fit_outcome=self._uses_outcome_model,
            n_folds=self.n_folds,
            random_state=self.random_state,
        )

    def _means(self, data, nuisance):
        oriented = _formulas.orient(data, nuisance, self.monotonicity)
        return type(self)._formula(oriented), oriented

    def fit(self, X, y, *, treatment, survival, sample_weight=None, groups=None):
        """Estimate the survivor average causal effect.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features) or None
            Pre-treatment covariates. ``None`` (or zero columns) gives the unadjusted analysis,
            where every model reduces to arm-wise shares and means.
        y : array-like of shape (n_samples,)
            Outcome. Values of non-survivors are ignored (they may be NaN).
        treatment, survival : array-like of shape (n_samples,)
            0/1 indicators.
        sample_weight : array-like of shape (n_samples,), optional
            Sampling (survey) weights, used in every model fit and every formula.
        groups : array-like of shape (n_samples,), optional
            Cluster labels: standard errors add influence values within clusters.

        Returns
        -------
        self
        """
        self._check_params()
        data = check_truncation_data(
            X, y, treatment, survival, sample_weight, groups, models=self._models()
        )
        if self.scale == "odds_ratio" and not data.binary_outcome:
            raise ValueError("`scale='odds_ratio'` needs a 0/1 outcome; `y` has other values.")
        if self.scale == "ratio" and np.nanmin(data.outcome) < 0:
            raise ValueError("`scale='ratio'` needs a non-negative outcome; `y` has negatives.")
        nuisance = self._fit_nuisance(data)
        self._store(data, nuisance)
        if self.std_error_method_ == "bootstrap":
            self._bootstrap_std_errors(data)
        return self

    def _store(self, data, nuisance):
        parts, oriented = self._means(data, nuisance)
        effect, influence = _formulas.scale_effect(parts, self.scale)
        if not (np.isfinite(effect) and np.all(np.isfinite(influence))):
            raise ValueError(
                "The estimate is not finite: a fitted treatment or survival probability is exactly "
                "0 or 1 where the formula divides by it (perfect separation, or no overlap). "
                "Use a regularized model (for example LogisticRegression with a finite C), "
                "coarser covariates, or restrict the population to where both arms occur."
            )
        self.effect_ = float(effect)
        self.mean_treated_ = float(parts.mean_treated)
        self.mean_control_ = float(parts.mean_control)
        self.influence_ = influence
        self._mean_influence = (parts.influence_treated, parts.influence_control)
        self.nuisance_ = nuisance
        self.training_data_ = replace(data, X=None)
        self.n_samples_ = data.n_samples
        self.n_features_in_ = data.n_features
        self.feature_names_ = data.feature_names
        self.classes_ = np.array(
            ["always_survivor", "protected" if oriented.increasing else "harmed", "doomed"]
        )
        self.principal_scores_ = _principal_scores(oriented.p_mixed, oriented.p_pure)
        violations = int(np.sum(oriented.p_mixed < oriented.p_pure))
        self.n_monotonicity_violations_ = violations
        if violations:
            warnings.warn(
                f"For {violations} of {data.n_samples} rows ({violations / data.n_samples:.1%}) "
                f"the fitted survival probability under "
                f"{'treatment' if oriented.increasing else 'control'} is below that under the "
                "other arm, contradicting the monotonicity assumption. Principal scores are "
                "clipped at zero there. Check the survival model, and see the sensitivity "
                "analysis for monotonicity.",
                MonotonicityWarning,
                stacklevel=3,
            )
        self.std_error_method_ = self._std_error_method(nuisance)
        self.std_error_ = influence_std_error(influence, data.sample_weight, data.groups)
        self.bootstrap_replicates_ = None

    def _std_error_method(self, nuisance):
        if self._formula is _formulas.robust_means:
            return "influence function"
        if nuisance.parametric is not None:
            return "sandwich"
        return "bootstrap" if self.n_bootstrap > 0 else "influence function (nuisance ignored)"

    # -- bootstrap fallback ------------------------------------------------------------------
    def _refit_means(self, data):
        nuisance = self._fit_nuisance(data)
        parts, _ = self._means(data, nuisance)
        effect, _ = _formulas.scale_effect(parts, self.scale)
        return effect, parts.mean_treated, parts.mean_control

    def _bootstrap_std_errors(self, data):
        """Resample rows within arms (clusters, if given) and refit every model."""
        seeds = spawn_seeds(self.random_state, self.n_bootstrap)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            results = Parallel(n_jobs=self.n_jobs)(
                delayed(_one_replicate)(self, data, seed) for seed in seeds
            )
        table = pd.DataFrame(
            [r for r in results if r is not None],
            columns=["effect", "mean_treated", "mean_control"],
        )
        self.bootstrap_replicates_ = table
        self.n_bootstrap_failed_ = len(results) - len(table)
        if len(table) < 2:
            raise RuntimeError("Fewer than two bootstrap resamples could be fitted.")
        self.std_error_ = float(table["effect"].std(ddof=1))

    # -- results -----------------------------------------------------------------------------
    def conf_int(self, level=0.95):
        """Normal-approximation confidence interval for the SACE (log scale for ratios).

        Returns
        -------
        (low, high) : tuple of float
        """
        check_is_fitted(self, "effect_")
        return normal_interval(self.effect_, self.std_error_, level, self.scale != "difference")

    def predict_proba(self, X):
        """Principal scores per row, columns in ``classes_`` order.

        Under monotonicity the always-survivor score is the survival probability in the pure arm,
        the helped stratum's score the difference of the arms' survival probabilities (clipped at
        zero where the models contradict monotonicity), and the doomed score the rest.
        """
        check_is_fitted(self, "effect_")
        X, n_features, _ = check_features(X, self._models())
        if n_features != self.n_features_in_:
            raise ValueError(
                f"`X` has {n_features} features but the estimator was fitted with "
                f"{self.n_features_in_}."
            )
        mixed, pure = (1, 0) if self.monotonicity == "increasing" else (0, 1)
        models = self.nuisance_.models
        p_mixed = predict_models(models[("survival", mixed)], X)
        p_pure = predict_models(models[("survival", pure)], X)
        return _principal_scores(p_mixed, p_pure)

    def predict(self, X):
        """The most probable principal stratum per row."""
        return self.classes_[np.argmax(self.predict_proba(X), axis=1)]

    def summary(self, level=0.95):
        """Estimates with standard errors and confidence intervals, one row per quantity.

        Rows: the SACE, the always-survivor mean under each arm, the principal stratum shares,
        and the naive survivor-only contrast (biased when treatment changes who survives; shown
        for comparison). ``attrs["notes"]`` explains how the standard errors were obtained.
        """
        check_is_fitted(self, "effect_")
        data = self.training_data_
        w, groups = data.sample_weight, data.groups
        rows = []
        z_label = _SCALE_LABELS[self.scale]
        method = self.std_error_method_
        boot = self.bootstrap_replicates_
        rows.append((f"SACE ({z_label})", self.effect_, self.std_error_, method))
        for name, value, infl, column in (
            (
                "always-survivor mean, treated",
                self.mean_treated_,
                self._mean_influence[0],
                "mean_treated",
            ),
            (
                "always-survivor mean, control",
                self.mean_control_,
                self._mean_influence[1],
                "mean_control",
            ),
        ):
            se = (
                float(boot[column].std(ddof=1))
                if boot is not None
                else influence_std_error(infl, w, groups)
            )
            rows.append((name, value, se, method))
        for name, value, infl in _stratum_shares(self):
            rows.append((name, value, influence_std_error(infl, w, groups), "influence function"))
        naive, naive_influence = _naive_contrast(data)
        rows.append(
            (
                "naive survivor contrast (biased)",
                naive,
                influence_std_error(naive_influence, w, groups),
                "influence function",
            )
        )
        table = pd.DataFrame(
            rows, columns=["quantity", "estimate", "std_error", "std_error_method"]
        )
        lows, highs = [], []
        for i, (est, se) in enumerate(zip(table["estimate"], table["std_error"], strict=True)):
            low, high = normal_interval(est, se, level, i == 0 and self.scale != "difference")
            lows.append(low)
            highs.append(high)
        table.insert(3, "ci_low", lows)
        table.insert(4, "ci_high", highs)
        table = table.set_index("quantity")
        table.attrs["notes"] = _notes(self, level)
        return table


def _one_replicate(estimator, data, seed):
    rows = stratified_resample(data.treatment, seed, data.groups)
    try:
        return estimator._refit_means(data.take(rows))
    except (ValueError, np.linalg.LinAlgError):
        return None


def _principal_scores(p_mixed, p_pure):
    always = np.minimum(p_pure, p_mixed)
    helped = np.clip(p_mixed - p_pure, 0.0, None)
    return np.column_stack([always, helped, 1.0 - always - helped])


def _stratum_shares(estimator):
    """Stratum shares from doubly robust means of the arm survival probabilities.

    ``E[p_t(X)]`` is estimated by ``mean(1{T=t}(S - p_t)/P(T=t|X) + p_t)``; its influence values
    are the centered terms.
    """
    data, nuisance = estimator.training_data_, estimator.nuisance_
    w = data.sample_weight
    pi = nuisance.treatment_probability
    T, S = data.treatment, data.survival
    shares, influence = {}, {}
    for arm, arm_prob in ((1, pi), (0, 1 - pi)):
        p = nuisance.survival[arm]
        terms = (T == arm) * (S - p) / arm_prob + p
        shares[arm] = float(np.sum(w * terms) / w.sum())
        influence[arm] = terms - shares[arm]
    mixed, pure = (1, 0) if estimator.monotonicity == "increasing" else (0, 1)
    helped = "protected" if mixed == 1 else "harmed"
    return [
        ("share always-survivor", shares[pure], influence[pure]),
        (f"share {helped}", shares[mixed] - shares[pure], influence[mixed] - influence[pure]),
        ("share doomed", 1 - shares[mixed], -influence[mixed]),
    ]


def _naive_contrast(data):
    """Difference of survivor means between arms, with its influence values."""
    w, T, S = data.sample_weight, data.treatment, data.survival
    Y = np.where(S == 1, data.outcome, 0.0)
    influence = np.zeros(data.n_samples)
    means = {}
    for arm, sign in ((1, 1.0), (0, -1.0)):
        cell = (T == arm) & (S == 1)
        share = np.sum(w * cell) / w.sum()
        means[arm] = np.sum(w * cell * Y) / np.sum(w * cell)
        influence += sign * cell * (Y - means[arm]) / share
    return float(means[1] - means[0]), influence


def _notes(estimator, level):
    notes = []
    method = estimator.std_error_method_
    if method == "sandwich":
        notes.append(
            "Standard errors stack the logistic-model score equations with the estimating "
            "equations (M-estimation sandwich), so they account for the fitted models."
        )
    elif method == "bootstrap":
        notes.append(
            f"Standard errors of the SACE and the always-survivor means come from "
            f"{len(estimator.bootstrap_replicates_)} bootstrap resamples (within arms) that refit "
            "every model, because the sandwich formula is available only for the default "
            "logistic/linear models."
        )
    elif method == "influence function":
        notes.append("Standard errors come from the efficient influence function.")
    else:
        notes.append(
            "Standard errors ignore the estimation of the nuisance models (n_bootstrap=0); they "
            "may be too wide or too narrow."
        )
    if estimator.training_data_.groups is not None:
        notes.append("Standard errors are cluster-robust (influence values summed per cluster).")
    if estimator.n_monotonicity_violations_:
        notes.append(
            f"{estimator.n_monotonicity_violations_} rows contradict monotonicity in the fitted "
            "survival models."
        )
    notes.append(
        "The always-survivor stratum is latent; the SACE rests on untestable assumptions "
        "(monotonicity, principal ignorability). See the bounds and sensitivity analyses."
    )
    return notes


_COMMON_PARAMETERS = """
    treatment_model : estimator, float in (0, 1) or None, default=None
        Model of ``P(T=1|X)``: a scikit-learn classifier or pipeline, or a known randomization
        probability. ``None`` is unpenalized logistic regression.
    survival_model : estimator or None, default=None
        Classifier for ``P(S=1|T=t,X)``, cloned and fitted in each arm. ``None`` is unpenalized
        logistic regression.
    monotonicity : {"increasing", "decreasing"}, default="increasing"
        ``"increasing"``: treatment can only help survival (no harmed units);
        ``"decreasing"``: it can only harm survival (no protected units).
    scale : {"difference", "ratio", "odds_ratio"}, default="difference"
        Scale of the effect. Ratio scales need positive (``"ratio"``) or binary
        (``"odds_ratio"``) outcomes; their intervals are computed on the log scale.
    n_folds : int or None, default=None
        K-fold cross-fitting of every nuisance model; ``None`` fits on all rows.
    random_state : int, RandomState or None, default=None
        Seeds the folds and the bootstrap.
"""


class PrincipalScoreWeighting(_SurvivorEffectEstimator):
    __doc__ = f"""SACE by principal score weighting (normalized weights).

    Under monotonicity and principal ignorability, the treated survivors are reweighted by
    ``p0(X) / (pi(X) p1(X))`` and the control survivors by ``1 / (1 - pi(X))`` so that both
    represent the always-survivors (Ding & Lu 2017; Jo & Stuart 2009).

    Parameters
    ----------{_COMMON_PARAMETERS}
    n_bootstrap : int, default=200
        Resamples for the standard error when a model is not the default (the sandwich formula
        needs the default logistic models). ``0`` skips it (the standard error then ignores
        nuisance estimation).
    n_jobs : int or None, default=None
        Parallel bootstrap workers (joblib).

    Attributes
    ----------
    effect_ : float
        The survivor average causal effect on the chosen scale.
    std_error_ : float
    mean_treated_, mean_control_ : float
        Always-survivor means under treatment and under control.
    influence_ : ndarray of shape (n_samples,)
        Per-row influence values of ``effect_``.
    std_error_method_ : str
    classes_ : ndarray of str
        Principal strata allowed by the monotonicity setting.
    principal_scores_ : ndarray of shape (n_samples, 3)
    nuisance_ : NuisanceFit
        Per-row predictions and fitted models.
    n_monotonicity_violations_ : int

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

    _formula = staticmethod(_formulas.weighting_means)

    def __init__(
        self,
        *,
        treatment_model=None,
        survival_model=None,
        monotonicity="increasing",
        scale="difference",
        n_folds=None,
        n_bootstrap=200,
        random_state=None,
        n_jobs=None,
    ):
        self.treatment_model = treatment_model
        self.survival_model = survival_model
        self.monotonicity = monotonicity
        self.scale = scale
        self.n_folds = n_folds
        self.n_bootstrap = n_bootstrap
        self.random_state = random_state
        self.n_jobs = n_jobs


class OutcomeRegression(_SurvivorEffectEstimator):
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
    n_jobs : int or None, default=None

    Attributes
    ----------
    effect_, std_error_, mean_treated_, mean_control_, influence_ : see
        :class:`PrincipalScoreWeighting`.
    """

    _formula = staticmethod(_formulas.regression_means)
    _uses_outcome_model = True

    def __init__(
        self,
        *,
        treatment_model=None,
        survival_model=None,
        outcome_model=None,
        monotonicity="increasing",
        scale="difference",
        n_folds=None,
        n_bootstrap=200,
        random_state=None,
        n_jobs=None,
    ):
        self.treatment_model = treatment_model
        self.survival_model = survival_model
        self.outcome_model = outcome_model
        self.monotonicity = monotonicity
        self.scale = scale
        self.n_folds = n_folds
        self.n_bootstrap = n_bootstrap
        self.random_state = random_state
        self.n_jobs = n_jobs


class MultiplyRobust(_SurvivorEffectEstimator):
    __doc__ = f"""SACE by the multiply robust estimator of Jiang, Yang & Ding (2022).

    Built on the efficient influence function: consistent when any two of the treatment,
    survival and outcome models are correct, and locally efficient when all three are. Use
    ``n_folds`` (cross-fitting) with flexible learners.

    Parameters
    ----------{_COMMON_PARAMETERS}
    outcome_model : estimator or None, default=None
        As in :class:`OutcomeRegression`.

    Attributes
    ----------
    effect_, std_error_, mean_treated_, mean_control_, influence_ : see
        :class:`PrincipalScoreWeighting`.

    References
    ----------
    Jiang, Z., Yang, S. & Ding, P. (2022). Multiply robust estimation of causal effects under
    principal ignorability. JRSSB 84.
    """

    _formula = staticmethod(_formulas.robust_means)
    _uses_outcome_model = True
    n_bootstrap = 0

    def __init__(
        self,
        *,
        treatment_model=None,
        survival_model=None,
        outcome_model=None,
        monotonicity="increasing",
        scale="difference",
        n_folds=None,
        random_state=None,
    ):
        self.treatment_model = treatment_model
        self.survival_model = survival_model
        self.outcome_model = outcome_model
        self.monotonicity = monotonicity
        self.scale = scale
        self.n_folds = n_folds
        self.random_state = random_state
