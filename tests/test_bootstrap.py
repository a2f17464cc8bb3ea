"""Tests of ps.bootstrap: intervals against scipy, standard errors against influence values,
reproducibility across workers and backends, clusters, failures and memory."""

import sys
import tracemalloc
import warnings

import joblib
import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.base import BaseEstimator

import pscore_strata as ps
from pscore_strata.inference import (
    BootstrapResult,
    bca_interval,
    bootstrap,
    influence_std_error,
    percentile_interval,
)
from pscore_strata.inference._resampling import (
    jackknife_blocks,
    multiplier_contributions,
    multiplier_draws,
    resample_rows,
    spawn_seeds,
    stratified_resample,
)


class MeanDifference(BaseEstimator):
    """Treated minus control mean of ``y`` (a plain two-sample statistic), with influence values.

    ``fit`` refuses to run an inner bootstrap, so the tests also check that clones get
    ``n_bootstrap=0``; with ``min_rows`` it fails on any subset smaller than that.
    """

    def __init__(self, *, n_bootstrap=200, min_rows=0):
        self.n_bootstrap = n_bootstrap
        self.min_rows = min_rows

    def fit(self, X, y, *, treatment, survival, sample_weight=None):
        if self.n_bootstrap != 0:
            raise AssertionError("an inner bootstrap would run")
        y, t = np.asarray(y, dtype=float), np.asarray(treatment)
        if y.size < self.min_rows:
            raise ValueError("too few rows")
        treated, control = y[t == 1], y[t == 0]
        self.effect_ = treated.mean() - control.mean()
        n = y.size
        self.influence_ = np.where(
            t == 1,
            (y - treated.mean()) * n / treated.size,
            -(y - control.mean()) * n / control.size,
        )
        return self


class FakeBounds(MeanDifference):
    """Bounds-like: ``lower_``/``upper_`` at the effect -/+ 1, influence values per bound."""

    def fit(self, X, y, **kwargs):
        super().fit(X, y, **kwargs)
        self.lower_, self.upper_ = self.effect_ - 1.0, self.effect_ + 1.0
        self.influence_lower_ = self.influence_upper_ = self.influence_
        return self


class NoStatistic(BaseEstimator):
    def fit(self, X, y, **kwargs):
        return self


def skewed_two_samples(n_treated=40, n_control=50, seed=0):
    rng = np.random.default_rng(seed)
    y = np.concatenate([rng.exponential(2.0, n_treated), rng.exponential(1.0, n_control)])
    treatment = np.r_[np.ones(n_treated, int), np.zeros(n_control, int)]
    return y, treatment, np.ones(y.size, int)


@pytest.fixture(scope="module")
def small():
    return ps.datasets.make_truncation(600, random_state=3)


# -- interval formulas against scipy.stats.bootstrap (reference library) ----------------------
def test_interval_formulas_reproduce_scipy_on_its_own_replicates():
    y, t, _ = skewed_two_samples()
    samples = (y[t == 1], y[t == 0])
    res = stats.bootstrap(
        samples,
        lambda a, b, axis=-1: a.mean(axis) - b.mean(axis),
        n_resamples=2000,
        method="BCa",
        random_state=1,
    )
    # Leave-one-out acceleration of a difference of two means, Efron & Tibshirani (1993) eq.
    # 14.15 per sample (as scipy applies it to several samples): U_i = +/-(x_i - mean).
    cubes = sum(
        np.sum((s - s.mean()) ** 3) / s.size**3 * sign
        for s, sign in zip(samples, (1, -1), strict=True)
    )
    squares = sum(np.sum((s - s.mean()) ** 2) / s.size**2 for s in samples)
    acceleration = cubes / (6 * squares**1.5)
    estimate = samples[0].mean() - samples[1].mean()
    low, high = bca_interval(res.bootstrap_distribution, estimate, acceleration, 0.95)
    np.testing.assert_allclose(
        [low[0], high[0]], [res.confidence_interval.low, res.confidence_interval.high], rtol=1e-10
    )
    res_p = stats.bootstrap(
        samples,
        lambda a, b, axis=-1: a.mean(axis) - b.mean(axis),
        n_resamples=2000,
        method="percentile",
        random_state=1,
    )
    low, high = percentile_interval(res_p.bootstrap_distribution, 0.95)
    np.testing.assert_allclose(
        [low, high], [res_p.confidence_interval.low, res_p.confidence_interval.high], rtol=1e-10
    )


