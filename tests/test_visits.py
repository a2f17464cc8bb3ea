"""Repeated visits: ``visit_effects``, its joint inference, the visit scenario and the figure.

External references: separate single-visit fits of the same estimator (the per-visit numbers),
the estimators' own standard errors with weights and clusters (the covariance diagonal),
scipy's multivariate normal CDF (Genz's algorithm) for the band's critical value, scipy's
chi-square law for the Wald test, the simulated truth of ``make_visits`` (always-survivor units
drawn from their latent frailty, against the quadrature truth) and, in the slow test, coverage
of that truth. The full 300-replicate study is ``benchmarks/visits.py``.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.optimize import brentq
from sklearn.base import clone
from sklearn.linear_model import LogisticRegression

import pscore_strata as ps
from pscore_strata.datasets import make_visits
from pscore_strata.inference._resampling import resample_rows, spawn_seeds
from pscore_strata.visits._joint import band_critical


@pytest.fixture(scope="module")
def data():
    return make_visits(1200, random_state=3)


@pytest.fixture(scope="module")
def lossy():
    return make_visits(1500, end_of_follow_up=0.25, missed_visits=0.15, random_state=4)


def _single(estimator, data, k, population, **kwargs):
    last = data.survival.columns[-1]
    survival = data.survival.iloc[:, k] if population == "each" else data.survival[last]
    y = data.y.iloc[:, k]
    if population == "last":
        y = y.where(data.survival[last].notna())
    return _fit(estimator, data.X, y, data.treatment, survival, **kwargs)


def _fit(estimator, X, y, treatment, survival, **kwargs):
    return clone(estimator).fit(X, y, treatment=treatment, survival=survival, **kwargs)


@pytest.mark.parametrize("population", ["each", "last"])
@pytest.mark.parametrize(
    "estimator", [ps.PrincipalScoreWeighting(), ps.OutcomeRegression(), ps.MultiplyRobust()],
    ids=["weighting", "regression", "robust"],
)
def test_each_visit_equals_a_single_visit_fit(data, estimator, population):
    # Source: a separate single-visit fit of the same estimator on that visit's columns.
    table = ps.visit_effects(estimator, data.X, data.y, treatment=data.treatment,
                             survival=data.survival, population=population)  # fmt: skip
    assert table["visit"].tolist() == data.visits
    for k in range(3):
        fit = _single(estimator, data, k, population)
        assert abs(table["effect"][k] - fit.effect_) < 1e-12
        assert abs(table["std_error"][k] - fit.std_error_) < 1e-12
        low, high = fit.conf_int()
        assert abs(table["ci_low"][k] - low) < 1e-12 and abs(table["ci_high"][k] - high) < 1e-12
        share = fit.summary().loc["share always-survivor", "estimate"]
        assert abs(table["always_survivor_share"][k] - share) < 1e-12
    # The band is wider than every pointwise interval and narrower than Bonferroni's.
    assert np.all(table["band_low"] < table["ci_low"])
    assert np.all(table["band_high"] > table["ci_high"])
    assert table.attrs["band_critical"] < stats.norm.ppf(1 - 0.05 / 6)


def test_missing_at_random_visits_match_single_visit_fits(lossy):
    # Source: single-visit fits with missing="at_random" (missed visits, ended follow-up).
    estimator = ps.MultiplyRobust(missing="at_random")
    for population in ("each", "last"):
        table = ps.visit_effects(estimator, lossy.X, lossy.y, treatment=lossy.treatment,
                                 survival=lossy.survival, population=population)  # fmt: skip
        for k in range(3):
            fit = _single(estimator, lossy, k, population)
            assert abs(table["effect"][k] - fit.effect_) < 1e-12
    with pytest.raises(ValueError, match="At visit 'month_3'.*missing=\"at_random\""):
        ps.visit_effects(ps.MultiplyRobust(), lossy.X, lossy.y, treatment=lossy.treatment,
                         survival=lossy.survival)  # fmt: skip


def test_covariance_diagonal_is_each_visits_variance_with_weights_and_clusters(data):
    # Source: each single-visit fit's cluster-robust, weighted standard error.
    rng = np.random.default_rng(0)
    weights = rng.uniform(0.5, 2.0, len(data.treatment))
    groups = rng.integers(0, 60, len(data.treatment))
    estimator = ps.OutcomeRegression()
    table = ps.visit_effects(estimator, data.X, data.y, treatment=data.treatment,
                             survival=data.survival, sample_weight=weights,
                             groups=groups)  # fmt: skip
    covariance = table.attrs["covariance"].to_numpy()
    for k in range(3):
        fit = _single(estimator, data, k, "each", sample_weight=weights, groups=groups)
        assert abs(covariance[k, k] - fit.std_error_**2) < 1e-14
    assert np.allclose(covariance, covariance.T)
    assert np.all(np.linalg.eigvalsh(covariance) > 0)
    # The same people at every visit: estimates at neighbouring visits are positively correlated.
    assert covariance[0, 1] > 0


def test_identical_visits_have_correlation_one_and_the_pointwise_critical_value(data):
    # Source: a visit repeated is perfectly correlated with itself, so the sup over visits is one
    # normal variable and the band's critical value is the normal quantile (1.96 at 95%).
    y = pd.concat([data.y.iloc[:, 0]] * 2, axis=1, keys=["a", "b"])
    survival = pd.concat([data.survival.iloc[:, 0]] * 2, axis=1, keys=["a", "b"])
    table = ps.visit_effects(ps.PrincipalScoreWeighting(), data.X, y, treatment=data.treatment,
                             survival=survival)  # fmt: skip
    covariance = table.attrs["covariance"].to_numpy()
    assert np.allclose(covariance / covariance[0, 0], 1.0, atol=1e-12)
    assert abs(table.attrs["band_critical"] - stats.norm.ppf(0.975)) < 0.04
    assert table.attrs["wald_test"]["df"] == 1  # a rank-one covariance


def test_band_critical_value_matches_the_multivariate_normal_quantile():
    # Source: scipy.stats.multivariate_normal.cdf (Genz's algorithm) solved for
    # P(max_k |Z_k| <= c) = 0.95 with Z ~ N(0, R).
    correlation = np.array([[1.0, 0.6, 0.3], [0.6, 1.0, 0.6], [0.3, 0.6, 1.0]])
    scale = np.diag([0.5, 1.0, 2.0])
    covariance = scale @ correlation @ scale
    law = stats.multivariate_normal(np.zeros(3), correlation, seed=1)

    def coverage(c):
        return law.cdf(np.full(3, c), lower_limit=np.full(3, -c)) - 0.95

    exact = brentq(coverage, 1.9, 2.6, xtol=1e-6)
    assert abs(band_critical(covariance, 0.95) - exact) < 0.03
    # With few clusters (t reference, 9 degrees of freedom) the band widens.
    assert band_critical(covariance, 0.95, dof=9) > exact + 0.1


def test_wald_test_is_the_chi_square_statistic(data):
    # Source: the quadratic form and scipy's chi-square survival function, computed here.
    table = ps.visit_effects(ps.MultiplyRobust(), data.X, data.y, treatment=data.treatment,
                             survival=data.survival)  # fmt: skip
    effect = table["effect"].to_numpy()
    covariance = table.attrs["covariance"].to_numpy()
    statistic = effect @ np.linalg.solve(covariance, effect)
    test = table.attrs["wald_test"]
    assert abs(test["statistic"] - statistic) < 1e-8 * statistic
    assert test["df"] == 3 and test["reference"] == "chi2"
    assert abs(test["p_value"] - stats.chi2.sf(statistic, 3)) < 1e-12


def test_ratio_scale_intervals_and_band_on_the_log_scale():
    # Source: the single-visit fit's own (log-scale) interval.
    data = make_visits(1200, random_state=8)
    y = np.exp(data.y / 2)  # positive outcomes for a ratio
    estimator = ps.PrincipalScoreWeighting(scale="ratio")
    table = ps.visit_effects(estimator, data.X, y, treatment=data.treatment, survival=data.survival)
    for k in range(3):
        fit = _fit(estimator, data.X, y.iloc[:, k], data.treatment, data.survival.iloc[:, k])
        assert np.allclose(table.loc[k, ["ci_low", "ci_high"]].to_numpy(float), fit.conf_int(),
                           atol=1e-12)  # fmt: skip
        effect, low, high = table.loc[k, ["effect", "band_low", "band_high"]].to_numpy(float)
        assert abs(np.log(effect) - np.log(low) - (np.log(high) - np.log(effect))) < 1e-10
    assert table.attrs["scale"] == "ratio"


def test_refitting_bootstrap_resamples_units_across_visits_together(data):
    # A penalized logistic model has no sandwich, so n_bootstrap > 0 refits. Source: with the
    # same visit twice, replicates that resample units jointly give correlation one.
    y = pd.concat([data.y.iloc[:, 1]] * 2, axis=1, keys=["a", "b"])
    survival = pd.concat([data.survival.iloc[:, 1]] * 2, axis=1, keys=["a", "b"])
    model = LogisticRegression(C=1.0, max_iter=500)
    estimator = ps.PrincipalScoreWeighting(
        treatment_model=model, survival_model=model, n_bootstrap=25, random_state=0
    )
    table = ps.visit_effects(estimator, data.X, y, treatment=data.treatment, survival=survival)
    covariance = table.attrs["covariance"].to_numpy()
    assert table.attrs["std_error_method"] == "bootstrap"
    assert np.allclose(covariance / covariance[0, 0], 1.0, atol=1e-12)
    assert np.allclose(table["std_error"] ** 2, np.diag(covariance), rtol=1e-12)
    # The point estimates are the single-visit fits' (the bootstrap changes only the errors).
    fit = _fit(estimator, data.X, y["a"], data.treatment, survival["a"])
    assert abs(table["effect"][0] - fit.effect_) < 1e-12
    # Refitting-bootstrap errors are close to the sandwich ones of the default models.
    sandwich = ps.visit_effects(ps.PrincipalScoreWeighting(), data.X, y, treatment=data.treatment,
                                survival=survival)  # fmt: skip
    assert 0.6 < table["std_error"][0] / sandwich["std_error"][0] < 1.6


def test_non_monotone_survival_is_refused_naming_the_rows(data):
    survival = data.survival.copy()
    survival.index = [f"id{i}" for i in range(len(survival))]
    dead_then_alive = survival.index[(survival.iloc[:, 0] == 1)][:2]
    survival.loc[dead_then_alive, "month_3"] = 0
    survival.loc[dead_then_alive, "month_6"] = 1
    before = survival.copy()
    with pytest.raises(ValueError, match=r"not monotone.*2 row.*'id\d+', 'id\d+'.*stay 0"):
        ps.visit_effects(ps.PrincipalScoreWeighting(), data.X, data.y.set_index(survival.index),
                         treatment=data.treatment, survival=survival)  # fmt: skip
    pd.testing.assert_frame_equal(survival, before)  # the caller's data is not changed
    with pytest.raises(ValueError, match=r"row positions \[5\]"):
        bad = data.survival.to_numpy().copy()
        bad[5] = [0, 1, 1]
        ps.visit_effects(ps.PrincipalScoreWeighting(), data.X, data.y.to_numpy(),
                         treatment=data.treatment, survival=bad)  # fmt: skip


@pytest.mark.parametrize(
    ("change", "error", "match"),
    [
        (dict(y="series"), ValueError, "two-dimensional.*Series"),
        (dict(y="one_column", survival="one_survival"), ValueError, "at least two"),
        (dict(survival="fewer_columns"), ValueError, "one survival column for each outcome"),
        (dict(survival="text"), TypeError, "numeric 0/1 per visit"),
        (dict(survival="twos"), ValueError, "only 0 .dead., 1 .alive. and NaN"),
        (dict(population="first"), ValueError, "`population` must be one of"),
        (dict(estimator="class"), TypeError, "an estimator instance"),
        (dict(estimator="bounds"), TypeError, "no `effect_` and `influence_`"),
        (dict(estimator="other"), TypeError, "must be a SACE estimator"),
        (dict(level=95), ValueError, "`level` must be"),
    ],
)
def test_bad_input_errors_name_the_argument(data, change, error, match):
    kwargs = dict(estimator=ps.PrincipalScoreWeighting(), X=data.X, y=data.y,
                  treatment=data.treatment, survival=data.survival)  # fmt: skip
    replacements = {
        "series": data.y.iloc[:, 0], "one_column": data.y.iloc[:, :1],
        "fewer_columns": data.survival.iloc[:, :2], "one_survival": data.survival.iloc[:, :1],
        "text": data.survival.replace({1.0: "alive", 0.0: "dead"}), "twos": data.survival * 2,
        "class": ps.PrincipalScoreWeighting, "bounds": ps.TrimmingBounds(),
        "other": LogisticRegression(),
    }
    for key, value in change.items():
        kwargs[key] = replacements.get(value, value) if isinstance(value, str) else value
    with pytest.raises(error, match=match):
        ps.visit_effects(kwargs.pop("estimator"), kwargs.pop("X"), kwargs.pop("y"), **kwargs)


def test_unknown_status_after_death_is_noted_not_filled(lossy):
    survival = lossy.survival.copy()
    dead = survival.index[survival["month_3"] == 0][:3]
    survival.loc[dead, ["month_6", "month_12"]] = np.nan
    table = ps.visit_effects(ps.PrincipalScoreWeighting(missing="at_random"), lossy.X, lossy.y,
                             treatment=lossy.treatment, survival=survival)  # fmt: skip
    assert any("unknown (NaN) after a recorded death" in note for note in table.attrs["notes"])


def test_warnings_are_issued_once_naming_the_visits(data):
    groups = np.arange(len(data.treatment)) % 12  # few clusters: every visit warns
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        table = ps.visit_effects(ps.PrincipalScoreWeighting(), data.X, data.y,
                                 treatment=data.treatment, survival=data.survival,
                                 groups=groups)  # fmt: skip
    few = [w for w in caught if issubclass(w.category, ps.FewClustersWarning)]
    assert len(few) == 1 and "'month_3', 'month_6', 'month_12'" in str(few[0].message)
    assert table.attrs["wald_test"]["reference"] == "F"
    assert table.attrs["wald_test"]["df"] == (3, 9)


def test_scenario_truth_matches_the_simulated_always_survivors():
    # Source: the always-survivor units drawn from the latent frailty in a large sample, against
    # the quadrature truth (each: always-survivors to each visit; last: to the last visit).
    big = make_visits(400_000, random_state=11)
    always = big.always_survivor.to_numpy()
    effect = big.unit_effect.to_numpy()
    for k, visit in enumerate(big.visits):
        sample_each = effect[always[:, k], k].mean()
        sample_last = effect[always[:, -1], k].mean()
        assert abs(sample_each - big.true_effects.loc[visit, "each"]) < 0.005
        assert abs(sample_last - big.true_effects.loc[visit, "last"]) < 0.005
        assert abs(always[:, k].mean() - big.always_survivor_shares[visit]) < 0.003
    # Deaths accumulate and survival is monotone over visits.
    survival = big.survival.to_numpy()
    assert np.all(np.diff(survival, axis=1) <= 0)
    flat = make_visits(100, effect_heterogeneity=0.0, random_state=0)
    assert np.allclose(flat.true_effects["each"], [0.5, 1.0, 1.5], atol=1e-12)


def test_plot_visit_effects(data):
    matplotlib = pytest.importorskip("matplotlib")
    matplotlib.use("Agg")
    table = ps.visit_effects(ps.PrincipalScoreWeighting(), data.X, data.y, treatment=data.treatment,
                             survival=data.survival)  # fmt: skip
    axes = ps.plotting.plot_visit_effects(table, outcome="score")
    assert len(axes) == 2
    assert [t.get_text() for t in axes[0].get_xticklabels()] == data.visits
    matplotlib.pyplot.close("all")


@pytest.mark.slow
def test_coverage_at_each_visit_band_and_test_size():
    # Source: the simulated truth of make_visits. A lean version of benchmarks/visits.py (300
    # replicates there): 24 replicates, so the bounds only catch gross failures (with 95%
    # coverage, 18 or fewer hits of 24 has probability below 0.002; so has 6 or more
    # rejections of 24 for a 5% test).
    rng = np.random.default_rng(2026)
    hits = {"each": [], "last": []}
    band = {"each": [], "last": []}
    rejections = []
    for _ in range(24):
        seed = int(rng.integers(2**31))
        d = make_visits(600, random_state=seed)
        for population in hits:
            table = ps.visit_effects(ps.PrincipalScoreWeighting(), d.X, d.y,
                                     treatment=d.treatment, survival=d.survival,
                                     population=population)  # fmt: skip
            truth = d.true_effects[population].to_numpy()
            hits[population].append((table["ci_low"] < truth) & (truth < table["ci_high"]))
            inside = (table["band_low"] < truth) & (truth < table["band_high"])
            band[population].append(bool(np.all(inside)))
        null = make_visits(600, effects=(0, 0, 0), effect_heterogeneity=0.0, random_state=seed)
        test = ps.visit_effects(ps.PrincipalScoreWeighting(), null.X, null.y,
                                treatment=null.treatment, survival=null.survival)  # fmt: skip
        rejections.append(test.attrs["wald_test"]["p_value"] < 0.05)
    for population in hits:
        assert np.all(np.sum(hits[population], axis=0) >= 19), population
        assert np.sum(band[population]) >= 19, population
    assert np.sum(rejections) <= 5


def test_docstring_examples_run():
    import doctest

    runner = doctest.DocTestRunner()
    for function in (ps.visit_effects, make_visits):
        for test in doctest.DocTestFinder().find(function, function.__name__):
            runner.run(test)
    assert runner.failures == 0 and runner.tries >= 4


@pytest.mark.slow
def test_joint_covariance_agrees_with_a_refitting_bootstrap():
    # Source: the refitting bootstrap (rows resampled within arms, every visit refitted on the
    # same resample), an estimate of the covariance that uses no influence values. With 80
    # resamples a bootstrap correlation has a Monte Carlo error near 0.1.
    data = make_visits(800, random_state=17)
    estimator = ps.PrincipalScoreWeighting()
    table = ps.visit_effects(estimator, data.X, data.y, treatment=data.treatment,
                             survival=data.survival)  # fmt: skip
    replicates = []
    for seed in spawn_seeds(5, 80):
        rows = resample_rows(data.treatment, seed)
        replicates.append([
            _fit(estimator, data.X.iloc[rows], data.y.iloc[rows, k], data.treatment[rows],
                 data.survival.iloc[rows, k]).effect_
            for k in range(3)
        ])  # fmt: skip
    boot = np.cov(np.array(replicates), rowvar=False)
    influence = table.attrs["covariance"].to_numpy()

    def correlation(m):
        return m / np.sqrt(np.outer(np.diag(m), np.diag(m)))

    assert np.allclose(np.sqrt(np.diag(boot)), np.sqrt(np.diag(influence)), rtol=0.25)
    assert np.max(np.abs(correlation(boot) - correlation(influence))) < 0.2
