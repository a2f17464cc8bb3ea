"""The always-survivor CDF at given values: the estimators' own formulas with ``1{Y <= v}``.

Replacing the outcome by ``1{Y <= v}`` in an always-survivor mean gives the always-survivor CDF
at ``v`` (DESIGN.md section 5b):

- weighting: the weighted empirical CDFs of each arm's survivors, with the estimator's weights
  (M-estimation terms of the default GLMs included, as for the mean);
- outcome regression: ``sum p_pure F_t(v | X) / sum p_pure`` with the conditional CDF model of
  :mod:`._conditional`;
- multiply robust: the efficient-influence-function estimator with the same model.

All values are evaluated at once (:mod:`._grid_formulas`: one sort of the survivors, cumulative
weighted sums, influence values in factored form), and the formula of
:mod:`pscore_strata.estimands._formulas` itself is evaluated at one value per prepared
estimator as a check (:func:`check_against_formula`; once per fitted conditional CDF model
for the outcome-model estimators, whose later calls share it). The nuisance predictions
(treatment and survival) are the estimator's stored ones; the conditional CDF models are
fitted once per fitted nuisance, covariates and CDF model, and shared by every later call
(:func:`prepare`).
"""

from __future__ import annotations

import hashlib
import weakref
from dataclasses import dataclass, field, replace

import numpy as np
from sklearn.utils.validation import check_is_fitted

from .._features import feature_fingerprint
from .._validation import check_features
from ..estimands._methods import METHODS
from ..estimands._methods import method_of as _method_record
from ..estimands._strata import ALWAYS, arm_cells, stratum_words
from ..estimands._view import Oriented, orient
from ._conditional import fit_conditional_cdf
from ._expansion import Expansion, ValueGrid
from ._grid_formulas import regression_grid, robust_grid, weighting_grid

__all__ = ["CDFPath", "prepare", "cdf_path", "method_of", "formula_cdf", "check_against_formula",
           "outcome_rows"]


def method_of(estimator):
    """``"weighting"``, ``"regression"`` or ``"robust"``; a clear error for anything else."""
    method = _method_record(estimator).name
    check_is_fitted(estimator, "effect_")
    return method


@dataclass
class Prepared:
    """What every CDF evaluation of one fitted estimator shares."""

    method: str
    oriented: Oriented
    data: object
    conditional: object  # ConditionalCDF or None (weighting)
    cdf_model_name: str = "unpenalized logistic regression"
    checked: bool = field(default=False, repr=False)
    stratum: str = "always_survivor"  # the canonical name of the target stratum
    cells: dict = field(default_factory=lambda: {1: 1, 0: 1})  # its intermediate in each arm

    @property
    def words(self):
        """The target stratum in text (``"always-survivor"``, ``"protected"``, ...)."""
        return stratum_words(self.stratum)


def outcome_rows(prepared, arm=None):
    """Rows whose observed outcomes the stratum's CDFs use: its cell in each arm (``arm``: that
    arm's only). For the always-survivors, the observed survivors."""
    data = prepared.data
    rows = np.zeros(data.n_samples, dtype=bool)
    for t, s in prepared.cells.items():
        if arm is None or t == arm:
            rows |= (data.treatment == t) & (data.survival == s)
    if data.outcome_observed is not None:
        rows &= data.outcome_observed == 1
    return rows


# Conditional CDF models by fitted nuisance: {id(nuisance): (weakref, {key: ConditionalCDF})}.
# Entries die with the nuisance fit (a refit makes a new one), and are never pickled with the
# estimator.
_FITTED = {}


def _fingerprint(X):
    """A digest of the covariates' values (the cache must not serve other covariates)."""
    if X is None:
        return None
    try:
        values = np.ascontiguousarray(np.asarray(X, dtype=float))
    except (TypeError, ValueError):
        return None
    return (values.shape, hashlib.blake2b(values.data, digest_size=16).hexdigest())


