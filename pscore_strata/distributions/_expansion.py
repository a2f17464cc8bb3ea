"""Influence values over a grid of outcome values, held in factored form.

With ``Y`` replaced by ``1{Y <= v}``, every always-survivor formula is linear in the indicator
and in the conditional CDF predictions (``F(v | X)`` interpolates a few fitted threshold models),
and the M-estimation term of a GLM nuisance fit is ``rows x (H^-1 x a weighted column sum)``.
So each estimating function, and each influence value, has the form

    E[i, v] = D_i 1{Y_i <= v} + sum_b f_b[i] B_b[i, :] @ M_b[:, v]

with per-row vectors ``D``, ``f_b``, a few per-row bases ``B_b`` (the design, the conditional
CDF grid, a column of ones) and small coefficient matrices ``M_b`` (one column per value).
Everything the distributions need is computed from the factors without the ``n x values``
matrix: the column sums (one bincount and cumulative sum over the rows' grid positions), the
weighted cross products with a design (the GLM gradient), and the ``values x values`` covariance
of the influence values (``sum_i h_i^2 E[i, u] E[i, v]``, from the same cumulative sums and the
bases' small Gram matrices), which gives the standard errors and the multiplier band. Columns
are only formed for the few values that need them (a quantile's influence values).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

__all__ = ["ValueGrid", "Expansion", "expansion_covariance", "empty_rows", "column_std_errors"]


def empty_rows(shape):
    """``np.empty(shape)`` in ordinary (4 KiB) pages, for the rows x columns arrays written
    chunk by chunk (conditional CDF grids, their M-estimation columns, quantile influence
    values).

    numpy asks the kernel for transparent huge pages for large arrays; where the kernel then
    compacts memory on the first touch (``defrag`` set to ``madvise``, as on the 2-core
    benchmark machine) a fresh 152 MB array cost up to 0.37 s of system time instead of
    0.056 s in ordinary pages (measured; 1.7 of the 4.7 CPU s of outcome regression's first
    ``survivor_distribution`` at 1,000,000 rows were system time). The request is switched off
    for this allocation only (numpy's documented ``_set_madvise_hugepage``).
    """
    toggle = getattr(np._core.multiarray, "_set_madvise_hugepage", None)
    if toggle is None:
        return np.empty(shape)
    previous = toggle(False)
    try:
        return np.empty(shape)
    finally:
        toggle(previous)


def column_std_errors(influence, weights, rows=16_384):
    """:func:`~pscore_strata.inference._standard_errors.influence_std_error` of every column
    of ``influence`` (each row its own cluster) in one pass of row chunks: the weighted values
    ``c`` centered by ``sum c^2 - (sum c)^2 / n``, no rows x columns temporaries."""
    n = influence.shape[0]
    sums, squares = 0.0, 0.0
    for start in range(0, n, rows):
        c = influence[start : start + rows] * weights[start : start + rows, None]
        sums = sums + c.sum(axis=0)
        squares = squares + np.einsum("ij,ij->j", c, c)
    if n < 2:
        return np.full(influence.shape[1], np.nan)
    variance = n / (n - 1) * np.clip(squares - sums**2 / n, 0.0, None) / weights.sum() ** 2
    return np.sqrt(variance)


@dataclass
class ValueGrid:
    """Sorted outcome values and each row's position among them.

    ``position[i]`` is the first grid index whose value is ``>= Y_i`` (``size`` if none), so
    ``1{Y_i <= values[t]} = 1{position[i] <= t}``.
    """

    values: np.ndarray
    position: np.ndarray
    ones: np.ndarray = field(repr=False)

    @classmethod
    def of(cls, values, outcome):
        values = np.asarray(values, dtype=float)
        position = np.searchsorted(values, outcome, side="left")
        return cls(values, position, np.ones((outcome.size, 1)))

    @property
    def size(self):
        return self.values.size

    def cumulative(self, x):
        """``c[t] = sum_{i: position_i <= t} x_i`` for each grid index (``x``: (n,) or (n, m)).

        Returns shape ``(size,)`` or ``(m, size)``.
        """
        if x.ndim == 1:
            totals = np.bincount(self.position, weights=x, minlength=self.size + 1)
            return np.cumsum(totals[: self.size])
        return np.vstack([self.cumulative(x[:, j]) for j in range(x.shape[1])])


@dataclass
class Expansion:
    """``E[:, v] = D * 1{position <= index[v]} + sum_b f_b * (B_b @ M_b[:, v])`` (see module).

    ``D`` is ``None`` for no indicator part; a block's factor may be a scalar. ``index`` maps
    each column to its grid index (a permutation after monotone rearrangement).
    """

    grid: ValueGrid
    D: np.ndarray | None
    blocks: list  # of (factor, base (n, m), M (m, k))
    index: np.ndarray

    @classmethod
    def indicator(cls, grid, D):
        return cls(grid, np.asarray(D, dtype=float), [], np.arange(grid.size))

    @classmethod
    def from_blocks(cls, grid, blocks):
        return cls(grid, None, list(blocks), np.arange(grid.size))

    @property
    def shape(self):
        return (self.grid.position.size, self.index.size)

    def scaled(self, x):
        """Every row multiplied by ``x`` (a per-row array or a scalar)."""
        if np.ndim(x) == 0:
            return Expansion(self.grid, None if self.D is None else self.D * x,
                             [(f, B, M * x) for f, B, M in self.blocks], self.index)  # fmt: skip
        return Expansion(self.grid, None if self.D is None else self.D * x,
                         [(f * x, B, M) for f, B, M in self.blocks], self.index)  # fmt: skip

    def __add__(self, other):
        if not np.array_equal(self.index, other.index):
            raise ValueError("Expansions over different column orders cannot be added.")
        if self.D is None or other.D is None:
            D = self.D if other.D is None else other.D
        else:
            D = self.D + other.D
        return Expansion(self.grid, D, self.blocks + other.blocks, self.index)

    def plus_outer(self, x, s):
        """``E + x s'`` for a per-row ``x`` and a per-column ``s``."""
        s = np.broadcast_to(np.asarray(s, dtype=float), self.index.shape)
        block = (np.asarray(x, dtype=float), self.grid.ones, s[None, :].copy())
        return Expansion(self.grid, self.D, self.blocks + [block], self.index)

    def permuted(self, order):
        return Expansion(self.grid, self.D, [(f, B, M[:, order]) for f, B, M in self.blocks],
                         self.index[order])  # fmt: skip

    def weighted_sum(self, h):
        """``sum_i h_i E[i, v]`` for each column."""
        total = np.zeros(self.index.size)
        if self.D is not None:
            total += self.grid.cumulative(h * self.D)[self.index]
        for f, B, M in self.blocks:
            total += (np.broadcast_to(h * f, h.shape) @ B) @ M
        return total

    def cross(self, factor, base):
        """``sum_i factor_i base_i E[i, v]``: shape ``(base columns, k)``."""
        out = np.zeros((base.shape[1], self.index.size))
        if self.D is not None:
            scaled = factor * self.D
            sums = [self.grid.cumulative(scaled * base[:, j]) for j in range(base.shape[1])]
            out += np.vstack(sums)[:, self.index]
        for f, B, M in self.blocks:
            h = np.broadcast_to(factor * f, factor.shape)
            # In row chunks, scaling the narrower of the two matrices: no rows x width array.
            product = np.zeros((base.shape[1], B.shape[1]))
            for start in range(0, h.size, _GRAM_ROWS):
                rows = slice(start, start + _GRAM_ROWS)
                b, Bc, hc = base[rows], B[rows], h[rows, None]
                product += (b * hc).T @ Bc if b.shape[1] < Bc.shape[1] else b.T @ (hc * Bc)
            out += product @ M
        return out

    def columns(self, which=None, rows=None):
        """The explicit ``(n, len(which))`` matrix (all columns when ``which`` is None; the
        slice ``rows`` of the rows only, when given)."""
        which = np.arange(self.index.size) if which is None else np.atleast_1d(which)
        rows = slice(None) if rows is None else rows
        position = self.grid.position[rows]
        out = np.zeros((position.size, which.size))
        if self.D is not None:
            out += self.D[rows, None] * (position[:, None] <= self.index[which][None, :])
        for f, B, M in self.blocks:
            out += (f if np.ndim(f) == 0 else f[rows, None]) * (B[rows] @ M[:, which])
        return out

    def __array__(self, dtype=None, copy=None):
        out = self.columns()
        return out if dtype is None else out.astype(dtype)

    def __getitem__(self, key):
        if isinstance(key, tuple) and len(key) == 2 and key[0] == slice(None):
            columns = np.arange(self.index.size)[key[1]]
            out = self.columns(columns)
            return out[:, 0] if np.ndim(columns) == 0 else out
        return self.columns()[key]


def _cluster_contributions(expansion, h, codes, n_clusters):
    """``sum_{i in g} h_i E[i, v]`` per cluster: shape ``(n_clusters, k)``."""
    grid, index = expansion.grid, expansion.index
    out = np.zeros((n_clusters, index.size))
    if expansion.D is not None:
        totals = np.zeros((n_clusters, grid.size + 1))
        np.add.at(totals, (codes, grid.position), h * expansion.D)
        out += np.cumsum(totals[:, : grid.size], axis=1)[:, index]
    for f, B, M in expansion.blocks:
        weighted = np.broadcast_to(h * f, h.shape)[:, None] * B
        sums = np.column_stack([np.bincount(codes, weights=weighted[:, j], minlength=n_clusters)
                                for j in range(B.shape[1])])  # fmt: skip
        out += sums @ M
    return out


_GRAM_ROWS = 8_192


def _one_hot(position, size):
    """``P`` with ``P[position[i], i] = 1`` (``size x rows``, by columns: row chunks are
    column slices)."""
    from scipy import sparse

    n = position.size
    return sparse.csc_matrix((np.ones(n), position, np.arange(n + 1)), shape=(size, n))


def expansion_covariance(expansion, sample_weight=None, groups=None):
    """``C'C`` of the multiplier-bootstrap contributions of ``expansion`` (``k x k``).

    ``C`` are the contributions of :func:`pscore_strata.inference._resampling
    .multiplier_contributions` (``sqrt(G/(G-1)) (d_g - mean(d))``, ``d_g`` the weighted cluster
    sums over the total weight), so the diagonal is the squared standard error of
    :func:`~pscore_strata.inference._standard_errors.influence_std_error` and the matrix the
    covariance of the Gaussian multiplier draws. Without clusters it is formed from the factors
    in O(n x bases^2 + k^2 x bases) time; with clusters from the ``G x k`` cluster sums.
    """
    n, k = expansion.shape
    w = np.ones(n) if sample_weight is None else np.asarray(sample_weight, dtype=float)
    h = w / w.sum()
    if groups is not None:
        codes, uniques = pd.factorize(np.asarray(groups))
        totals = _cluster_contributions(expansion, h, codes, uniques.size)
        g = totals.shape[0]
        if g < 2:
            return np.full((k, k), np.nan)
        centered = totals - totals.mean(axis=0)
        return g / (g - 1) * (centered.T @ centered)
    grid, index = expansion.grid, expansion.index
    h2 = h * h
    gram = np.zeros((k, k))
    blocks = expansion.blocks
    D = expansion.D
    if D is not None:
        a = grid.cumulative(h2 * D * D)
        gram += a[np.minimum.outer(index, index)]
    if blocks:
        # All blocks side by side, W = [f_b B_b] (rows x sum of widths) with M stacked: the
        # blocks' part is M' (W' diag(h^2) W) M and the indicator's cross part the cumulative
        # sums over the grid positions of h^2 D W, both accumulated in cache-sized row chunks.
        M = np.vstack([Mb for _, _, Mb in blocks])
        inner = np.zeros((M.shape[0], M.shape[0]))
        totals = None if D is None else np.zeros((grid.size + 1, M.shape[0]))
        one_hot = None if D is None else _one_hot(grid.position, grid.size + 1)
        for start in range(0, n, _GRAM_ROWS):
            rows = slice(start, start + _GRAM_ROWS)
            W = np.hstack([B[rows] * (f[rows, None] if np.ndim(f) else f) for f, B, _ in blocks])
            hW = W * h2[rows, None]
            inner += hW.T @ W
            if D is not None:
                hW *= D[rows, None]
                totals += one_hot[:, rows] @ hW
        gram += M.T @ inner @ M
        if D is not None:
            term = np.cumsum(totals[: grid.size], axis=0)[index] @ M
            gram += term + term.T
    mean = expansion.weighted_sum(h) / n
    gram -= n * np.outer(mean, mean)
    return n / (n - 1) * gram
