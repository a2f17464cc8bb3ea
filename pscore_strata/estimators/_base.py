"""Shared machinery of the SACE estimators: fitting, repeats, bootstrap fallback, results.

A concrete estimator (:mod:`pscore_strata.estimators`) only names its estimand formula from
:mod:`pscore_strata.estimators._formulas` and whether it needs the outcome model.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
from joblib import Parallel, delayed
from sklearn.base import BaseEstimator, clone
from sklearn.utils.validation import check_is_fitted

try:
    from sklearn.utils.validation import _check_feature_names
except ImportError:  # scikit-learn < 1.6: a method of BaseEstimator

    def _check_feature_names(estimator, X, *, reset):
        return estimator._check_feature_names(X, reset=reset)

from .._arguments import check_estimator_arguments, check_n_folds
from .._validation import check_choice, check_features, check_level, check_truncation_data
from ..diagnostics._arrays import ROW_SHARE_TOLERANCE, SCORE_FLOOR
from ..inference._influence import (
    count_clusters,
    influence_std_error,
    normal_interval,
    reference_dof,
    resample_rows,
    spawn_seeds,
)
from ..inference._refits import _seed_models
from ..nuisance._fit import MonotonicityWarning, fit_nuisance, predict_models
from ..nuisance._share import record_settings, shared_nuisance
from ..nuisance._strata import StratumArm
from . import _formulas, _stratum_formulas
from ._design import design_at_fit, design_for_new_rows
from ._display import EstimatorDisplay
from ._heterogeneity import conditional_effect, subgroup_effects
from ._repeats import check_repeats, median_aggregate, repeat_seeds
from ._summary import summary_table

__all__ = ["SurvivorEffectEstimator", "ConditionalEffectMixin"]

_SCALES = ("difference", "ratio", "odds_ratio")


class SurvivorEffectEstimator(EstimatorDisplay, BaseEstimator):
    """Shared fit logic. Subclasses set ``_formula`` and ``_uses_outcome_model``."""

    _uses_outcome_model = False
    _treatment_enters_estimate = True

    # -- fitting -----------------------------------------------------------------------------
    def _models(self):
        """The models that will see X (for input checks that depend on them)."""
        used = (self.treatment_model, self.survival_model)
        used += (self.outcome_model,) if self._uses_outcome_model else ()
        return used + ((self.response_model,) if self.missing == "at_random" else ())

    def _target_stratum(self):
        """The canonical name of the stratum targeted (``stratum=``; aliases resolved)."""
        return _stratum_formulas.resolve_stratum(
            getattr(self, "stratum", "always_survivor"), self.monotonicity
        )

    def _other_stratum(self):
        return _stratum_formulas.needs_zero_cells(self._target_stratum())

    def _check_params(self):
        check_choice(self.monotonicity, "monotonicity", ("increasing", "decreasing"))
        if self._other_stratum() and self.missing != "error":
            raise ValueError(
                f"`missing`={self.missing!r} is not available with `stratum`="
                f"{self.stratum!r} yet (the follow-up and response models are fitted for the "
                "always-survivor formulas only); use missing='error' with complete data, or "
                "stratum='always_survivor'."
            )
        check_choice(self.scale, "scale", _SCALES)
        check_choice(self.missing, "missing", ("error", "at_random"))
        check_estimator_arguments(self)
        return check_repeats(getattr(self, "n_repeats", 1), self.n_folds)

    def _fit_nuisance(self, data, random_state, sandwich=True):
        # Learners left at random_state=None are seeded from `random_state` (as the bootstrap
        # seeds them per replicate), so two fits with the same random_state agree.
        models = self if random_state is None else _seed_models(
            clone(self), spawn_seeds(random_state, 1)[0]
        )  # fmt: skip
        fitted = fit_nuisance(
            data,
            models.treatment_model,
            models.survival_model,
            getattr(models, "outcome_model", None),
            fit_outcome=self._uses_outcome_model,
            n_folds=self.n_folds,
            random_state=random_state,
            treatment_enters_estimate=self._treatment_enters_estimate,
            response_model=models.response_model,
            # The multiply robust influence values never use the sandwich pieces.
            sandwich=sandwich and self._formula is not _formulas.robust_means,
            monotonicity=self.monotonicity,
            zero_cells=self._other_stratum(),
        )
        return record_settings(fitted, self, data, random_state)

    def _oriented(self, data, nuisance):
        """The view the formulas read: the SACE's oriented arrays, or the target stratum's."""
        stratum = self._target_stratum()
        if _stratum_formulas.needs_zero_cells(stratum):
            return _stratum_formulas.stratum_view(data, nuisance, self.monotonicity, stratum)
        return _formulas.orient(data, nuisance, self.monotonicity)

    def _formula_for(self, oriented):
        if isinstance(oriented, _stratum_formulas.StratumView):
            return _STRATUM_FORMULAS[type(self)._formula]
        return type(self)._formula

    def _means(self, data, nuisance):
        oriented = self._oriented(data, nuisance)
        with np.errstate(divide="ignore", invalid="ignore"):  # non-finite results are checked
            return self._formula_for(oriented)(oriented), oriented

    def fit(self, X, y, *, treatment, survival=None, intermediate=None, sample_weight=None,
            groups=None, nuisance=None):  # fmt: skip
        """Estimate the effect in the target stratum (by default the SACE).

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features) or None
            Pre-treatment covariates. ``None`` (or zero columns) gives the unadjusted analysis,
            where every model reduces to arm-wise shares and means.
        y : array-like of shape (n_samples,)
            Outcome. Values of non-survivors are ignored (they may be NaN).
        treatment, survival : array-like of shape (n_samples,)
            0/1 indicators.
        intermediate : array-like of shape (n_samples,), optional
            The general name of the binary post-treatment variable (treatment received under
            noncompliance, an intercurrent event): the same as ``survival``. Give exactly one
            of the two.
        sample_weight : array-like of shape (n_samples,), optional
            Survey (sampling) or frequency weights. Every model is fitted with them and every
            mean in the formulas is weighted, so an integer weight gives the same point
            estimate as repeating the row that many times; only their relative sizes matter
            (they are rescaled to mean one internally). Standard errors treat each row as
            one sampled unit carrying its weight (linearization variance
            ``sum_i (w_i IF_i)^2 / (sum_i w_i)^2``): right for survey weights, conservative
            for frequency weights (repeat the rows to get the frequency-weight error).
        groups : array-like of shape (n_samples,), optional
            Cluster labels: standard errors add influence values within clusters. At least two
            clusters are needed; with fewer than 30 (common practice) a
            :class:`FewClustersWarning` is raised and :meth:`conf_int` and :meth:`summary` use
            Student's t with ``n_clusters_ - 1`` degrees of freedom instead of the normal.
        nuisance : NuisanceFit, optional
            The ``nuisance_`` of another estimator fitted on the same rows with the same
            models, folds and monotonicity (outcome regression and multiply robust share five
            models; weighting needs the first three). Its models are reused instead of
            refitted, giving the numbers a separate fit would; a fit on other data or with
            other settings is refused.

        Returns
        -------
        self
        """
        n_repeats = self._check_params()
        survival, name = intermediate_alias(survival, intermediate)
        stratum = self._target_stratum()
        X = design_at_fit(self, X)
        data = check_truncation_data(
            X, y, treatment, survival, sample_weight, groups, models=self._models(),
            missing=self.missing, survival_name=name,
            stratum=stratum if self._other_stratum() else None,
        )
        check_n_folds(self.n_folds, data)
        n_clusters = count_clusters(data.groups)
        if X is not None:
            # scikit-learn's convention: feature_names_in_ for DataFrames with string names,
            # checked again by predict_proba.
            _check_feature_names(self, data.X, reset=True)
        if self.scale == "odds_ratio" and not data.binary_outcome:
            raise ValueError("`scale='odds_ratio'` needs a 0/1 outcome; `y` has other values.")
        if self.scale == "ratio" and np.nanmin(data.outcome) < 0:
            raise ValueError("`scale='ratio'` needs a non-negative outcome; `y` has negatives.")
        if getattr(self, "_statistic_only", False) and nuisance is None:
            return self._fit_statistic(data, n_repeats)
        if nuisance is not None:
            fits = [
                shared_nuisance(
                    self, nuisance, data, uses_outcome=self._uses_outcome_model,
                    sandwich=self._formula is not _formulas.robust_means,
                    treatment_enters=self._treatment_enters_estimate, n_repeats=n_repeats,
                )
            ]  # fmt: skip
            if self._uses_outcome_model and self._other_stratum() and (0, 0) not in (
                fits[0].outcome or {}
            ):
                raise ValueError(
                    f"`nuisance` was fitted without the outcome models among units with "
                    f"intermediate 0 that `stratum`={self.stratum!r} needs; share the nuisance "
                    "of a fit for a stratum other than 'always_survivor', or drop `nuisance`."
                )
        else:
            fits = [
                self._fit_nuisance(data, seed)
                for seed in repeat_seeds(self.random_state, n_repeats)
            ]
        self._store(data, fits)
        self.n_clusters_ = n_clusters
        if self.std_error_method_ == "bootstrap":
            self._bootstrap_std_errors(data)
        return self

    def _evaluate(self, data, nuisance):
        """Estimates of one nuisance fit (one cross-fitting repeat)."""
        parts, oriented = self._means(data, nuisance)
        effect, influence = _formulas.scale_effect(parts, self.scale)
        if not (np.isfinite(effect) and np.all(np.isfinite(influence))):
            raise ValueError(
                "The estimate is not finite: a fitted treatment or survival probability is exactly "
                "0 or 1 where the formula divides by it (perfect separation, or no overlap). "
                "Use a regularized model (for example LogisticRegression with a finite C), "
                "coarser covariates, or restrict the population to where both arms occur."
            )
        w, groups = data.sample_weight, data.groups
        row = {
            "effect": float(effect),
            "std_error": influence_std_error(influence, w, groups),
            "mean_treated": float(parts.mean_treated),
            "std_error_mean_treated": influence_std_error(parts.influence_treated, w, groups),
            "mean_control": float(parts.mean_control),
            "std_error_mean_control": influence_std_error(parts.influence_control, w, groups),
        }
        return row, influence, parts, oriented

    def _store(self, data, fits):
        evaluated = [self._evaluate(data, nuisance) for nuisance in fits]
        table = pd.DataFrame([row for row, *_ in evaluated])
        effect, std_error = median_aggregate(table["effect"], table["std_error"])
        # The repeat closest to the median supplies the per-row quantities (one split's values).
        chosen = int(np.argmin(np.abs(table["effect"].to_numpy() - effect)))
        _, influence, parts, oriented = evaluated[chosen]
        # Only the nuisance arrays are needed from here: drop the oriented copies before the
        # principal scores are built (peak memory at a million rows).
        oriented = _Roles(oriented.p_mixed, oriented.p_pure, oriented.increasing)  # any view
        del evaluated
        self.effect_ = float(effect)
        self.std_error_ = float(std_error)
        self.stratum_ = self._target_stratum()
        self.mean_treated_ = float(np.median(table["mean_treated"]))
        self.mean_control_ = float(np.median(table["mean_control"]))
        self.repeat_estimates_ = table
        self.influence_ = influence
        self.nuisance_ = fits[chosen]
        self._repeat_fits = fits
        self.training_data_ = replace(data, X=None)
        self.n_samples_ = data.n_samples
        self.n_features_in_ = data.n_features
        self.feature_names_ = data.feature_names
        self.classes_ = np.array(
            ["always_survivor", "protected" if oriented.increasing else "harmed", "doomed"]
        )
        violations = int(np.sum(oriented.p_mixed < oriented.p_pure))
        self.n_monotonicity_violations_ = violations
        # Small reversals are estimation noise where the arms' survival is close; warn when
        # more than 5% of rows are reversed by more than 0.05 (thresholds: common practice,
        # shared with diagnostics.diagnostic_warnings).
        marked = int(np.sum(oriented.p_pure - oriented.p_mixed > SCORE_FLOOR))
        if marked > ROW_SHARE_TOLERANCE * data.n_samples:
            warnings.warn(
                f"For {marked} of {data.n_samples} rows ({marked / data.n_samples:.1%}) the "
                f"fitted survival probability under "
                f"{'treatment' if oriented.increasing else 'control'} is more than "
                f"{SCORE_FLOOR} below that under the other arm ({violations} rows are reversed "
                "at all), contradicting the monotonicity assumption. Principal scores are "
                "clipped at zero there. Check the survival model, and see the sensitivity "
                "analysis for monotonicity.",
                MonotonicityWarning,
                stacklevel=3,
            )
        self.std_error_method_ = self._std_error_method(self.nuisance_)
        self.bootstrap_replicates_ = None

    @property
    def principal_scores_(self):
        """Principal scores of the training rows, shape (n_samples, 3), ``classes_`` order.

        Computed from the stored survival predictions on each access (not kept, so three
        estimators sharing one nuisance fit do not hold three n x 3 copies).
        """
        if "nuisance_" not in self.__dict__:
            raise AttributeError("principal_scores_ is set by fit")
        mixed, pure = (1, 0) if self.monotonicity == "increasing" else (0, 1)
        survival = self.nuisance_.survival
        return _principal_scores(survival[mixed], survival[pure])

    def _std_error_method(self, nuisance):
        if self._formula is _formulas.robust_means:
            return "influence function"
        if nuisance.parametric is not None:
            return "sandwich"
        return "bootstrap" if self.n_bootstrap > 0 else "influence function (nuisance ignored)"

    # -- bootstrap fallback ------------------------------------------------------------------
    def _refit_means(self, data, random_state=None):
        """The statistic of one refit: no standard errors, sandwich pieces or diagnostics."""
        seed = self.random_state if random_state is None else random_state
        nuisance = self._fit_nuisance(data, seed, sandwich=False)
        parts, _ = self._means(data, nuisance)
        effect, _ = _formulas.scale_effect(parts, self.scale)
        return effect, parts.mean_treated, parts.mean_control

    def _fit_statistic(self, data, n_repeats):
        """A bootstrap replicate's fit (``ps.bootstrap`` sets ``_statistic_only``): the effect
        and the always-survivor means (medians over cross-fitting repeats), nothing else."""
        values = np.array([
            self._refit_means(data, seed) for seed in repeat_seeds(self.random_state, n_repeats)
        ], dtype=float)  # fmt: skip
        self.effect_, self.mean_treated_, self.mean_control_ = map(
            float, np.median(values, axis=0)
        )
        self.n_samples_ = data.n_samples
        return self

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
            raise RuntimeError(
                f"Fewer than two of the `n_bootstrap`={self.n_bootstrap} resamples could be "
                "fitted (resamples lost the survivors or deaths of an arm, or the fitted "
                "probabilities reached 0 or 1). Use the default models (sandwich standard "
                "errors), set n_bootstrap=0, or use more data."
            )
        self.std_error_ = float(table["effect"].std(ddof=1))

    # -- results -----------------------------------------------------------------------------
    def conf_int(self, level=0.95):
        """Normal-approximation confidence interval for the SACE (log scale for ratios).

        With fewer than 30 clusters in ``groups`` the reference is Student's t with
        ``n_clusters_ - 1`` degrees of freedom (a :class:`FewClustersWarning` is raised at fit).

        Returns
        -------
        (low, high) : tuple of float
        """
        check_is_fitted(self, "effect_")
        return normal_interval(
            self.effect_, self.std_error_, level, self.scale != "difference",
            dof=reference_dof(getattr(self, "n_clusters_", None)),
        )  # fmt: skip

    def predict_proba(self, X):
        """Principal scores per row, columns in ``classes_`` order.

        Columns are checked as scikit-learn checks them: a DataFrame must have the names and
        order seen in ``fit`` (``feature_names_in_``; otherwise a ValueError), and mixing a
        DataFrame with an array between ``fit`` and here warns and matches columns by position.

        Under monotonicity the always-survivor score is the survival probability in the pure arm,
        the helped stratum's score the difference of the arms' survival probabilities, and the
        doomed score the rest. Where the fitted models contradict monotonicity (survival in the
        mixed arm below that in the pure arm) the helped score is 0 and the always-survivor
        score the smaller of the two survival probabilities. With
        cross-fitting, the predictions average every fold model (of every repeat).

        Returns
        -------
        ndarray of shape (n_rows, 3), or DataFrame
            A pandas DataFrame (columns ``classes_``, the index of ``X``) when ``X`` is a
            DataFrame, as scikit-learn's ``set_output(transform="pandas")`` labels its output;
            an ndarray otherwise.
        """
        check_is_fitted(self, "effect_")
        X = design_for_new_rows(self, X)
        index = X.index if isinstance(X, pd.DataFrame) else None
        X = _match_feature_names(self, X)
        X, n_features, _ = check_features(X, self._models())
        if n_features != self.n_features_in_:
            raise ValueError(
                f"`X` has {n_features} features but the estimator was fitted with "
                f"{self.n_features_in_}."
            )
        mixed, pure = (1, 0) if self.monotonicity == "increasing" else (0, 1)
        scores = {}
        for arm in (mixed, pure):
            models = [m for fit in self._repeat_fits for m in fit.models[("survival", arm)]]
            scores[arm] = predict_models(models, X)
        result = _principal_scores(scores[mixed], scores[pure])
        if isinstance(models[0], StratumArm):  # a stratum model's own scores, fold-averaged
            result = np.mean([m.strata.predict_proba(X) for m in models], axis=0)
        if index is not None:
            return pd.DataFrame(result, index=index, columns=list(self.classes_))
        return result

    def predict(self, X):
        """The most probable principal stratum per row."""
        return self.classes_[np.argmax(np.asarray(self.predict_proba(X)), axis=1)]

    def summary(self, level=0.95):
        """Estimates with standard errors and confidence intervals, one row per quantity.

        Rows: the SACE (its scale in the row name), the always-survivor mean under each arm, the
        principal stratum shares, and the naive survivor-only contrast (biased when treatment
        changes who survives; shown for comparison). ``attrs["notes"]`` explains how the
        standard errors were obtained and states the cautions that go with every SACE.
        """
        check_is_fitted(self, "effect_")
        return summary_table(self, level)

    def effect_by(self, labels, level=0.95):
        """Subgroup SACEs from the fitted models, without refitting.

        In subgroup ``g`` every estimating function of the estimator is restricted to the rows
        of ``g`` (for the multiply robust estimator ``mu_t(g) = sum_g phi_t / sum_g phi_e``; for
        weighting, weights normalized within ``g``). Standard errors come from the matching
        influence values over the whole sample (cluster-robust and weighted as in :meth:`fit`;
        nuisance estimation included where :attr:`std_error_method_` is ``"sandwich"`` or
        ``"influence function"``).

        Parameters
        ----------
        labels : array-like of shape (n_samples,)
            Subgroup label of each training row, in the order given to :meth:`fit`.
        level : float, default=0.95

        Returns
        -------
        pandas.DataFrame
            Columns ``label``, ``n`` (rows), ``effect``, ``std_error``, ``ci_low``, ``ci_high``;
            ``attrs["notes"]`` holds the cautions.
        """
        check_is_fitted(self, "effect_")
        check_level(level)
        return subgroup_effects(self, labels, level)


class ConditionalEffectMixin:
    def predict_effect(self, X):
        """The always-survivor effect given ``X``: ``m1(X) - m0(X)`` (ratio scales: their ratio).

        Valid under principal ignorability, which makes the survivors' outcome mean in each arm
        equal the always-survivors' mean given ``X``. With cross-fitting, each ``m_t`` averages
        the fold models (of every repeat). A classifier outcome model gives risks.

        Parameters
        ----------
        X : array-like of shape (n_rows, n_features)

        Returns
        -------
        ndarray of shape (n_rows,)
        """
        check_is_fitted(self, "effect_")
        return conditional_effect(self, design_for_new_rows(self, X))


def _one_replicate(estimator, data, seed):
    rows = resample_rows(data.treatment, seed, data.groups)
    # Learners left at random_state=None get a seed from the replicate, so the bootstrap
    # standard error is reproducible with random learners too.
    estimator = _seed_models(clone(estimator), seed)
    try:
        values = estimator._refit_means(data.take(rows))
    except (ValueError, np.linalg.LinAlgError):
        return None
    # A resample whose fitted probability hits 0 or 1 where a formula divides gives inf/NaN:
    # count it as a failed fit, as the full-sample fit would refuse it.
    return values if np.all(np.isfinite(values)) else None


def _match_feature_names(estimator, X):
    """scikit-learn's feature-name check; after its warning, ``X`` takes the fitted form so the
    nuisance models do not warn again."""
    if X is None:
        return X
    _check_feature_names(estimator, X, reset=False)
    names = getattr(estimator, "feature_names_in_", None)
    if isinstance(X, pd.DataFrame) and names is None:
        return X.to_numpy()
    if names is not None and not isinstance(X, pd.DataFrame):
        values = np.asarray(X)
        if values.ndim == 2 and values.shape[1] == len(names):
            return pd.DataFrame(values, columns=names)
    return X


def _principal_scores(p_mixed, p_pure):
    # Written into one array (three n-vectors at the peak, not six).
    scores = np.empty((p_mixed.shape[0], 3))
    always, helped, doomed = scores[:, 0], scores[:, 1], scores[:, 2]
    np.minimum(p_pure, p_mixed, out=always)
    np.subtract(p_mixed, p_pure, out=helped)
    np.clip(helped, 0.0, None, out=helped)
    np.subtract(1.0, always, out=doomed)
    doomed -= helped
    return scores


# The formula of each method for the strata other than the always-survivors.
_STRATUM_FORMULAS = {
    _formulas.weighting_means: _stratum_formulas.stratum_weighting_means,
    _formulas.regression_means: _stratum_formulas.stratum_regression_means,
    _formulas.robust_means: _stratum_formulas.stratum_robust_means,
}


def intermediate_alias(survival, intermediate):
    """``(values, name)`` of the binary post-treatment variable given as exactly one of the two."""
    if (survival is None) == (intermediate is None):
        raise TypeError(
            "Pass exactly one of `survival` and `intermediate` (the same 0/1 post-treatment "
            "variable under two names); got " + ("both." if survival is not None else "neither.")
        )
    return (survival, "survival") if intermediate is None else (intermediate, "intermediate")


class _Roles:
    """The two survival predictions by role, and the monotonicity direction."""

    def __init__(self, p_mixed, p_pure, increasing):
        self.p_mixed, self.p_pure, self.increasing = p_mixed, p_pure, increasing