def _conditional_cdf(estimator, data, X, cdf_model, seed, cells, fingerprint=None):
    nuisance = estimator.nuisance_
    # ``fingerprint``: the digest of X when X was just checked to be the training table.
    fingerprint = ("training", fingerprint) if fingerprint is not None else _fingerprint(X)
    key = (fingerprint, estimator.n_folds, seed, "default" if cdf_model is None else
           (id(cdf_model), repr(cdf_model)), tuple(sorted(cells.items())))  # fmt: skip
    entry = _FITTED.get(id(nuisance))
    if entry is None or entry[0]() is not nuisance:
        entry = (weakref.ref(nuisance), {})
        _FITTED[id(nuisance)] = entry
        weakref.finalize(nuisance, _FITTED.pop, id(nuisance), None)
    cached = entry[1].get(key)
    if cached is not None and cached[0] is data and (cdf_model is None or cached[1] is cdf_model):
        return cached[2]
    conditional = fit_conditional_cdf(data, X, cdf_model, estimator.n_folds, seed, cells=cells)
    if X is None or fingerprint is not None:
        entry[1][key] = (data, cdf_model, conditional)
    return conditional


def check_training_rows(estimator, X):
    """Refuse ``X`` that is not the table the estimator was fitted on (same rows, same order).

    The conditional CDF models are fitted on ``X`` next to the stored per-row predictions, so
    shuffled or other rows would pair each row with another row's predictions.
    """
    expected = getattr(estimator, "feature_fingerprint_", None)
    if expected is None or feature_fingerprint(X) == expected:
        return expected  # the digest of X's values (None: not checked)
    raise ValueError(
        "`X` is not the covariate table the estimator was fitted on (its values or row order "
        "differ): the distribution models pair each row of `X` with that row's stored "
        "predictions. Pass exactly the `X` given to fit, rows in the same order."
    )


def prepare(estimator, X=None, cdf_model=None):
    """The oriented nuisance view and, for outcome-model estimators, the conditional CDF model.

    The conditional CDF models are fitted on the first call for a fitted estimator and reused
    by later calls with the same covariates and ``cdf_model`` (and by the other estimators
    sharing the same nuisance fit).
    """
    method = method_of(estimator)
    stratum = getattr(estimator, "stratum_", "always_survivor")
    cells = arm_cells(stratum, estimator.monotonicity)
    data = estimator.training_data_
    oriented = orient(data, estimator.nuisance_, estimator.monotonicity, stratum)
    conditional = None
    if method != "weighting":
        if X is None and estimator.n_features_in_ > 0:
            raise ValueError(
                f"The {type(estimator).__name__} estimator needs a model of the survivors' "
                "outcome distribution, fitted on the covariates: pass `X`, the covariates the "
                "estimator was fitted with (the fitted estimator does not keep them)."
            )
        checked = None
        if X is not None:
            given = X
            X, n_features, _ = check_features(X, (cdf_model,), n_rows=data.n_samples)
            if n_features != estimator.n_features_in_:
                raise ValueError(
                    f"`X` has {n_features} features but the estimator was fitted with "
                    f"{estimator.n_features_in_}; pass the same covariates."
                )
            checked = check_training_rows(estimator, given)
            if n_features == 0:
                X = None
        seed = estimator.random_state if isinstance(estimator.random_state, int) else 0
        conditional = _conditional_cdf(estimator, data, X, cdf_model, seed, cells,
                                       None if X is None else checked)  # fmt: skip
    name = "unpenalized logistic regression" if cdf_model is None else type(cdf_model).__name__
    prepared = Prepared(method, oriented, data, conditional, name, stratum=stratum, cells=cells)
    prepared.checked = conditional is not None and conditional.cache.get(_check_key(prepared),
                                                                         False)  # fmt: skip
    return prepared


