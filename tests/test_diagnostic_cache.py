"""Diagnostics are computed once per fitted estimator and reused (issue 12)."""

from unittest import mock

import numpy as np
import pandas as pd

import pscore_strata as ps
from pscore_strata.datasets import make_truncation
from pscore_strata.diagnostics import _monotonicity, _tables


def _fitted(data):
    return ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                   survival=data.survival)  # fmt: skip


def test_warnings_and_checks_computed_once_and_dropped_on_refit():
    data = make_truncation(800, random_state=2)
    est = _fitted(data)
    with mock.patch.object(_monotonicity, "_strata_labels", wraps=_monotonicity._strata_labels) \
            as labels:  # fmt: skip
        first = ps.diagnostics.diagnostic_warnings(est)
        for _ in range(3):
            est.summary()
            assert ps.diagnostics.diagnostic_warnings(est) == first
        # diagnostic_warnings reads the one monotonicity check's Bonferroni flag; computed once.
        assert labels.call_count == 1
        _fitted_again = est.fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
        ps.diagnostics.diagnostic_warnings(_fitted_again)
        assert labels.call_count == 2


def test_cached_tables_are_copies_and_follow_the_covariates():
    data = make_truncation(800, random_state=2)
    est = _fitted(data)
    X = pd.DataFrame(data.X, columns=[f"x{j}" for j in range(data.X.shape[1])])
    table = ps.diagnostics.balance_table(est, X)
    table.iloc[:, :] = np.nan
    again = ps.diagnostics.balance_table(est, X)
    assert np.isfinite(again["smd_treated_vs_control"]).all()
    pd.testing.assert_frame_equal(again, ps.diagnostics.balance_table(est, X.copy()))
    X.iloc[:, 0] += 1.0  # changed in place: a fresh table
    moved = ps.diagnostics.balance_table(est, X)
    assert not np.allclose(moved["mean_everyone"], again["mean_everyone"])
    with mock.patch.object(_tables, "balancing_weights", wraps=_tables.balancing_weights) as w:
        ps.diagnostics.weight_summary(est)
        ps.diagnostics.weight_summary(est)
        assert w.call_count == 1


def test_estimators_sharing_a_nuisance_fit_share_its_diagnostics():
    """One nuisance fit, three estimators (as in the report): each diagnostic is computed once,
    and every estimator gets what it would get from its own fit of the same models."""
    data = make_truncation(800, random_state=3)
    X = pd.DataFrame(data.X, columns=[f"x{j}" for j in range(data.X.shape[1])])
    first = _fitted(data)
    shared = [cls().fit(data.X, data.y, treatment=data.treatment, survival=data.survival,
                        nuisance=first.nuisance_)
              for cls in (ps.OutcomeRegression, ps.PrincipalScoreWeighting)]  # fmt: skip
    alone = [cls().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
             for cls in (ps.MultiplyRobust, ps.OutcomeRegression, ps.PrincipalScoreWeighting)]
    with mock.patch.object(_monotonicity, "_strata_labels", wraps=_monotonicity._strata_labels) \
            as labels:  # fmt: skip
        together = [ps.diagnostics.diagnostic_warnings(est, X) for est in (first, *shared)]
        checks = [ps.diagnostics.monotonicity_check(est) for est in (first, *shared)]
        assert labels.call_count == 1
    separate = [ps.diagnostics.diagnostic_warnings(est, X) for est in alone]
    assert together == separate
    for check, est in zip(checks, alone, strict=True):
        pd.testing.assert_frame_equal(check, ps.diagnostics.monotonicity_check(est))


def test_summary_data_rows_shared_and_clusters_kept_apart():
    """The shares and the naive contrast are computed once for a shared fit; with other
    clusters (not part of the shared fit's check) their standard errors are computed again."""
    data = make_truncation(800, random_state=5)
    first = _fitted(data)
    from pscore_strata.estimators import _summary

    with mock.patch.object(_summary, "_stratum_shares", wraps=_summary._stratum_shares) as calls:
        shared = ps.OutcomeRegression().fit(data.X, data.y, treatment=data.treatment,
                                            survival=data.survival, nuisance=first.nuisance_)
        rows = [est.summary().iloc[3:] for est in (first, shared)]
        assert calls.call_count == 1
        clustered = ps.OutcomeRegression().fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival,
            groups=np.arange(800) // 4, nuisance=first.nuisance_)
        table = clustered.summary().iloc[3:]
        assert calls.call_count == 2
    alone = ps.OutcomeRegression().fit(data.X, data.y, treatment=data.treatment,
                                       survival=data.survival).summary().iloc[3:]
    pd.testing.assert_frame_equal(rows[1], alone)
    pd.testing.assert_frame_equal(rows[0], rows[1])
    assert not np.allclose(table["std_error"], alone["std_error"])


def test_a_pickled_fit_leaves_the_derived_values_out_and_recomputes_them():
    import pickle

    data = make_truncation(600, random_state=6)
    est = _fitted(data)
    before = ps.diagnostics.diagnostic_warnings(est)
    table = est.summary()
    assert est.nuisance_.derived  # filled by the requests above
    loaded = pickle.loads(pickle.dumps(est))
    assert loaded.nuisance_.derived == {}
    assert ps.diagnostics.diagnostic_warnings(loaded) == before
    pd.testing.assert_frame_equal(loaded.summary(), table)