def test_percentile_and_bca_agree_with_scipy_within_monte_carlo_error():
    y, t, s = skewed_two_samples()
    result = bootstrap(
        MeanDifference(),
        None,
        y,
        treatment=t,
        survival=s,
        n_resamples=4000,
        n_jackknife_groups=1000,
        random_state=0,
    )
    samples = (y[t == 1], y[t == 0])
    sd = result.std_error
    # The exact leave-one-out acceleration (formula in the test above) is what the grouped
    # jackknife gives when every block is one row.
    cubes = sum(
        np.sum((v - v.mean()) ** 3) / v.size**3 * sign
        for v, sign in zip(samples, (1, -1), strict=True)
    )
    squares = sum(np.sum((v - v.mean()) ** 2) / v.size**2 for v in samples)
    assert result.acceleration == pytest.approx(cubes / (6 * squares**1.5), rel=1e-9)
    for kind, scipy_method in (("percentile", "percentile"), ("bca", "BCa")):
        ref = stats.bootstrap(
            samples,
            lambda a, b, axis=-1: a.mean(axis) - b.mean(axis),
            n_resamples=20000,
            method=scipy_method,
            random_state=2,
        )
        ours = result.conf_int(0.95, kind=kind)
        # Monte Carlo error of a 2.5% quantile from 4000 draws is about 0.04 SD; allow 0.15 SD.
        assert abs(ours[0] - ref.confidence_interval.low) < 0.15 * sd
        assert abs(ours[1] - ref.confidence_interval.high) < 0.15 * sd
        assert sd == pytest.approx(ref.standard_error, rel=0.05)
    # The skewed outcome moves the BCa interval away from the percentile one (as in scipy).
    assert result.conf_int(kind="bca")[1] > result.conf_int(kind="percentile")[1] + 0.05 * sd


# -- standard errors against the influence-value standard error --------------------------------
def test_resample_std_error_matches_sandwich_at_n_5000():
    data = ps.datasets.make_truncation(5000, random_state=11)
    est = ps.PrincipalScoreWeighting()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fitted = ps.PrincipalScoreWeighting().fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )
        result = bootstrap(
            est,
            data.X,
            data.y,
            treatment=data.treatment,
            survival=data.survival,
            n_resamples=250,
            random_state=5,
        )
    assert fitted.std_error_method_ == "sandwich"
    # Relative Monte Carlo error of an SD from 250 draws is about 1/sqrt(500) = 4.5%.
    assert 0.9 < result.std_error / fitted.std_error_ < 1.1
    assert result.estimate == pytest.approx(fitted.effect_)


@pytest.mark.parametrize("multiplier", ["rademacher", "gaussian"])
def test_multiplier_std_error_matches_influence_std_error(small, multiplier):
    groups = np.arange(small.y.size) // 7
    for g in (None, groups):
        result = bootstrap(
            ps.PrincipalScoreWeighting(),
            small.X,
            small.y,
            treatment=small.treatment,
            survival=small.survival,
            groups=g,
            method="multiplier",
            multiplier=multiplier,
            n_resamples=3000,
            random_state=0,
        )
        fitted = ps.PrincipalScoreWeighting().fit(
            small.X, small.y, treatment=small.treatment, survival=small.survival, groups=g
        )
        # The multipliers have unit variance, so the draws' variance is the linearization
        # variance exactly in expectation; 3000 draws give about 1.3% relative error.
        assert result.std_error / influence_std_error(fitted.influence_, None, g) == (
            pytest.approx(1.0, abs=0.05)
        )


def test_sample_weights_flow_into_both_methods(small):
    w = np.random.default_rng(1).uniform(0.5, 2.0, small.y.size)
    common = dict(
        treatment=small.treatment, survival=small.survival, sample_weight=w, random_state=0
    )
    fitted = ps.PrincipalScoreWeighting().fit(
        small.X, small.y, treatment=small.treatment, survival=small.survival, sample_weight=w
    )
    multiplier = bootstrap(
        ps.PrincipalScoreWeighting(),
        small.X,
        small.y,
        method="multiplier",
        n_resamples=3000,
        **common,
    )
    assert multiplier.estimate == pytest.approx(fitted.effect_)
    # Same identity as above, with the weighted linearization variance.
    assert multiplier.std_error / influence_std_error(fitted.influence_, w) == pytest.approx(
        1.0, abs=0.05
    )
    resample = bootstrap(
        ps.PrincipalScoreWeighting(), small.X, small.y, n_resamples=40, stratify=False, **common
    )
    assert resample.estimate == pytest.approx(fitted.effect_)
    assert 0.6 < resample.std_error / fitted.std_error_ < 1.5  # 40 refits: a loose check


