"""Trimming bounds: checked against an independent Lee (2009) computation on the NSW data,
simulated truth without principal ignorability, and the binary closed form."""

import warnings

import numpy as np
import pytest
from scipy import stats
from sklearn.base import clone

import pscore_strata as ps
from pscore_strata.assumptions._trimming import (
    binary_trimmed_means,
    imbens_manski_interval,
    trimmed_means,
)


def _quiet_fit(estimator, X, data, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return estimator.fit(X, data.y, treatment=data.treatment, survival=data.survival, **kwargs)


@pytest.fixture(scope="module")
def nsw():
    # Open dataset: LaLonde (1986) NSW experiment, Dehejia & Wahba (1999) sample, shipped by
    # causaldata as nsw_mixtape. Employment in 1978 truncates the 1978 earnings.
    from causaldata import nsw_mixtape

    frame = nsw_mixtape.load_pandas().data
    return frame


def _lee_reference(y, treatment, employed):
    """Lee (2009, section 3) trimming bounds, written without the library.

    The trimmed mean of the lowest q-fraction is (1/q) * integral_0^q F^-1(u) du of the treated
    survivors' empirical quantile function F^-1(u) = y_(ceil(u n)), integrated exactly.
    """
    q = employed[treatment == 0].mean() / employed[treatment == 1].mean()
    treated = np.sort(y[(treatment == 1) & (employed == 1)])
    n = treated.size
    grid = np.arange(n + 1) / n
    lengths_low = np.diff(np.minimum(grid, q))
    lengths_high = np.diff(np.minimum(grid, q))[::-1]
    lower = np.sum(lengths_low * treated) / q
    upper = np.sum(lengths_high * treated) / q
    control = y[(treatment == 0) & (employed == 1)].mean()
    return lower - control, upper - control, q


def test_nsw_matches_independent_lee_trimming(nsw):
    y = nsw["re78"].to_numpy(dtype=float)  # stored as float32
    t = nsw["treat"].to_numpy()
    s = (y > 0).astype(int)
    bounds = ps.TrimmingBounds().fit(None, y, treatment=t, survival=s)
    lower, upper, q = _lee_reference(y, t, s)
    np.testing.assert_allclose([bounds.lower_, bounds.upper_], [lower, upper], rtol=1e-12)
    np.testing.assert_allclose(bounds.trimming_share_, 1 - q, rtol=1e-12)
    # The classic recipe (keep y <= the q-quantile) differs from exact trimming by at most one
    # observation's share of the trimmed mean.
    treated = y[(t == 1) & (s == 1)]
    control = y[(t == 0) & (s == 1)].mean()
    classic = treated[treated <= np.quantile(treated, q)].mean() - control
    assert abs(classic - bounds.lower_) < np.ptp(treated) / (q * treated.size)
    assert bounds.lower_ < bounds.upper_
    low, high = bounds.conf_int()
    assert low < bounds.lower_ and high > bounds.upper_


def test_exact_fractional_trimming_handles_ties_and_weights():
    rng = np.random.default_rng(0)
    values = rng.integers(0, 4, 50).astype(float)  # heavy ties
    weights = rng.integers(1, 4, 50).astype(float)
    lower, upper, _, _ = trimmed_means(values, weights, 0.37)
    expanded = np.sort(np.repeat(values, weights.astype(int)))
    # Independent reference: integrate the quantile function of the expanded (unweighted) data.
    grid = np.arange(expanded.size + 1) / expanded.size
    lengths = np.diff(np.minimum(grid, 0.37))
    assert lower == pytest.approx(np.sum(lengths * expanded) / 0.37, rel=1e-12)
    assert upper == pytest.approx(np.sum(lengths * expanded[::-1]) / 0.37, rel=1e-12)


@pytest.mark.parametrize("share", [0.2, 0.5, 0.73, 0.95, 1.0])
@pytest.mark.parametrize("success", [0.1, 0.5, 0.9])
def test_binary_closed_form_equals_trimming(share, success):
    n = 1000
    values = (np.arange(n) < round(success * n)).astype(float)
    low, high, _, _ = trimmed_means(values, np.ones(n), share)
    np.testing.assert_allclose(binary_trimmed_means(values.mean(), share), (low, high), atol=1e-12)


def test_binary_outcome_fit_uses_closed_form():
    data = ps.datasets.make_truncation(3000, design="randomized", outcome="binary", random_state=1)
    bounds = ps.TrimmingBounds().fit(None, data.y, treatment=data.treatment, survival=data.survival)
    t, s, y = data.treatment, data.survival, data.y
    q = s[t == 0].mean() / s[t == 1].mean()
    low, high, _, _ = trimmed_means(y[(t == 1) & (s == 1)], np.ones(int(s[t == 1].sum())), q)
    control = y[(t == 0) & (s == 1)].mean()
    np.testing.assert_allclose([bounds.lower_, bounds.upper_], [low - control, high - control])


def test_weights_equal_duplicated_rows():
    data = ps.datasets.make_truncation(400, design="randomized", random_state=2)
    counts = np.random.default_rng(3).integers(1, 4, 400)
    weighted = ps.TrimmingBounds().fit(
        None, data.y, treatment=data.treatment, survival=data.survival, sample_weight=counts
    )
    rows = np.repeat(np.arange(400), counts)
    duplicated = ps.TrimmingBounds().fit(
        None, data.y[rows], treatment=data.treatment[rows], survival=data.survival[rows]
    )
    np.testing.assert_allclose(
        [weighted.lower_, weighted.upper_], [duplicated.lower_, duplicated.upper_], rtol=1e-10
    )


def _population_bounds(pi_difference):
    """Bounds of the identified set from 10^6 simulated potential outcomes (randomized)."""
    big = ps.datasets.make_truncation(
        1_000_000, design="randomized", pi_difference=pi_difference, random_state=99
    )
    helped_or_always, always = big.s1 == 1, big.s0 == 1
    q = always.mean() / helped_or_always.mean()
    y1 = np.sort(big.y1[helped_or_always])
    k = int(round(q * y1.size))
    control = big.y0[always].mean()
    return y1[:k].mean() - control, y1[-k:].mean() - control


@pytest.fixture(scope="module")
def population_bounds():
    return _population_bounds(1.0)


@pytest.mark.parametrize(
    "design, strata, use_cells",
    [("randomized", "none", False), ("observational", "none", False),
     ("observational", "score", False), ("observational", "none", True)],
)  # fmt: skip
def test_bounds_contain_truth_without_principal_ignorability(design, strata, use_cells):
    # Simulated truth: principal ignorability fails by 1.0 (difference) in the protected stratum.
    data = ps.datasets.make_truncation(20_000, design=design, pi_difference=1.0, random_state=4)
    X = None if (design == "randomized" and strata == "none") else data.X
    cells = (data.X[:, 0] > 0).astype(int) + 2 * (data.X[:, 1] > 0) if use_cells else None
    bounds = _quiet_fit(ps.TrimmingBounds(strata=strata), X, data, cells=cells)
    assert bounds.lower_ < data.true_effect < bounds.upper_
    low, high = bounds.conf_int()
    assert low < bounds.lower_ and high > bounds.upper_


def test_weighted_bounds_recover_population_bounds(population_bounds):
    # Inverse probability weights make observational arms comparable: the estimated bounds
    # match the randomized population's identified set (same strata, outcomes and shares).
    data = ps.datasets.make_truncation(20_000, pi_difference=1.0, random_state=5)
    bounds = _quiet_fit(ps.TrimmingBounds(), data.X, data)
    assert abs(bounds.lower_ - population_bounds[0]) < 4 * bounds.std_error_lower_
    assert abs(bounds.upper_ - population_bounds[1]) < 4 * bounds.std_error_upper_


def test_covariate_tightened_bounds_are_not_wider_on_average():
    widths = {"none": [], "score": [], "cells": []}
    for seed in range(8):
        data = ps.datasets.make_truncation(3000, pi_difference=1.0, random_state=10 + seed)
        cells = (data.X[:, 0] > 0).astype(int)
        for name, strata, cell in (("none", "none", None), ("score", "score", None),
                                   ("cells", "none", cells)):  # fmt: skip
            bounds = _quiet_fit(ps.TrimmingBounds(strata=strata), data.X, data, cells=cell)
            widths[name].append(bounds.upper_ - bounds.lower_)
    assert np.mean(widths["score"]) <= np.mean(widths["none"])
    assert np.mean(widths["cells"]) <= np.mean(widths["none"])


def test_decreasing_monotonicity_mirrors_increasing():
    data = ps.datasets.make_truncation(3000, design="randomized", random_state=6)
    up = ps.TrimmingBounds().fit(None, data.y, treatment=data.treatment, survival=data.survival)
    down = ps.TrimmingBounds(monotonicity="decreasing").fit(
        None, data.y, treatment=1 - data.treatment, survival=data.survival
    )
    np.testing.assert_allclose([down.lower_, down.upper_], [-up.upper_, -up.lower_])
    np.testing.assert_allclose(
        [down.std_error_lower_, down.std_error_upper_], [up.std_error_upper_, up.std_error_lower_]
    )


def test_decreasing_bounds_contain_truth():
    data = ps.datasets.make_truncation(
        20_000, monotonicity="decreasing", pi_difference=-1.0, random_state=7
    )
    bounds = _quiet_fit(ps.TrimmingBounds(monotonicity="decreasing", strata="score"), data.X, data)
    assert bounds.lower_ < data.true_effect < bounds.upper_


def test_imbens_manski_interval_limits():
    # Imbens & Manski (2004): c -> z_{(1+level)/2} for a point and z_level for a wide set.
    z975, z95 = stats.norm.ppf(0.975), stats.norm.ppf(0.95)
    assert imbens_manski_interval(0.0, 0.0, 1.0, 1.0) == pytest.approx((-z975, z975))
    assert imbens_manski_interval(0.0, 100.0, 1.0, 1.0) == pytest.approx((-z95, 100 + z95))


def test_interval_coverage_in_simulation():
    # Monte Carlo, 400 trials of n = 1000 with a known identified set (10^6 potential outcomes).
    # Imbens-Manski covers each point of the set (worst case: its ends) with >= 95%; the
    # identified-set interval covers the whole set with >= 95%. Tolerance: 2 Monte Carlo SEs.
    lower_true, upper_true = _population_bounds(1.0)
    reps = 400
    hits = {"lower": 0, "upper": 0, "set": 0}
    lowers, se_lowers = [], []
    rng = np.random.default_rng(8)
    for _ in range(reps):
        data = ps.datasets.make_truncation(
            1000, design="randomized", pi_difference=1.0, random_state=rng
        )
        bounds = ps.TrimmingBounds().fit(
            None, data.y, treatment=data.treatment, survival=data.survival
        )
        low, high = bounds.conf_int(0.95)
        hits["lower"] += low <= lower_true <= high
        hits["upper"] += low <= upper_true <= high
        set_low, set_high = bounds.conf_int(0.95, coverage="identified_set")
        hits["set"] += set_low <= lower_true and upper_true <= set_high
        lowers.append(bounds.lower_)
        se_lowers.append(bounds.std_error_lower_)
    tolerance = 2 * np.sqrt(0.95 * 0.05 / reps)
    for key, count in hits.items():
        assert count / reps >= 0.95 - tolerance, key
    # Influence-function standard error against the Monte Carlo spread of the lower bound.
    assert np.mean(se_lowers) == pytest.approx(np.std(lowers), rel=0.15)


def test_estimator_protocol():
    data = ps.datasets.make_truncation(1500, random_state=9)
    bounds = ps.TrimmingBounds(strata="score", n_strata=3)
    copy = clone(bounds)
    assert copy.get_params() == bounds.get_params()
    first = _quiet_fit(bounds, data.X, data)
    second = _quiet_fit(copy, data.X, data)
    assert (first.lower_, first.upper_) == (second.lower_, second.upper_)
    assert len(first.cells_) == 3
    assert first.cells_["weight"].sum() == pytest.approx(1.0)
    table = first.summary()
    assert list(table.index) == ["SACE lower bound", "SACE upper bound"]
    assert any("latent" in note for note in table.attrs["notes"])
    assert any("statistician" in note for note in table.attrs["notes"])


def test_clustered_standard_errors_run():
    data = ps.datasets.make_truncation(2000, design="randomized", random_state=11)
    groups = np.arange(2000) // 10
    bounds = ps.TrimmingBounds().fit(
        None, data.y, treatment=data.treatment, survival=data.survival, groups=groups
    )
    assert np.isfinite(bounds.std_error_lower_) and bounds.std_error_upper_ > 0


def test_monotonicity_contradiction_warns():
    data = ps.datasets.make_truncation(2000, design="randomized", random_state=12)
    with pytest.warns(ps.MonotonicityWarning, match="contradicting the monotonicity"):
        bounds = ps.TrimmingBounds(monotonicity="decreasing").fit(
            None, data.y, treatment=data.treatment, survival=data.survival
        )
    assert bounds.n_clipped_cells_ == 1 and bounds.trimming_share_ == 0


@pytest.fixture(scope="module")
def small():
    return ps.datasets.make_truncation(600, random_state=13)


@pytest.mark.parametrize(
    "params, kwargs, error, match",
    [
        ({"strata": "cells"}, {}, ValueError, "`strata`"),
        ({"monotonicity": "up"}, {}, ValueError, "`monotonicity`"),
        ({"strata": "score", "n_strata": 0}, {}, ValueError, "`n_strata`"),
        ({"strata": "score", "n_strata": 2.5}, {}, TypeError, "`n_strata`"),
        ({"strata": "score"}, {"cells": np.zeros(600)}, ValueError, "either `cells`"),
        ({}, {"cells": np.zeros(5)}, ValueError, "`cells` must be one label per row"),
        ({}, {"cells": np.r_[np.nan, np.zeros(599)]}, ValueError, "`cells` has 1 missing"),
        ({}, {"cells": np.arange(600)}, ValueError, "no survivors"),
    ],
)
def test_errors(small, params, kwargs, error, match):
    with pytest.raises(error, match=match):
        _quiet_fit(ps.TrimmingBounds(**params), small.X, small, **kwargs)


def test_score_strata_need_covariates(small):
    with pytest.raises(ValueError, match="needs covariates X"):
        _quiet_fit(ps.TrimmingBounds(strata="score"), None, small)


def test_interval_argument_errors(small):
    bounds = _quiet_fit(ps.TrimmingBounds(), None, small)
    with pytest.raises(ValueError, match="`level`"):
        bounds.conf_int(1.5)
    with pytest.raises(ValueError, match="`coverage`"):
        bounds.conf_int(coverage="set")
    with pytest.raises(Exception, match="not fitted"):
        ps.TrimmingBounds().conf_int()
