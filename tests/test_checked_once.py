"""Inputs checked once when the library fits several estimators on the same arrays."""

from unittest import mock

import numpy as np

import pscore_strata as ps
from pscore_strata import _features, _validation
from pscore_strata._checked_once import checked_once, once


def test_fit_estimators_validates_and_fingerprints_once_with_separate_fit_numbers():
    data = ps.datasets.make_truncation(600, random_state=4)
    arguments = dict(treatment=data.treatment, survival=data.survival)
    with mock.patch.object(_validation, "_check_truncation_data",
                           wraps=_validation._check_truncation_data) as checks, \
            mock.patch.object(_features, "_fingerprint", wraps=_features._fingerprint) as prints:
        together = ps.fit_estimators(data.X, data.y, **arguments)
    assert checks.call_count == 1 and prints.call_count == 1
    # The reference: each estimator fitted on its own, every check done again.
    for name, cls in (("weighting", ps.PrincipalScoreWeighting),
                      ("regression", ps.OutcomeRegression), ("robust", ps.MultiplyRobust)):
        alone = cls().fit(data.X, data.y, **arguments)
        assert together[name].effect_ == alone.effect_
        assert together[name].std_error_ == alone.std_error_
        assert together[name].feature_fingerprint_ == alone.feature_fingerprint_


def test_separate_fits_check_every_time_and_see_changed_inputs():
    data = ps.datasets.make_truncation(600, random_state=4)
    y = data.y.copy()
    first = ps.OutcomeRegression().fit(data.X, y, treatment=data.treatment, survival=data.survival)
    y[data.survival == 1] += 1.0  # changed in place between two fits of the user's
    second = ps.OutcomeRegression().fit(data.X, y, treatment=data.treatment,
                                        survival=data.survival)  # fmt: skip
    assert np.isclose(second.mean_treated_ - first.mean_treated_, 1.0)


def test_once_keys_by_identity_and_options_and_forgets_outside_the_block():
    calls = []

    def compute():
        calls.append(1)
        return len(calls)

    a, b = np.zeros(3), np.zeros(3)
    with checked_once():
        assert once("k", (a,), "x", compute) == 1
        assert once("k", (a,), "x", compute) == 1  # same object, same options
        assert once("k", (b,), "x", compute) == 2  # equal values, another object
        assert once("k", (a,), "y", compute) == 3  # other options
        with checked_once():  # nested: the outer memo serves
            assert once("k", (a,), "x", compute) == 1
    assert once("k", (a,), "x", compute) == 4  # outside: always computed
