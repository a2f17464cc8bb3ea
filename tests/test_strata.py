"""Effects in every principal stratum: independent computations, the IV check, refusals.

Derivations in docs/guide/derivations/strata.md.
"""

import warnings

import numpy as np
import pytest
import statsmodels.api as sm

import pscore_strata as ps
from pscore_strata.datasets import make_intermediate, make_truncation

ESTIMATORS = (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust)

INCREASING = ("always_survivor", "protected", "doomed")
DECREASING = ("always_survivor", "harmed", "doomed")


def _fit(cls, data, stratum, monotonicity="increasing", **params):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.MonotonicityWarning)
        return cls(stratum=stratum, monotonicity=monotonicity, **params).fit(
            data.X, data.y, treatment=data.treatment, intermediate=data.intermediate
        )


def _logit(X, target, rows):
    # Source: statsmodels GLM (binomial, logit link) on the given rows, predicted on every row;
    # fitted here independently of the library.
    design = sm.add_constant(X, has_constant="add")
    fit = sm.GLM(target[rows], design[rows], family=sm.families.Binomial()).fit(tol=1e-13)
    return fit.predict(design)


def _weighted_mean(values, weights):
    # The normalized (Hajek) mean written out; the weights may be negative where the fitted
    # intermediate models cross (the formulas keep e = p1 - p0 unclipped; derivation section 4).
    return float(np.sum(weights * values) / np.sum(weights))


def _statsmodels_weighting(data, stratum, monotonicity):
    """Each stratum's weighting formula (derivation section 4, table) from scratch."""
    X, T, S, Y = data.X, data.treatment, data.intermediate, data.y
    pi = _logit(X, T, np.ones(T.size, bool))
    p1, p0 = _logit(X, S, T == 1), _logit(X, S, T == 0)
    if monotonicity == "increasing":
        score = {"always_survivor": p0, "protected": p1 - p0,
                 "doomed": 1 - p1}[stratum]  # fmt: skip
        cells = {"always_survivor": (1, 1), "protected": (1, 0), "doomed": (0, 0)}[stratum]
    else:
        score = {"always_survivor": p1, "harmed": p0 - p1,
                 "doomed": 1 - p0}[stratum]  # fmt: skip
        cells = {"always_survivor": (1, 1), "harmed": (0, 1), "doomed": (0, 0)}[stratum]
    s_treated, s_control = cells
    q1 = p1 if s_treated == 1 else 1 - p1
    q0 = p0 if s_control == 1 else 1 - p0
    w1 = np.where((T == 1) & (S == s_treated), score / (pi * q1), 0.0)
    w0 = np.where((T == 0) & (S == s_control), score / ((1 - pi) * q0), 0.0)
    return _weighted_mean(Y, w1), _weighted_mean(Y, w0)


@pytest.mark.parametrize(
    "monotonicity, stratum",
    [("increasing", g) for g in INCREASING] + [("decreasing", g) for g in DECREASING],
)
def test_weighting_matches_statsmodels_computation(monotonicity, stratum):
    data = make_intermediate(3000, stratum=stratum, monotonicity=monotonicity, random_state=5)
    est = _fit(ps.PrincipalScoreWeighting, data, stratum, monotonicity)
    mu1, mu0 = _statsmodels_weighting(data, stratum, monotonicity)
    assert est.mean_treated_ == pytest.approx(mu1, abs=1e-6)
    assert est.mean_control_ == pytest.approx(mu0, abs=1e-6)
    assert est.effect_ == pytest.approx(mu1 - mu0, abs=1e-6)
    assert est.stratum_ == stratum
    assert est.std_error_method_ == "sandwich"


@pytest.mark.parametrize("alias, name", [("always_taker", "always_survivor"),
                                         ("complier", "protected"), ("never_taker", "doomed")])
def test_noncompliance_names_are_the_same_strata(alias, name):
    data = make_intermediate(1500, stratum=name, random_state=2)
    for cls in ESTIMATORS:
        by_alias = _fit(cls, data, alias)
        by_name = _fit(cls, data, name)
        assert by_alias.stratum_ == name
        assert by_alias.effect_ == by_name.effect_
        assert by_alias.std_error_ == by_name.std_error_


