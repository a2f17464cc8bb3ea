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
:func:`logistic_mle`, Newton-Raphson on standardized columns started from the previous
threshold's solution, which reaches the same maximum-likelihood fit as the estimators'
scikit-learn model (checked to 1e-8 in ``tests/test_distribution_reference.py``) without its
per-fit overhead; a threshold where it does not converge cleanly (separation, collinear
columns) is fitted by the scikit-learn model itself.

Separately fitted classifiers can cross; each row's predictions over the grid are sorted
(monotone rearrangement; Chernozhukov, Fernandez-Val & Galichon 2010, Econometrica 78, which
shows the sorted curve is never farther from a monotone truth than the original).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.special import expit
from sklearn.base import clone
from sklearn.model_selection import StratifiedKFold

from ..nuisance._fit import _fit, _parametric, _rows, default_binary_model

__all__ = ["ConditionalCDF", "fit_conditional_cdf", "threshold_grid", "logistic_mle", "MAX_LEVELS"]

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

    def __init__(self, fits, coefficients):
        self.fits, self.coefficients = fits, coefficients

    def correction(self, derivative, weights):
        total = 0.0
        for fit, c in zip(self.fits, self.coefficients, strict=True):
            if fit is not None and c != 0:
                total = total + fit.correction(c * derivative, weights)
        return total


@dataclass
class ConditionalCDF:
    """Per-row conditional CDF predictions on the grid, per arm.

    ``grid[t]`` has shape ``(n_rows, n_thresholds)`` (rearranged); ``parametric[t]`` holds one
    :class:`ParametricFit` per threshold when every classifier is the default logistic model
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

    def at(self, value, arm):
        """``F_arm(value | X)`` per row, and a sandwich helper (or ``None``)."""
        columns, coefficients, constant = self.position(value)
        prediction = np.full(self.grid[arm].shape[0], constant)
        for j, c in zip(columns, coefficients, strict=True):
            prediction = prediction + c * self.grid[arm][:, j]
        fits = None
        if self.parametric is not None:
            fits = _Blend([self.parametric[arm][j] for j in columns], coefficients)
        return prediction, fits


def fit_conditional_cdf(data, X, cdf_model=None, n_folds=None, random_state=None,
                        n_thresholds=N_THRESHOLDS):  # fmt: skip
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
    """
    T, S, Y, w = data.treatment, data.survival, data.outcome, data.sample_weight
    # Outcome-model rows: observed survivors (with missing data, known status and a response).
    observed = S == 1
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
    grid = {arm: np.empty((n, thresholds.size)) for arm in (0, 1)}
    use_sandwich = cdf_model is None and n_folds is None
    parametric = {0: [], 1: []} if use_sandwich else None
    design = None if X is None else np.asarray(X, dtype=float) if use_sandwich else None
    values = None if X is None or cdf_model is not None else np.asarray(X, dtype=float)
    n_constant = 0
    outcome = np.nan_to_num(Y)
    for arm in (0, 1):
        folds = []
        for train, test in splits:
            rows = train[(T[train] == arm) & observed[train]]
            fold = None if values is None or rows.size == 0 else _FoldFit(values, rows, w,
                                                                          data.weighted)
            folds.append((rows, outcome[rows], w[rows], test, fold))
        for j, threshold in enumerate(thresholds):
            for rows, y_rows, w_rows, test, fold in folds:
                labels = (y_rows <= threshold).astype(float)
                share = np.sum(w_rows * labels) / np.sum(w_rows)
                if X is None or share in (0.0, 1.0):
                    # No covariates, or one class only among these survivors: the weighted share.
                    grid[arm][test, j] = share
                    n_constant += X is not None
                    continue
                prediction = None if fold is None else fold.predict(labels, values, test)
                if prediction is None:
                    fitted = _fit(clone(model), _rows(X, rows), labels,
                                  w_rows if data.weighted else None)  # fmt: skip
                    prediction = fitted.predict_proba(_rows(X, test))[:, 1]
                grid[arm][test, j] = prediction
            if use_sandwich:
                p = grid[arm][:, j]
                mask = (T == arm) & observed
                target = np.where(observed, (outcome <= threshold).astype(float), 0.0)
                parametric[arm].append(_parametric(design, mask, target, p, p * (1 - p), w))
        grid[arm] = np.sort(grid[arm], axis=1)  # rearrangement over the thresholds
    return ConditionalCDF(thresholds, discrete, low, high, grid, parametric, n_constant)


def logistic_mle(Z, y, w, start, tol=1e-11, max_iter=100):
    """Unpenalized logistic maximum likelihood by Newton-Raphson with step halving.

    ``Z`` is the design with an intercept column (standardized columns), ``w`` the row
    weights. Returns the coefficients, or ``None`` when the iterations do not converge to a
    finite, well-determined maximum (separation, collinear columns): the caller then uses the
    scikit-learn model.
    """
    beta = np.array(start, dtype=float)
    eta = Z @ beta
    current = np.sum(w * (y * eta - np.logaddexp(0.0, eta)))
    for _ in range(max_iter):
        p = expit(eta)
        gradient = Z.T @ (w * (y - p))
        hessian = Z.T @ (Z * (w * p * (1 - p))[:, None])
        if not np.all(np.isfinite(hessian)) or np.linalg.cond(hessian) > 1e12:
            return None
        step = np.linalg.solve(hessian, gradient)
        size = 1.0
        if np.max(np.abs(step)) > 1e-2:  # far from the maximum: halve until the fit improves
            if current is None:
                current = np.sum(w * (y * eta - np.logaddexp(0.0, eta)))
            while True:
                new_eta = Z @ (beta + size * step)
                new = np.sum(w * (y * new_eta - np.logaddexp(0.0, new_eta)))
                if new >= current - 1e-12 * abs(current) or size < 1e-6:
                    break
                size /= 2
            eta, current = new_eta, new
        else:  # within the quadratic convergence region: the full step
            eta, current = Z @ (beta + step), None
        beta = beta + size * step
        if not np.all(np.isfinite(beta)) or np.max(np.abs(beta)) > 30:
            return None  # drifting to infinity: (quasi-)separation
        if np.max(np.abs(size * step)) < tol:
            return beta
    return None


class _FoldFit:
    """The standardized design of one arm's fitting rows, shared by every threshold."""

    def __init__(self, values, rows, w, weighted):
        block = values[rows]
        self.center = block.mean(axis=0)
        spread = block.std(axis=0)
        self.spread = np.where(spread > 0, spread, 1.0)
        self.Z = np.column_stack([np.ones(rows.size), (block - self.center) / self.spread])
        self.w = w[rows] if weighted else np.ones(rows.size)
        self.start = None

    def predict(self, labels, values, test):
        """Fitted probabilities on the ``test`` rows, or ``None`` (fall back to scikit-learn)."""
        share = np.sum(self.w * labels) / np.sum(self.w)
        intercept_only = np.zeros(self.Z.shape[1])
        intercept_only[0] = np.log(share / (1 - share))
        beta = None
        for start in ((self.start, intercept_only) if self.start is not None else
                      (intercept_only,)):  # fmt: skip
            beta = logistic_mle(self.Z, labels, self.w, start)
            if beta is not None:
                break
        if beta is None:
            return None
        self.start = beta  # the next threshold starts here
        slopes = beta[1:] / self.spread
        rows = values if test.size == values.shape[0] else values[test]  # all rows: no copy
        return expit(rows @ slopes + (beta[0] - slopes @ self.center))