@dataclass
class CDFPath:
    """Always-survivor CDFs at ``values`` and, optionally, their influence values.

    The influence values are :class:`~._expansion.Expansion` objects: ``(n_rows, n_values)``
    arrays in factored form (``np.asarray`` or ``[:, j]`` gives explicit columns).
    """

    values: np.ndarray
    treated: np.ndarray
    control: np.ndarray
    influence_treated: Expansion | None
    influence_control: Expansion | None


_CHECK_ROWS = 100_000
_KEPT_CURVES = 8  # estimated curves kept per conditional CDF model (cdf_path)


def _view(prepared, value, with_influence):
    o = prepared.oriented
    # The always-survivors' outcome is 0 outside the survivors; the other strata's cells carry
    # their own indicators in the formulas.
    below = (o.outcome <= value).astype(float)
    indicator = o.survival * below if o.stratum is ALWAYS else below
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


def formula_cdf(prepared, value, with_influence=True):
    """The formula layer's always-survivor means with ``Y -> 1{Y <= value}`` (one value)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return METHODS[prepared.method].means(_view(prepared, value, with_influence))


def _model_expansion(conditional, grid, arm):
    """``F_arm(v | X)`` at the grid values: constant + sum_j c_j(v) G[:, j] (interpolation)."""
    n_thresholds = conditional.thresholds.size
    coefficients, constant = conditional.weights(grid.values)
    blocks = [(1.0, grid.ones, constant[None, :])]
    if n_thresholds:
        blocks.append((1.0, conditional.grid[arm], coefficients))
    return Expansion.from_blocks(grid, blocks), coefficients


def _add_scaled(out, factor, base, chunk=65_536):
    """``out += factor[:, None] * base`` in row chunks (no rows x columns temporary)."""
    column = np.reshape(factor, (-1, 1)) if np.ndim(factor) else np.full((out.shape[0], 1), factor)
    for start in range(0, out.shape[0], chunk):
        rows = slice(start, start + chunk)
        out[rows] += column[rows] * base[rows]


def _grid_parts(prepared, grid, with_influence):
    o = prepared.oriented
    indicator = Expansion.indicator(grid, o.survival if o.stratum is ALWAYS else
                                    np.ones_like(o.survival))  # fmt: skip
    if prepared.method == "weighting":
        return weighting_grid(o, indicator, with_influence)
    c = prepared.conditional
    mixed_arm, pure_arm = (1, 0) if o.increasing else (0, 1)
    m_mixed, c_mixed = _model_expansion(c, grid, mixed_arm)
    m_pure, c_pure = _model_expansion(c, grid, pure_arm)
    if prepared.method == "robust":
        return robust_grid(o, indicator, m_mixed, m_pure, with_influence)
    blends = {}
    if c.parametric is not None:
        for key, arm, coefficients in (("m_mixed", mixed_arm, c_mixed),
                                       ("m_pure", pure_arm, c_pure)):  # fmt: skip
            def blend(derivative, blocks, arm=arm, coefficients=coefficients):
                # The interpolated prediction's term: the fits' terms in the same combination.
                # The derivative (the always-survivor score) is fixed by the nuisance fit and
                # the direction, so the columns are computed once per conditional CDF model.
                # The prediction's own block (score x grid, the same coefficients) is folded
                # into them: one rows x thresholds base instead of two in every later product.
                model = [b for b in blocks if b[1] is c.grid[arm] and b[2] is coefficients]
                key = ("corrections", o.increasing, o.stratum.role, arm, len(model) == 1)
                if key not in c.cache:
                    base = c.parametric[arm].corrections(derivative, o.weight)
                    if len(model) == 1:
                        _add_scaled(base, model[0][0], c.grid[arm])
                    c.cache[key] = base
                kept = blocks if len(model) != 1 else [b for b in blocks if b is not model[0]]
                return kept + [(1.0, c.cache[key], coefficients)]

            blends[key] = blend
    return regression_grid(o, m_mixed, m_pure, blends, with_influence)


def check_against_formula(prepared, path_values, parts, with_influence):
    """Refuse a grid path that differs from the formula layer at the middle value (see module)."""
    j = path_values.size // 2
    exact = formula_cdf(prepared, path_values[j], with_influence)
    pairs = [(parts.mean_treated[j], exact.mean_treated), (parts.mean_control[j],
                                                           exact.mean_control)]  # fmt: skip
    if with_influence:
        pairs += [(parts.influence_treated[:, j], exact.influence_treated),
                  (parts.influence_control[:, j], exact.influence_control)]
    for fast, slow in pairs:
        fast, slow = np.asarray(fast, dtype=float), np.asarray(slow, dtype=float)
        scale = max(1.0, float(np.max(np.abs(slow), initial=0.0)))
        if np.all(np.isfinite(slow)) and np.max(np.abs(fast - slow), initial=0.0) > 1e-7 * scale:
            raise RuntimeError(
                "Internal check failed: the always-survivor CDF computed on the grid differs "
                f"from the {prepared.method} formula at {path_values[j]:.6g}. Please report "
                "this with the estimator's settings."
            )
    prepared.checked = prepared.checked or with_influence or prepared.data.n_samples > _CHECK_ROWS
    if prepared.checked and prepared.conditional is not None:
        # Shared by every later call on the same conditional CDF models (see prepare).
        prepared.conditional.cache[_check_key(prepared)] = True


def _check_key(prepared):
    return ("checked", prepared.method, prepared.oriented.increasing, prepared.stratum)


def cdf_path(prepared, values, with_influence=True):
    """Evaluate the always-survivor CDFs at sorted ``values`` and rearrange them.

    The formula's estimates need not be monotone in ``v`` (multiply robust: the residual
    terms; all of them: nothing forces it between separately computed points), so each curve is
    sorted over the values (monotone rearrangement with respect to the counting measure on
    ``values``; Chernozhukov, Fernandez-Val & Galichon 2010) and clipped to [0, 1]; the
    influence values move with the estimates they belong to.
    """
    values = np.asarray(values, dtype=float)
    c = prepared.conditional
    key = ("curves", prepared.method, prepared.oriented.increasing, prepared.stratum,
           values.tobytes())  # fmt: skip
    if not with_influence and c is not None and key in c.cache:
        # The estimates of an earlier path at the same values (with or without influence
        # values: the same sums), e.g. survivor_distribution's for quantile_effects' density.
        return CDFPath(values, *c.cache[key], None, None)
    grid = ValueGrid.of(values, prepared.oriented.outcome)
    with np.errstate(divide="ignore", invalid="ignore"):
        parts = _grid_parts(prepared, grid, with_influence)
    treated, control = parts.mean_treated, parts.mean_control
    if not (np.all(np.isfinite(treated)) and np.all(np.isfinite(control))):
        raise ValueError(
            "The always-survivor CDF is not finite: a fitted probability is 0 or 1 where the "
            "formula divides by it. Refit the estimator with regularized models."
        )
    if not prepared.checked:
        # The influence values are compared on data of up to _CHECK_ROWS rows only (the
        # formula's per-value M-estimation terms cost seconds at a million rows); the test
        # suite compares them at every grid point.
        check_against_formula(prepared, values, parts,
                              with_influence and prepared.data.n_samples <= _CHECK_ROWS)
    curves = []
    for curve, infl in ((treated, parts.influence_treated), (control, parts.influence_control)):
        order = np.argsort(curve, kind="stable")
        curves.append((np.clip(curve[order], 0.0, 1.0), None if infl is None else
                       infl.permuted(order)))  # fmt: skip
    (treated, if_treated), (control, if_control) = curves
    if c is not None:
        kept = [k for k in c.cache if k[0] == "curves"]
        for old in kept[: max(0, len(kept) - _KEPT_CURVES + 1)]:
            del c.cache[old]  # the oldest first: memory stays bounded in long loops
        c.cache[key] = (treated, control)
    return CDFPath(values, treated, control, if_treated, if_control)
