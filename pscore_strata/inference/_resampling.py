"""Seeds and resampling: child seeds per replicate, row and cluster resamples, jackknife blocks,
and the multiplier bootstrap's draws from influence values.

Every replicate draws from its own :class:`numpy.random.SeedSequence` child, so results do not
depend on how replicates are scheduled.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = [
    "spawn_seeds",
    "seed_models",
    "stratified_resample",
    "resample_rows",
    "jackknife_blocks",
    "multiplier_contributions",
    "multiplier_draws",
    "gaussian_draws",
]


def spawn_seeds(random_state, n):
    """Independent child seeds, one per replicate, so results do not depend on scheduling.

    Parameters
    ----------
    random_state : int, numpy.random.SeedSequence, Generator, RandomState or None
        Root of the seeds (``None``: fresh entropy).
    n : int
        Number of seeds.

    Returns
    -------
    list of numpy.random.SeedSequence
    """
    if isinstance(random_state, np.random.SeedSequence):
        root = random_state
    elif isinstance(random_state, np.random.Generator):
        root = np.random.SeedSequence(random_state.integers(0, 2**63))
    elif isinstance(random_state, np.random.RandomState):
        root = np.random.SeedSequence(random_state.randint(0, 2**31))
    else:
        root = np.random.SeedSequence(random_state)
    return root.spawn(n)


def stratified_resample(treatment, seed):
    """Row positions of one bootstrap resample, drawn with replacement within each arm.

    Cluster and unstratified schemes are in :func:`resample_rows`.

    Parameters
    ----------
    treatment : ndarray of shape (n_rows,)
        0/1 arm of each row.
    seed : numpy.random.SeedSequence
        The replicate's seed.

    Returns
    -------
    ndarray of int
        Row positions, with repeats.
    """
    rng = np.random.default_rng(seed)
    rows = []
    for arm in (0, 1):
        arm_rows = np.flatnonzero(treatment == arm)
        rows.append(arm_rows[rng.integers(0, arm_rows.size, arm_rows.size)])
    return np.sort(np.concatenate(rows))


def seed_models(estimator, seed):
    """Seed every ``random_state`` left at None from the replicate's seed (for reproducibility)."""
    unset = [
        key
        for key, value in estimator.get_params(deep=True).items()
        if (key == "random_state" or key.endswith("__random_state")) and value is None
    ]
    if unset:
        child = np.random.SeedSequence(seed.entropy, spawn_key=(*seed.spawn_key, 0))
        estimator.set_params(**{key: int(child.generate_state(1)[0]) for key in unset})
    return estimator



# -- resampling schemes ------------------------------------------------------------------------
def _unit_codes(treatment, groups, stratify):
    """Resampling units (rows or clusters) and the stratum (arm or 0) of each unit.

    Returns ``(codes, unit_stratum)``: ``codes`` maps rows to units, or is ``None`` when every
    row is its own unit. Clusters are stratified by arm only when each lies within one arm (a
    cluster-randomized design); otherwise whole clusters are drawn across arms.
    """
    treatment = np.asarray(treatment)
    if groups is None:
        return None, (treatment.astype(np.int8) if stratify else np.zeros(treatment.size, np.int8))
    codes, _ = pd.factorize(np.asarray(groups))
    n_units = codes.max() + 1
    arm_sum = np.bincount(codes, weights=treatment, minlength=n_units)
    size = np.bincount(codes, minlength=n_units)
    single_arm = np.all((arm_sum == 0) | (arm_sum == size))
    unit_stratum = (
        (arm_sum > 0).astype(np.int8) if stratify and single_arm else np.zeros(n_units, np.int8)
    )
    return codes, unit_stratum


