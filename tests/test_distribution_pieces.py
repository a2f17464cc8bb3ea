"""Pieces of the distribution paths computed in bulk, against their one-at-a-time definitions.

External references: the scalar interpolation rule (``ConditionalCDF.position``) at every
value, the explicit influence columns of an expansion, and
``inference._standard_errors.influence_std_error`` (the library's standard-error formula) on
explicit quantile influence values.
"""

import numpy as np
import pytest

import pscore_strata as ps
from pscore_strata.distributions._conditional import ConditionalCDF
from pscore_strata.distributions._paths import cdf_path, prepare
from pscore_strata.distributions._quantiles import _std_errors
from pscore_strata.inference._standard_errors import influence_std_error


@pytest.mark.parametrize("discrete", [False, True])
def test_weights_equal_position_at_every_value(discrete):
    rng = np.random.default_rng(0)
    if discrete:
        g, low, high = np.arange(5.0), 0.0, 5.0
        values = np.concatenate([np.arange(-1, 7.0), rng.uniform(-1, 6, 300)])
    else:
        g = np.sort(rng.normal(size=19))
        low, high = g[0] - 1, g[-1] + 1
        values = np.concatenate([rng.normal(size=2000) * 2, g, [low, high, low - 1, high + 1]])
    c = ConditionalCDF(g, discrete, low, high, {}, None)
    coefficients, constants = c.weights(values)
    for t, value in enumerate(values):
        columns, weights, constant = c.position(value)
        expected = np.zeros(g.size)
        expected[columns] = weights
        assert np.array_equal(coefficients[:, t], expected) and constants[t] == constant


@pytest.fixture(scope="module")
def robust_path():
    data = ps.datasets.make_truncation(3000, random_state=21)
    est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                  survival=data.survival)  # fmt: skip
    prepared = prepare(est, data.X)
    return prepared, cdf_path(prepared, np.quantile(data.y[data.survival == 1], [0.2, 0.5, 0.7]))


def test_expansion_row_chunks_equal_the_explicit_columns(robust_path):
    _, path = robust_path
    expansion = path.influence_treated
    whole = expansion.columns([0, 2])
    parts = [expansion.columns([0, 2], slice(start, start + 700)) for start in range(0, 3000, 700)]
    np.testing.assert_allclose(np.vstack(parts), whole, rtol=1e-13, atol=1e-15)


def test_chunked_quantile_std_errors_equal_influence_std_error(robust_path):
    prepared, path = robust_path
    w = np.random.default_rng(4).uniform(0.5, 2.0, 3000)
    density = {"treated": np.array([0.3, 0.5]), "control": np.array([0.4, 0.2])}
    influence = {"treated": (path.influence_treated, np.array([0, 1])),
                 "control": (path.influence_control, np.array([1, 2]))}  # fmt: skip
    se, se_arm = _std_errors(influence, density, w)
    explicit = {arm: -expanded[:, columns] / density[arm]
                for arm, (expanded, columns) in influence.items()}  # fmt: skip
    for arm in ("treated", "control"):
        np.testing.assert_allclose(se_arm[arm], influence_std_error(explicit[arm], w), rtol=1e-12)
    expected = influence_std_error(explicit["treated"] - explicit["control"], w)
    np.testing.assert_allclose(se, expected, rtol=1e-12)


def test_empty_rows_gives_a_writable_array_of_the_shape():
    from pscore_strata.distributions._expansion import empty_rows

    out = empty_rows((1000, 7))
    out[:] = 1.5
    assert out.shape == (1000, 7) and out.dtype == float and np.all(out == 1.5)


def test_cross_in_row_chunks_equals_the_explicit_product(robust_path, monkeypatch):
    # Source: the explicit columns times the weighted base, summed over the rows.
    monkeypatch.setattr("pscore_strata.distributions._expansion._GRAM_ROWS", 700)
    _, path = robust_path
    expansion = path.influence_control
    rng = np.random.default_rng(7)
    factor, base = rng.normal(size=3000), rng.normal(size=(3000, 4))
    expected = (base * factor[:, None]).T @ expansion.columns()
    np.testing.assert_allclose(expansion.cross(factor, base), expected, rtol=1e-10, atol=1e-12)


def test_band_covariance_in_small_row_chunks_equals_the_explicit_one(robust_path, monkeypatch):
    # Source: C'C of the explicit contributions sqrt(n/(n-1)) (h_i E_i - mean), h = w / sum w.
    from pscore_strata.distributions._expansion import expansion_covariance

    monkeypatch.setattr("pscore_strata.distributions._expansion._GRAM_ROWS", 700)
    _, path = robust_path
    expansion = path.influence_treated
    w = np.random.default_rng(8).uniform(0.5, 2.0, 3000)
    contributions = expansion.columns() * (w / w.sum())[:, None]
    centered = contributions - contributions.mean(axis=0)
    expected = 3000 / 2999 * centered.T @ centered
    np.testing.assert_allclose(expansion_covariance(expansion, w), expected, rtol=0,
                               atol=1e-12 * np.abs(expected).max())  # fmt: skip


def test_column_std_errors_equal_influence_std_error():
    from pscore_strata.distributions._expansion import column_std_errors

    rng = np.random.default_rng(9)
    influence, w = rng.normal(size=(40_000, 3)) + 0.1, rng.uniform(0.5, 2.0, 40_000)
    np.testing.assert_allclose(column_std_errors(influence, w), influence_std_error(influence, w),
                               rtol=1e-12)  # fmt: skip


def test_curves_reused_by_a_path_without_influence_equal_a_fresh_one(robust_path):
    # The cached estimates of an earlier path (with influence values) at the same values.
    prepared, path = robust_path
    again = cdf_path(prepared, path.values, with_influence=False)
    assert again.treated is path.treated or np.array_equal(again.treated, path.treated)
    prepared.conditional.cache.clear()
    fresh = cdf_path(prepared, path.values, with_influence=False)
    np.testing.assert_array_equal(fresh.treated, path.treated)
    np.testing.assert_array_equal(fresh.control, path.control)


def test_default_values_are_numpy_unique_of_the_survivors():
    from pscore_strata.distributions._cdf import default_values

    data = ps.datasets.make_truncation(2000, random_state=22)
    y = np.round(data.y, 1)  # ties
    checked = ps._validation.check_truncation_data(data.X, y, data.treatment, data.survival)
    expected = np.unique(y[data.survival == 1])
    np.testing.assert_array_equal(default_values(checked, limit=10_000), expected)


def test_kept_curves_stay_bounded(robust_path):
    prepared, path = robust_path
    for shift in np.linspace(0, 1, 20):
        cdf_path(prepared, path.values + shift, with_influence=False)
    kept = [key for key in prepared.conditional.cache if key[0] == "curves"]
    assert 1 <= len(kept) <= 8
