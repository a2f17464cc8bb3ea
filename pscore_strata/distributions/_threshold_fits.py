"""The default conditional CDF models: every threshold's logistic fit at once, and its sandwich.

Distribution regression fits one unpenalized logistic model per threshold on the same rows and
design; only the 0/1 target changes. :func:`fit_thresholds` runs Newton-Raphson for a group of
thresholds together, so each iteration is three matrix products over the rows (linear
predictors, gradients, and every Hessian from the rows' outer products) instead of a
scikit-learn fit per threshold with its validation and copies. It reaches the same maximum
likelihood fit as the estimators' default model (``tests/test_distribution_reference.py``
checks the CDFs built on it to 1e-8); a threshold where Newton does not converge cleanly
(separation, collinear columns) is reported as failed and fitted by the scikit-learn model.

:class:`ThresholdSandwich` holds what the outcome regression's M-estimation terms need from
these fits (design, rows, targets, predictions), builds a threshold's
:class:`~pscore_strata.nuisance._models.ParametricFit` only when the per-value formula asks for
it, and gives all thresholds' terms for one derivative in a few matrix products.
"""

from __future__ import annotations

import numpy as np
from scipy.special import expit

from ..nuisance._sandwich import parametric_piece

__all__ = ["fit_thresholds", "ThresholdSandwich"]

_GROUP = 1  # thresholds iterated together (memory: rows x group per temporary)
_CHUNK = 65_536


def _outer_products(Z):
    """Row-wise upper-triangle products ``Z_a Z_b`` (a <= b): shape (rows, q (q + 1) / 2)."""
    upper = np.triu_indices(Z.shape[1])
    return Z[:, upper[0]] * Z[:, upper[1]], upper


def _unpack(packed, upper, q):
    """(pairs, a) -> (a, q, q) symmetric matrices."""
    out = np.zeros((packed.shape[1], q, q))
    out[:, upper[0], upper[1]] = packed.T
    out[:, upper[1], upper[0]] = packed.T
    return out


def _newton_group(Z, ZZ, upper, labels, w, start, tol=1e-4, max_iter=100):
    """Newton-Raphson for the columns of ``labels``; ``(q, a)`` coefficients and success.

    Newton converges quadratically, so stopping after the step in which no coefficient (on
    standardized columns) moved by more than ``tol`` leaves an error of order ``tol^2``
    (1e-8; measured: predictions within 4e-10 of the fit iterated to 1e-11).
    """
    q, a = Z.shape[1], labels.shape[1]
    beta = start.copy()
    ok = np.ones(a, bool)
    active = np.arange(a)
    for _ in range(max_iter):
        if active.size == 0:
            break
        everything = active.size == a
        y = labels if everything else labels[:, active]
        eta = Z @ beta[:, active]
        p = expit(eta)
        gradient = Z.T @ (w[:, None] * (y - p))
        p *= 1 - p
        hessian = _unpack(ZZ.T @ (w[:, None] * p), upper, q)
        good = np.all(np.isfinite(hessian), axis=(1, 2))
        good[good] = np.linalg.cond(hessian[good]) < 1e12
        step = np.zeros((q, active.size))
        if good.any():
            step[:, good] = np.linalg.solve(hessian[good], gradient[:, good].T[..., None])[..., 0].T
        # Started near the maximum (the neighbouring threshold's fit), Newton needs no line
        # search; a step is only capped, and a fit that wanders off is refitted by scikit-learn.
        size = np.minimum(1.0, 5.0 / np.maximum(np.max(np.abs(step), axis=0), 1e-300))
        beta[:, active] += size * step
        moved = np.max(np.abs(size * step), axis=0)
        failed = ~good | ~np.all(np.isfinite(beta[:, active]), axis=0) | (
            np.max(np.abs(beta[:, active]), axis=0) > 30)  # drifting to infinity: separation
        ok[active[failed]] = False
        active = active[~failed & (moved >= tol)]
    ok[active] = False  # not converged within max_iter
    return beta, ok


def _logit(share):
    return np.log(share / (1 - share))