def resample_rows(treatment, seed, groups=None, stratify=True):
    """Row positions of one bootstrap resample.

    Extends :func:`stratified_resample` (whose draws it reproduces for ``stratify=True``): rows
    are drawn with replacement within each arm, or across arms when ``stratify=False``; with
    ``groups``, whole clusters are drawn (within arms when every cluster lies in one arm).

    Parameters
    ----------
    treatment : ndarray of shape (n_rows,)
        0/1 arm of each row.
    seed : numpy.random.SeedSequence
        The replicate's seed.
    groups : array-like of shape (n_rows,), optional
        Cluster labels: whole clusters are drawn.
    stratify : bool, default=True
        Draw within each arm (arm sizes kept), or across arms.

    Returns
    -------
    ndarray of int
        Row positions, with repeats (a cluster's rows together when ``groups`` is given).
    """
    if stratify and groups is None:
        return stratified_resample(np.asarray(treatment), seed)
    codes, unit_stratum = _unit_codes(treatment, groups, stratify)
    rng = np.random.default_rng(seed)
    chosen = []
    for stratum in np.unique(unit_stratum):
        units = np.flatnonzero(unit_stratum == stratum)
        chosen.append(units[rng.integers(0, units.size, units.size)])
    chosen = np.sort(np.concatenate(chosen))
    if codes is None:
        return chosen
    order = np.argsort(codes, kind="stable")
    starts = np.concatenate([[0], np.cumsum(np.bincount(codes))])
    return np.concatenate([order[starts[c] : starts[c + 1]] for c in chosen])


def jackknife_blocks(treatment, seed, groups=None, stratify=True, n_groups=25):
    """Leave-out blocks for a (grouped) jackknife that respects the resampling strata.

    Within each stratum the units (rows or clusters) are split at random into ``n_groups``
    blocks of near-equal size, or left out one at a time when there are no more units than
    that (the ordinary jackknife).

    Parameters
    ----------
    treatment : ndarray of shape (n_rows,)
        0/1 arm of each row (the strata, with ``stratify``).
    seed : numpy.random.SeedSequence
        Seed of the random split into blocks.
    groups : array-like of shape (n_rows,), optional
        Cluster labels: whole clusters are left out together.
    stratify : bool, default=True
        Blocks within each arm (as the resamples are drawn), or across arms.
    n_groups : int, default=25
        Blocks per stratum.

    Returns
    -------
    block : ndarray of shape (n_rows,)
        Block label of each row.
    block_stratum : ndarray of shape (n_blocks,)
        Stratum of each block.
    """
    codes, unit_stratum = _unit_codes(treatment, groups, stratify)
    rng = np.random.default_rng(seed)
    unit_block = np.empty(unit_stratum.size, dtype=np.intp)
    block_stratum = []
    for stratum in np.unique(unit_stratum):
        units = rng.permutation(np.flatnonzero(unit_stratum == stratum))
        k = min(n_groups, units.size)
        unit_block[units] = len(block_stratum) + np.arange(units.size) % k
        block_stratum.extend([stratum] * k)
    block = unit_block if codes is None else unit_block[codes]
    return block, np.asarray(block_stratum)


# -- multiplier bootstrap ----------------------------------------------------------------------
# Row chunks keep the memory of a block of B replicates at O(B * chunk), whatever n is.
_RADEMACHER_CHUNK_BYTES = 2048  # eight rows per random byte
# Row v of the table holds the signs (+1/-1) that the bits of byte value v give to eight rows.
_BYTE_SIGNS = ((np.arange(256)[:, None] >> np.arange(8)[None, :]) & 1) * 2.0 - 1.0


def multiplier_contributions(influence, sample_weight=None, groups=None):
    """Per-unit terms ``c`` of a multiplier bootstrap, one row per row or per cluster.

    ``c_g = sqrt(G/(G-1)) (d_g - mean(d))`` with ``d_g = sum_{i in g} w_i IF_i / sum_i w_i``, so
    that ``sum_g xi_g c_g`` for independent mean-zero unit-variance multipliers ``xi_g`` has
    exactly the variance :func:`influence_std_error` reports (one multiplier per cluster).

    Parameters
    ----------
    influence : ndarray of shape (n_rows,) or (n_rows, n_columns)
        Influence values of the statistic(s).
    sample_weight : ndarray of shape (n_rows,), optional
    groups : array-like of shape (n_rows,), optional
        Cluster labels (one multiplier per cluster).

    Returns
    -------
    ndarray of shape (n_units, n_columns)
        ``c``, one row per row (or per cluster, in order of first appearance).
    """
    influence = np.asarray(influence, dtype=float)
    influence = influence.reshape(influence.shape[0], -1)
    n = influence.shape[0]
    weights = np.ones(n) if sample_weight is None else np.asarray(sample_weight, dtype=float)
    terms = influence * (weights / weights.sum())[:, None]
    if groups is not None:
        codes, _ = pd.factorize(np.asarray(groups))
        terms = np.column_stack(
            [np.bincount(codes, weights=terms[:, j]) for j in range(terms.shape[1])]
        )
    n_units = terms.shape[0]
    if n_units < 2:
        raise ValueError("The multiplier bootstrap needs at least two rows (or clusters).")
    return (terms - terms.mean(axis=0)) * np.sqrt(n_units / (n_units - 1))


