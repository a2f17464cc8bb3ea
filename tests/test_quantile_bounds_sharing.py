"""Quantile bounds from fitted mean bounds (no refit), and the report's quantile bounds.

External references: a ``TrimmingBounds(quantiles=...)`` fit of the same data (the quantile
bounds must not depend on whether they are computed at fit or later), and the trimming written
out with numpy (each row keeps the part of its weight below the cut, rows ranked by a sort of
``-y`` for the highest share), with heavily tied outcomes.
"""

import json

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata import report
from pscore_strata.assumptions._quantile_bounds import quantile_bounds_of, trimmed_mixtures
from pscore_strata.datasets import make_truncation

U = (0.1, 0.25, 0.5, 0.75, 0.9)
COLUMNS = ["quantile", "lower", "upper", "std_error_lower", "std_error_upper", "ci_low", "ci_high"]


def _fit(data, y=None, **kwargs):
    fit_params = kwargs.pop("fit_params", {})
    return ps.TrimmingBounds(**kwargs).fit(data.X, data.y if y is None else y,
                                           treatment=data.treatment, survival=data.survival,
                                           **fit_params)  # fmt: skip


@pytest.mark.parametrize("setting", ["plain", "score", "weights", "groups", "decreasing"])
def test_quantile_bounds_of_fitted_mean_bounds_equal_a_fit_with_quantiles(setting):
    monotonicity = "decreasing" if setting == "decreasing" else "increasing"
    data = make_truncation(2500, random_state=11, monotonicity=monotonicity)
    rng = np.random.default_rng(3)
    kwargs = {"monotonicity": monotonicity, "strata": "score" if setting == "score" else "none"}
    if setting == "weights":
        kwargs["fit_params"] = {"sample_weight": rng.uniform(0.5, 2.0, data.y.size)}
    if setting == "groups":
        kwargs["fit_params"] = {"groups": rng.integers(0, 40, data.y.size)}
    reference = _fit(data, quantiles=U, **dict(kwargs)).quantile_bounds_
    bounds = _fit(data, **kwargs)
    assert bounds.quantile_bounds_ is None
    table = quantile_bounds_of(bounds, U)
    pd.testing.assert_frame_equal(table[COLUMNS], reference[COLUMNS], rtol=1e-12, atol=0)


def test_quantile_bounds_of_refuses_after_another_fit():
    data = make_truncation(1500, random_state=12)
    first = _fit(data)
    _fit(data)  # another fit: the first one's inputs are no longer held
    assert quantile_bounds_of(first, U) is None


def test_trimmed_mixtures_with_ties_equal_the_trimming_written_out():
    # Outcomes rounded to 0.5: many ties straddle the cuts.
    data = make_truncation(3000, random_state=13)
    y = np.round(data.y * 2) / 2
    checked = ps._validation.check_truncation_data(data.X, y, data.treatment, data.survival)
    from pscore_strata.estimands import _view
    from pscore_strata.nuisance._fit import fit_nuisance

    o = _view.orient(checked, fit_nuisance(checked), "increasing")
    masses = trimmed_mixtures(o, np.zeros(y.size, dtype=int))
    # Written out: one cell, the mixed arm's survivors weighted by 1 / pi.
    mixed = (data.treatment == 1) & (data.survival == 1)
    pure = (data.treatment == 0) & (data.survival == 1)
    pi = o.pi
    n_m, n_p = np.sum(data.treatment / pi), np.sum((1 - data.treatment) / (1 - pi))
    q = (np.sum(pure / (1 - pi)) / n_p) / (np.sum(mixed / pi) / n_m)
    weight = np.where(mixed, 1 / pi, 0.0)
    for key, ranking in (("lower", y), ("upper", -y)):
        rows = np.flatnonzero(mixed)
        rows = rows[np.argsort(ranking[rows], kind="stable")]
        w = weight[rows]
        kept = np.clip(q * w.sum() - (np.cumsum(w) - w), 0.0, w)
        expected = np.zeros(y.size)
        expected[rows] = kept / kept.sum()
        np.testing.assert_allclose(masses[key], expected, rtol=1e-12, atol=1e-15)
    expected_pure = np.where(pure, 1 / (1 - pi), 0.0)
    np.testing.assert_allclose(masses["pure"], expected_pure / expected_pure.sum(), rtol=1e-12)


def test_report_quantile_bounds_equal_trimming_bounds_with_quantiles(tmp_path):
    # The report takes them from its mean bounds' fit: the same numbers as a fit of its own.
    data = make_truncation(1500, n_features=3, random_state=5)
    frame = pd.DataFrame(data.X[:, :3], columns=["x1", "x2", "x3"])
    frame["score"], frame["treated"], frame["alive"] = np.exp(0.5 * data.y), data.treatment, \
        data.survival  # fmt: skip
    roles = report.ColumnRoles(outcome="score", treatment="treated", survival="alive",
                               covariates=("x1", "x2", "x3"))  # fmt: skip
    report.analyze_frame(frame, roles, report.AnalysisOptions(), out_dir=tmp_path)
    record = json.loads((tmp_path / "results.json").read_text())["distributions"]
    bounds = ps.TrimmingBounds(quantiles=U).fit(frame[["x1", "x2", "x3"]], frame["score"],
                                                treatment=frame["treated"],
                                                survival=frame["alive"])  # fmt: skip
    table = bounds.quantile_bounds_
    for key in ("lower", "upper", "std_error_lower", "std_error_upper", "ci_low", "ci_high"):
        np.testing.assert_allclose([row[key] for row in record["quantile_bounds"]], table[key],
                                   rtol=1e-9)  # fmt: skip


def test_other_fit_classes_get_their_own_correction_per_quantile():
    # A fit whose class is not the plain GLM one takes the per-column path (its own
    # ``correction``); for a GLM fit in disguise both paths must agree.
    from dataclasses import replace

    from pscore_strata.assumptions._quantile_bounds import quantile_bounds
    from pscore_strata.estimands import _view
    from pscore_strata.nuisance._fit import fit_nuisance
    from pscore_strata.nuisance._models import ParametricFit

    class Disguised(ParametricFit):
        pass

    data = make_truncation(2000, random_state=14)
    checked = ps._validation.check_truncation_data(data.X, data.y, data.treatment,
                                                   data.survival)  # fmt: skip
    o = _view.orient(checked, fit_nuisance(checked), "increasing")
    labels = np.zeros(data.y.size, dtype=int)
    fit = o.parametric["pi"]
    disguised = Disguised(**{k: getattr(fit, k) for k in fit.__dataclass_fields__})
    other = replace(o, parametric={**o.parametric, "pi": disguised})
    _, expected = quantile_bounds(o, labels, U)
    _, influence = quantile_bounds(other, labels, U)
    for key in ("lower", "upper"):
        np.testing.assert_allclose(influence[key], expected[key], rtol=1e-10, atol=1e-12)
