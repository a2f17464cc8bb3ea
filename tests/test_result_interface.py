"""One interface for results: ``identification`` tells a point estimate from bounds, and
``conf_int(level)`` returns ``(low, high)`` from every estimator, the bounds and every bootstrap
result (issue 22, point 4)."""

import warnings

import numpy as np
import pytest
from conftest import ESTIMATORS
from scipy import optimize, stats

import pscore_strata as ps
from pscore_strata._results import identification_of
from pscore_strata.datasets import make_truncation

DATA = make_truncation(1200, n_features=2, random_state=12)
FIT = dict(treatment=DATA.treatment, survival=DATA.survival)


@pytest.fixture(autouse=True)
def _quiet():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        yield


def _is_pair(interval):
    return (isinstance(interval, tuple) and len(interval) == 2
            and all(isinstance(end, float) for end in interval))  # fmt: skip


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_point_estimators_say_point(cls):
    assert cls.identification == "point"
    est = cls(n_bootstrap=0).fit(DATA.X, DATA.y, **FIT)
    assert est.identification == "point" and identification_of(est) == "point"
    for level in (0.9, 0.95):
        assert _is_pair(est.conf_int(level))


def test_bounds_say_bounds_and_give_the_same_shape():
    assert ps.TrimmingBounds.identification == "bounds"
    bounds = ps.TrimmingBounds().fit(DATA.X, DATA.y, **FIT)
    assert bounds.identification == "bounds" and identification_of(bounds) == "bounds"
    for coverage in ("effect", "identified_set"):
        assert _is_pair(bounds.conf_int(0.9, coverage=coverage))


@pytest.mark.parametrize("template, kind", [(ps.PrincipalScoreWeighting(), "point"),
                                            (ps.TrimmingBounds(), "bounds")])  # fmt: skip
@pytest.mark.parametrize("interval", ["percentile", "bca", "normal"])
def test_bootstrap_results_say_what_they_bootstrapped(template, kind, interval):
    result = ps.bootstrap(template, DATA.X, DATA.y, **FIT, method="multiplier",
                          n_resamples=300, random_state=0)  # fmt: skip
    assert result.identification == kind and identification_of(result) == kind
    assert _is_pair(result.conf_int(0.95, kind=interval))
    table = result.statistic_intervals(0.95, kind=interval)
    assert list(table.columns) == ["low", "high"]
    assert list(table.index) == (["effect"] if kind == "point" else ["lower", "upper"])
    if kind == "point":
        assert result.conf_int(0.95, kind=interval) == tuple(table.loc["effect"])


def test_bootstrap_interval_for_bounds_is_imbens_manski_with_bootstrap_errors():
    result = ps.bootstrap(ps.TrimmingBounds(), DATA.X, DATA.y, **FIT, method="multiplier",
                          n_resamples=400, random_state=1)  # fmt: skip
    lower, upper = result.estimate["lower"], result.estimate["upper"]
    se = result.replicates.std(ddof=1)
    # Imbens & Manski (2004), eq. for C_n: Phi(c + width / max(se)) - Phi(-c) = level, solved
    # here directly with scipy.
    width, scale = upper - lower, max(se["lower"], se["upper"])
    c = optimize.brentq(lambda c: stats.norm.cdf(c + width / scale) - stats.norm.cdf(-c) - 0.95,
                        0.0, 5.0, xtol=1e-12)  # fmt: skip
    low, high = result.conf_int(0.95, kind="normal")
    assert low == pytest.approx(lower - c * se["lower"], abs=1e-9)
    assert high == pytest.approx(upper + c * se["upper"], abs=1e-9)
    # The identified-set interval: each bound's own two-sided percentile interval, by numpy.
    set_low, set_high = result.conf_int(0.95, coverage="identified_set")
    assert set_low == pytest.approx(np.quantile(result.replicates["lower"], 0.025))
    assert set_high == pytest.approx(np.quantile(result.replicates["upper"], 0.975))
    effect_low, effect_high = result.conf_int(0.95)
    assert set_low <= effect_low <= lower <= upper <= effect_high <= set_high
    # Close to the analytic interval of the fitted bounds (same formula, analytic errors; the
    # bootstrap SD of 400 draws is itself off by about 3.5%, times c ~ 1.7).
    fitted = ps.TrimmingBounds().fit(DATA.X, DATA.y, **FIT)
    np.testing.assert_allclose((low, high), fitted.conf_int(0.95), atol=0.2 * scale)
    with pytest.raises(ValueError, match="`coverage`"):
        result.conf_int(coverage="everything")


def test_bootstrap_interval_for_bounds_covers_the_identified_set_at_the_level():
    # Simulated truth: the population bounds of the scenario (10^6 potential outcomes,
    # datasets/_identified.py). Every point of the set, the ends included, must be covered
    # with probability ``level`` by the effect interval (Imbens & Manski 2004): at the ends of
    # a wide set, about exactly; the whole set by the identified-set interval. Measured:
    # 93.7% (lower end), 96.0% (upper end), 94.0% (whole set).
    true_lower, true_upper = ps.datasets.SCENARIOS["linear"].bounds(design="randomized")
    ends, whole, n = np.zeros(2), 0, 300
    for r in range(n):
        data = ps.datasets.make_scenario("linear", 600, design="randomized",
                                         random_state=500 + r)  # fmt: skip
        result = ps.bootstrap(ps.TrimmingBounds(), None, data.y, treatment=data.treatment,
                              survival=data.survival, method="multiplier", n_resamples=300,
                              random_state=r)  # fmt: skip
        low, high = result.conf_int(0.95)
        ends += [low <= true_lower <= high, low <= true_upper <= high]
        set_low, set_high = result.conf_int(0.95, coverage="identified_set")
        whole += set_low <= true_lower and true_upper <= set_high
    # 300 datasets: a coverage of 95% has binomial SE 1.3 points.
    assert np.all((ends / n >= 0.92) & (ends / n <= 0.985)), ends / n
    assert whole / n >= 0.92, whole / n


class _Outside:
    """An estimator from outside the package that declares nothing."""


def test_outside_estimators_are_read_off_their_attributes():
    point, bounds, neither = _Outside(), _Outside(), _Outside()
    point.effect_ = 1.0
    bounds.lower_, bounds.upper_ = 0.0, 1.0
    assert identification_of(point) == "point"
    assert identification_of(bounds) == "bounds"
    assert identification_of(neither) is None
    declared = _Outside()
    declared.identification, declared.effect_ = "sideways", 1.0
    with pytest.raises(ValueError, match="identification must be 'point' or 'bounds'"):
        identification_of(declared)
