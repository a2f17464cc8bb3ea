"""The default conditional CDF models: every threshold's logistic fit, and its sandwich.

Distribution regression fits one unpenalized logistic model per threshold on the same rows and
design; only the 0/1 target changes. :func:`fit_thresholds` runs Newton-Raphson on the
standardized design once per threshold, in increasing order, each fit started from the
previous thresholds' fits extrapolated, so a threshold takes two or three passes over the rows
(each accumulating the gradient and Hessian in cache-sized row blocks) instead of a
scikit-learn fit with its validation and copies. It reaches the same maximum likelihood fit
as the estimators' default model (``tests/test_distribution_reference.py`` checks the CDFs
built on it to 1e-8); a threshold where Newton does not converge cleanly (separation,
collinear columns) is reported as failed and fitted by the scikit-learn model.

:class:`ThresholdSandwich` holds what the outcome regression's M-estimation terms need from
these fits (design, rows, targets, predictions), builds a threshold's
:class:`~pscore_strata.nuisance._models.ParametricFit` only when the per-value formula asks for
it, and gives all thresholds' terms for one derivative in a few matrix products.
"""

from __future__ import annotations

import numpy as np
from scipy.special import expit

from ..nuisance._sandwich import parametric_piece
from ._expansion import empty_rows

__all__ = ["fit_thresholds", "ThresholdSandwich"]

_ROWS = 8_192  # rows per block of a Newton pass (the block's temporaries stay in cache)
_CHUNK = 65_536


def _unpack(packed, upper, q):
    """(pairs, a) -> (a, q, q) symmetric matrices."""
    out = np.zeros((packed.shape[1], q, q))
    out[:, upper[0], upper[1]] = packed.T
    out[:, upper[1], upper[0]] = packed.T
    return out


def _newton(Z, labels, w, start, tol=1e-4, max_iter=100):
    """Newton-Raphson for one threshold's logistic fit; ``(coefficients, converged)``.

    Each pass runs over the rows in blocks of ``_ROWS``, accumulating the gradient and the
    Hessian ``Z' diag(w p (1 - p)) Z`` block by block, so no rows x parameters^2 products are
    stored. Newton converges quadratically, so stopping after the step in which no coefficient
    (on standardized columns) moved by more than ``tol`` leaves an error of order ``tol^2``
    (1e-8; measured: predictions within 6e-10 of the fit iterated to 1e-13).
    """
    n, q = Z.shape
    beta = start.copy()
    # Multiplying by unit weights changes no bit, so unweighted data skip it.
    weights = None if np.all(w == 1) else w
    blocks = [(Z[first : first + _ROWS], labels[first : first + _ROWS],
               None if weights is None else weights[first : first + _ROWS])
              for first in range(0, n, _ROWS)]  # fmt: skip
    for _ in range(max_iter):
        gradient, hessian = np.zeros(q), np.zeros((q, q))
        for Zb, yb, wb in blocks:
            p = expit(Zb @ beta)
            residual = yb - p
            p *= 1 - p
            if wb is not None:
                residual *= wb
                p *= wb
            gradient += Zb.T @ residual
            hessian += (Zb * p[:, None]).T @ Zb
        if not (np.all(np.isfinite(hessian)) and np.linalg.cond(hessian) < 1e12):
            return beta, False
        step = np.linalg.solve(hessian, gradient)
        # Started near the maximum (the neighbouring threshold's fit), Newton needs no line
        # search; a step is only capped, and a fit that wanders off is
        # refitted by scikit-learn.
        step *= min(1.0, 5.0 / max(float(np.max(np.abs(step))), 1e-300))
        beta += step
        if not np.all(np.isfinite(beta)) or np.max(np.abs(beta)) > 30:
            return beta, False  # drifting to infinity: separation
        if np.max(np.abs(step)) < tol:
            return beta, True
    return beta, False  # not converged within max_iter


def _logit(share):
    return np.log(share / (1 - share))


def _start(previous, location, q):
    """Starting coefficients at a threshold whose intercept-only fit is ``location``.

    ``previous`` holds the converged fits ``(coefficients, location)`` of the thresholds below.
    With two of them the start extrapolates linearly from the last two in ``location`` (the
    coefficients change smoothly along the thresholds; measured: 54-57 Newton passes per arm
    instead of 67-70 at 500,000 rows, same fits to 2e-9); with one, its slopes and its
    intercept moved by the change of logit; with none, the intercept-only fit.
    """
    start = np.zeros(q)
    start[0] = location
    if len(previous) >= 2 and previous[-1][1] != previous[-2][1]:
        (last, at), (before, at_before) = previous[-1], previous[-2]
        return last + (last - before) * ((location - at) / (at - at_before))
    if previous:
        beta, at = previous[-1]
        start[1:] = beta[1:]
        start[0] = beta[0] + location - at
    return start


