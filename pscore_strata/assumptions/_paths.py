"""Cheap evaluation of the sensitivity formulas along one parameter, from stored arrays.

A sensitivity grid or a tipping-point search evaluates the adjusted SACE at many parameter
values. Two facts make that cheap:

- the oriented view of the nuisance predictions does not depend on the parameters, so it is
  built once per nuisance fit (not once per value);
- with ``pi_ratio`` unset, every estimating function of :mod:`._sensitivity` is affine in the
  difference parameter ``delta`` (``G = e_a m - delta e_a e_h / p_m``, and the weighting,
  regression and multiply robust formulas, their normalizers and M-estimation corrections are
  linear in ``G`` and its partial derivatives, while the normalizers do not involve ``delta``).
  So the always-survivor means and their influence values at any ``delta`` are exact affine
  combinations of those at ``delta = 0`` and ``delta = 1``, and the variance of any linear
  combination of the four influence vectors is a quadratic form in a 4 x 4 matrix built once.
  A whole grid of ``delta`` then costs two passes over the rows.

The other parameters (``pi_ratio``, ``harmed_ratio``) enter nonlinearly (and ``harmed_ratio``
clips scores row by row), so they are evaluated directly, still on the stored view.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..estimands._setting import Setting
from ..estimands._view import orient, scale_effect
from ..estimators._repeats import median_aggregate
from ..inference._standard_errors import influence_std_error

__all__ = ["SensitivityPath"]


def _gram(basis, weights, groups):
    """``Cov`` matrix such that ``c' G c`` is ``influence_std_error(basis @ c)**2``."""
    contributions = basis * weights[:, None]
    if groups is not None:
        codes, _ = pd.factorize(np.asarray(groups))
        totals = np.zeros((codes.max() + 1, basis.shape[1]))
        np.add.at(totals, codes, contributions)
        contributions = totals
    n_clusters = contributions.shape[0]
    if n_clusters < 2:
        return np.full((basis.shape[1], basis.shape[1]), np.nan)
    centered = contributions - contributions.mean(axis=0)
    return n_clusters / (n_clusters - 1) * (centered.T @ centered) / weights.sum() ** 2


class SensitivityPath:
    """The adjusted SACE of one fitted estimator at any sensitivity setting.

    Parameters
    ----------
    estimator : fitted estimator (checked by the caller)
    method : its :class:`~pscore_strata.estimands.Method` record
    """

    def __init__(self, estimator, method):
        self.estimator, self.method = estimator, method
        data = estimator.training_data_
        self.weights, self.groups = data.sample_weight, data.groups
        fits = getattr(estimator, "_repeat_fits", None) or [estimator.nuisance_]
        # One oriented view per fit (it keeps its parameter-free arrays between settings).
        stratum = getattr(estimator, "stratum_", "always_survivor")
        self.views = [orient(data, nuisance, estimator.monotonicity, stratum) for nuisance in fits]
        self._lines = {}

    # -- direct evaluation -------------------------------------------------------------------
    def at(self, delta=0.0, eps=None, xi=0.0, delta_0=0.0):
        """``(effect, std_error, n_clipped)`` at one setting, repeats combined by medians."""
        effects, errors, clipped = [], [], 0
        for o in self.views:
            parts, n_clipped = self.method.adjusted(o, Setting(delta, eps, xi, delta_0))
            effect, influence = scale_effect(parts, self.estimator.scale)
            effects.append(float(effect))
            errors.append(influence_std_error(influence, self.weights, self.groups))
            clipped = max(clipped, n_clipped)
        effect, std_error = median_aggregate(effects, errors)
        return float(effect), float(std_error), clipped

    # -- the affine path in delta ------------------------------------------------------------
    def _line(self, xi):
        if xi not in self._lines:
            lines = []
            for o in self.views:
                start, clipped = self.method.adjusted(o, Setting(0.0, None, xi))
                end, _ = self.method.adjusted(o, Setting(1.0, None, xi))
                means = np.array([start.mean_treated, end.mean_treated - start.mean_treated,
                                  start.mean_control, end.mean_control - start.mean_control])
                basis = np.column_stack([
                    start.influence_treated, end.influence_treated - start.influence_treated,
                    start.influence_control, end.influence_control - start.influence_control,
                ])  # fmt: skip
                lines.append((means, _gram(basis, self.weights, self.groups), clipped))
            self._lines[xi] = lines
        return self._lines[xi]

    def along_delta(self, deltas, xi=0.0):
        """Arrays ``(effect, std_error)`` at every ``delta`` in ``deltas``, and ``n_clipped``."""
        deltas = np.atleast_1d(np.asarray(deltas, dtype=float))
        scale = self.estimator.scale
        effects, errors, clipped = [], [], 0
        for means, gram, n_clipped in self._line(xi):
            mu1 = means[0] + deltas * means[1]
            mu0 = means[2] + deltas * means[3]
            # Coefficients of the influence value on the basis (if1, slope1, if0, slope0).
            if scale == "difference":
                effect, k1, k0 = mu1 - mu0, np.ones_like(deltas), np.ones_like(deltas)
            elif scale == "ratio":
                effect = mu1 / mu0
                k1, k0 = effect / mu1, effect / mu0
            else:
                effect = (mu1 / (1 - mu1)) / (mu0 / (1 - mu0))
                k1, k0 = effect / (mu1 * (1 - mu1)), effect / (mu0 * (1 - mu0))
            coefficients = np.column_stack([k1, k1 * deltas, -k0, -k0 * deltas])
            variance = np.einsum("ij,jk,ik->i", coefficients, gram, coefficients)
            effects.append(effect)
            errors.append(np.sqrt(np.maximum(variance, 0.0)))
            clipped = max(clipped, n_clipped)
        effect, std_error = median_aggregate(effects, errors)
        return np.asarray(effect, dtype=float), np.asarray(std_error, dtype=float), clipped

    def evaluate(self, setting):
        """``(effect, std_error, n_clipped)`` at a setting dict (checked values)."""
        eps = setting.get("pi_ratio")
        delta = setting.get("pi_difference", 0.0)
        xi = setting.get("harmed_ratio", 0.0)
        delta_0 = setting.get("pi_difference_doomed", 0.0)
        if eps is None and delta != 0 and delta_0 == 0:
            effect, std_error, clipped = self.along_delta([delta], xi)
            return float(effect[0]), float(std_error[0]), clipped
        return self.at(delta, eps, xi, delta_0)
