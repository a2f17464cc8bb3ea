"""The exact harmed-ratio path and the affine pi_difference_doomed path (issue 24) give the
answers of direct evaluation.

Reference: the direct formulas (``adjusted_effect``: one full pass over the rows per value, the
principal scores clipped row by row as in ``estimands/_setting.py``) with the standard error of
``influence_std_error``, at many values of ``harmed_ratio``; and, for the clipped rows, the
direct formula's own test ``(p_p - xi p_m) / (1 - xi) < 0`` counted row by row.
"""

import gc
import warnings
import weakref
from types import SimpleNamespace

import numpy as np
import pytest

import pscore_strata as ps
from pscore_strata.assumptions import _paths
from pscore_strata.assumptions._harmed import HarmedLine
from pscore_strata.assumptions._sensitivity import _PATHS, adjusted_effect, sensitivity_path
from pscore_strata.datasets import make_truncation
from pscore_strata.inference import influence_std_error

# Values from the null to the top of tipping_point's search range, the report's grid among them.
XIS = np.unique(np.r_[np.linspace(0.001, 0.999, 61), np.round(np.arange(0.05, 0.951, 0.05), 2)])


def _direct(est, xi):
    effect, influence, clipped = adjusted_effect(est, harmed_ratio=xi)
    data = est.training_data_
    return effect, influence_std_error(influence, data.sample_weight, data.groups), clipped


def _compare(est, xis=XIS, reference=_direct):
    path = sensitivity_path(est)
    n = est.training_data_.n_samples
    for xi in xis:
        fast = path.along_harmed(float(xi))
        assert fast is not None
        effect, se, clipped = reference(est, float(xi))
        assert fast[2] == clipped
        if np.isnan(effect):
            assert np.isnan(fast[0]) and np.isnan(fast[1])
            continue
        assert fast[0] == pytest.approx(effect, rel=1e-12, abs=1e-12 * se)
        if clipped <= 0.9 * n or n - clipped <= _paths.EXPLICIT_ROWS:
            assert fast[1] == pytest.approx(se, rel=1e-10, abs=1e-12 * est.std_error_)
        # else: few rows left and summed as a quadratic form (large data only), whose terms
        # cancel to the small variance: checked at 500,000 rows to 1e-14 by hand (issue 24).


@pytest.fixture(params=["row by row when few rows are left", "always as a quadratic form"])
def explicit_rows(request, monkeypatch):
    """The variance of the few-rows-left settings both ways (small data: every setting)."""
    if request.param.startswith("always"):
        monkeypatch.setattr(_paths, "EXPLICIT_ROWS", 0)


@pytest.fixture(scope="module")
def data():
    d = make_truncation(2500, effect=0.6, random_state=7)
    d.y_positive = d.y + 8.0
    return d


@pytest.mark.parametrize("monotonicity", ["increasing", "decreasing"])
@pytest.mark.parametrize("scale", ["difference", "ratio"])
def test_harmed_path_matches_direct_formulas(data, monotonicity, scale, explicit_rows):
    y = data.y if scale == "difference" else data.y_positive
    est = ps.MultiplyRobust(scale=scale, monotonicity=monotonicity).fit(
        data.X, y, treatment=data.treatment, survival=data.survival
    )
    _compare(est)


def test_harmed_path_odds_ratio_and_weights(explicit_rows):
    d = make_truncation(2000, outcome="binary", random_state=3)
    weights = np.random.default_rng(0).uniform(0.5, 2.0, d.y.size)
    est = ps.MultiplyRobust(scale="odds_ratio").fit(
        d.X, d.y, treatment=d.treatment, survival=d.survival, sample_weight=weights
    )
    _compare(est)


def _direct_repeats(est, xi):
    """Each repeat's direct formulas, combined by medians as the estimator combines them."""
    from pscore_strata.assumptions._sensitivity import _adjusted
    from pscore_strata.estimands import METHODS, Setting
    from pscore_strata.estimators._repeats import median_aggregate

    effects, errors, most = [], [], 0
    for fit in est._repeat_fits:
        effect, influence, clipped = _adjusted(METHODS["robust"], est, fit, Setting(0.0, None, xi))
        effects.append(effect)
        errors.append(influence_std_error(influence))
        most = max(most, clipped)
    effect, se = median_aggregate(effects, errors)
    return float(effect), float(se), most


def test_harmed_path_cross_fitted_repeats(data, explicit_rows):
    est = ps.MultiplyRobust(n_folds=2, n_repeats=3, random_state=0).fit(
        data.X, data.y, treatment=data.treatment, survival=data.survival
    )
    _compare(est, XIS[::4], reference=_direct_repeats)


