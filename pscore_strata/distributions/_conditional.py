"""Conditional CDF models of the survivors' outcome: distribution regression on a threshold grid.

``F_t(v | X) = P(Y <= v | T=t, S=1, X)`` is modelled by one binary classifier per threshold
``g_j`` on a grid (distribution regression; Foresi & Peracchi 1995, JASA 90; Chernozhukov,
Fernandez-Val & Melly 2013, Econometrica 81), fitted per arm among survivors. The grid:

- an outcome with at most ``MAX_LEVELS`` distinct survivor values (binary, ordinal, counts) uses
  every value but the largest, and ``F(v | X)`` is the step function between them (exact);
- otherwise ``n_thresholds`` weighted quantiles of the survivors' outcomes (both arms pooled) at
  levels ``j / (n_thresholds + 1)``; between thresholds ``F(v | X)`` is interpolated linearly, and
  from 0 at the smallest to 1 at the largest observed survivor outcome beyond them.

With the default model (unpenalized logistic regression) every threshold is fitted by
:func:`._threshold_fits.fit_thresholds`, Newton-Raphson on standardized columns, each
threshold started from its neighbours' fits, which reaches the same maximum-likelihood fit as
the estimators' scikit-learn model (checked to 1e-8 in ``tests/test_distribution_reference.py``)
without its per-fit overhead; a threshold where it does not converge cleanly (separation, collinear
columns) is fitted by the scikit-learn model itself.

Separately fitted classifiers can cross; each row's predictions over the grid are sorted
(monotone rearrangement; Chernozhukov, Fernandez-Val & Galichon 2010, Econometrica 78, which
shows the sorted curve is never farther from a monotone truth than the original).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from sklearn.base import clone
from sklearn.model_selection import StratifiedKFold

from ..nuisance._models import default_binary_model, fit_model, take_rows
from ._expansion import empty_rows
from ._threshold_fits import ThresholdSandwich, fit_thresholds

__all__ = ["ConditionalCDF", "fit_conditional_cdf", "threshold_grid", "MAX_LEVELS"]

MAX_LEVELS = 20
N_THRESHOLDS = 19


def threshold_grid(outcome, survival, weights, n_thresholds=N_THRESHOLDS):
    """Thresholds of the conditional CDF models and whether the outcome is discrete.

    Returns
    -------
    thresholds : ndarray
    discrete : bool
    low, high : float
        Smallest and largest observed survivor outcome.
    """
    y, w = outcome[survival == 1], weights[survival == 1]
    levels = np.unique(y)
    if levels.size <= MAX_LEVELS:
        return levels[:-1], True, float(levels[0]), float(levels[-1])
    order = np.argsort(y, kind="stable")
    cumulative = np.cumsum(w[order]) / w.sum()
    probabilities = np.arange(1, n_thresholds + 1) / (n_thresholds + 1)
    thresholds = np.unique(y[order][np.searchsorted(cumulative, probabilities)])
    return thresholds, False, float(levels[0]), float(levels[-1])


class _Blend:
    """Duck-typed :class:`ParametricFit` for an interpolated prediction ``sum_j c_j F_j``.

    The M-estimation term of a linear combination of fits is the same combination of their
    terms, each with the derivative scaled by its coefficient.
    """

    def __init__(self, fits, columns, coefficients):
        # ``fits[j]`` is built on first use (formulas without M-estimation terms never ask).
        self.fits, self.columns, self.coefficients = fits, columns, coefficients

    def correction(self, derivative, weights):
        total = 0.0
        for j, c in zip(self.columns, self.coefficients, strict=True):
            if c != 0:
                total = total + self.fits[j].correction(c * derivative, weights)
        return total


@dataclass
class ConditionalCDF:
    """Per-row conditional CDF predictions on the grid, per arm.

    ``grid[t]`` has shape ``(n_rows, n_thresholds)`` (rearranged); ``parametric[t]`` gives one
    :class:`ParametricFit` per threshold (a :class:`._threshold_fits.ThresholdSandwich`) when
    every classifier is the default logistic model
    fitted on all rows (the outcome regression's sandwich needs them), else ``None``.
    """

    thresholds: np.ndarray
    discrete: bool
    low: float
    high: float
    grid: dict
    parametric: dict | None
    n_constant: int = 0
    cache: dict = field(default_factory=dict, repr=False)  # per-direction correction columns

    def position(self, value):
        """Grid columns and coefficients whose combination gives ``F(value | X)``."""
        g = self.thresholds
        if self.discrete:
            j = int(np.searchsorted(g, value, side="right")) - 1
            if value >= self.high:
                return [], [], 1.0
            return ([j], [1.0], 0.0) if j >= 0 else ([], [], 0.0)
        if value < self.low:
            return [], [], 0.0
        if value >= self.high:
            return [], [], 1.0
        knots = np.concatenate([[self.low], g, [self.high]])
        k = int(np.searchsorted(knots, value, side="right")) - 1
        k = min(k, knots.size - 2)
        lam = (value - knots[k]) / (knots[k + 1] - knots[k])
        columns, coefficients, constant = [], [], 0.0
        for knot, c in ((k, 1 - lam), (k + 1, lam)):
            if knot == 0:
                continue  # F = 0 at the smallest observed outcome (continuous approximation)
            if knot == knots.size - 1:
                constant += c
            else:
                columns.append(knot - 1)
                coefficients.append(c)
        return columns, coefficients, constant

    def weights(self, values):
        """:meth:`position` at every one of ``values`` at once: ``(coefficients (thresholds x
        values), constants (values))`` with ``F(v_t | X) = constants[t] + grid @
        coefficients[:, t]``."""
        values = np.asarray(values, dtype=float)
        g, k = self.thresholds, values.size
        coefficients, constants = np.zeros((g.size, k)), np.zeros(k)
        top = values >= self.high
        if self.discrete:
            j = np.searchsorted(g, values, side="right") - 1
            constants[top] = 1.0
            inside = np.flatnonzero(~top & (j >= 0))
            coefficients[j[inside], inside] = 1.0
            return coefficients, constants
        low = values < self.low
        constants[top & ~low] = 1.0
        inside = np.flatnonzero(~low & ~top)
        v = values[inside]
        knots = np.concatenate([[self.low], g, [self.high]])
        lower = np.minimum(np.searchsorted(knots, v, side="right") - 1, knots.size - 2)
        lam = (v - knots[lower]) / (knots[lower + 1] - knots[lower])
        for knot, c in ((lower, 1 - lam), (lower + 1, lam)):
            # F = 0 at the smallest observed outcome, 1 at the largest (knots 0 and last).
            last = knot == knots.size - 1
            constants[inside[last]] += c[last]
            grid = (knot > 0) & ~last
            coefficients[knot[grid] - 1, inside[grid]] = c[grid]
        return coefficients, constants

    def at(self, value, arm):
        """``F_arm(value | X)`` per row, and a sandwich helper (or ``None``)."""
        columns, coefficients, constant = self.position(value)
        prediction = np.full(self.grid[arm].shape[0], constant)
        for j, c in zip(columns, coefficients, strict=True):
            prediction = prediction + c * self.grid[arm][:, j]
        fits = None
        if self.parametric is not None:
            fits = _Blend(self.parametric[arm], columns, coefficients)
        return prediction, fits


def fit_conditional_cdf(data, X, cdf_model=None, n_folds=None, random_state=None,
                        n_thresholds=N_THRESHOLDS, cells=None):  # fmt: skip
    """Fit the conditional CDF models of each arm's survivors (see the module docstring).

    Parameters
    ----------
    data : TruncationData
        The estimator's training data (``X`` is passed separately).
    X : array-like or None
        The covariates the estimator was fitted with; ``None`` gives arm-wise empirical CDFs.
    cdf_model : classifier or None
        Cloned once per threshold and arm; ``None`` is unpenalized logistic regression.
    n_folds : int or None
        Cross-fitting folds (stratified by treatment x survival), as the estimator used.
    cells : dict or None
        ``{arm: s}``: fit each arm's models among its units with intermediate ``s`` (the target
        stratum's cell in that arm); ``None``: among survivors (the always-survivors).
    """
    T, S, Y, w = data.treatment, data.survival, data.outcome, data.sample_weight
    # Outcome-model rows: observed units of each arm's cell (survivors by default; with missing
    # data, known status and a response).
    cells = {1: 1, 0: 1} if cells is None else cells
    in_cell = {arm: (T == arm) & (S == s) for arm, s in cells.items()}
    observed = in_cell[0] | in_cell[1]
    if data.outcome_observed is not None:
        observed = observed & (data.outcome_observed == 1)
    thresholds, discrete, low, high = threshold_grid(Y, observed, w, n_thresholds)
    n = data.n_samples
    all_rows = np.arange(n)
    if n_folds is None:
        splits = [(all_rows, all_rows)]
    else:
        splitter = StratifiedKFold(n_splits=int(n_folds), shuffle=True, random_state=random_state)
        splits = list(splitter.split(np.zeros(n), 2 * T + S))
    model = default_binary_model() if cdf_model is None else cdf_model
    grid = {arm: empty_rows((n, thresholds.size)) for arm in (0, 1)}
    use_sandwich = cdf_model is None and n_folds is None
    parametric = {} if use_sandwich else None
    design = None if X is None else np.asarray(X, dtype=float) if use_sandwich else None
    values = None if X is None or cdf_model is not None else np.asarray(X, dtype=float)
    n_constant = 0
    outcome = np.nan_to_num(Y)
    for arm in (0, 1):
        for train, test in splits:
            rows = train[in_cell[arm][train] & observed[train]]
            y_rows, w_rows = outcome[rows], w[rows]
            order = np.argsort(y_rows, kind="stable")
            cumulative = np.concatenate([[0.0], np.cumsum(w_rows[order])])
            shares = cumulative[np.searchsorted(y_rows[order], thresholds, side="right")]
            shares = shares / cumulative[-1]
            constant = (shares == 0.0) | (shares == 1.0) if X is not None else np.ones_like(
                shares, dtype=bool)
            n_constant += int(constant.sum()) if X is not None else 0
            fitted_here = np.flatnonzero(~constant)
            failed = fitted_here
            # No covariates, or one class only among these survivors: the weighted share.
            if test.size == n:
                grid[arm][:, constant] = shares[constant]
            else:
                grid[arm][np.ix_(test, np.flatnonzero(constant))] = shares[constant]
            if values is not None and fitted_here.size:
                converged = fit_thresholds(values, rows, y_rows,
                                           w_rows if data.weighted else np.ones(rows.size),
                                           thresholds[fitted_here], test, grid[arm],
                                           fitted_here)  # fmt: skip
                failed = fitted_here[~converged]
            for j in failed:
                labels = (y_rows <= thresholds[j]).astype(float)
                fitted = fit_model(clone(model), take_rows(X, rows), labels,
                              w_rows if data.weighted else None)  # fmt: skip
                grid[arm][test, j] = fitted.predict_proba(take_rows(X, test))[:, 1]
        # Rearrangement over the thresholds, row by row where the fitted curves cross.
        raw = grid[arm]
        crossing = np.flatnonzero(np.any(raw[:, 1:] < raw[:, :-1], axis=1))
        if crossing.size:
            grid[arm] = raw.copy()
            grid[arm][crossing] = np.sort(raw[crossing], axis=1)
        if use_sandwich:
            # The sandwich belongs to the fits as fitted (before the rearrangement).
            unsorted = raw
            parametric[arm] = ThresholdSandwich(design, in_cell[arm] & observed, outcome,
                                                thresholds, unsorted, w)  # fmt: skip
    return ConditionalCDF(thresholds, discrete, low, high, grid, parametric, n_constant)