def test_multiplier_warns_when_influence_values_ignore_the_models(small):
    from sklearn.ensemble import HistGradientBoostingClassifier

    model = HistGradientBoostingClassifier(max_iter=20)
    with pytest.warns(UserWarning, match="ignore the estimation"):
        result = bootstrap(
            ps.PrincipalScoreWeighting(survival_model=model),
            small.X,
            small.y,
            treatment=small.treatment,
            survival=small.survival,
            method="multiplier",
            n_resamples=50,
            random_state=0,
        )
    assert any("method='resample'" in note for note in result.summary().attrs["notes"])


def test_multiplier_draws_equal_dense_computation():
    rng = np.random.default_rng(0)
    c = rng.standard_normal((1000, 2))
    seeds = spawn_seeds(7, 3)
    draws = multiplier_draws(c, seeds, "rademacher")
    for b, seed in enumerate(seeds):
        bits = np.frombuffer(np.random.default_rng(seed).bytes(125), dtype=np.uint8)
        signs = np.unpackbits(bits, bitorder="little")[:1000] * 2.0 - 1.0
        np.testing.assert_allclose(draws[b], signs @ c, rtol=1e-12)


def test_gaussian_multiplier_draws_have_the_exact_covariance():
    # Source: for xi ~ N(0, I_n), xi @ C ~ N(0, C'C) (the normal distribution's linear maps).
    # The draws' sample covariance over 20,000 replicates matches C'C within Monte Carlo error.
    rng = np.random.default_rng(1)
    c = rng.standard_normal((500, 2)) * [1.0, 3.0]
    c[:, 1] += c[:, 0]
    draws = multiplier_draws(c, spawn_seeds(3, 20_000), "gaussian")
    standardized_means = draws.mean(axis=0) / np.sqrt(np.diag(c.T @ c) / 20_000)
    assert np.all(np.abs(standardized_means) < 4)
    np.testing.assert_allclose(np.cov(draws.T), c.T @ c, rtol=0.05, atol=0.05 * 500)


def test_multiplier_memory_is_chunked():
    n, n_draws = 300_000, 250
    c = np.random.default_rng(0).standard_normal((n, 1))
    seeds = spawn_seeds(0, n_draws)
    tracemalloc.start()
    multiplier_draws(c, seeds, "rademacher")
    rademacher_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.reset_peak()
    multiplier_draws(c, seeds[:20], "gaussian")
    gaussian_peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    dense = n * n_draws * 8  # an n x B matrix of float64 multipliers: 600 MB
    assert rademacher_peak < dense / 40
    assert gaussian_peak < 4 * n * 8  # O(n k) for C'C, nothing of size n x B


# -- reproducibility across workers and backends -----------------------------------------------
@pytest.mark.parametrize("method", ["resample", "multiplier"])
def test_same_replicates_for_any_n_jobs_and_dask(small, method):
    distributed = pytest.importorskip("dask.distributed")
    kwargs = dict(
        treatment=small.treatment,
        survival=small.survival,
        method=method,
        n_resamples=24 if method == "resample" else 600,
        random_state=42,
    )
    est = ps.PrincipalScoreWeighting()
    one = bootstrap(est, small.X, small.y, n_jobs=1, **kwargs).replicates
    two = bootstrap(est, small.X, small.y, n_jobs=2, **kwargs).replicates
    with joblib.parallel_config(backend="threading", n_jobs=2):
        threads = bootstrap(est, small.X, small.y, **kwargs).replicates
    # In-process workers; the scheduler's HTTP server (which dashboard_address=None still starts,
    # on every interface) is bound to a free loopback port instead.
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=False, dashboard_address="127.0.0.1:0"
    ) as cluster:
        with distributed.Client(cluster) as client, joblib.parallel_config(backend="dask"):
            with distributed.get_task_stream(client) as stream:
                on_dask = bootstrap(est, small.X, small.y, **kwargs).replicates
    assert len(stream.data) > 0  # the work did run on the cluster
    for other in (two, threads, on_dask):
        pd.testing.assert_frame_equal(one, other)
    other_seed = bootstrap(est, small.X, small.y, n_jobs=1, **{**kwargs, "random_state": 43})
    assert not np.allclose(one.to_numpy(), other_seed.replicates.to_numpy())