def fit_thresholds(values, rows, y_rows, w_rows, thresholds, test, out, columns):
    """Fit every threshold; write the predictions on the ``test`` rows into ``out``.

    ``values`` are the covariates (all rows), ``rows`` the fitting rows, ``y_rows`` and
    ``w_rows`` their outcomes and weights; threshold ``j``'s predictions go to
    ``out[test, columns[j]]`` (those of failed thresholds are undefined). Returns which
    thresholds converged. Each group of thresholds
    starts from the previous group's nearest fit with its intercept moved to the new share
    (neighbouring thresholds have similar slopes), the first from the intercept-only fit.
    """
    block = values[rows]
    center = block.mean(axis=0)
    spread = block.std(axis=0)
    spread = np.where(spread > 0, spread, 1.0)
    Z = np.column_stack([np.ones(rows.size), (block - center) / spread])
    del block
    ZZ, upper = _outer_products(Z)
    coefficients = np.zeros((Z.shape[1], thresholds.size))
    converged = np.zeros(thresholds.size, bool)
    previous = None
    for first in range(0, thresholds.size, _GROUP):
        group = slice(first, first + _GROUP)
        labels = (y_rows[:, None] <= thresholds[None, group]).astype(float)
        share = (w_rows @ labels) / w_rows.sum()
        start = np.zeros((Z.shape[1], labels.shape[1]))
        start[0] = _logit(share)
        if previous is not None:
            beta_previous, share_previous = previous
            start[1:] = beta_previous[1:, None]
            start[0] = beta_previous[0] + _logit(share) - _logit(share_previous)
        beta, converged[group] = _newton_group(Z, ZZ, upper, labels, w_rows, start)
        if converged[group][-1]:
            previous = (beta[:, -1], share[-1])
        coefficients[:, group] = beta
    del Z, ZZ
    slopes = coefficients[1:] / spread[:, None]
    intercepts = coefficients[0] - center @ slopes
    if test.size == values.shape[0]:  # all rows (no cross-fitting): in row chunks, no copies
        for start in range(0, test.size, _CHUNK):
            chunk = slice(start, start + _CHUNK)
            out[chunk, columns] = expit(values[chunk] @ slopes + intercepts)
    else:
        out[np.ix_(test, columns)] = expit(values[test] @ slopes + intercepts)
    return converged


def _equilibrated_inverse(info):
    """Inverse after scaling to unit diagonal, as the nuisance sandwich does (batched)."""
    scale = np.sqrt(np.abs(np.diagonal(info, axis1=1, axis2=2)))
    scale[scale == 0] = 1.0
    outer = scale[:, :, None] * scale[:, None, :]
    return np.linalg.pinv(info / outer) / outer


class ThresholdSandwich:
    """M-estimation pieces of the default conditional CDF fits of one arm (see module)."""

    def __init__(self, design, mask, outcome, thresholds, predictions, weights):
        self.design, self.mask, self.outcome = design, mask, outcome
        self.thresholds, self.predictions, self.weights = thresholds, predictions, weights
        self._fits = {}

    def __len__(self):
        return self.thresholds.size

    def __getitem__(self, j):
        """The :class:`ParametricFit` of threshold ``j`` (built on first use)."""
        if j not in self._fits:
            target = np.where(self.mask, (self.outcome <= self.thresholds[j]).astype(float), 0.0)
            p = self.predictions[:, j]
            self._fits[j] = parametric_piece(self.design, self.mask, target, p, p * (1 - p),
                                        self.weights)  # fmt: skip
        return self._fits[j]

    def corrections(self, derivative, weights):
        """``[self[j].correction(derivative, weights) for j]`` as ``(rows, thresholds)`` columns."""
        X, total = self.design, weights.sum()
        n, k = self.predictions.shape
        q = 1 if X is None else X.shape[1] + 1
        info = np.zeros((q * (q + 1) // 2, k))
        gradient = np.zeros((q, k))
        upper = np.triu_indices(q)
        for start in range(0, n, _CHUNK):
            rows = slice(start, start + _CHUNK)
            Zc = np.ones((min(_CHUNK, n - start), 1))
            if X is not None:
                Zc = np.column_stack([Zc, X[rows]])
            p = self.predictions[rows]
            slope = p * (1 - p)
            info += (Zc[:, upper[0]] * Zc[:, upper[1]]).T @ (
                (weights[rows] * self.mask[rows])[:, None] * slope)
            # The gradient runs over every row (ParametricFit.correction), the information
            # over the fitting rows.
            gradient += Zc.T @ ((weights[rows] * derivative[rows])[:, None] * slope)
        h_inverse = _equilibrated_inverse(_unpack(info / total, upper, q))
        direction = np.einsum("jab,bj->aj", h_inverse, gradient / total)
        out = np.empty((n, k))
        for start in range(0, n, _CHUNK):
            rows = slice(start, start + _CHUNK)
            fitted = np.broadcast_to(direction[0], (min(_CHUNK, n - start), k))
            if X is not None:
                fitted = X[rows] @ direction[1:] + direction[0]
            target = self.outcome[rows, None] <= self.thresholds[None, :]
            residual = np.where(self.mask[rows, None], target - self.predictions[rows], 0.0)
            out[rows] = residual * fitted
        return out
