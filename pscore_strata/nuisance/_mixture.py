"""The observed-data likelihood of a principal stratum model, its posteriors and its sandwich.

Under monotonicity each observed cell (arm x survival) is a known set of principal strata. With
the strata in ``classes_`` order (0 always-survivor, 1 the helped stratum, 2 doomed) and the
*mixed* arm the one whose survivors include the helped stratum (treated under ``"increasing"``):

- mixed arm, survived: {0, 1};  mixed arm, died: {2};
- pure arm, survived: {0};      pure arm, died: {1, 2}.

A unit's observed-data likelihood is the sum of its stratum probabilities over its cell,
``L_i = sum_{k in C_i} e_k(X_i)`` (Ding & Lu 2017, JRSSB), and its posterior stratum
probabilities are ``e_k 1{k in C_i} / L_i``. For the multinomial logistic model
``e_k = exp(eta_k) / (1 + exp(eta_0) + exp(eta_1))`` (doomed the reference, ``eta_2 = 0``) with
``eta_j = b_j' Xd``, the derivatives in ``eta`` are (derivation in
docs/guide/derivations/stratum-model.md)

- score: ``d log L_i / d eta_j = post_ij - e_ij``;
- Hessian: ``[diag(post_i) - post_i post_i'] - [diag(e_i) - e_i e_i']`` over j, k in {0, 1},

and those in ``b`` follow by the chain rule with ``d eta_j / d b_j = Xd``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

__all__ = [
    "compatible_strata",
    "strata_probabilities",
    "posterior_strata",
    "fast_strata",
    "MixtureLikelihood",
    "StratumScoreFit",
    "stratum_pieces",
]

_CHUNK = 65_536
_N_FREE = 2  # non-reference strata: always-survivor and the helped stratum


def compatible_strata(treatment, survival, increasing):
    """Boolean (n, 3) matrix: which strata (``classes_`` order) each observed cell allows."""
    mixed = (np.asarray(treatment) == (1 if increasing else 0))
    survived = np.asarray(survival) == 1
    allowed = np.zeros((mixed.size, 3), dtype=bool)
    allowed[:, 0] = survived
    allowed[:, 1] = (mixed & survived) | (~mixed & ~survived)
    allowed[:, 2] = ~survived
    return allowed


def _log_strata(eta):
    """Log stratum probabilities (n, 3) from the two free linear predictors (n, 2)."""
    full = np.column_stack([eta, np.zeros(eta.shape[0])])
    return full - logsumexp(full, axis=1, keepdims=True)


def strata_probabilities(eta):
    """Stratum probabilities (n, 3) from the linear predictors (n, 2) of always and helped."""
    return np.exp(_log_strata(eta))


def posterior_strata(log_strata, allowed):
    """Posterior stratum probabilities given the observed cell, and ``log L_i``."""
    masked = np.where(allowed, log_strata, -np.inf)
    log_cell = logsumexp(masked, axis=1)
    return np.exp(masked - log_cell[:, None]), log_cell


def fast_strata(eta, allowed):
    """``(e, post, log L_i)`` from the linear predictors (n, 2), shifted by the row maximum.

    The same quantities as :func:`strata_probabilities` and :func:`posterior_strata`, without
    general log-sum-exp machinery (three columns; this is the inner loop of the fit).
    """
    shift = np.maximum(np.maximum(eta[:, 0], eta[:, 1]), 0.0)
    raw = np.empty((eta.shape[0], 3))
    np.exp(eta - shift[:, None], out=raw[:, :_N_FREE])
    np.exp(-shift, out=raw[:, 2])
    total = raw.sum(axis=1)
    cell = np.where(allowed, raw, 0.0)
    cell_total = np.maximum(cell.sum(axis=1), np.finfo(float).tiny)
    e = raw / total[:, None]
    post = cell / cell_total[:, None]
    return e, post, np.log(cell_total) - np.log(total)


def _with_intercept(Z):
    return np.column_stack([np.ones(Z.shape[0]), Z])


def _block_information(Zd, a):
    """``sum_i Zd_i Zd_i' a_i[(j, k)]`` for each (j, k) block, assembled class-major.

    ``a`` maps ``(j, k)`` with ``j <= k`` to a per-row weight vector.
    """
    p = Zd.shape[1]
    info = np.zeros((_N_FREE * p, _N_FREE * p))
    for start in range(0, Zd.shape[0], _CHUNK):
        block = Zd[start : start + _CHUNK]
        for (j, k), weight in a.items():
            info[j * p : (j + 1) * p, k * p : (k + 1) * p] += block.T @ (
                block * weight[start : start + _CHUNK, None]
            )
    for j in range(_N_FREE):
        for k in range(j):
            info[j * p : (j + 1) * p, k * p : (k + 1) * p] = info[
                k * p : (k + 1) * p, j * p : (j + 1) * p
            ].T
    return info


class MixtureLikelihood:
    """Mean observed-data log-likelihood of the multinomial logistic stratum model.

    ``Zd`` is the design with an intercept column; parameters are ``b`` of shape (2, p)
    flattened class-major. Values are means over the weight total, so tolerances do not depend
    on n. Each evaluation is cached for the optimizer's function / gradient / Hessian calls.
    """

    def __init__(self, Zd, allowed, weights):
        self.Zd, self.allowed, self.weights = Zd, allowed, weights
        self.total = float(weights.sum())
        self._key, self._state = None, None

    def _evaluate(self, theta):
        key = theta.tobytes()
        if key != self._key:
            b = theta.reshape(_N_FREE, -1)
            self._key, self._state = key, fast_strata(self.Zd @ b.T, self.allowed)
        return self._state

    def log_likelihood(self, theta):
        return float(self.weights @ self._evaluate(theta)[2]) / self.total

    def score(self, theta):
        e, post, _ = self._evaluate(theta)
        residual = (post - e)[:, :_N_FREE] * self.weights[:, None]
        return (self.Zd.T @ residual).T.ravel() / self.total

    def evaluate(self, theta):
        """Mean log-likelihood, its gradient and the observed information at ``theta``."""
        return self.log_likelihood(theta), self.score(theta), self.information(theta)

    def information(self, theta):
        """Minus the Hessian of the mean log-likelihood (the observed information per unit)."""
        e, post, _ = self._evaluate(theta)
        return _observed_information(self.Zd, e, post, self.weights) / self.total


def _observed_information(Zd, e, post, weights):
    # -(Hessian in eta) = [diag(e) - e e'] - [diag(post) - post post'] per row.
    a = {
        (j, k): weights * ((e[:, j] * ((j == k) - e[:, k])) - post[:, j] * ((j == k) - post[:, k]))
        for j in range(_N_FREE)
        for k in range(j, _N_FREE)
    }
    return _block_information(Zd, a)


def _equilibrated_inverse(info):
    scale = np.sqrt(np.abs(np.diag(info)))
    scale[scale == 0] = 1.0
    return np.linalg.pinv(info / np.outer(scale, scale)) / np.outer(scale, scale)


@dataclass(frozen=True)
class StratumScoreFit:
    """Sandwich piece of one survival prediction made by the multinomial stratum model.

    ``p = sum_{k in members} e_k`` (``p0`` and ``p1`` are both sums of stratum probabilities of
    one coefficient vector). The coefficients' influence rows are ``I_i = H^{-1} s_i`` with the
    per-row observed-data score ``s_i`` (``(post_i - e_i) x Zd_i`` on fitting rows, 0 elsewhere)
    and ``H`` the mean observed information (Stefanski & Boos 2002). ``correction`` has the
    interface of :class:`~._fit.ParametricFit`: for ``derivative = d f_i / d p_i`` it returns
    ``I_i . mean_w(derivative * d p / d b)``, with
    ``d p / d b_j = e_j (1{j in members} - p) Zd``. The two predictions share ``I_i``, so the
    sum of their corrections is the stacked M-estimation term of the joint model.
    """

    design: np.ndarray  # Zd: intercept and standardized covariates, every row
    residual: np.ndarray  # (n, 2): (post - e) on fitting rows, 0 elsewhere
    strata: np.ndarray  # (n, 3): fitted stratum probabilities, every row
    members: tuple
    h_inverse: np.ndarray

    def correction(self, derivative, weights):
        e = self.strata
        p = e[:, list(self.members)].sum(axis=1)
        gradient = np.concatenate([
            self.design.T @ (weights * derivative * e[:, j] * ((j in self.members) - p))
            for j in range(_N_FREE)
        ]) / weights.sum()  # fmt: skip
        direction = (self.h_inverse @ gradient).reshape(_N_FREE, -1)
        return np.sum(self.residual * (self.design @ direction.T), axis=1)


def stratum_pieces(model, X, treatment, survival, weights, mask, arms):
    """Sandwich pieces ``{arm: StratumScoreFit}`` of a fitted default stratum model.

    ``mask`` marks the rows the model was fitted on (all rows, or those of known status);
    ``arms`` maps each arm to the strata its survival probability sums.
    """
    Zd = _with_intercept(model._standardized(X, len(treatment)))
    allowed = compatible_strata(treatment, survival, model.monotonicity == "increasing")
    e, post, _ = fast_strata(Zd @ model._standardized_coef().T, allowed)
    residual = np.where(mask[:, None], (post - e)[:, :_N_FREE], 0.0)
    info = _observed_information(Zd, e, post, weights * mask) / weights.sum()
    h_inverse = _equilibrated_inverse(info)
    return {
        arm: StratumScoreFit(design=Zd, residual=residual, strata=e, members=members,
                             h_inverse=h_inverse)  # fmt: skip
        for arm, members in arms.items()
    }
