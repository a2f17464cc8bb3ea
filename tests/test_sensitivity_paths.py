"""The cheap sensitivity path (issue 12) gives the answers of direct evaluation.

Reference: the direct formulas of ``adjusted_effect`` (one full pass per value, as before the
change) with the same bracket-and-Brent search, written out here.
"""

import numpy as np
import pytest
from scipy import optimize

import pscore_strata as ps
from pscore_strata.assumptions._sensitivity import adjusted_effect
from pscore_strata.assumptions._tipping import _path
from pscore_strata.datasets import make_truncation
from pscore_strata.inference._standard_errors import influence_std_error, normal_interval

NULL = {"pi_difference": 0.0, "pi_ratio": 1.0, "harmed_ratio": 0.0}


def _direct(est, setting):
    effect, influence, _ = adjusted_effect(est, **setting)
    data = est.training_data_
    return effect, influence_std_error(influence, data.sample_weight, data.groups)


def _reference_tipping(est, parameter, level=0.95):
    log_scale = est.scale != "difference"
    null_effect = 0.0 if est.scale == "difference" else 1.0
    sign = np.sign(est.effect_ - null_effect)

    def distance(value):
        effect, se = _direct(est, {parameter: value})
        low, high = normal_interval(effect, se, level, log_scale)
        return low - null_effect if sign > 0 else null_effect - high

    spread = float(np.nanstd(est.training_data_.outcome[est.training_data_.survival == 1]))
    search = {"pi_difference": (-20 * spread, 20 * spread), "pi_ratio": (1 / 50, 50.0),
              "harmed_ratio": (0.0, 0.999)}[parameter]  # fmt: skip
    null, found = NULL[parameter], []
    for end in search:
        if end == null:
            continue
        previous = null
        for point in _path(null, end, parameter):
            if distance(point) <= 0:
                found.append(optimize.brentq(distance, previous, point, xtol=1e-10))
                break
            previous = point
    if parameter == "pi_ratio":
        return min(found, key=lambda v: abs(np.log(v)))
    return min(found, key=lambda v: abs(v - null))


@pytest.fixture(scope="module")
def data():
    d = make_truncation(1500, effect=0.6, random_state=4)
    d.y_positive = d.y + 8.0
    return d


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.OutcomeRegression,
                                 ps.MultiplyRobust])  # fmt: skip
@pytest.mark.parametrize("parameter", ["pi_difference", "harmed_ratio", "pi_ratio"])
def test_tipping_point_matches_direct_search(data, cls, parameter):
    est = cls().fit(data.X, data.y_positive if parameter == "pi_ratio" else data.y,
                    treatment=data.treatment, survival=data.survival)  # fmt: skip
    reference = _reference_tipping(est, parameter)
    clipped = ps.sensitivity_grid(est, **{parameter: reference})["n_rows_clipped"].iloc[0]
    if clipped > 0.5 * data.y.size:
        # Most rows' principal scores are clipped at the crossing: "not reached" (issue 14).
        assert parameter == "harmed_ratio"
        with pytest.warns(UserWarning, match="not reached.*clipped"):
            assert np.isnan(ps.tipping_point(est, parameter))
        return
    assert ps.tipping_point(est, parameter) == pytest.approx(reference, abs=1e-8)


@pytest.mark.parametrize("scale", ["difference", "ratio"])
def test_grid_matches_direct_evaluation_with_clusters(data, scale):
    groups = np.arange(data.y.size) % 50
    est = ps.PrincipalScoreWeighting(scale=scale).fit(
        data.X, data.y_positive, treatment=data.treatment, survival=data.survival, groups=groups
    )
    deltas = np.linspace(-2, 2, 9)
    grid = ps.sensitivity_grid(est, pi_difference=deltas, harmed_ratio=[0.0, 0.3])
    for _, row in grid.iterrows():
        setting = {"pi_difference": row["pi_difference"], "harmed_ratio": row["harmed_ratio"]}
        effect, se = _direct(est, setting)
        assert row["effect"] == pytest.approx(effect, rel=1e-10, abs=1e-12)
        assert row["std_error"] == pytest.approx(se, rel=1e-9)


def test_cross_fitted_repeats_path(data):
    est = ps.MultiplyRobust(n_folds=2, n_repeats=3, random_state=0).fit(
        data.X, data.y, treatment=data.treatment, survival=data.survival
    )
    grid = ps.sensitivity_grid(est, pi_difference=[0.0, 0.7])
    assert grid["effect"].iloc[0] == est.effect_
    assert grid["std_error"].iloc[0] == pytest.approx(est.std_error_, rel=1e-9)
    from pscore_strata.estimators._repeats import median_aggregate

    effects, errors = [], []
    for fit in est._repeat_fits:
        from pscore_strata.assumptions._sensitivity import _adjusted
        from pscore_strata.estimands import METHODS, Setting

        effect, influence, _ = _adjusted(METHODS["robust"], est, fit, Setting(0.7, None, 0.0))
        effects.append(effect)
        errors.append(influence_std_error(influence))
    effect, se = median_aggregate(effects, errors)
    assert grid["effect"].iloc[1] == pytest.approx(effect, rel=1e-10)
    assert grid["std_error"].iloc[1] == pytest.approx(se, rel=1e-9)