def test_harmed_path_missing_at_random(data, explicit_rows):
    rng = np.random.default_rng(5)
    survival = data.survival.astype(float)
    y = data.y.copy()
    survival[rng.random(y.size) < 0.05] = np.nan
    y[(survival != 1) | (rng.random(y.size) < 0.1)] = np.nan
    est = ps.MultiplyRobust(missing="at_random", random_state=0).fit(
        data.X, y, treatment=data.treatment, survival=survival
    )
    _compare(est, XIS[::3])


def test_grid_and_tipping_point_use_it(data):
    est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                  survival=data.survival)  # fmt: skip
    grid = ps.sensitivity_grid(est, harmed_ratio=[0.0, 0.1, 0.3, 0.5])
    assert grid["effect"].iloc[0] == est.effect_
    for _, row in grid.iloc[1:].iterrows():
        effect, se, clipped = _direct(est, row["harmed_ratio"])
        assert row["effect"] == pytest.approx(effect, rel=1e-12)
        assert row["std_error"] == pytest.approx(se, rel=1e-10)
        assert row["n_rows_clipped"] == clipped


def test_clipped_rows_follow_the_direct_test_at_ties():
    """Rows whose ratio p_p / p_m equals xi, or lies within rounding of it."""
    rng = np.random.default_rng(1)
    p_m = rng.uniform(0.05, 1.0, 4000)
    xis = np.array([0.1, 0.25, 1 / 3, 0.5, 0.7, 0.9])
    p_p = p_m * rng.uniform(0.0, 1.0, p_m.size)
    # Exact and near-exact ties with the xis, zero scores and zero mixed-arm probabilities.
    p_p[:600] = np.repeat(xis, 100) * p_m[:600]
    p_p[600:1200] = np.nextafter(p_p[:600], np.where(np.arange(600) % 2, 2.0, -1.0))
    p_p[1200:1300] = 0.0
    p_m[1300:1350], p_p[1300:1350] = 0.0, 0.0
    view = SimpleNamespace(p_mixed=p_m, p_pure=p_p)
    ones = np.ones(p_m.size)
    terms = {role: (ones, ones) for role in ("e", "mixed", "pure")}
    line = HarmedLine(view, {**terms, "prefix": None, "n_low": 0}, ones)
    assert line.available
    checked = 0
    for xi in np.r_[xis, np.nextafter(xis, 0), np.nextafter(xis, 1), 0.05, 0.999]:
        direct = int(np.count_nonzero((p_p - xi * p_m) / (1 - xi) < 0))
        found = line.n_clipped(xi)
        if found is not None:  # None: evaluated directly instead
            assert found == direct
            checked += 1
    assert checked >= 12
    # So small an xi that xi p_m could underflow: left to the direct formulas.
    assert line.n_clipped(1e-300) is None
    assert line.n_clipped(1e-200) == int(np.count_nonzero(p_p < 1e-200 * p_m))


def test_degenerate_probabilities_leave_the_path_unavailable():
    p_m = np.array([0.5, 1e-310, 0.3])
    view = SimpleNamespace(p_mixed=p_m, p_pure=np.array([0.1, 0.0, 0.2]))
    ones = np.ones(3)
    terms = {role: (ones, ones) for role in ("e", "mixed", "pure")}
    line = HarmedLine(view, {**terms, "prefix": None, "n_low": 0}, ones)
    assert not line.available


def test_other_methods_evaluate_directly(data):
    est = ps.OutcomeRegression().fit(data.X, data.y, treatment=data.treatment,
                                     survival=data.survival)  # fmt: skip
    assert sensitivity_path(est).along_harmed(0.3) is None
    effect, se, clipped = _direct(est, 0.3)
    row = ps.sensitivity_grid(est, harmed_ratio=0.3).iloc[0]
    assert row["effect"] == pytest.approx(effect, rel=1e-12)
    assert row["std_error"] == pytest.approx(se, rel=1e-10)


@pytest.mark.parametrize("n_clusters", [5, 40, 900, 2500])
def test_harmed_path_with_clusters(data, n_clusters, explicit_rows):
    # Reference: influence_std_error of the direct formulas' influence values, summed within
    # clusters (few, many, and about one row each).
    groups = np.random.default_rng(n_clusters).integers(0, n_clusters, data.y.size)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # few clusters
        est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                      survival=data.survival, groups=groups)  # fmt: skip
    assert sensitivity_path(est).along_harmed(0.3) is not None
    _compare(est, XIS[::2])