def test_same_replicates_on_ray_when_installed(small):
    ray = pytest.importorskip("ray")
    from ray.util.joblib import register_ray

    kwargs = dict(
        treatment=small.treatment, survival=small.survival, n_resamples=12, random_state=42
    )
    est = ps.PrincipalScoreWeighting()
    one = bootstrap(est, small.X, small.y, n_jobs=1, **kwargs).replicates
    ray.init(num_cpus=2, include_dashboard=False, _node_ip_address="127.0.0.1")
    try:
        register_ray()
        with joblib.parallel_config(backend="ray"):
            on_ray = bootstrap(est, small.X, small.y, **kwargs).replicates
    finally:
        ray.shutdown()
    pd.testing.assert_frame_equal(one, on_ray)


def test_unseeded_random_learners_are_seeded_per_replicate(small):
    from sklearn.ensemble import RandomForestClassifier

    est = ps.PrincipalScoreWeighting(
        survival_model=RandomForestClassifier(n_estimators=5, min_samples_leaf=20)
    )
    kwargs = dict(treatment=small.treatment, survival=small.survival, n_resamples=6, random_state=3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        first, second = (bootstrap(est, small.X, small.y, **kwargs).replicates for _ in range(2))
    pd.testing.assert_frame_equal(first, second)
    assert est.survival_model.random_state is None  # the caller's template is left alone


def test_default_resampling_matches_stratified_resample():
    t = np.r_[np.ones(30, int), np.zeros(45, int)]
    for seed in spawn_seeds(1, 5):
        np.testing.assert_array_equal(resample_rows(t, seed), stratified_resample(t, seed))
        rows = resample_rows(t, seed, stratify=False)
        assert rows.size == t.size


def test_cluster_resampling_keeps_clusters_and_arms():
    groups = np.repeat(np.arange(12), 5)
    t = (groups % 2).astype(int)  # each cluster in one arm: clusters are drawn within arms
    rows = resample_rows(t, spawn_seeds(0, 1)[0], groups=groups)
    assert rows.size == groups.size and t[rows].sum() == t.sum()
    counts = pd.Series(groups[rows]).value_counts()
    assert (counts % 5 == 0).all()
    block, block_stratum = jackknife_blocks(t, spawn_seeds(0, 1)[0], groups, n_groups=4)
    assert block_stratum.tolist() == [0] * 4 + [1] * 4
    for label in range(8):  # a block holds whole clusters of one arm
        assert np.unique(t[block == label]).size == 1
        assert set(np.unique(groups[block == label])).isdisjoint(groups[block != label])


# -- clusters ------------------------------------------------------------------------------
def cluster_randomized(n, seed):
    """The "clustered" scenario with treatment assigned per cluster (a cluster-randomized trial).

    Its shared cluster effect no longer cancels between arms, so clustering widens intervals; the
    potential outcomes are untouched, so the SACE stays the scenario's exact 1.0.
    """
    data = ps.datasets.make_scenario("clustered", n, random_state=seed)
    arm = np.random.default_rng(seed).permutation(np.arange(data.groups.max() + 1) % 2)
    t = arm[data.groups]
    return (
        dict(
            X=data.X,
            y=np.where(t == 1, data.y1, data.y0),
            treatment=t,
            survival=np.where(t == 1, data.s1, data.s0),
        ),
        data.groups,
        data.true_effect,
    )


def test_cluster_bootstrap_is_wider_than_naive():
    data, groups, _ = cluster_randomized(1000, 4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        naive, clustered = (
            bootstrap(
                ps.PrincipalScoreWeighting(), **data, groups=g, n_resamples=100, random_state=0
            )
            for g in (None, groups)
        )
    width = [np.diff(r.conf_int())[0] for r in (naive, clustered)]
    assert width[1] > 1.5 * width[0]


def test_cluster_multiplier_coverage_is_nominal():
    # Simulated truth: the "clustered" scenario's SACE is exactly 1.0 (datasets docs).
    hits = {"cluster": 0, "naive": 0}
    n_datasets = 200
    for i in range(n_datasets):
        data, groups, truth = cluster_randomized(1000, 1000 + i)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for name, g in (("cluster", groups), ("naive", None)):
                low, high = bootstrap(
                    ps.PrincipalScoreWeighting(),
                    **data,
                    groups=g,
                    method="multiplier",
                    n_resamples=400,
                    random_state=i,
                ).conf_int(0.95)
                hits[name] += low < truth < high
    coverage = {k: v / n_datasets for k, v in hits.items()}
    # 200 datasets: binomial SE of a 95% coverage is 1.5 points.
    assert 0.90 <= coverage["cluster"] <= 0.99, coverage
    assert coverage["naive"] < coverage["cluster"] - 0.1, coverage


# -- bounds-like estimators --------------------------------------------------------------------
@pytest.mark.parametrize("method", ["resample", "multiplier"])
def test_bounds_give_two_named_columns(method):
    y, t, s = skewed_two_samples()
    result = bootstrap(
        FakeBounds(),
        None,
        y,
        treatment=t,
        survival=s,
        method=method,
        n_resamples=200,
        random_state=0,
    )
    assert list(result.replicates.columns) == ["lower", "upper"]
    np.testing.assert_allclose(result.replicates["upper"] - result.replicates["lower"], 2.0)
    interval = result.statistic_intervals(0.9, kind="bca")
    assert list(interval.index) == ["lower", "upper"] and list(interval.columns) == ["low", "high"]
    assert isinstance(result.std_error, pd.Series)
    table = result.summary()
    assert list(table.index) == ["lower", "upper"]
    assert any("latent" in note for note in table.attrs["notes"])


def test_trimming_bounds_if_available(small):
    bounds = pytest.importorskip("pscore_strata.assumptions._bounds")
    result = bootstrap(
        bounds.TrimmingBounds(),
        small.X,
        small.y,
        treatment=small.treatment,
        survival=small.survival,
        method="multiplier",
        n_resamples=500,
        random_state=0,
    )
    fitted = bounds.TrimmingBounds().fit(
        small.X, small.y, treatment=small.treatment, survival=small.survival
    )
    np.testing.assert_allclose(
        result.std_error.to_numpy(),
        [fitted.std_error_lower_, fitted.std_error_upper_],
        rtol=0.1,
    )


# -- failures, progress and errors -------------------------------------------------------------
def test_more_than_one_percent_failures_raise():
    rng = np.random.default_rng(0)
    n = 200
    t = np.r_[np.ones(170, int), np.zeros(30, int)]
    s = np.r_[rng.integers(0, 2, 170), np.zeros(29, int), 1]  # one control survivor
    X = rng.standard_normal((n, 2))
    y = rng.standard_normal(n)
    with pytest.raises(RuntimeError, match=r"could not be estimated.*no survivors"):
        bootstrap(
            ps.PrincipalScoreWeighting(),
            X,
            y,
            treatment=t,
            survival=s,
            n_resamples=50,
            random_state=0,
        )


@pytest.mark.parametrize("failure", ["raise", "nan"])
def test_rare_failures_are_counted_and_reported(failure):
    class Fragile(MeanDifference):
        def fit(self, X, y, **kwargs):
            super().fit(X, y, **kwargs)
            if np.sum(np.asarray(X)[:, 0] == 0) >= 5:  # row 0 drawn five times or more
                if failure == "raise":
                    raise ValueError("row 0 too often")
                self.effect_ = np.nan
            return self

    y, t, s = skewed_two_samples()
    X = np.arange(y.size, dtype=float)[:, None]
    with pytest.warns(RuntimeWarning, match="row 0 too often|non-finite"):
        result = bootstrap(
            Fragile(), X, y, treatment=t, survival=s, n_resamples=1000, random_state=3
        )
    assert 0 < result.n_failed <= 10
    assert len(result.replicates) == 1000 - result.n_failed
    assert np.isfinite(result.replicates.to_numpy()).all()
    assert "n_failed" in repr(result)


def test_progress_bar_only_when_asked(capsys):
    y, t, s = skewed_two_samples()
    bootstrap(MeanDifference(), None, y, treatment=t, survival=s, n_resamples=20, progress=True)
    assert "replicate" in capsys.readouterr().err
    bootstrap(MeanDifference(), None, y, treatment=t, survival=s, n_resamples=20)
    assert capsys.readouterr().err == ""  # stderr is not a terminal under pytest


def test_progress_without_tqdm_is_a_clear_error(monkeypatch):
    monkeypatch.setitem(sys.modules, "tqdm", None)
    y, t, s = skewed_two_samples()
    with pytest.raises(ImportError, match="tqdm"):
        bootstrap(MeanDifference(), None, y, treatment=t, survival=s, n_resamples=5, progress=True)


@pytest.mark.parametrize(
    "kwargs, error, match",
    [
        ({"n_resamples": 1}, ValueError, "n_resamples"),
        ({"n_resamples": 10.0}, ValueError, "n_resamples"),
        ({"n_jackknife_groups": 1}, ValueError, "n_jackknife_groups"),
        ({"method": "jackknife"}, ValueError, "method"),
        ({"multiplier": "mammen"}, ValueError, "multiplier"),
        ({"stratify": "yes"}, ValueError, "stratify"),
        ({"progress": "auto"}, ValueError, "progress"),
        ({"groups": np.zeros(3)}, ValueError, "groups"),
        ({"groups": np.r_[np.full(89, 1.0), np.nan]}, ValueError, "missing cluster"),
    ],
)
def test_bad_arguments(kwargs, error, match):
    y, t, s = skewed_two_samples()
    with pytest.raises(error, match=match):
        bootstrap(MeanDifference(), None, y, treatment=t, survival=s, **kwargs)


def test_bad_estimators():
    y, t, s = skewed_two_samples()
    with pytest.raises(TypeError, match="scikit-learn style"):
        bootstrap(lambda: None, None, y, treatment=t, survival=s)
    with pytest.raises(TypeError, match="effect_"):
        bootstrap(NoStatistic(), None, y, treatment=t, survival=s, n_resamples=5)

    class NoInfluence(MeanDifference):
        def fit(self, X, y, **kwargs):
            super().fit(X, y, **kwargs)
            del self.influence_
            return self

    with pytest.raises(TypeError, match="influence values"):
        bootstrap(NoInfluence(), None, y, treatment=t, survival=s, method="multiplier")


def test_bad_interval_requests_and_failed_jackknife():
    y, t, s = skewed_two_samples()
    result = bootstrap(
        MeanDifference(min_rows=y.size),
        None,
        y,
        treatment=t,
        survival=s,
        n_resamples=50,
        random_state=0,
    )
    assert isinstance(result, BootstrapResult)
    with pytest.raises(ValueError, match="kind"):
        result.conf_int(kind="studentized")
    with pytest.raises(ValueError, match="level"):
        result.conf_int(level=95)
    with pytest.raises(RuntimeError, match="jackknife"):
        result.conf_int(kind="bca")  # every leave-out fit has too few rows
    low, high = result.conf_int(kind="normal")
    assert high - low == pytest.approx(2 * stats.norm.ppf(0.975) * result.std_error)


def test_multiplier_helpers_reject_bad_input():
    with pytest.raises(ValueError, match="at least two"):
        multiplier_contributions(np.ones(5), groups=np.zeros(5))
    with pytest.raises(ValueError, match="multiplier"):
        multiplier_draws(np.ones((4, 1)), spawn_seeds(0, 2), "uniform")


def test_caller_data_is_not_modified(small):
    X = pd.DataFrame(small.X).copy()
    y = pd.Series(small.y)
    before = (X.copy(), y.copy())
    bootstrap(
        ps.PrincipalScoreWeighting(),
        X,
        y,
        treatment=small.treatment,
        survival=small.survival,
        n_resamples=5,
        random_state=0,
    )
    pd.testing.assert_frame_equal(X, before[0])
    pd.testing.assert_series_equal(y, before[1])


def test_the_resampling_machinery_is_deprecated_on_the_public_path():
    # Internal from this release: the old import path warns and still gives the same function.
    with pytest.warns(DeprecationWarning, match="internal machinery of the bootstrap"):
        old = ps.inference.spawn_seeds
    assert old is spawn_seeds
    assert "spawn_seeds" not in ps.inference.__all__
