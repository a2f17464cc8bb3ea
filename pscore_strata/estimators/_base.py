"""Shared machinery of the SACE estimators: fitting, repeats, bootstrap fallback, results.

A concrete estimator (:mod:`pscore_strata.estimators`) only names its method, a record of
:data:`pscore_strata.estimands.METHODS` that holds the formula and whether it needs the outcome
model.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, clone
from sklearn.utils.validation import check_is_fitted

from .._arguments import check_estimator_arguments, check_n_folds
from .._features import feature_fingerprint
from .._validation import check_choice, check_level, check_truncation_data, intermediate_alias
from .._warnings import warn_at_caller
from ..estimands._methods import method_of
from ..estimands._strata import needs_zero_cells, resolve_stratum
from ..estimands._view import orient, scale_effect
from ..exceptions import FewOutcomesWarning
from ..inference._resampling import seed_models, spawn_seeds
from ..inference._standard_errors import (
    count_clusters,
    influence_std_error,
    normal_interval,
    reference_dof,
)
from ..nuisance._fit import fit_nuisance
from ..nuisance._missing import few_outcomes_message
from ..nuisance._share import record_settings, shared_nuisance
from . import _design
from ._fallback import bootstrap_std_errors
from ._heterogeneity import subgroup_effects
from ._repeats import check_repeats, median_aggregate, repeat_seeds
from ._scores import PrincipalScoresMixin, check_feature_names, count_crossings
from ._summary import summary_table

__all__ = ["SurvivorEffectEstimator"]

_SCALES = ("difference", "ratio", "odds_ratio")


class SurvivorEffectEstimator(PrincipalScoresMixin, BaseEstimator):
    """Shared fit logic. Subclasses set ``method`` (a key of ``estimands.METHODS``)."""

    _treatment_enters_estimate = True

    @property
    def _method(self):
        return method_of(self)

    @property
    def _uses_outcome_model(self):
        return self._method.uses_outcome_model

    # -- fitting -----------------------------------------------------------------------------
    def _models(self):
        """The models that will see X (for input checks that depend on them)."""
        used = (self.treatment_model, self.survival_model)
        used += (self.outcome_model,) if self._uses_outcome_model else ()
        missing = (self.follow_up_model, self.response_model)
        return used + (missing if self.missing == "at_random" else ())

    def _target_stratum(self):
        """The canonical name of the stratum targeted (``stratum=``; aliases resolved)."""
        return resolve_stratum(getattr(self, "stratum", "always_survivor"), self.monotonicity)

    def _other_stratum(self):
        return needs_zero_cells(self._target_stratum())

    def _check_params(self):
        check_choice(self.monotonicity, "monotonicity", ("increasing", "decreasing"))
        check_choice(self.scale, "scale", _SCALES)
        check_choice(self.missing, "missing", ("error", "at_random"))
        check_estimator_arguments(self)
        return check_repeats(getattr(self, "n_repeats", 1), self.n_folds)

    def _fit_nuisance(self, data, random_state, sandwich=True, check_separation=True):
        # Learners left at random_state=None are seeded from `random_state` (as the bootstrap
        # seeds them per replicate), so two fits with the same random_state agree.
        models = self if random_state is None else seed_models(
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
            follow_up_model=models.follow_up_model,
            # The multiply robust influence values never use the sandwich pieces.
            sandwich=sandwich and not self._method.orthogonal,
            monotonicity=self.monotonicity,
            check_separation=check_separation,
            zero_cells=self._other_stratum(),
        )
        return record_settings(fitted, self, data, random_state)

    def _oriented(self, data, nuisance):
        """The view the formulas read: the oriented arrays of the target stratum."""
        return orient(data, nuisance, self.monotonicity, self._target_stratum())

    def _means(self, data, nuisance, subset=None):
        oriented = self._oriented(data, nuisance)
        with np.errstate(divide="ignore", invalid="ignore"):  # non-finite results are checked
            return self._method.means(oriented, subset=subset), oriented

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
            models; weighting needs the first three), or a list of them (one per cross-fitting
            repeat: the estimates are medians over them). Its models are reused instead of
            refitted; a fit on other data or with other settings is refused.

        Returns
        -------
        self
        """
        n_repeats = self._check_params()
        survival, name = intermediate_alias(survival, intermediate)
        stratum = self._target_stratum()
        data = check_truncation_data(
            _design.design_at_fit(self, X), y, treatment, survival, sample_weight, groups,
            models=self._models(), missing=self.missing, survival_name=name,
            stratum=stratum if self._other_stratum() else None,
        )
        check_n_folds(self.n_folds, data)
        n_clusters = count_clusters(data.groups)
        if X is not None:
            # scikit-learn's convention: feature_names_in_ for DataFrames with string names,
            # checked again by predict_proba.
            # The caller's table, so that polars (converted for the models) keeps its names.
            check_feature_names(self, X if hasattr(X, "columns") else data.X, reset=True)
        self._fitted_on_frame = isinstance(data.X, pd.DataFrame)
        if self.scale == "odds_ratio" and not data.binary_outcome:
            raise ValueError("`scale='odds_ratio'` needs a 0/1 outcome; `y` has other values.")
        if self.scale == "ratio" and np.nanmin(data.outcome) < 0:
            raise ValueError("`scale='ratio'` needs a non-negative outcome; `y` has negatives.")
        if getattr(self, "_statistic_only", False) and nuisance is None:
            return self._fit_statistic(data, n_repeats)
        if nuisance is not None:
            shared = nuisance if isinstance(nuisance, list) else [nuisance]
            seeds = repeat_seeds(self.random_state, len(shared))
            fits = [
                shared_nuisance(
                    self, fit, data, uses_outcome=self._uses_outcome_model,
                    sandwich=not self._method.orthogonal,
                    treatment_enters=self._treatment_enters_estimate, n_repeats=n_repeats,
                    fold_seed=seed,
                )
                for fit, seed in zip(shared, seeds, strict=True)
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
        # The rows seen, so that labels (effect_by) and covariates (the distribution functions)
        # given later can be checked against them.
        self.training_index_ = X.index if isinstance(X, pd.DataFrame) else None
        self.feature_fingerprint_ = feature_fingerprint(X) if data.n_features else None
        message = few_outcomes_message(data)
        if message:
            warn_at_caller(message, FewOutcomesWarning)
        self.n_clusters_ = n_clusters
        if self.std_error_method_ == "bootstrap":
            bootstrap_std_errors(self, data)
        return self

    def _evaluate(self, data, nuisance):
        """Estimates of one nuisance fit (one cross-fitting repeat)."""
        parts, oriented = self._means(data, nuisance)
        effect, influence = scale_effect(parts, self.scale)
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
        # Crossings within rounding (two arms fitted to the same shares) are no contradiction.
        self.n_monotonicity_violations_ = count_crossings(oriented, data.n_samples)
        self.std_error_method_ = self._std_error_method(self.nuisance_)
        # Separated binary models (SeparationWarning at fit): their sandwich is not trusted.
        self.separation_ = list(getattr(self.nuisance_, "separation", []))
        self.bootstrap_replicates_ = None

    def _std_error_method(self, nuisance):
        if self._method.orthogonal:
            return "influence function"
        if nuisance.parametric is not None:
            return "sandwich"
        return "bootstrap" if self.n_bootstrap > 0 else "influence function (nuisance ignored)"

    # -- bootstrap fallback ------------------------------------------------------------------
    def _refit_means(self, data, random_state=None):
        """The statistic of one refit: no standard errors, sandwich pieces or diagnostics."""
        seed = self.random_state if random_state is None else random_state
        nuisance = self._fit_nuisance(data, seed, sandwich=False, check_separation=False)
        parts, _ = self._means(data, nuisance)
        effect, _ = scale_effect(parts, self.scale)
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

    # -- results -----------------------------------------------------------------------------
    def conf_int(self, level=0.95):
        """Normal-approximation confidence interval for the SACE (log scale for ratios).

        With fewer than 30 clusters in ``groups`` the reference is Student's t with
        ``n_clusters_ - 1`` degrees of freedom (a :class:`FewClustersWarning` is raised at fit).
        :class:`~pscore_strata.TrimmingBounds` and a one-effect :class:`BootstrapResult` answer
        ``conf_int(level)`` with the same ``(low, high)`` pair; for the bounds it covers the
        partially identified effect rather than surrounding one estimate.

        Parameters
        ----------
        level : float, default=0.95
            Confidence level, strictly between 0 and 1.

        Returns
        -------
        (low, high) : tuple of float
            The interval's ends.
        """
        check_is_fitted(self, "effect_")
        return normal_interval(
            self.effect_, self.std_error_, level, self.scale != "difference",
            dof=reference_dof(getattr(self, "n_clusters_", None)),
        )  # fmt: skip

    def summary(self, level=0.95):
        """Estimates with standard errors and confidence intervals, one row per quantity.

        Rows: the SACE (its scale in the row name), the always-survivor mean under each arm, the
        principal stratum shares, and the naive survivor-only contrast (biased when treatment
        changes who survives; shown for comparison). ``attrs["notes"]`` explains how the
        standard errors were obtained and states the cautions that go with every SACE.

        Parameters
        ----------
        level : float, default=0.95
            Level of the confidence intervals.

        Returns
        -------
        pandas.DataFrame
            Columns ``estimate``, ``std_error``, ``ci_low``, ``ci_high``, one row per quantity;
            ``attrs["notes"]`` holds the notes and cautions.
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


class _Roles:  # the two survival predictions by role, and the monotonicity direction

    def __init__(self, p_mixed, p_pure, increasing):
        self.p_mixed, self.p_pure, self.increasing = p_mixed, p_pure, increasing