def test_path_is_kept_per_fit_and_goes_with_the_estimator(data):
    est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                  survival=data.survival)  # fmt: skip
    path = sensitivity_path(est)
    assert sensitivity_path(est) is path
    est.set_params(scale="ratio")
    assert sensitivity_path(est) is not path
    est.set_params(scale="difference")
    est.fit(data.X, data.y + 1.0, treatment=data.treatment, survival=data.survival)
    refit = sensitivity_path(est)
    assert refit is not path
    assert ps.sensitivity_grid(est, harmed_ratio=0.2)["effect"].iloc[0] == pytest.approx(
        _direct(est, 0.2)[0], rel=1e-12)  # fmt: skip
    # The cache does not keep the estimator (nor its arrays) alive.
    alive = weakref.ref(est)
    count = len(_PATHS)
    del est, path, refit
    gc.collect()
    assert alive() is None
    assert len(_PATHS) < count


# -- the helped stratum's harmed-ratio path -------------------------------------------------


@pytest.mark.parametrize(("monotonicity", "stratum"), [("increasing", "protected"),
                                                       ("decreasing", "harmed")])  # fmt: skip
def test_helped_stratum_harmed_path_matches_direct_formulas(monotonicity, stratum,
                                                            explicit_rows):  # fmt: skip
    from pscore_strata.datasets import make_intermediate

    d = make_intermediate(3000, stratum=stratum, monotonicity=monotonicity, random_state=8)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = ps.MultiplyRobust(stratum=stratum, monotonicity=monotonicity).fit(
            d.X, d.y, treatment=d.treatment, intermediate=d.intermediate)  # fmt: skip
    assert sensitivity_path(est).along_harmed(0.3) is not None
    _compare(est)


def test_doomed_stratum_and_near_ties_evaluate_directly():
    from pscore_strata.datasets import make_intermediate

    d = make_intermediate(1500, stratum="doomed", random_state=8)
    est = ps.MultiplyRobust(stratum="doomed").fit(d.X, d.y, treatment=d.treatment,
                                                   intermediate=d.intermediate)  # fmt: skip
    assert sensitivity_path(est).along_harmed(0.3) is None
    row = ps.sensitivity_grid(est, harmed_ratio=0.3).iloc[0]
    assert row["effect"] == pytest.approx(_direct(est, 0.3)[0], rel=1e-12)
    # Rows whose two survival probabilities tie: the direct formula's clipping of their helped
    # score is decided by rounding, so no exact path.
    from dataclasses import replace

    from pscore_strata.estimands._formulas import robust_harmed_terms

    d = make_intermediate(1500, stratum="protected", random_state=8)
    est = ps.MultiplyRobust(stratum="protected").fit(d.X, d.y, treatment=d.treatment,
                                                      intermediate=d.intermediate)  # fmt: skip
    view = sensitivity_path(est).views[0]
    tied = np.arange(view.p_pure.size) < 10
    assert robust_harmed_terms(replace(view, p_pure=np.where(tied, view.p_mixed,
                                                             view.p_pure))) is None  # fmt: skip
    apart = replace(view, p_pure=np.where(tied, view.p_mixed * (1 - 1e-6), view.p_pure))
    assert robust_harmed_terms(apart) is not None


# -- the affine path in pi_difference_doomed ------------------------------------------------


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.OutcomeRegression,
                                 ps.MultiplyRobust])  # fmt: skip
@pytest.mark.parametrize(("monotonicity", "stratum"), [
    ("increasing", "protected"), ("increasing", "doomed"), ("decreasing", "harmed"),
])  # fmt: skip
def test_doomed_difference_path_matches_direct_formulas(cls, monotonicity, stratum):
    # Reference: the direct formulas at each value (adjusted_effect, one pass per value).
    from pscore_strata.datasets import make_intermediate

    d = make_intermediate(2000, stratum=stratum, monotonicity=monotonicity,
                          pi_difference_doomed=0.7, random_state=11)  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = cls(stratum=stratum, monotonicity=monotonicity).fit(
            d.X, d.y, treatment=d.treatment, intermediate=d.intermediate)  # fmt: skip
    values = [-3.0, -0.7, 0.25, 1.0, 2.5]
    for xi in (0.0, 0.2):
        grid = ps.sensitivity_grid(est, pi_difference_doomed=values, harmed_ratio=[xi])
        for _, row in grid.iterrows():
            effect, influence, clipped = adjusted_effect(
                est, pi_difference_doomed=row["pi_difference_doomed"], harmed_ratio=xi)
            se = influence_std_error(influence, est.training_data_.sample_weight)
            assert row["effect"] == pytest.approx(effect, rel=1e-11, abs=1e-12 * se)
            assert row["std_error"] == pytest.approx(se, rel=1e-9)
            assert row["n_rows_clipped"] == clipped
