"""Cheap evaluation of the sensitivity formulas along one parameter, from stored arrays.

A sensitivity grid or a tipping-point search evaluates the adjusted SACE at many parameter
values. Two facts make that cheap:

- the oriented view of the nuisance predictions does not depend on the parameters, so it is
  built once per nuisance fit (not once per value);
- with ``pi_ratio`` unset, every estimating function of :mod:`._sensitivity` is affine in the
  difference parameter ``delta`` (``G = e_a m - delta e_a e_h / p_m``, and the weighting,
  regression and multiply robust formulas, their normalizers and M-estimation corrections are
  linear in ``G`` and its partial derivatives, while the normalizers do not involve ``delta``).
  So the stratum's means and their influence values at any ``delta`` are exact affine
  combinations of those at ``delta = 0`` and ``delta = 1``, and the variance of any linear
  combination of the four influence vectors is a quadratic form in a 4 x 4 matrix built once.
  A whole grid of ``delta`` then costs two passes over the rows. The same holds for
  ``delta_0`` (``pi_difference_doomed``) with ``delta = 0``: in the pure arm's
  intermediate-0 cell ``G = e m +- delta_0 e_h e_d / (1 - p_p)``, and no normalizer involves it.

The other parameters (``pi_ratio``, ``harmed_ratio``) enter nonlinearly (and ``harmed_ratio``
clips scores row by row), so they are evaluated directly, still on the stored view; except
``harmed_ratio`` alone for a method with ``harmed_terms`` (multiply robust; always-survivors,
with or without clusters, and helped stratum), whose exact path is
:class:`._harmed.HarmedLine`. Each setting's answer is kept, so a grid and a tipping-point
search on the same path share their evaluations.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..estimands._setting import Setting
from ..estimands._view import orient, scale_effect, scale_factors
from ..estimators._repeats import median_aggregate
from ..inference._standard_errors import influence_std_error
from ._harmed import EXPLICIT_ROWS, HarmedLine

__all__ = ["SensitivityPath"]

NULL = Setting()

# Answers kept per path (a few grids and tipping-point searches need a few hundred).
_KEPT_ANSWERS = 10_000


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
        # No reference to the estimator itself: paths are cached per estimator (weakly).
        self.method, self.scale = method, estimator.scale
        data = estimator.training_data_
        self.weights, self.groups = data.sample_weight, data.groups
        fits = getattr(estimator, "_repeat_fits", None) or [estimator.nuisance_]
        # One oriented view per fit (it keeps its parameter-free arrays between settings).
        stratum = getattr(estimator, "stratum_", "always_survivor")
        self.views = [orient(data, nuisance, estimator.monotonicity, stratum) for nuisance in fits]
        self._lines = {}
        self._harmed = None
        self._answers = {}
        self._null = {}

    # -- direct evaluation -------------------------------------------------------------------
    def at(self, delta=0.0, eps=None, xi=0.0, delta_0=0.0):
        """``(effect, std_error, n_clipped)`` at one setting, repeats combined by medians."""
        effects, errors, clipped = [], [], 0
        for index in range(len(self.views)):
            parts, n_clipped = self._adjusted(index, Setting(delta, eps, xi, delta_0))
            effect, influence = scale_effect(parts, self.scale)
            effects.append(float(effect))
            errors.append(influence_std_error(influence, self.weights, self.groups))
            clipped = max(clipped, n_clipped)
        effect, std_error = median_aggregate(effects, errors)
        return float(effect), float(std_error), clipped

    def _adjusted(self, index, setting):
        """``method.adjusted`` on view ``index``; the null setting's kept (the grids, the
        tipping points and the affine path all start there)."""
        if setting != NULL:
            return self.method.adjusted(self.views[index], setting)
        if index not in self._null:
            self._null[index] = self.method.adjusted(self.views[index], setting)
        return self._null[index]

    # -- the affine paths in delta and delta_0 ----------------------------------------------
    def _line(self, xi, parameter="pi_difference"):
        if (parameter, xi) not in self._lines:
            # The other difference parameter stays 0 (both paths hold pi_ratio unset).
            unit = (Setting(1.0, None, xi) if parameter == "pi_difference"
                    else Setting(0.0, None, xi, 1.0))  # fmt: skip
            lines = []
            for index, o in enumerate(self.views):
                start, clipped = self._adjusted(index, Setting(0.0, None, xi))
                end, _ = self.method.adjusted(o, unit)
                means = np.array([start.mean_treated, end.mean_treated - start.mean_treated,
                                  start.mean_control, end.mean_control - start.mean_control])
                basis = np.column_stack([
                    start.influence_treated, end.influence_treated - start.influence_treated,
                    start.influence_control, end.influence_control - start.influence_control,
                ])  # fmt: skip
                lines.append((means, _gram(basis, self.weights, self.groups), clipped))
            self._lines[parameter, xi] = lines
        return self._lines[parameter, xi]

    def along_delta(self, deltas, xi=0.0, parameter="pi_difference"):
        """Arrays ``(effect, std_error)`` at every ``delta`` in ``deltas``, and ``n_clipped``;
        ``parameter="pi_difference_doomed"``: the same along ``delta_0`` (``delta = 0``)."""
        deltas = np.atleast_1d(np.asarray(deltas, dtype=float))
        scale = self.scale
        effects, errors, clipped = [], [], 0
        for means, gram, n_clipped in self._line(xi, parameter):
            mu1 = means[0] + deltas * means[1]
            mu0 = means[2] + deltas * means[3]
            # Coefficients of the influence value on the basis (if1, slope1, if0, slope0).
            effect, k1, k0 = scale_factors(mu1, mu0, scale)
            k1, k0 = np.broadcast_to(k1, deltas.shape), np.broadcast_to(k0, deltas.shape)
            coefficients = np.column_stack([k1, k1 * deltas, -k0, -k0 * deltas])
            variance = np.einsum("ij,jk,ik->i", coefficients, gram, coefficients)
            effects.append(effect)
            errors.append(np.sqrt(np.maximum(variance, 0.0)))
            clipped = max(clipped, n_clipped)
        effect, std_error = median_aggregate(effects, errors)
        return np.asarray(effect, dtype=float), np.asarray(std_error, dtype=float), clipped

    # -- the exact path in harmed_ratio ------------------------------------------------------
    def _harmed_lines(self):
        """One :class:`HarmedLine` per view, or ``()`` where the exact path does not apply."""
        if self._harmed is None:
            terms = self.method.harmed_terms
            lines = ()
            if terms is not None:
                weights = np.ones(len(self.views[0].mixed)) if self.weights is None else (
                    np.asarray(self.weights, dtype=float))  # fmt: skip
                found = [terms(o) for o in self.views]
                if all(t is not None for t in found):
                    lines = tuple(HarmedLine(o, t, weights, self.groups)
                                  for o, t in zip(self.views, found, strict=True))  # fmt: skip
                if not all(line.available for line in lines):
                    lines = ()
            self._harmed = lines
        return self._harmed

    def along_harmed(self, xi):
        """``(effect, std_error, n_clipped)`` at ``harmed_ratio`` ``xi`` (``0 < xi < 1``) from
        the exact path, or ``None`` where it does not apply (then evaluate directly)."""
        lines = self._harmed_lines()
        if not lines:
            return None
        s = xi / (1 - xi)
        total = lines[0].total_weight
        effects, errors, clipped = [], [], 0
        for o, line in zip(self.views, lines, strict=True):
            found = line.suffix(xi)
            if found is None:
                return None
            effect, variance = _harmed_effect(found, s, total, line, o.increasing, self.scale)
            effects.append(float(effect))
            errors.append(float(np.sqrt(np.maximum(variance, 0.0))))
            clipped = max(clipped, found[-1] + line.n_low)
        effect, std_error = median_aggregate(effects, errors)
        return float(effect), float(std_error), clipped

    def evaluate(self, setting):
        """``(effect, std_error, n_clipped)`` at a setting dict (checked values)."""
        eps = setting.get("pi_ratio")
        delta = setting.get("pi_difference", 0.0)
        xi = setting.get("harmed_ratio", 0.0)
        delta_0 = setting.get("pi_difference_doomed", 0.0)
        key = (delta, eps, xi, delta_0)
        if key not in self._answers:
            if len(self._answers) >= _KEPT_ANSWERS:
                self._answers.clear()
            self._answers[key] = self._evaluate(delta, eps, xi, delta_0)
        return self._answers[key]

    def _evaluate(self, delta, eps, xi, delta_0):
        if eps is None and (delta == 0) != (delta_0 == 0):
            # One difference parameter away from 0: its affine path.
            value, parameter = ((delta, "pi_difference") if delta != 0
                                else (delta_0, "pi_difference_doomed"))  # fmt: skip
            effect, std_error, clipped = self.along_delta([value], xi, parameter)
            return float(effect[0]), float(std_error[0]), clipped
        if eps is None and delta == 0 and delta_0 == 0 and xi != 0:
            found = self.along_harmed(xi)
            if found is not None:
                return found
        return self.at(delta, eps, xi, delta_0)


def _harmed_effect(found, s, total, line, increasing, scale):
    """Effect and influence variance at ``s = xi / (1 - xi)`` from the sums of
    :meth:`HarmedLine.suffix`: the rows from ``start`` on contribute ``A + s B`` (stored as
    ``phi_e`` and ``phi_t - r_t phi_e``), the rows before it ``C`` (helped stratum) or 0.

    As :func:`~pscore_strata.estimands._formulas.robust_means` and
    :func:`~pscore_strata.estimands._view.scale_effect`: ``mu_t = mean(phi_t) / mean(phi_e)``,
    the influence values ``k1 (phi_1 - mu_1 phi_e) / share - k0 (phi_0 - mu_0 phi_e) / share``
    with the scale's delta-method factors, and the variance of
    :func:`~pscore_strata.inference._standard_errors.influence_std_error` (rows as clusters),
    ``n / (n - 1) (sum c^2 - (sum c)^2 / n) / (sum w)^2`` for ``c = w IF``.
    """
    sums, products, prefix_sums, prefix_products, start = found
    # Rows, or clusters with groups (the cluster totals over all rows, clipped ones giving 0).
    n = line.n if line.codes is None else line.n_clusters
    r_mixed, r_pure = line.reference
    fixed = np.zeros(3) if prefix_sums is None else prefix_sums
    with np.errstate(divide="ignore", invalid="ignore"):
        phi_e = sums[0] + s * sums[1] + fixed[0]
        share = phi_e / total
        mu_mixed = r_mixed + (sums[2] + s * sums[3] + fixed[1]) / phi_e
        mu_pure = r_pure + (sums[4] + s * sums[5] + fixed[2]) / phi_e
        mu1, mu0 = (mu_mixed, mu_pure) if increasing else (mu_pure, mu_mixed)
        effect, k1, k0 = scale_factors(mu1, mu0, scale)
        c1, c0 = k1 / share, -k0 / share
        c_mixed, c_pure = (c1, c0) if increasing else (c0, c1)
        # c_m phi_m + c_p phi_p + c_e phi_e on the stored parts (phi_t - r_t phi_e, phi_e).
        c_e = c_mixed * (r_mixed - mu_mixed) + c_pure * (r_pure - mu_pure)
        coefficients = np.array([c_e, s * c_e, c_mixed, s * c_mixed, c_pure, s * c_pure])
        if n < 2:
            return effect, np.nan
        if prefix_sums is None and line.n - start <= EXPLICIT_ROWS:
            # Few rows left: their weighted influence values one by one (summed by cluster),
            # centered over all n rows or clusters (the clipped rows contribute 0), as
            # influence_std_error sums them.
            values = coefficients @ line.rows(start)
            if line.codes is not None:
                values = np.bincount(line.codes[start : line.n], weights=values, minlength=n)
            mean = np.sum(values) / n
            square = np.sum((values - mean) ** 2) + ((n - values.size) * mean**2)
            return effect, n / (n - 1) * square / total**2
        square = coefficients @ products @ coefficients
        mean_total = coefficients @ sums
        if prefix_sums is not None:
            fixed_coefficients = np.array([c_e, c_mixed, c_pure])
            square = square + fixed_coefficients @ prefix_products @ fixed_coefficients
            mean_total = mean_total + fixed_coefficients @ prefix_sums
        variance = n / (n - 1) * (square - mean_total**2 / n) / total**2
    return effect, variance
