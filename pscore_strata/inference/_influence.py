"""Standard errors and intervals from per-unit influence values.

One mechanism serves every estimator (DESIGN.md section 3): an estimator hands over its influence
values ``IF_i`` (scaled so that ``estimate - truth ~ sum_i w_i IF_i / sum_i w_i``) and the
standard error follows, with optional sample weights and clusters. The same values drive the
multiplier bootstrap; the resampling schemes, bootstrap interval formulas and the joblib runner
used by :func:`pscore_strata.bootstrap` live here too.
"""

from __future__ import annotations

import sys
import warnings

import numpy as np
import pandas as pd
from joblib import Parallel
from scipy import stats

from .._validation import check_level

__all__ = [
    "FewClustersWarning",
    "FEW_CLUSTERS",
    "count_clusters",
    "reference_dof",
    "estimator_dof",
    "influence_std_error",
    "normal_interval",
    "spawn_seeds",
    "stratified_resample",
    "resample_rows",
    "jackknife_blocks",
    "percentile_interval",
    "bca_interval",
    "jackknife_acceleration",
    "influence_acceleration",
    "multiplier_contributions",
    "multiplier_draws",
    "gaussian_draws",
    "run_tasks",
]


# Below this many clusters a cluster-robust standard error is itself noisy and the normal
# reference too narrow; a t reference with G - 1 degrees of freedom is common practice.
FEW_CLUSTERS = 30


class FewClustersWarning(UserWarning):
    """Cluster-robust inference with fewer than 30 clusters (intervals use a t reference)."""


def count_clusters(groups, stacklevel=3):
    """Number of clusters (``None`` without ``groups``); warns when there are few."""
    if groups is None:
        return None
    n_clusters = int(pd.unique(np.asarray(groups)).size)
    if n_clusters < FEW_CLUSTERS:
        warnings.warn(
            f"Only {n_clusters} clusters in `groups` (fewer than {FEW_CLUSTERS}): the "
            "cluster-robust standard error is imprecise, so confidence intervals use a t "
            f"reference with {n_clusters - 1} degrees of freedom (G - 1) instead of the normal. "
            "Even so they may undercover with very few clusters; treat them with caution.",
            FewClustersWarning,
            stacklevel=stacklevel,
        )
    return n_clusters


def reference_dof(n_clusters):
    """Degrees of freedom of the interval's t reference: ``G - 1`` with few clusters, else
    ``None`` (normal reference)."""
    if n_clusters is None or n_clusters >= FEW_CLUSTERS:
        return None
    return n_clusters - 1


def estimator_dof(estimator):
    """:func:`reference_dof` of a fitted estimator (its ``n_clusters_``)."""
    return reference_dof(getattr(estimator, "n_clusters_", None))


def influence_std_error(influence, sample_weight=None, groups=None):
    """Standard error of an estimate from its influence values.

    ``SE^2 = G/(G-1) * sum_g (sum_{i in g} w_i IF_i)^2 / (sum_i w_i)^2`` where each row is its
    own cluster unless ``groups`` is given (the linearization variance of a weighted estimator
    with a with-replacement cluster sample). The small-sample factor ``G/(G-1)`` makes singleton
    clusters give exactly the ordinary standard error, and with unit weights the ordinary SE
    equals ``sd(IF, ddof=1) / sqrt(n)`` when the influence values average zero.

    Parameters
    ----------
    influence : array-like of shape (n,) or (n, k)
    sample_weight : array-like of shape (n,), optional
    groups : array-like of shape (n,), optional
        Cluster labels.

    Returns
    -------
    float or ndarray of shape (k,)
    """
    influence = np.asarray(influence, dtype=float)
    n = influence.shape[0]
    weights = np.ones(n) if sample_weight is None else np.asarray(sample_weight, dtype=float)
    contributions = influence * (weights if influence.ndim == 1 else weights[:, None])
    if groups is not None:
        codes, _ = pd.factorize(np.asarray(groups))
        totals = np.zeros((codes.max() + 1,) + influence.shape[1:])
        np.add.at(totals, codes, contributions)
        contributions = totals
    n_clusters = contributions.shape[0]
    if n_clusters < 2:
        return np.full(influence.shape[1:], np.nan) if influence.ndim > 1 else float("nan")
    centered = contributions - contributions.mean(axis=0)
    variance = n_clusters / (n_clusters - 1) * np.sum(centered**2, axis=0) / weights.sum() ** 2
    result = np.sqrt(variance)
    return float(result) if influence.ndim == 1 else result


def reference_distribution(dof=None):
    """The intervals' reference: the normal, or Student's t with ``dof`` degrees of freedom
    (few clusters: see :func:`reference_dof`)."""
    return stats.norm if dof is None else stats.t(dof)


def reference_quantile(level, dof=None):
    """Two-sided quantile of :func:`reference_distribution` at ``level``."""
    return float(reference_distribution(dof).ppf(0.5 + level / 2))


def normal_interval(estimate, std_error, level=0.95, log_scale=False, dof=None):
    """Wald interval; on the log scale (then exponentiated) for ratio effects.

    With ``dof`` (few clusters: see :func:`reference_dof`) the quantile is Student's t with
    ``dof`` degrees of freedom instead of the normal one.
    """
    level = check_level(level)
    z = reference_quantile(level, dof)
    if log_scale:
        if estimate <= 0:
            return (float("nan"), float("nan"))
        log_se = std_error / estimate
        return (float(estimate * np.exp(-z * log_se)), float(estimate * np.exp(z * log_se)))
    return (float(estimate - z * std_error), float(estimate + z * std_error))


