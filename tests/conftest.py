"""What several test files share: the list of estimators the common-behaviour checks loop over,
and Card's college-proximity data as the command line reads it.

A new estimator class goes into these lists (DEVELOPERS.md, "Adding an estimand"); the loops in
tests/test_conventions.py then check it like every other.
"""

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps

#: The point estimators of the SACE (one per method of ``ps.estimands.METHODS``).
ESTIMATORS = [ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust]

#: Every estimator class of the package: the point estimators, the bounds, the stratum model.
ALL_ESTIMATORS = [*ESTIMATORS, ps.TrimmingBounds, ps.PrincipalScoreModel]


def fit_any(estimator, X, y, treatment, survival):
    """Fit any estimator of ``ALL_ESTIMATORS`` (the stratum model takes no outcome)."""
    if isinstance(estimator, ps.PrincipalScoreModel):
        return estimator.fit(X, treatment=treatment, survival=survival)
    return estimator.fit(X, y, treatment=treatment, survival=survival)


def fitted_numbers(estimator, X):
    """What a fit produced, as an array, to compare two fits (or a fit and its copy)."""
    if isinstance(estimator, ps.PrincipalScoreModel):
        return np.asarray(estimator.predict_proba(X))
    if isinstance(estimator, ps.TrimmingBounds):
        return np.array([estimator.lower_, estimator.upper_])
    return np.array([estimator.effect_, estimator.std_error_])


@pytest.fixture(scope="module")
def card(tmp_path_factory):
    """Card (1995), shipped by causaldata as ``close_college``, with a text-coded intermediate
    (a college degree, ``educ >= 16``) written to CSV: ``(frame as read back, path)``."""
    causaldata = pytest.importorskip("causaldata")
    frame = causaldata.close_college.load_pandas().data
    frame = frame.assign(college=np.where(frame["educ"] >= 16, "degree", "no degree"))
    path = tmp_path_factory.mktemp("data") / "card.csv"
    frame.to_csv(path, index=False)
    return pd.read_csv(path), path  # the values the command line reads