def multiplier_draws(contributions, seeds, kind="rademacher"):
    """``sum_g xi_g c_g`` for each seed, the multipliers ``xi`` drawn from that seed alone.

    Gaussian multipliers are drawn in distribution (see the comment in the code); Rademacher
    multipliers are drawn row by row.

    Each Rademacher replicate reads its own generator in a fixed row order, so its value does not
    depend on how replicates are grouped into tasks. Signs come eight rows per random byte: each
    chunk of rows gets a table of the 256 signed sums of every eight rows, and a replicate adds
    up one table entry per byte.

    Parameters
    ----------
    contributions : ndarray of shape (n_units, n_columns)
        From :func:`multiplier_contributions`.
    seeds : sequence of numpy.random.SeedSequence
        One per replicate.
    kind : {"rademacher", "gaussian"}, default="rademacher"
        Law of the multipliers.

    Returns
    -------
    ndarray of shape (len(seeds), n_columns)
    """
    c = np.asarray(contributions, dtype=float)
    c = c.reshape(c.shape[0], -1)
    n, k = c.shape
    generators = [np.random.default_rng(seed) for seed in seeds]
    draws = np.zeros((len(generators), k))
    if kind == "gaussian":
        return gaussian_draws(c.T @ c, seeds)
    if kind != "rademacher":
        raise ValueError(f"`multiplier` must be 'rademacher' or 'gaussian'; got {kind!r}.")
    rows_per_chunk = 8 * _RADEMACHER_CHUNK_BYTES
    indices = np.empty((len(generators), _RADEMACHER_CHUNK_BYTES), dtype=np.intp)
    for start in range(0, n, rows_per_chunk):
        block = c[start : start + rows_per_chunk]
        n_bytes = -(-block.shape[0] // 8)
        if block.shape[0] < 8 * n_bytes:
            block = np.vstack([block, np.zeros((8 * n_bytes - block.shape[0], k))])
        table = np.einsum("jrk,vr->jvk", block.reshape(n_bytes, 8, k), _BYTE_SIGNS)
        table = table.reshape(n_bytes * 256, k)
        idx = indices[:, :n_bytes]
        for b, rng in enumerate(generators):
            idx[b] = np.frombuffer(rng.bytes(n_bytes), dtype=np.uint8)
        idx += np.arange(n_bytes) * 256
        for j in range(k):
            draws[:, j] += table[idx, j].sum(axis=1)
    return draws


def gaussian_draws(cross_products, seeds):
    """Gaussian multiplier draws ``sum_g xi_g c_g`` given only ``C'C`` (one per seed).

    With standard normal multipliers, ``sum_g xi_g c_g`` is exactly ``N(0, C'C)``: each draw is
    ``k`` normals from its own seed times a square root of the ``k x k`` matrix ``C'C``. Same
    distribution as drawing ``n`` multipliers, at ``O(B k^2)`` cost once ``C'C`` is known,
    and ``B x k`` memory.
    """
    cross_products = np.asarray(cross_products, dtype=float)
    k = cross_products.shape[0]
    eigenvalues, eigenvectors = np.linalg.eigh(cross_products)
    # Each eigenvector's sign is arbitrary, and rounding-level changes of C'C can flip it,
    # which changes every draw; fixing it (largest component positive) makes the draws, and
    # the band built on them, depend on C'C only.
    largest = np.abs(eigenvectors).argmax(axis=0)
    eigenvectors = eigenvectors * np.sign(eigenvectors[largest, np.arange(k)] + 0.0)[None, :]
    root = np.sqrt(np.clip(eigenvalues, 0.0, None))[:, None] * eigenvectors.T
    draws = np.zeros((len(seeds), k))
    for b, seed in enumerate(seeds):
        draws[b] = np.random.default_rng(seed).standard_normal(k) @ root
    return draws
