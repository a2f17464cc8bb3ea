"""The fast distribution paths against the numbers of the per-value path they replaced.

Until issue 24 the always-survivor CDFs were computed by calling each estimator's formula once
per outcome value with ``Y`` replaced by ``1{Y <= v}`` (DESIGN.md section 5b), refitting the
conditional CDF models on every call. ``tests/data/distribution_reference.npz`` holds that
path's numbers on small data (recorded at main 1ebb971 by running this file as a script:
``python tests/test_distribution_reference.py --record``); the grid path, the cumulative sums
and the cached distribution regression must reproduce them to 1e-8 at every grid point.

The band's critical values are not compared with the recorded ones: the per-value path kept
values whose standard error was rounding noise (about 1e-17, where the CDF is pinned at 0 or 1)
in the sup-t statistic, so noise over noise moved its critical value (by up to 0.1 here). The
band now drops them; its covariance is checked against the explicit multiplier contributions
instead (``test_band_covariance_equals_explicit_contributions``).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

import pscore_strata as ps

REFERENCE = Path(__file__).parent / "data" / "distribution_reference.npz"
QUANTILES = (0.1, 0.25, 0.5, 0.75, 0.9)


def _data(n, seed, rounded=False, **kwargs):
    data = ps.datasets.make_truncation(n, n_features=3, random_state=seed, **kwargs)
    y = data.y
    if rounded:  # a score on a coarse scale: ties at every value
        y = np.round(y * 4) / 4
    return data, y


def _fit(estimator, data, y, weights=None, groups=None):
    return estimator.fit(data.X, y, treatment=data.treatment, survival=data.survival,
                         sample_weight=weights, groups=groups)  # fmt: skip


def _cases():
    """name -> (fitted estimator, X, kind) for every setting the reference covers."""
    cases = {}
    estimators = {
        "weighting": ps.PrincipalScoreWeighting,
        "regression": ps.OutcomeRegression,
        "robust": ps.MultiplyRobust,
    }
    small, y_small = _data(300, 1)  # fewer distinct survivor outcomes than the grid's limit
    large, y_large = _data(900, 2)  # more: the grid takes 200 evenly spaced ranks
    coarse, y_coarse = _data(600, 3, rounded=True)
    falling, y_falling = _data(500, 4, monotonicity="decreasing")
    rng = np.random.default_rng(5)
    weights = rng.uniform(0.5, 2.0, large.X.shape[0])
    groups = rng.integers(0, 60, large.X.shape[0])
    for name, cls in estimators.items():
        cases[f"{name}-small"] = (_fit(cls(), small, y_small), small.X, "continuous")
        cases[f"{name}-large"] = (_fit(cls(), large, y_large), large.X, "continuous")
        cases[f"{name}-coarse"] = (_fit(cls(), coarse, y_coarse), coarse.X, "continuous")
        cases[f"{name}-decreasing"] = (
            _fit(cls(monotonicity="decreasing"), falling, y_falling), falling.X, "continuous")
        cases[f"{name}-weighted"] = (_fit(cls(), large, y_large, weights, groups), large.X,
                                     "continuous")  # fmt: skip
    cases["robust-crossfit"] = (_fit(ps.MultiplyRobust(n_folds=2, random_state=0), large,
                                     y_large), large.X, "continuous")  # fmt: skip
    cases["weighting-stratum-model"] = (
        _fit(ps.PrincipalScoreWeighting(survival_model=ps.PrincipalScoreModel()), small, y_small),
        small.X, "continuous")  # fmt: skip
    ordinal, _ = _data(800, 6)
    y_ordinal = np.clip(np.round(ordinal.y), -1, 3)
    for name, cls in estimators.items():
        cases[f"{name}-ordinal"] = (_fit(cls(), ordinal, y_ordinal), ordinal.X, "ordinal")
    return cases


def _bounds_cases():
    data, y = _data(900, 2)
    out = {}
    for strata in ("none", "score"):
        bounds = ps.TrimmingBounds(quantiles=QUANTILES, strata=strata)
        out[f"bounds-{strata}"] = bounds.fit(data.X, y, treatment=data.treatment,
                                             survival=data.survival)  # fmt: skip
    return out


def compute(cases=None, bounds_cases=None):
    """Every number the reference holds, keyed ``case/quantity``."""
    cases = _cases() if cases is None else cases
    bounds_cases = _bounds_cases() if bounds_cases is None else bounds_cases
    out = {}
    for name, (est, X, kind) in cases.items():
        X = None if name.startswith("weighting") else X
        if kind == "ordinal":
            result = ps.ordinal_comparison(est, X=X)
            for column in ("treated", "control", "std_error_treated", "std_error_control"):
                out[f"{name}/levels_{column}"] = result.levels[column].to_numpy()
            out[f"{name}/probability"] = np.array([result.probability, result.std_error])
            continue
        frame = ps.survivor_distribution(est, X=X).to_frame()
        for column in ("value", "treated", "control", "treated_std_error", "control_std_error",
                       "naive_treated", "naive_control", "treated_band_low"):
            out[f"{name}/cdf_{column}"] = frame[column].to_numpy()
        table = ps.quantile_effects(est, QUANTILES, X=X)
        for column in ("treated", "control", "effect", "std_error", "density_treated",
                       "density_control"):
            out[f"{name}/quantile_{column}"] = table[column].to_numpy()
    for name, bounds in bounds_cases.items():
        table = bounds.quantile_bounds_
        for column in ("lower", "upper", "std_error_lower", "std_error_upper"):
            out[f"{name}/{column}"] = table[column].to_numpy()
    return out


@pytest.fixture(scope="module")
def current():
    return compute()


def test_reference_is_complete(current):
    reference = np.load(REFERENCE)
    assert sorted(reference.files) == sorted(current)


@pytest.mark.parametrize("quantity", sorted(np.load(REFERENCE).files) if REFERENCE.exists() else [])
def test_equals_the_per_value_path(current, quantity):
    # Source: the per-value path of main 1ebb971 (the estimators' formulas called once per value).
    if quantity.endswith("band_low"):
        pytest.skip("band critical values: see the module docstring")
    expected = np.load(REFERENCE)[quantity]
    np.testing.assert_allclose(current[quantity], expected, rtol=0, atol=1e-8, err_msg=quantity)


@pytest.mark.parametrize("name", ["weighting-weighted", "regression-small", "robust-decreasing"])
def test_band_covariance_equals_explicit_contributions(name):
    # Source: C'C of inference._resampling.multiplier_contributions on the explicit influence
    # matrix (rows x values), the covariance the Gaussian multiplier draws used before.
    from pscore_strata.distributions._cdf import _band_critical, default_values
    from pscore_strata.distributions._expansion import expansion_covariance
    from pscore_strata.distributions._paths import cdf_path, prepare
    from pscore_strata.inference._resampling import multiplier_contributions
    from pscore_strata.inference._standard_errors import influence_std_error

    est, X, _ = _cases()[name]
    prepared = prepare(est, X)
    data = prepared.data
    path = cdf_path(prepared, default_values(data))
    for influence in (path.influence_treated, path.influence_control):
        explicit = np.asarray(influence)
        contributions = multiplier_contributions(explicit, data.sample_weight, data.groups)
        expected = contributions.T @ contributions
        covariance = expansion_covariance(influence, data.sample_weight, data.groups)
        np.testing.assert_allclose(covariance, expected, rtol=0, atol=1e-12 * expected.max())
        se = influence_std_error(explicit, data.sample_weight, data.groups)
        np.testing.assert_allclose(np.sqrt(np.clip(np.diag(covariance), 0, None)), se, atol=1e-8)
        assert _band_critical(covariance, se, 0.95, 500, 0) == pytest.approx(
            _band_critical(expected, se, 0.95, 500, 0), rel=1e-6)


if __name__ == "__main__":
    if "--record" in sys.argv:
        REFERENCE.parent.mkdir(exist_ok=True)
        np.savez_compressed(REFERENCE, **compute())
        print(f"wrote {REFERENCE}")
