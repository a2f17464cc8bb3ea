"""Monte Carlo coverage of the weighting estimator's sandwich interval (simulated truth)."""

import warnings

import numpy as np
import pytest

import pscore_strata as ps
from pscore_strata.datasets import make_truncation


@pytest.mark.slow
def test_weighting_interval_covers_truth_at_nominal_rate():
    # Source: simulated truth (make_truncation, exact SACE = 1). 500 replicates of n = 1500; the
    # 95% interval should cover 92-98% of the time (Monte Carlo SE of a 95% rate is 1.0 point).
    hits, errors, ses = [], [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for seed in range(500):
            data = make_truncation(1500, n_features=3, design="observational", random_state=seed)
            est = ps.PrincipalScoreWeighting().fit(
                data.X, data.y, treatment=data.treatment, survival=data.survival
            )
            low, high = est.conf_int(0.95)
            hits.append(low <= data.true_effect <= high)
            errors.append(est.effect_ - data.true_effect)
            ses.append(est.std_error_)
    coverage = np.mean(hits)
    print(f"coverage {coverage:.3f}, mean SE {np.mean(ses):.4f}, MC SD {np.std(errors):.4f}")
    assert 0.92 <= coverage <= 0.98
    assert 0.85 < np.mean(ses) / np.std(errors, ddof=1) < 1.15
