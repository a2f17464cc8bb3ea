"""Trimming bounds on the effect in every principal stratum (outcome measured for all).

Sources: the trimming construction (Zhang & Rubin 2003; Lee 2009) written out here with numpy
for an unadjusted randomized trial; simulated truth (``make_intermediate`` with principal
ignorability broken in both mixed cells, so the point estimators miss the truth while the
bounds must contain it); Monte Carlo spread for the bounds' standard errors.
"""

import warnings

import numpy as np
import pytest

import pscore_strata as ps
from pscore_strata.datasets import make_intermediate

CASES = [("increasing", "protected"), ("increasing", "doomed"), ("decreasing", "harmed"),
         ("decreasing", "doomed")]  # fmt: skip
VIOLATED = dict(pi_difference=0.8, pi_difference_doomed=-0.6)


def _bounds(data, stratum, monotonicity, X=None, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ps.TrimmingBounds(stratum=stratum, monotonicity=monotonicity, **kwargs).fit(
            X, data.y, treatment=data.treatment, intermediate=data.intermediate)


def _low_mean(sorted_values, share):
    """Mean of the lowest ``share`` of equally weighted sorted values (fractional last one)."""
    k = share * sorted_values.size
    whole = int(np.floor(k))
    if whole >= sorted_values.size:
        return float(sorted_values.mean())
    return float((sorted_values[:whole].sum() + (k - whole) * sorted_values[whole]) / k)


@pytest.mark.parametrize(("monotonicity", "stratum"), CASES)
def test_unadjusted_bounds_match_the_written_out_trimming(monotonicity, stratum):
    # In each arm the stratum's cell is trimmed to the stratum's share of it: e / P(S = s).
    data = make_intermediate(6000, stratum=stratum, monotonicity=monotonicity,
                             design="randomized", random_state=7, **VIOLATED)  # fmt: skip
    bounds = _bounds(data, stratum, monotonicity)
    T, S, Y = data.treatment, data.intermediate, data.y
    p = {t: S[T == t].mean() for t in (0, 1)}
    mixed, pure = (1, 0) if monotonicity == "increasing" else (0, 1)
    p_m, p_p = p[mixed], p[pure]
    if stratum == "doomed":
        score, cells = 1 - p_m, {mixed: 0, pure: 0}
    else:
        score, cells = p_m - p_p, {mixed: 1, pure: 0}
    ends = {}
    for arm in (0, 1):
        s = cells[arm]
        share = score / (p[arm] if s == 1 else 1 - p[arm])
        values = np.sort(Y[(T == arm) & (S == s)])
        ends[arm] = (_low_mean(values, share), _low_mean(values[::-1], share))
    low, high = ends[1][0] - ends[0][1], ends[1][1] - ends[0][0]
    assert bounds.lower_ == pytest.approx(low, abs=1e-10)
    assert bounds.upper_ == pytest.approx(high, abs=1e-10)
    assert bounds.stratum_ == stratum


@pytest.mark.parametrize(("monotonicity", "stratum"), CASES)
def test_bounds_contain_the_truth_when_principal_ignorability_fails(monotonicity, stratum):
    data = make_intermediate(20000, stratum=stratum, monotonicity=monotonicity, random_state=3,
                             **VIOLATED)  # fmt: skip
    bounds = _bounds(data, stratum, monotonicity, X=data.X)
    low, high = bounds.conf_int()
    assert low <= data.true_effect <= high
    assert bounds.lower_ < data.true_effect < bounds.upper_
    point = ps.MultiplyRobust(stratum=stratum, monotonicity=monotonicity).fit(
        data.X, data.y, treatment=data.treatment, intermediate=data.intermediate)
    # The point estimate under principal ignorability misses the truth here.
    assert abs(point.effect_ - data.true_effect) > 4 * point.std_error_
    table = bounds.summary()
    assert table.index[0].startswith(stratum.replace("_", "-"))
    assert "latent" in " ".join(table.attrs["notes"])


def test_missing_data_at_random_and_the_refusals():
    data = make_intermediate(20000, stratum="protected", random_state=5,
                             follow_up=(0.85, 0.6), response=(0.8, -0.7), **VIOLATED)  # fmt: skip
    bounds = _bounds(data, "complier", "increasing", X=data.X, missing="at_random")
    assert bounds.lower_ < data.true_effect < bounds.upper_
    with pytest.raises(ValueError, match="`quantiles` is not available yet with `stratum`"):
        _bounds(data, "complier", "increasing", quantiles=[0.5])
    truncated = ps.datasets.make_truncation(500, random_state=0)
    with pytest.raises(ValueError, match="needs the outcomes of those units"):
        ps.TrimmingBounds(stratum="complier").fit(
            truncated.X, truncated.y, treatment=truncated.treatment, survival=truncated.survival)


@pytest.mark.slow
def test_standard_errors_of_the_bounds_match_monte_carlo_spread():
    # Source: Monte Carlo over 80 simulated trials (the complier bounds, with covariates).
    lows, highs, se_low, se_high = [], [], [], []
    for seed in range(80):
        data = make_intermediate(2000, stratum="protected", random_state=300 + seed, **VIOLATED)
        bounds = _bounds(data, "protected", "increasing", X=data.X)
        lows.append(bounds.lower_)
        highs.append(bounds.upper_)
        se_low.append(bounds.std_error_lower_)
        se_high.append(bounds.std_error_upper_)
    assert np.mean(se_low) == pytest.approx(np.std(lows, ddof=1), rel=0.25)
    assert np.mean(se_high) == pytest.approx(np.std(highs, ddof=1), rel=0.25)