def test_noncompliance_names_need_increasing_monotonicity():
    data = make_intermediate(500, stratum="harmed", monotonicity="decreasing", random_state=0)
    with pytest.raises(ValueError, match="`stratum`='complier'.*increasing"):
        _fit(ps.MultiplyRobust, data, "complier", "decreasing")
    with pytest.raises(ValueError, match="`stratum`='harmed'.*decreasing"):
        _fit(ps.MultiplyRobust, data, "harmed", "increasing")
    with pytest.raises(ValueError, match="`stratum` must be one of"):
        _fit(ps.MultiplyRobust, data, "compliers", "increasing")


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_recovers_each_stratum_effect(cls):
    # Source: simulated truth (make_intermediate: exact stratum effects).
    for monotonicity, strata in (("increasing", INCREASING), ("decreasing", DECREASING)):
        for seed, stratum in enumerate(strata):
            data = make_intermediate(4000, stratum=stratum, monotonicity=monotonicity,
                                     random_state=10 + seed)  # fmt: skip
            est = _fit(cls, data, stratum, monotonicity)
            assert abs(est.effect_ - data.true_effect) < 4 * est.std_error_, (stratum, est.effect_)


def test_complier_effect_matches_two_stage_least_squares():
    # Source: linearmodels IV2SLS (Y on S instrumented by T, X exogenous). Under randomization,
    # monotonicity, the exclusion restriction and principal ignorability with a constant
    # complier effect, both estimate the complier effect (Angrist, Imbens & Rubin 1996;
    # docs/guide/derivations/strata.md section 7), so they agree up to sampling error.
    from linearmodels.iv import IV2SLS

    data = ps.datasets.make_scenario("intermediate_exclusion", 20000, random_state=4)
    exog = sm.add_constant(data.X)
    iv = IV2SLS(data.y, exog, data.intermediate.astype(float), data.treatment.astype(float)).fit(
        cov_type="robust")  # fmt: skip
    iv_effect, iv_se = float(iv.params.iloc[-1]), float(iv.std_errors.iloc[-1])
    assert abs(iv_effect - data.true_effect) < 4 * iv_se
    for cls in ESTIMATORS:
        est = _fit(cls, data, "complier", treatment_model=0.5)
        assert abs(est.effect_ - iv_effect) < 3 * np.hypot(est.std_error_, iv_se), cls.__name__


@pytest.mark.parametrize("stratum", ["protected", "complier", "doomed", "never_taker"])
def test_refuses_other_strata_under_truncation_by_death(stratum):
    data = make_truncation(500, random_state=0)  # y is NaN where survival == 0
    for cls in ESTIMATORS:
        with pytest.raises(ValueError, match="only the always-survivor effect exists"):
            cls(stratum=stratum).fit(data.X, data.y, treatment=data.treatment,
                                     survival=data.survival)  # fmt: skip


def test_always_survivor_still_allows_truncation():
    data = make_truncation(500, random_state=0)
    est = ps.MultiplyRobust(stratum="always_survivor").fit(
        data.X, data.y, treatment=data.treatment, intermediate=data.survival)
    reference = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                        survival=data.survival)  # fmt: skip
    assert est.effect_ == reference.effect_
    assert est.std_error_ == reference.std_error_


def test_intermediate_is_survival_under_another_name():
    data = make_intermediate(800, random_state=1)
    for cls in ESTIMATORS:
        a = cls(stratum="protected").fit(data.X, data.y, treatment=data.treatment,
                                         survival=data.intermediate)  # fmt: skip
        b = cls(stratum="protected").fit(data.X, data.y, treatment=data.treatment,
                                         intermediate=data.intermediate)  # fmt: skip
        assert a.effect_ == b.effect_ and a.std_error_ == b.std_error_


def test_exactly_one_of_survival_and_intermediate():
    data = make_intermediate(300, random_state=1)
    est = ps.MultiplyRobust()
    with pytest.raises(TypeError, match="exactly one of `survival` and `intermediate`"):
        est.fit(data.X, data.y, treatment=data.treatment, survival=data.intermediate,
                intermediate=data.intermediate)  # fmt: skip
    with pytest.raises(TypeError, match="exactly one of `survival` and `intermediate`"):
        est.fit(data.X, data.y, treatment=data.treatment)


def test_always_survivor_effect_unchanged_when_outcome_exists_everywhere():
    # With the outcome observed for everyone, the always-survivor analysis ignores the values
    # of units with intermediate 0, as under truncation (the same number either way).
    data = make_intermediate(1500, stratum="always_survivor", random_state=3)
    truncated = np.where(data.intermediate == 1, data.y, np.nan)
    for cls in ESTIMATORS:
        full = cls().fit(data.X, data.y, treatment=data.treatment, survival=data.intermediate)
        cut = cls().fit(data.X, truncated, treatment=data.treatment, survival=data.intermediate)
        assert full.effect_ == cut.effect_