def fit_thresholds(values, rows, y_rows, w_rows, thresholds, test, out, columns):
    """Fit every threshold; write the predictions on the ``test`` rows into ``out``.

    ``values`` are the covariates (all rows), ``rows`` the fitting rows, ``y_rows`` and
    ``w_rows`` their outcomes and weights; threshold ``j``'s predictions go to
    ``out[test, columns[j]]`` (those of failed thresholds are undefined). Returns which
    thresholds converged. The thresholds are fitted in increasing order, each started from
    the previous fits (:func:`_start`).
    """
    block = values[rows]
    center = block.mean(axis=0)
    spread = block.std(axis=0)
    spread = np.where(spread > 0, spread, 1.0)
    Z = np.column_stack([np.ones(rows.size), (block - center) / spread])
    del block
    q = Z.shape[1]
    coefficients = np.zeros((q, thresholds.size))
    converged = np.zeros(thresholds.size, bool)
    previous = []
    total = w_rows.sum()
    for j, threshold in enumerate(thresholds):
        labels = (y_rows <= threshold).astype(float)
        location = _logit((w_rows @ labels) / total)
        beta, converged[j] = _newton(Z, labels, w_rows, _start(previous, location, q))
        if converged[j]:
            previous.append((beta, location))
        coefficients[:, j] = beta
    del Z
    slopes = coefficients[1:] / spread[:, None]
    intercepts = coefficients[0] - center @ slopes
    columns = np.asarray(columns)
    if columns.size and np.array_equal(columns, np.arange(columns[0], columns[0] + columns.size)):
        columns = slice(columns[0], columns[0] + columns.size)  # a plain view: no scattered writes
    if test.size == values.shape[0]:  # all rows (no cross-fitting): in row chunks, no copies
        whole = isinstance(columns, slice) and columns == slice(0, out.shape[1])
        for start in range(0, test.size, _CHUNK):
            chunk = slice(start, start + _CHUNK)
            if whole:  # straight into the grid's rows (contiguous): no temporary
                linear = out[chunk]
                np.matmul(values[chunk], slopes, out=linear)
                linear += intercepts
                expit(linear, out=linear)
                continue
            linear = values[chunk] @ slopes
            linear += intercepts
            out[chunk, columns] = expit(linear, out=linear)
    else:
        linear = values[test] @ slopes
        linear += intercepts
        if isinstance(columns, slice):
            out[test, columns] = expit(linear, out=linear)
        else:
            out[np.ix_(test, columns)] = expit(linear, out=linear)
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
        upper = np.triu_indices(q)
        # The information runs over the fitting rows (the others carry no weight in it), the
        # gradient over every row (ParametricFit.correction).
        fitting = np.flatnonzero(self.mask)
        info = np.zeros((upper[0].size, k))
        for start in range(0, fitting.size, _CHUNK):
            rows = fitting[start : start + _CHUNK]
            Zc = _with_ones(None if X is None else X[rows], rows.size)
            p = self.predictions[rows]
            p = p * (1 - p)
            p *= weights[rows, None]
            info += (Zc[:, upper[0]] * Zc[:, upper[1]]).T @ p
        gradient = np.zeros((q, k))
        for start in range(0, n, _CHUNK):
            rows = slice(start, start + _CHUNK)
            Zc = _with_ones(None if X is None else X[rows], min(_CHUNK, n - start))
            p = self.predictions[rows]
            p = p * (1 - p)
            p *= (weights[rows] * derivative[rows])[:, None]
            gradient += Zc.T @ p
        h_inverse = _equilibrated_inverse(_unpack(info / total, upper, q))
        direction = np.einsum("jab,bj->aj", h_inverse, gradient / total)
        out = empty_rows((n, k))
        for start in range(0, n, _CHUNK):
            rows = slice(start, start + _CHUNK)
            fitted = out[rows]
            if X is None:
                fitted[:] = direction[0]
            else:
                np.matmul(X[rows], direction[1:], out=fitted)
                fitted += direction[0]
            residual = (self.outcome[rows, None] <= self.thresholds[None, :]).astype(float)
            residual -= self.predictions[rows]
            residual[~self.mask[rows]] = 0.0
            fitted *= residual
        return out


def _with_ones(X, rows=None):
    """``[1, X]`` (a column of ones alone when ``X`` is None)."""
    if X is None:
        return np.ones((rows, 1))
    return np.column_stack([np.ones(X.shape[0]), X])
