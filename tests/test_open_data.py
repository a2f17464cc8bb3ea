"""The NSW job-training experiment (LaLonde 1986; Dehejia & Wahba 1999), shipped by causaldata.

Employment in 1978 (positive 1978 earnings) plays the role of survival and 1978 earnings the
outcome: the effect of the programme on earnings among people who would be employed either way.
"""

import warnings

import numpy as np
import pytest

import pscore_strata as ps

causaldata = pytest.importorskip("causaldata")


@pytest.fixture(scope="module")
def nsw():
    data = causaldata.nsw_mixtape.load_pandas().data
    employed = (data["re78"] > 0).astype(int)
    earnings = data["re78"].astype(float)
    covariates = data[["age", "educ", "black", "hisp", "marr", "nodegree", "re74", "re75"]]
    return covariates.astype(float), earnings, data["treat"].to_numpy(), employed.to_numpy()


def test_unadjusted_survival_probabilities_equal_sample_proportions(nsw):
    X, y, t, s = nsw
    est = ps.PrincipalScoreWeighting().fit(None, y, treatment=t, survival=s)
    # Reference: the per-arm employment proportions counted directly.
    np.testing.assert_allclose(est.nuisance_.survival[1], s[t == 1].mean())
    np.testing.assert_allclose(est.nuisance_.survival[0], s[t == 0].mean())
    # Recorded values (this data set): 185 treated, 260 controls, employment 0.757 vs 0.646.
    assert s[t == 1].mean() == pytest.approx(0.7568, abs=1e-4)
    assert s[t == 0].mean() == pytest.approx(0.6462, abs=1e-4)
    naive = y[(t == 1) & (s == 1)].mean() - y[(t == 0) & (s == 1)].mean()
    assert est.effect_ == pytest.approx(naive, abs=1e-6)


def test_adjusted_estimates_recorded(nsw):
    X, y, t, s = nsw
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        weighting = ps.PrincipalScoreWeighting().fit(X, y, treatment=t, survival=s)
        robust = ps.MultiplyRobust().fit(X, y, treatment=t, survival=s)
    # Recorded (not an external reference): a positive earnings effect among always-employed
    # participants, of the order of the experimental earnings effect; intervals are wide.
    for est in (weighting, robust):
        assert np.isfinite(est.effect_) and est.std_error_ > 0
        assert -2000 < est.effect_ < 4000
    # Treated survival is higher than control survival overall, consistent with monotonicity.
    assert est.summary().loc["share protected", "estimate"] > 0