def test_simulated_stratum_effects_are_the_truth():
    # Source: the potential outcomes drawn by make_intermediate (sample means per true stratum
    # against the stated exact effects), and the cell structure monotonicity implies.
    for monotonicity in ("increasing", "decreasing"):
        data = make_intermediate(200_000, monotonicity=monotonicity, random_state=7,
                                 stratum="doomed")  # fmt: skip
        for g, effect in data.true_effects.items():
            rows = data.stratum == g
            gap = data.y1[rows] - data.y0[rows]
            assert abs(gap.mean() - effect) < 4 * gap.std() / np.sqrt(rows.sum())
        assert np.all(data.s1[data.stratum == "doomed"] == 0)
        assert np.all(data.s0[data.stratum == "always_survivor"] == 1)
    data = make_intermediate(100, exclusion=True, random_state=0)
    assert data.true_effects == {"always_survivor": 0.0, "protected": 2.0, "doomed": 0.0}
    with pytest.raises(ValueError, match="stratum must be one of"):
        make_intermediate(100, stratum="harmed")


def test_summary_names_the_stratum_and_its_assumptions():
    data = make_intermediate(1500, random_state=0)
    est = _fit(ps.MultiplyRobust, data, "complier")
    table = est.summary()
    assert table.index[0] == "protected effect (difference)"
    assert "protected mean, treated" in table.index
    notes = " ".join(table.attrs["notes"])
    assert "E[Y(0) | protected, X] = E[Y(0) | doomed, X]" in notes
    assert "latent" in notes and "individual patients" in notes
    # Source: the naive as-treated contrast computed here (treated with S=1 vs control S=0).
    T, S, Y = data.treatment, data.intermediate, data.y
    naive = Y[(T == 1) & (S == 1)].mean() - Y[(T == 0) & (S == 0)].mean()
    assert table.iloc[-1]["estimate"] == pytest.approx(naive, abs=1e-12)


def test_subgroups_cross_fitting_clusters_and_weights_run_for_each_stratum():
    data = make_intermediate(2000, stratum="doomed", random_state=3)
    groups = np.arange(2000) % 40
    weights = np.random.default_rng(0).uniform(0.5, 2.0, 2000)
    for cls in ESTIMATORS:
        # Cross-fitted weighting and regression get refitting-bootstrap errors: keep them few.
        extra = {} if cls is ps.MultiplyRobust else {"n_bootstrap": 20}
        est = cls(stratum="never_taker", n_folds=3, random_state=0, **extra).fit(
            data.X, data.y, treatment=data.treatment, intermediate=data.intermediate,
            groups=groups, sample_weight=weights)  # fmt: skip
        assert abs(est.effect_ - data.true_effect) < 4 * est.std_error_
        table = est.effect_by(data.X[:, 0] > 0)
        assert table["n"].sum() == 2000 and np.isfinite(table["std_error"]).all()


def test_intermediate_accepted_by_the_bootstrap_and_the_bounds():
    data = make_intermediate(600, random_state=4)
    by_name = ps.bootstrap(ps.PrincipalScoreWeighting(stratum="complier"), data.X, data.y,
                           treatment=data.treatment, intermediate=data.intermediate,
                           n_resamples=20, random_state=0)  # fmt: skip
    by_survival = ps.bootstrap(ps.PrincipalScoreWeighting(stratum="complier"), data.X, data.y,
                               treatment=data.treatment, survival=data.intermediate,
                               n_resamples=20, random_state=0)  # fmt: skip
    assert by_name.std_error == by_survival.std_error
    truncated = make_truncation(600, random_state=4)
    a = ps.TrimmingBounds().fit(truncated.X, truncated.y, treatment=truncated.treatment,
                                intermediate=truncated.survival)  # fmt: skip
    b = ps.TrimmingBounds().fit(truncated.X, truncated.y, treatment=truncated.treatment,
                                survival=truncated.survival)  # fmt: skip
    assert (a.lower_, a.upper_) == (b.lower_, b.upper_)
    with pytest.raises(TypeError, match="exactly one of `survival` and `intermediate`"):
        ps.TrimmingBounds().fit(truncated.X, truncated.y, treatment=truncated.treatment)