def spawn_seeds(random_state, n):
    """Independent child seeds, one per replicate, so results do not depend on scheduling."""
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
    """
    rng = np.random.default_rng(seed)
    rows = []
    for arm in (0, 1):
        arm_rows = np.flatnonzero(treatment == arm)
        rows.append(arm_rows[rng.integers(0, arm_rows.size, arm_rows.size)])
    return np.sort(np.concatenate(rows))


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


# -- interval formulas -------------------------------------------------------------------------
def percentile_interval(replicates, level=0.95):
    """Percentile interval: the ``(1 -/+ level)/2`` quantiles of the replicates (per column)."""
    level = check_level(level)
    alpha = (1 - level) / 2
    values = np.asarray(replicates, dtype=float)
    return np.quantile(values, alpha, axis=0), np.quantile(values, 1 - alpha, axis=0)


def jackknife_acceleration(leave_out, block_stratum=None):
    """BCa acceleration from leave-one-block-out estimates (Efron & Tibshirani 1993, eq. 14.15).

    With ``G_s`` blocks in stratum ``s`` and ``U = (G_s - 1)(mean_s - theta_(j))``,
    ``a = sum_s sum_j U^3 / G_s^3 / (6 (sum_s sum_j U^2 / G_s^2)^(3/2))``: each stratum is
    jackknifed separately, the same stratified form that :func:`scipy.stats.bootstrap` uses for
    several independent samples.
    """
    values = np.asarray(leave_out, dtype=float)
    values = values.reshape(values.shape[0], -1)
    strata = np.zeros(values.shape[0]) if block_stratum is None else np.asarray(block_stratum)
    cubes = np.zeros(values.shape[1])
    squares = np.zeros(values.shape[1])
    for stratum in np.unique(strata):
        part = values[strata == stratum]
        g = part.shape[0]
        if g < 2:
            continue
        u = (g - 1) * (part.mean(axis=0) - part)
        cubes += np.sum(u**3, axis=0) / g**3
        squares += np.sum(u**2, axis=0) / g**2
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(squares > 0, cubes / (6 * squares**1.5), 0.0)


def influence_acceleration(contributions):
    """BCa acceleration from influence contributions: ``sum c^3 / (6 (sum c^2)^(3/2))``.

    The jackknife's ``U`` values are first-order the centered influence contributions, so this is
    the limit of :func:`jackknife_acceleration` without refits.
    """
    c = np.asarray(contributions, dtype=float)
    c = c.reshape(c.shape[0], -1)
    c = c - c.mean(axis=0)
    squares = np.sum(c**2, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(squares > 0, np.sum(c**3, axis=0) / (6 * squares**1.5), 0.0)


def bca_interval(replicates, estimate, acceleration, level=0.95):
    """Bias-corrected and accelerated interval (Efron 1987, JASA 82; per column).

    The bias correction ``z0`` counts ties as half (as :func:`scipy.stats.bootstrap` does); the
    adjusted levels are ``Phi(z0 + (z0 + z) / (1 - a (z0 + z)))``.
    """
    level = check_level(level)
    values = np.asarray(replicates, dtype=float)
    values = values.reshape(values.shape[0], -1)
    estimate = np.atleast_1d(np.asarray(estimate, dtype=float))
    acceleration = np.broadcast_to(np.asarray(acceleration, dtype=float), estimate.shape)
    below = np.sum(values < estimate, axis=0) + np.sum(values <= estimate, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        z0 = stats.norm.ppf(below / (2 * values.shape[0]))
        low, high = np.full(estimate.shape, np.nan), np.full(estimate.shape, np.nan)
        for j in range(estimate.size):
            levels = []
            for z in stats.norm.ppf([(1 - level) / 2, (1 + level) / 2]):
                shifted = z0[j] + z
                levels.append(stats.norm.cdf(z0[j] + shifted / (1 - acceleration[j] * shifted)))
            if np.all(np.isfinite(levels)):
                low[j], high[j] = np.quantile(values[:, j], levels)
    return low, high


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


# -- execution ---------------------------------------------------------------------------------
def run_tasks(tasks, sizes, n_jobs, progress, label):
    """Run the tasks through joblib, moving a progress bar as blocks finish."""
    bar = _progress_bar(progress, sum(sizes), label)
    try:
        parallel = Parallel(n_jobs=n_jobs, return_as="generator")
    except ValueError:  # a backend that cannot stream results (Ray's): the bar jumps at the end
        parallel = Parallel(n_jobs=n_jobs)
    out = []
    for size, result in zip(sizes, parallel(tasks), strict=True):
        out.append(result)
        if bar is not None:
            bar.update(size)
    if bar is not None:
        bar.close()
    return out


def _progress_bar(progress, total, label):
    notebook = _in_notebook()
    if progress is False or (progress is None and not (notebook or _stderr_is_terminal())):
        return None
    try:
        # tqdm.auto draws a notebook widget in Jupyter and a text bar elsewhere; the package
        # itself is imported first so that its absence is always noticed.
        import tqdm as _tqdm_package  # noqa: F401
        from tqdm.auto import tqdm
    except ImportError:
        if progress:
            raise ImportError("`progress=True` needs tqdm: pip install tqdm.") from None
        return None
    # In automatic mode the bar appears only once the run has taken a few seconds.
    options = dict(
        total=total, desc=label, unit="replicate", delay=3.0 if progress is None else 0.0
    )
    if not notebook:
        options["file"] = sys.stderr
    return tqdm(**options)


def _in_notebook():
    """Whether the code runs in a Jupyter kernel (where standard error is not a terminal)."""
    shell = sys.modules.get("IPython")
    if shell is None or "ipykernel" not in sys.modules:
        return False
    try:
        return shell.get_ipython() is not None and "IPKernelApp" in shell.get_ipython().config
    except Exception:  # an unusual IPython setup: behave as outside a notebook
        return False


def _stderr_is_terminal():
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False
