"""The exact path of the always-survivor (and helped) effect along ``harmed_ratio``, from one
sort.

With ``harmed_ratio`` ``xi`` alone (no departure from principal ignorability), the multiply
robust estimating functions of a row are ``A + s B`` with ``s = xi / (1 - xi)`` while its
always-survivor score ``(p_p - xi p_m) / (1 - xi)`` is not negative, and 0 once it is clipped
(:func:`pscore_strata.estimands._formulas.robust_harmed_terms`). A row is clipped exactly when
``xi p_m > p_p``, i.e. when ``p_p / p_m < xi``: after sorting the rows by that ratio the clipped
rows at any ``xi`` are a prefix, and the rows that count are the suffix. So the means at ``xi``
need the weighted sums of the six per-row arrays over a suffix, and the variance of the
influence values (a linear combination of them) the 6 x 6 matrix of their weighted cross
products over the same suffix. Both come from suffix sums over blocks of rows computed once,
plus the rows of one partial block: an evaluation costs a few microseconds instead of a pass
over the rows, and sums nothing it does not need (no cancellation between a total and a
prefix). For the helped stratum the rows before the boundary contribute a constant each (their
helped score is the whole mixed cell's), kept as prefix sums the same way.

Which rows are clipped is decided by the direct formula's own test (``xi p_m > p_p`` in double
precision) for every row whose ratio lies within a relative ``1e-9`` of ``xi``; the sort only
settles rows far from it. Rows with degenerate probabilities (non-finite, or so small that the
products underflow), and values of ``xi`` so small that ``xi p_m`` could underflow, leave the
path unavailable, and the caller evaluates directly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["HarmedLine", "EXPLICIT_ROWS"]

_BLOCK = 256
# Ratios within this relative distance of xi are checked with the direct formula's own test.
_MARGIN = 1e-9
# Below this, products of probabilities may underflow: no exact path.
_TINY = 1e-290
# At most this many rows left: the variance is summed row by row (it is then small against the
# terms of its quadratic form, which would cancel).
EXPLICIT_ROWS = 8192


class HarmedLine:
    """Block sums of one view's estimating-function parts, rows sorted by ``p_p / p_m``.

    The suffix parts (rows not clipped) are ``A_e, B_e`` of ``phi_e`` and ``A_t - r_t A_e,
    B_t - r_t B_e`` of ``phi_t - r_t phi_e`` (``t`` mixed, pure) with fixed reference means
    ``r_t`` (:attr:`reference`); the prefix parts (rows whose always-survivor score is clipped;
    the helped stratum only) ``C_e, C_t - r_t C_e``. Suffix sums run from the end, prefix sums
    from the start.

    Parameters
    ----------
    view : oriented view
    terms : dict
        ``method.harmed_terms(view)``.
    weights : ndarray of shape (n,)
    groups : array-like of shape (n,), optional
        Cluster labels (always-survivors only): the cross products are then those of the
        cluster totals over the rows not clipped.
    """

    def __init__(self, view, terms, weights, groups=None):
        p_m, p_p = view.p_mixed, view.p_pure
        with np.errstate(divide="ignore", invalid="ignore"):
            key = np.where(p_m > 0, p_p / p_m, np.inf)
        self.available = bool(
            (groups is None or terms["prefix"] is None)
            and np.all(np.isfinite(p_m)) and np.all(np.isfinite(p_p))
            and np.all((p_m == 0) | (p_m >= _TINY)) and np.all((p_p == 0) | (p_p >= _TINY))
            and np.all((key == 0) | (key >= _TINY))
        )  # fmt: skip
        if not self.available:
            return
        positive = p_m[p_m > 0]
        self.smallest = float(positive.min()) if positive.size else np.inf
        order = np.argsort(key)
        self.key, self.order = key[order], order
        self.p_m, self.p_p = p_m, p_p
        self.n_low = terms["n_low"]  # rows clipped at every xi > 0 (the helped stratum)
        # The influence values are close to phi_t - mu_t phi_e: the parts of phi_t are stored
        # less a reference multiple of phi_e's (the means over all rows at xi = 0), so that the
        # quadratic form of the variance does not cancel large terms.
        total = np.sum(weights * terms["e"][0])
        self.reference = tuple(np.sum(weights * terms[role][0]) / total
                               for role in ("mixed", "pure"))  # fmt: skip
        self.n = len(key)
        self.total_weight = float(np.sum(weights))  # as Oriented.weighted_mean divides by
        w = weights[order]
        suffix = [terms["e"][0], terms["e"][1]]
        for role, mu in zip(("mixed", "pure"), self.reference, strict=True):
            suffix += [terms[role][0] - mu * terms["e"][0], terms[role][1] - mu * terms["e"][1]]
        self.weighted, blocks = _sorted_blocks(suffix, order, w)
        self.codes = self.later = None
        if groups is not None:
            self.codes, self.n_clusters, self.later = _clusters(groups, order, self.weighted)
            if self.codes is None:
                self.available = False
                return
            later = self.later.reshape(blocks.shape)
        # Suffix sums: entry b holds blocks b, b+1, ...; the last entry is empty.
        per_block = _block_sums(blocks, None if groups is None else later)
        self.sums, self.products = (_cumulative(x[::-1])[::-1] for x in per_block)
        self.prefix = terms["prefix"] is not None
        if self.prefix:
            c = terms["prefix"]
            parts = [c["e"]] + [c[role] - mu * c["e"]
                                for role, mu in zip(("mixed", "pure"), self.reference,
                                                    strict=True)]  # fmt: skip
            self.weighted_prefix, blocks = _sorted_blocks(parts, order, w)
            # Prefix sums: entry b holds blocks 0, ..., b - 1; the first entry is empty.
            self.prefix_sums, self.prefix_products = (
                _cumulative(x) for x in _block_sums(blocks))  # fmt: skip

    def n_clipped(self, xi):
        """Rows whose always-survivor score is clipped at ``xi`` (a prefix in sorted order),
        or ``None`` if the direct test does not give a prefix near the boundary (or if
        ``xi p_m`` could underflow)."""
        if xi * self.smallest < _TINY:
            return None
        low = int(np.searchsorted(self.key, xi * (1 - _MARGIN), side="left"))
        high = int(np.searchsorted(self.key, xi * (1 + _MARGIN), side="right"))
        if high == low:
            return low
        # The direct formula's test: (p_p - xi p_m) / (1 - xi) < 0.
        rows = self.order[low:high]
        near = (self.p_p[rows] - xi * self.p_m[rows]) / (1 - xi) < 0
        count = int(np.count_nonzero(near))
        if not near[:count].all():
            return None
        return low + count

    def suffix(self, xi):
        """The sums at ``xi`` (``0 < xi < 1``): ``(sums, products, prefix_sums,
        prefix_products, start)`` (prefix ones ``None`` without prefix parts), ``start`` the
        number of rows whose always-survivor score is clipped; ``None`` if those rows are not a
        prefix."""
        start = self.n_clipped(xi)
        if start is None:
            return None
        block = -(-start // _BLOCK)
        partial = self.weighted[:, start : block * _BLOCK]
        sums = self.sums[block] + partial.sum(axis=1)
        products = self.products[block] + partial @ partial.T
        if self.later is not None:
            later = self.later[:, start : block * _BLOCK]
            products = products + partial @ later.T + later @ partial.T
        if not self.prefix:
            return sums, products, None, None, start
        block = start // _BLOCK
        partial = self.weighted_prefix[:, block * _BLOCK : start]
        prefix_sums = self.prefix_sums[block] + partial.sum(axis=1)
        prefix_products = self.prefix_products[block] + partial @ partial.T
        return sums, products, prefix_sums, prefix_products, start

    def rows(self, start):
        """The weighted suffix parts (6, m) of the rows from ``start`` (sorted order) on."""
        return self.weighted[:, start : self.n]


def _sorted_blocks(parts, order, w):
    """The parts as rows of one array (sorted rows along the columns, times the weights, zero
    padded to whole blocks) and its view by block ``(n_parts, n_blocks, _BLOCK)``."""
    n = len(order)
    n_blocks = -(-n // _BLOCK)
    weighted = np.zeros((len(parts), n_blocks * _BLOCK))
    for j, part in enumerate(parts):
        np.multiply(part[order], w, out=weighted[j, :n])
    return weighted, weighted.reshape(len(parts), n_blocks, _BLOCK)


def _block_sums(blocks, later=None):
    """Per block: the sums of the parts ``(n_blocks, k)`` and their cross products
    ``(n_blocks, k, k)``; with ``later`` (clusters) also ``u later' + later u'``."""
    by_block = blocks.transpose(1, 0, 2)
    products = np.matmul(by_block, by_block.transpose(0, 2, 1))
    if later is not None:
        cross = np.matmul(by_block, later.transpose(1, 2, 0))
        products += cross + cross.transpose(0, 2, 1)
    return blocks.sum(axis=2).T, products


def _clusters(groups, order, weighted):
    """Cluster codes of the sorted rows, the number of clusters, and for each row the sum of
    the weighted parts of the rows after it (in sorted order) in its cluster.

    The cluster totals over the rows from ``k`` on are ``T_g = sum_{i >= k, i in g} u_i``, and
    ``sum_g T_g T_g' = sum_{i >= k} (u_i u_i' + u_i l_i' + l_i u_i')`` with ``l_i`` those later
    sums: a sum over the rows from ``k`` on, like the others.
    """
    codes, uniques = pd.factorize(np.asarray(groups))
    if np.any(codes < 0):  # missing labels: the direct formulas decide what they mean
        return None, 0, None
    codes = codes[order]
    n = len(order)
    by_cluster = np.argsort(codes, kind="stable")  # within a cluster: sorted order
    counts = np.bincount(codes, minlength=len(uniques))
    ends = np.cumsum(counts)
    # Later rows of the same cluster: the cluster's total minus the running sum up to the row.
    running = np.cumsum(weighted[:, :n][:, by_cluster], axis=1)
    later_sorted = np.repeat(running[:, ends - 1], counts, axis=1) - running
    later = np.zeros_like(weighted)
    later[:, by_cluster] = later_sorted
    return codes, len(uniques), later


def _cumulative(per_block):
    """Running sums over blocks with an empty first entry (``n_blocks + 1`` entries)."""
    out = np.zeros((len(per_block) + 1, *per_block.shape[1:]))
    np.cumsum(per_block, axis=0, out=out[1:])
    return out
