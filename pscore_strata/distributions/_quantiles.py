"""``quantile_effects``: always-survivor quantiles under each arm and their differences.

The ``u``-quantile ``Q_t(u) = inf{v : F_t(v) >= u}`` inverts the always-survivor CDF of
:mod:`._paths`. Its influence function is ``-IF_F(Q_t(u)) / f_t(Q_t(u))`` (the Bahadur
representation; van der Vaart 1998, Asymptotic Statistics, chapter 21), where ``IF_F`` are the
CDF's influence values at the estimated quantile (nuisance terms included as for the mean) and
``f_t`` the always-survivor density, estimated by a Gaussian kernel over the masses of the
estimated CDF with Silverman's bandwidth ``0.9 min(sd, IQR/1.34) n_eff^(-1/5)`` (Silverman 1986,
Density Estimation, eq. 3.31; common practice), ``sd`` and ``IQR`` those of the estimated
always-survivor distribution and ``n_eff`` the Kish effective size of the arm's survivors under
the principal score weights.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.base import clone

from .._validation import check_level
from .._warnings import warn_at_caller
from ..estimands._strata import ALWAYS
from ..estimands._view import ratio
from ..inference._resampling import resample_rows, seed_models, spawn_seeds
from ..inference._standard_errors import estimator_dof, influence_std_error, reference_quantile
from ._cdf import caution, default_values, stratum_notes
from ._conditional import MAX_LEVELS
from ._paths import cdf_path, outcome_rows, prepare

__all__ = ["quantile_effects", "quantiles_of", "interpolated_quantiles", "silverman_bandwidth",
           "kernel_density"]

# Outcome-model estimators invert their rearranged CDF at the distinct survivor outcomes, at
# most this many (evenly spaced ranks beyond); weighting inverts its exact weighted ECDF.
MAX_PATH_VALUES = 4000


def check_quantiles(quantiles):
    array = np.atleast_1d(np.asarray(quantiles, dtype=float))
    if array.ndim != 1 or array.size == 0 or not np.all((array > 0) & (array < 1)):
        raise ValueError(
            f"`quantiles` must be probabilities strictly between 0 and 1; got {quantiles!r}."
        )
    return array


def quantiles_of(values, cdf, quantiles):
    """``inf{v : F(v) >= u}`` of a monotone CDF given at sorted ``values``."""
    index = np.searchsorted(cdf, np.asarray(quantiles) - 1e-12, side="left")
    return values[np.minimum(index, values.size - 1)]


def masses(cdf):
    return np.diff(np.concatenate([[0.0], cdf]))


def silverman_bandwidth(values, mass, n_effective):
    """``0.9 min(sd, IQR / 1.34) n_eff^(-1/5)`` of the distribution with point ``mass``."""
    mass = mass / mass.sum()
    mean = np.sum(mass * values)
    sd = np.sqrt(np.sum(mass * (values - mean) ** 2))
    cdf = np.cumsum(mass)
    iqr = np.subtract(*quantiles_of(values, cdf, [0.75, 0.25]))
    spread = min(sd, iqr / 1.34) if iqr > 0 else sd
    return 0.9 * spread * n_effective ** (-0.2)


def kernel_density(at, values, mass, bandwidth):
    """Gaussian kernel density of the distribution with point ``mass`` at ``values``."""
    z = (np.atleast_1d(at)[:, None] - values[None, :]) / bandwidth
    return stats.norm.pdf(z) @ mass / bandwidth


def effective_sizes(oriented):
    """Kish effective sizes of each arm's survivors (each arm's cell of the target stratum)
    under the principal score weights."""
    o = oriented
    if o.stratum is not ALWAYS:
        e = o.stratum.score(o.p_mixed, o.p_pure)
        weights = {role: o.weight * ratio(o.cell(role) * e, o.cell_probability(role))
                   for role in ("mixed", "pure")}  # fmt: skip
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            weights = {
                "mixed": o.weight * o.mixed * o.survival * o.p_pure / (o.pi * o.p_mixed),
                "pure": o.weight * (1 - o.mixed) * o.survival / (1 - o.pi),
            }
    sizes = {k: np.nansum(v) ** 2 / np.nansum(v**2) for k, v in weights.items()}
    mixed, pure = ("treated", "control") if o.increasing else ("control", "treated")
    return {mixed: sizes["mixed"], pure: sizes["pure"]}


def _survivor_values(prepared):
    return np.unique(prepared.data.outcome[outcome_rows(prepared)])


def interpolated_quantiles(values, cdf, quantiles):
    """Quantiles of a CDF known on a grid, interpolated linearly between grid values.

    For ``u`` with ``F(g_{j-1}) < u <= F(g_j)`` the step inverse would give ``g_j``; the
    interpolated one ``g_{j-1} + (u - F(g_{j-1})) / (F(g_j) - F(g_{j-1})) (g_j - g_{j-1})``
    (error of order the squared grid spacing for a smooth CDF; docs/guide/distributions.md).
    """
    quantiles = np.asarray(quantiles, dtype=float)
    index = np.minimum(np.searchsorted(cdf, quantiles - 1e-12, side="left"), values.size - 1)
    out = values[index].astype(float)
    inner = index > 0
    j = index[inner]
    low, high = cdf[j - 1], cdf[j]
    share = np.where(high > low, (quantiles[inner] - low) / np.where(high > low, high - low, 1),
                     1.0)  # fmt: skip
    out[inner] = values[j - 1] + np.clip(share, 0.0, 1.0) * (values[j] - values[j - 1])
    return out


def _point_quantiles(prepared, quantiles, distinct=None):
    """Quantiles of the two always-survivor distributions (no influence values).

    Weighting inverts its weighted ECDF exactly (every distinct survivor outcome: one sort and
    a cumulative sum). The outcome-model estimators invert their rearranged CDF at the
    distinct survivor outcomes when there are at most ``MAX_PATH_VALUES`` (exactly), else at
    that many evenly spaced ranks, interpolating linearly between them.
    """
    values = _survivor_values(prepared) if distinct is None else distinct
    invert = quantiles_of
    if prepared.method != "weighting" and values.size > MAX_PATH_VALUES:
        values = default_values(prepared.data, limit=MAX_PATH_VALUES, rows=outcome_rows(prepared))
        invert = interpolated_quantiles
    path = cdf_path(prepared, values, with_influence=False)
    return {arm: invert(path.values, getattr(path, arm), quantiles)
            for arm in ("treated", "control")}  # fmt: skip


def quantile_effects(estimator, quantiles=(0.25, 0.5, 0.75), level=0.95, *, X=None,
                     cdf_model=None, n_bootstrap=0, random_state=0):  # fmt: skip
    """Quantiles of the always-survivor outcome distribution under each arm and their differences.

    For an estimator fitted with another ``stratum``, the quantiles of that stratum's
    distributions (:func:`survivor_distribution`).

    Parameters
    ----------
    estimator : fitted PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
    quantiles : sequence of float in (0, 1), default=(0.25, 0.5, 0.75)
    level : float, default=0.95
    X : array-like, optional
        The covariates the estimator was fitted with. Required by outcome regression and the
        multiply robust estimator (their conditional CDF model), and by the bootstrap.
    cdf_model : classifier, optional
        As in :func:`survivor_distribution`.
    n_bootstrap : int, default=0
        When positive, also refit the estimator (and the conditional CDF models) on this many
        resamples (rows drawn within arms; clusters with ``groups``) and add bootstrap standard
        errors and percentile intervals, a check on the influence-function ones.
    random_state : int or None, default=0
        Seeds the bootstrap.

    Returns
    -------
    pandas.DataFrame
        Columns ``quantile``, ``treated``, ``control``, ``effect``, ``std_error``, ``ci_low``,
        ``ci_high`` (influence function; normal interval, t with G - 1 degrees of freedom under
        fewer than 30 clusters), ``std_error_treated``,
        ``std_error_control``, ``density_treated``, ``density_control``; with ``n_bootstrap``
        also ``bootstrap_std_error``, ``bootstrap_ci_low``, ``bootstrap_ci_high``.
        ``attrs["notes"]`` states the method, the bandwidth and the cautions.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(3000, random_state=0)
    >>> est = ps.PrincipalScoreWeighting().fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> table = ps.quantile_effects(est)
    >>> table.columns[:7].tolist()
    ['quantile', 'treated', 'control', 'effect', 'std_error', 'ci_low', 'ci_high']
    """
    level = check_level(level)
    quantiles = check_quantiles(quantiles)
    if isinstance(n_bootstrap, bool) or not isinstance(n_bootstrap, int | np.integer) or (
        n_bootstrap < 0 or n_bootstrap == 1
    ):
        raise ValueError(f"`n_bootstrap` must be 0 or an integer >= 2; got {n_bootstrap!r}.")
    prepared = prepare(estimator, X, cdf_model)
    data = prepared.data
    distinct = _survivor_values(prepared)
    if distinct.size <= MAX_LEVELS:
        raise ValueError(
            f"The survivors' outcome takes at most {MAX_LEVELS} distinct values, so its "
            "quantiles sit on point masses and have no density-based standard error. Use "
            "ps.ordinal_comparison for binary or ordinal outcomes, or ps.survivor_distribution."
        )
    point = _point_quantiles(prepared, quantiles, distinct)
    # The density is a binned kernel estimate (Wand 1994, JCGS 3): CDF masses at <= 200 values.
    path = cdf_path(prepared, default_values(data, rows=outcome_rows(prepared)),
                    with_influence=False)
    sizes = effective_sizes(prepared.oriented)
    w, groups = data.sample_weight, data.groups
    z = reference_quantile(level, estimator_dof(estimator))  # t with few clusters
    influence, density, bandwidth, single = {}, {}, {}, {}
    # One pass gives both arms' influence values at every quantile of either arm.
    at_quantiles = cdf_path(prepared, np.unique(np.concatenate([point["treated"],
                                                                point["control"]])))
    for arm in ("treated", "control"):
        mass = masses(getattr(path, arm))
        bandwidth[arm] = silverman_bandwidth(path.values, mass, sizes[arm])
        columns = np.searchsorted(at_quantiles.values, point[arm])
        if not bandwidth[arm] > 0:
            # One outcome value carries the arm: every quantile is that value, a point mass
            # with no density, so no density-based standard error exists.
            single[arm] = float(path.values[np.argmax(mass)])
            density[arm] = np.full(len(quantiles), np.nan)
            influence[arm] = np.full((data.n_samples, len(quantiles)), np.nan)
            continue
        density[arm] = kernel_density(point[arm], path.values, mass, bandwidth[arm])
        influence[arm] = (getattr(at_quantiles, f"influence_{arm}"), columns)
    if groups is None and not single:
        se, se_arm = _std_errors(influence, density, w)
    else:
        for arm, value in influence.items():
            if isinstance(value, tuple):
                influence[arm] = -value[0][:, value[1]] / density[arm]
        se_arm = {arm: influence_std_error(influence[arm], w, groups) for arm in influence}
        se = influence_std_error(influence["treated"] - influence["control"], w, groups)
    effect = point["treated"] - point["control"]
    table = pd.DataFrame({
        "quantile": quantiles,
        "treated": point["treated"],
        "control": point["control"],
        "effect": effect,
        "std_error": se,
        "ci_low": effect - z * se,
        "ci_high": effect + z * se,
        "std_error_treated": se_arm["treated"],
        "std_error_control": se_arm["control"],
        "density_treated": density["treated"],
        "density_control": density["control"],
    })  # fmt: skip
    notes = [
        f"Quantiles invert the {prepared.words} CDFs ({prepared.method} estimator); standard "
        "errors from the influence function of the quantile, -IF_F(q) / f(q), with the density "
        "f from a Gaussian kernel with Silverman's bandwidth (treated "
        f"{bandwidth['treated']:.4g}, control {bandwidth['control']:.4g}).",
        "Each quantile effect is a difference of quantiles of two distributions (a marginal "
        "contrast), not the quantile of individual effects, which the data cannot identify.",
        *stratum_notes(prepared, estimator.monotonicity),
        caution(prepared),
    ]
    units = "survivors" if prepared.stratum == "always_survivor" else "units"
    for arm, value in single.items():
        message = (
            f"The {arm} {prepared.words} distribution is a single value ({value:g}: the "
            f"{arm} {units}' outcome does not vary), so its quantiles are that value and have no "
            "density-based standard error; the quantile effects get no interval. Compare the "
            "means, or use ps.ordinal_comparison for an outcome with few levels."
        )
        notes.insert(1, message)
        warn_at_caller(message, UserWarning)
    if n_bootstrap:
        replicates = _bootstrap(estimator, X, cdf_model, quantiles, n_bootstrap, random_state)
        low, high = np.quantile(replicates, [(1 - level) / 2, (1 + level) / 2], axis=0)
        table["bootstrap_std_error"] = replicates.std(axis=0, ddof=1)
        table["bootstrap_ci_low"], table["bootstrap_ci_high"] = low, high
        notes.insert(1, f"Bootstrap: {replicates.shape[0]} resamples refitting every model "
                        "(rows drawn within arms), percentile intervals.")  # fmt: skip
    table.attrs["notes"] = notes
    table.attrs["bandwidth"] = bandwidth
    table.attrs["stratum"] = prepared.stratum
    return table


_ROWS = 16_384


def _std_errors(influence, density, w):
    """Standard errors of the quantile effects and of each arm's quantiles (each row its own
    cluster), from the influence values ``-IF_F / f`` formed in row chunks: no rows x quantiles
    array. ``influence[arm]`` is ``(expanded IF_F, columns)``. The sums of
    :func:`~pscore_strata.inference._standard_errors.influence_std_error`, the weighted values
    centered by ``sum c^2 - (sum c)^2 / n``."""
    n = w.size
    sums = {key: 0.0 for key in ("treated", "control", "effect")}
    squares = dict(sums)
    for start in range(0, n, _ROWS):
        rows = slice(start, start + _ROWS)
        values = {}
        for arm, (expanded, columns) in influence.items():
            values[arm] = expanded.columns(columns, rows) * (-w[rows, None] / density[arm])
        values["effect"] = values["treated"] - values["control"]
        for key, c in values.items():
            sums[key] = sums[key] + c.sum(axis=0)
            squares[key] = squares[key] + np.einsum("ij,ij->j", c, c)
    scale = n / (n - 1) / w.sum() ** 2 if n > 1 else np.nan
    se = {key: np.sqrt(np.clip(squares[key] - sums[key] ** 2 / n, 0.0, None) * scale)
          for key in sums}  # fmt: skip
    return se["effect"], {arm: se[arm] for arm in ("treated", "control")}


def _bootstrap(estimator, X, cdf_model, quantiles, n_resamples, random_state):
    data = estimator.training_data_
    if X is None and estimator.n_features_in_ > 0:
        raise ValueError(
            "`n_bootstrap` refits the estimator on resamples, which needs `X`: pass the "
            "covariates the estimator was fitted with."
        )
    # The status of units lost to follow-up is unknown, not death: blank again, as given to fit.
    survival = data.survival.astype(float)
    if data.status_known is not None:
        survival = np.where(data.status_known == 1, survival, np.nan)
    template = clone(estimator)
    if "n_bootstrap" in template.get_params():
        template.set_params(n_bootstrap=0)  # only the point estimates are needed
    out = []
    for seed in spawn_seeds(random_state, n_resamples):
        rows = resample_rows(data.treatment, seed, data.groups)
        X_b = None if X is None else (X.iloc[rows] if isinstance(X, pd.DataFrame) else
                                      np.asarray(X)[rows])  # fmt: skip
        fitted = seed_models(clone(template), seed)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fitted.fit(X_b, data.outcome[rows], treatment=data.treatment[rows],
                           survival=survival[rows],
                           sample_weight=data.sample_weight[rows] if data.weighted else None,
                           groups=None if data.groups is None else data.groups[rows])
                point = _point_quantiles(prepare(fitted, X_b, cdf_model), quantiles)
        except (ValueError, np.linalg.LinAlgError):
            continue
        out.append(point["treated"] - point["control"])
    if len(out) < 2:
        raise RuntimeError("Fewer than two bootstrap resamples could be fitted; use more data.")
    return np.asarray(out)

