"""The always-survivor CDF at given values: the estimators' own formulas with ``1{Y <= v}``.

Replacing the outcome by ``1{Y <= v}`` in an always-survivor mean gives the always-survivor CDF
at ``v`` (DESIGN.md section 5b), so each estimator's formula in
:mod:`pscore_strata.estimators._formulas` is called once per value on an :class:`Oriented`
view whose outcome (and, for the outcome-model estimators, outcome predictions) are swapped:

- weighting: the weighted empirical CDFs of each arm's survivors, with the estimator's weights
  (M-estimation terms of the default GLMs included, as for the mean);
- outcome regression: ``sum p_pure F_t(v | X) / sum p_pure`` with the conditional CDF model of
  :mod:`._conditional`;
- multiply robust: the efficient-influence-function estimator with the same model.

The nuisance predictions (treatment and survival) are the estimator's stored ones; nothing is
refitted apart from the conditional CDF models.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from sklearn.utils.validation import check_is_fitted

from .._validation import check_features
from ..estimators import _formulas
from ..estimators._stratum_formulas import require_always_survivor
from ._conditional import fit_conditional_cdf

__all__ = ["CDFPath", "prepare", "cdf_path", "method_of"]

_METHODS = {
    _formulas.weighting_means: "weighting",
    _formulas.regression_means: "regression",
    _formulas.robust_means: "robust",
}


def method_of(estimator):
    """``"weighting"``, ``"regression"`` or ``"robust"``; a clear error for anything else."""
    formula = getattr(type(estimator), "_formula", None)
    method = _METHODS.get(getattr(formula, "__func__", formula))
    if method is None:
        raise TypeError(
            "`estimator` must be a PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust "
            f"estimator; got {type(estimator).__name__}."
        )
    check_is_fitted(estimator, "effect_")
    return method


@dataclass
class Prepared:
    """What every CDF evaluation of one fitted estimator shares."""

    method: str
    oriented: _formulas.Oriented
    data: object
    conditional: object  # ConditionalCDF or None (weighting)
    cdf_model_name: str = "unpenalized logistic regression"


def prepare(estimator, X=None, cdf_model=None):
    """The oriented nuisance view and, for outcome-model estimators, the conditional CDF model."""
    method = method_of(estimator)
    require_always_survivor(
        estimator, "The distribution functions (survivor_distribution, quantile_effects, "
        "ordinal_comparison)")  # fmt: skip
    if getattr(estimator, "missing", "error") != "error":
        raise ValueError(
            "The distribution functions do not yet support estimators fitted with "
            "`missing='at_random'` (their formulas have not been checked under coarsening); "
            "refit with complete cases, or use the estimator's mean effect."
        )
    data = estimator.training_data_
    oriented = _formulas.orient(data, estimator.nuisance_, estimator.monotonicity)
    conditional = None
    if method != "weighting":
        if X is None and estimator.n_features_in_ > 0:
            raise ValueError(
                f"The {type(estimator).__name__} estimator needs a model of the survivors' "
                "outcome distribution, fitted on the covariates: pass `X`, the covariates the "
                "estimator was fitted with (the fitted estimator does not keep them)."
            )
        if X is not None:
            X, n_features, _ = check_features(X, (cdf_model,), n_rows=data.n_samples)
            if n_features != estimator.n_features_in_:
                raise ValueError(
                    f"`X` has {n_features} features but the estimator was fitted with "
                    f"{estimator.n_features_in_}; pass the same covariates."
                )
            if n_features == 0:
                X = None
        seed = estimator.random_state if isinstance(estimator.random_state, int) else 0
        conditional = fit_conditional_cdf(data, X, cdf_model, estimator.n_folds, seed)
    name = "unpenalized logistic regression" if cdf_model is None else type(cdf_model).__name__
    return Prepared(method, oriented, data, conditional, name)


@dataclass
class CDFPath:
    """Always-survivor CDFs at ``values`` and, optionally, their influence values."""

    values: np.ndarray
    treated: np.ndarray
    control: np.ndarray
    influence_treated: np.ndarray | None  # (n_rows, n_values)
    influence_control: np.ndarray | None


def _view(prepared, value, with_influence):
    o = prepared.oriented
    indicator = o.survival * (o.outcome <= value)
    parametric = o.parametric if with_influence else None
    changes = {"outcome": indicator, "parametric": parametric}
    c = prepared.conditional
    if c is not None:
        mixed_arm, pure_arm = (1, 0) if o.increasing else (0, 1)
        m_mixed, fit_mixed = c.at(value, mixed_arm)
        m_pure, fit_pure = c.at(value, pure_arm)
        changes.update(m_mixed=m_mixed, m_pure=m_pure)
        if parametric is not None:
            # The stored outcome GLMs model the mean, not the CDF: swap in the CDF fits' terms.
            changes["parametric"] = {**parametric, "m_mixed": fit_mixed, "m_pure": fit_pure}
    return replace(o, **changes)


def cdf_path(prepared, values, with_influence=True):
    """Evaluate the always-survivor CDFs at sorted ``values`` and rearrange them.

    The formula's estimates need not be monotone in ``v`` (multiply robust: the residual
    terms; all of them: nothing forces it between separately computed points), so each curve is
    sorted over the values (monotone rearrangement with respect to the counting measure on
    ``values``; Chernozhukov, Fernandez-Val & Galichon 2010) and clipped to [0, 1]; the
    influence values move with the estimates they belong to.
    """
    formula = {"weighting": _formulas.weighting_means, "regression": _formulas.regression_means,
               "robust": _formulas.robust_means}[prepared.method]  # fmt: skip
    k = values.size
    n = prepared.data.n_samples
    treated, control = np.empty(k), np.empty(k)
    influence = (np.empty((n, k)), np.empty((n, k))) if with_influence else (None, None)
    with np.errstate(divide="ignore", invalid="ignore"):
        for j, value in enumerate(values):
            parts = formula(_view(prepared, value, with_influence))
            treated[j], control[j] = parts.mean_treated, parts.mean_control
            if with_influence:
                influence[0][:, j] = parts.influence_treated
                influence[1][:, j] = parts.influence_control
    if not (np.all(np.isfinite(treated)) and np.all(np.isfinite(control))):
        raise ValueError(
            "The always-survivor CDF is not finite: a fitted probability is 0 or 1 where the "
            "formula divides by it. Refit the estimator with regularized models."
        )
    curves = []
    for curve, infl in zip((treated, control), influence, strict=True):
        order = np.argsort(curve, kind="stable")
        curves.append((np.clip(curve[order], 0.0, 1.0), None if infl is None else infl[:, order]))
    (treated, if_treated), (control, if_control) = curves
    return CDFPath(values, treated, control, if_treated, if_control)
