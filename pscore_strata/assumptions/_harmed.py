"""The exact path of the always-survivor effect along ``harmed_ratio``, from one sort.

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
prefix).

Which rows are clipped is decided by the direct formula's own test (``xi p_m > p_p`` in double
precision) for every row whose ratio lies within a relative ``1e-9`` of ``xi``; the sort only
settles rows far from it. Rows with degenerate probabilities (non-finite, or so small that the
product underflows) leave the path unavailable, and the caller evaluates directly.
"""

from __future__ import annotations

import numpy as np

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
    """Suffix sums of one view's six estimating-function parts, sorted by ``p_p / p_m``.

    The parts are ``A_e, B_e`` of ``phi_e`` and ``A_t - r_t A_e, B_t - r_t B_e`` of
    ``phi_t - r_t phi_e`` (``t`` mixed, pure) with the fixed reference means ``r_t``
    (:attr:`reference`).

    Parameters
    ----------
    view : oriented view (always-survivor stratum)
    terms : dict
        ``robust_harmed_terms(view)``.
    weights : ndarray of shape (n,)
    """

    def __init__(self, view, terms, weights):
        p_m, p_p = view.p_mixed, view.p_pure
        with np.errstate(divide="ignore", invalid="ignore"):
            key = np.where(p_m > 0, p_p / p_m, np.inf)
        self.available = bool(
            np.all(np.isfinite(p_m)) and np.all(np.isfinite(p_p))
            and np.all((p_m == 0) | (p_m >= _TINY)) and np.all((key == 0) | (key >= _TINY))
        )  # fmt: skip
        if not self.available:
            return
        order = np.argsort(key)
        self.key, self.order = key[order], order
        self.p_m, self.p_p = p_m, p_p
        # The influence values are close to phi_t - mu_t phi_e: the parts of phi_t are stored
        # less a reference multiple of phi_e's (the means over all rows at xi = 0), so that the
        # quadratic form of the variance does not cancel large terms.
        total = np.sum(weights * terms["e"][0])
        self.reference = tuple(np.sum(weights * terms[role][0]) / total
                               for role in ("mixed", "pure"))  # fmt: skip
        self.n = n = len(key)
        self.total_weight = float(np.sum(weights))  # as Oriented.weighted_mean divides by
        n_blocks = -(-n // _BLOCK)
        # One row per part (sorted rows along the columns), times the weights.
        weighted = np.zeros((6, n_blocks * _BLOCK))
        w = weights[order]
        a_e, b_e = terms["e"][0][order], terms["e"][1][order]
        np.multiply(a_e, w, out=weighted[0, :n])
        np.multiply(b_e, w, out=weighted[1, :n])
        for j, (role, mu) in enumerate(zip(("mixed", "pure"), self.reference, strict=True)):
            for k, (part, part_e) in enumerate(zip(terms[role], (a_e, b_e), strict=True)):
                column = part[order]
                column -= mu * part_e
                np.multiply(column, w, out=weighted[2 + 2 * j + k, :n])
        self.weighted = weighted
        blocks = weighted.reshape(6, n_blocks, _BLOCK)
        sums = blocks.sum(axis=2).T
        by_block = blocks.transpose(1, 0, 2)
        products = np.matmul(by_block, by_block.transpose(0, 2, 1))
        # Suffix sums: entry b holds blocks b, b+1, ...; the last entry is empty.
        self.sums = np.zeros((n_blocks + 1, 6))
        self.products = np.zeros((n_blocks + 1, 6, 6))
        self.sums[:-1] = np.cumsum(sums[::-1], axis=0)[::-1]
        self.products[:-1] = np.cumsum(products[::-1], axis=0)[::-1]

    def n_clipped(self, xi):
        """Rows clipped at ``xi`` (a prefix in sorted order), or ``None`` if the direct test
        does not give a prefix near the boundary."""
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
        """``(sums, products, n_clipped)`` over the rows not clipped at ``xi`` (``0 < xi <
        1``): weighted sums of the six parts and their weighted cross products; ``None`` if
        the clipped rows are not a prefix."""
        start = self.n_clipped(xi)
        if start is None:
            return None
        block = -(-start // _BLOCK)
        partial = self.weighted[:, start : block * _BLOCK]
        sums = self.sums[block] + partial.sum(axis=1)
        products = self.products[block] + partial @ partial.T
        return sums, products, start

    def rows(self, start):
        """The weighted parts (6, m) of the rows from ``start`` (sorted order) to the end."""
        return self.weighted[:, start : self.n]
