"""Always-survivor distributions with data missing at random (``missing="at_random"``).

Independent check: replacing ``Y`` by ``1{Y <= v}`` in the mean estimator gives the CDF at ``v``
(DESIGN.md section 5b), so an estimator fitted with the outcome ``1{Y <= v}`` (missing where
``Y`` is) and ``missing="at_random"`` has the always-survivor CDFs at ``v`` as its two means and
the CDF difference's standard error as its own. The mean estimators' missing-data terms were
checked by simulation in ``tests/test_missing_data*.py``; here the distribution path must agree
with them. For the outcome-model estimators ``v`` is one of the conditional CDF model's
thresholds, where the CDF model is the same logistic model the mean estimator fits to a binary
outcome. Coverage over 300 replicates: ``benchmarks/distribution_missing_coverage.py``.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import pscore_strata as ps
from pscore_strata.datasets import make_truncation
from pscore_strata.distributions._paths import prepare

ESTIMATORS = [ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust]
KINDS = {
    "follow-up": {"follow_up": (0.75, 0.5)},
    "response": {"response": (0.75, -0.5)},
    "both": {"follow_up": (0.8, 0.5), "response": (0.8, -0.5)},
}


def _fit(cls, data, y, **kwargs):
    return cls(missing="at_random", **kwargs).fit(data.X, y, treatment=data.treatment,
                                                  survival=data.survival)  # fmt: skip


@pytest.mark.parametrize("kind", sorted(KINDS))
@pytest.mark.parametrize("cls", ESTIMATORS, ids=lambda c: c.__name__)
def test_cdf_equals_the_mean_estimator_of_the_indicator(cls, kind):
    # Source: the mean estimator with outcome 1{Y <= v} and missing="at_random" (its own
    # follow-up / response models and sandwich or efficient influence function).
    data = make_truncation(1500, n_features=3, random_state=7, **KINDS[kind])
    est = _fit(cls, data, data.y)
    X = None if cls is ps.PrincipalScoreWeighting else data.X
    if X is None:
        value = float(np.nanquantile(data.y, 0.4))
    else:
        value = float(prepare(est, X).conditional.thresholds[7])
    indicator = np.where(np.isnan(data.y), np.nan, (data.y <= value).astype(float))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reference = _fit(cls, data, indicator)
    dist = ps.survivor_distribution(est, values=[value], X=X)
    tolerance = 1e-8
    if X is not None:
        # The threshold's fits equal the mean estimator's logistic outcome models (scikit-learn,
        # on the observed survivors) to 1e-7; the CDF then moves by the monotone rearrangement
        # of each row's predictions over the thresholds (rows where fitted curves cross), here
        # by at most 5e-4 (2% of its standard error).
        conditional = prepare(est, X).conditional
        for arm in (0, 1):
            fitted = conditional.parametric[arm].predictions[:, 7]
            np.testing.assert_allclose(fitted, reference.nuisance_.outcome[arm], atol=1e-7)
        tolerance = 5e-4
    assert dist.treated[0] == pytest.approx(reference.mean_treated_, abs=tolerance)
    assert dist.control[0] == pytest.approx(reference.mean_control_, abs=tolerance)
    difference = np.asarray(dist.influence_treated)[:, 0] - np.asarray(dist.influence_control)[:, 0]
    se = ps.inference.influence_std_error(difference)
    assert se == pytest.approx(reference.std_error_, rel=1e-8 if X is None else 1e-2)


def test_missing_data_changes_the_distribution_as_the_mean():
    # Complete cases would be biased when missingness depends on x2; the weighting CDF with
    # missing="at_random" uses the observation weights: it differs from the naive ECDF of the
    # observed survivors and from the complete-case fit.
    data = make_truncation(3000, n_features=3, random_state=3, response=(0.6, -1.5))
    est = _fit(ps.PrincipalScoreWeighting, data, data.y)
    dist = ps.survivor_distribution(est)
    assert np.all(np.diff(dist.treated) >= 0) and dist.treated[-1] == pytest.approx(1.0)
    note = " ".join(dist.notes)
    assert "CDFs" in note


def test_ordinal_comparison_and_quantile_bounds_run_under_missing_data():
    data = make_truncation(2000, n_features=3, random_state=4, follow_up=(0.8, 0.5),
                           response=(0.8, -0.5))  # fmt: skip
    levels = np.where(np.isnan(data.y), np.nan, np.clip(np.round(data.y), -1, 3))
    est = _fit(ps.PrincipalScoreWeighting, data, levels)
    result = ps.ordinal_comparison(est)
    assert result.levels["treated"].sum() == pytest.approx(1.0)
    assert 0.5 < result.probability < 1.0
    bounds = ps.TrimmingBounds(missing="at_random", quantiles=[0.25, 0.5, 0.75]).fit(
        data.X, data.y, treatment=data.treatment, survival=data.survival)
    table = bounds.quantile_bounds_
    assert np.all(table["lower"] <= table["upper"])
    assert np.all(table["std_error_lower"] > 0)


def test_quantile_bounds_mean_of_the_trimmed_mixtures_equals_the_mean_bounds():
    # Source: the mean bounds (TrimmingBounds.lower_, upper_, computed by assumptions._bounds
    # with the same observation weights): the means of the trimmed mixtures G_L and G_U minus
    # the pure arm's mean are the mean bounds (see assumptions/_quantile_bounds.py).
    from pscore_strata.assumptions._quantile_bounds import trimmed_mixtures
    from pscore_strata.estimands import _view

    data = make_truncation(2500, n_features=3, random_state=5, follow_up=(0.8, 0.5),
                           response=(0.8, -0.5))  # fmt: skip
    bounds = ps.TrimmingBounds(missing="at_random").fit(
        data.X, data.y, treatment=data.treatment, survival=data.survival)
    from pscore_strata._validation import check_truncation_data
    from pscore_strata.nuisance import fit_nuisance

    checked = check_truncation_data(data.X, data.y, data.treatment, data.survival, None, None,
                                    missing="at_random")  # fmt: skip
    nuisance = fit_nuisance(checked, None, None, random_state=None, monotonicity="increasing")
    o = _view.orient(checked, nuisance, "increasing")
    masses = trimmed_mixtures(o, np.zeros(checked.n_samples, dtype=int))
    pure = np.sum(masses["pure"] * o.outcome)
    assert np.sum(masses["lower"] * o.outcome) - pure == pytest.approx(bounds.lower_, abs=1e-8)
    assert np.sum(masses["upper"] * o.outcome) - pure == pytest.approx(bounds.upper_, abs=1e-8)


@pytest.mark.slow
def test_cdf_intervals_cover_the_truth_under_missing_data():
    # Source: simulated truth (potential outcomes of 2 x 10^5 units). Lean version of
    # benchmarks/distribution_missing_coverage.py (300 replicates, both kinds, three
    # estimators: 93-97%): 80 replicates of n = 1000, weighting, outcomes missing at random;
    # the 95% interval of each arm's CDF at its true median must cover at least 85% of the
    # time (Monte Carlo SE of a 95% rate over 80 replicates: 2.4 points).
    big = make_truncation(200_000, n_features=3, random_state=99)
    always = big.stratum == "always_survivor"
    medians = {"treated": np.median(big.y1[always]), "control": np.median(big.y0[always])}
    hits = {"treated": [], "control": []}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for seed in range(80):
            data = make_truncation(1000, n_features=3, random_state=seed, response=(0.75, -0.5))
            est = _fit(ps.PrincipalScoreWeighting, data, data.y)
            for arm in hits:
                frame = ps.survivor_distribution(est, values=[medians[arm]], n_draws=100).to_frame()
                hits[arm].append(frame[f"{arm}_ci_low"][0] <= 0.5 <= frame[f"{arm}_ci_high"][0])
    coverage = {arm: np.mean(v) for arm, v in hits.items()}
    assert all(c >= 0.85 for c in coverage.values()), coverage


class _Recording(ps.PrincipalScoreWeighting):
    """Records the survival statuses each refit receives."""

    seen = []

    def fit(self, X, y, *, treatment, survival=None, **kwargs):
        type(self).seen.append(int(np.isnan(np.asarray(survival, dtype=float)).sum()))
        return super().fit(X, y, treatment=treatment, survival=survival, **kwargs)


def test_the_quantile_bootstrap_refits_with_unknown_statuses_left_unknown():
    # A unit lost to follow-up has an unknown status in every refit, not a death: the refit
    # must receive NaN where the fit did (the resample keeps such units).
    data = make_truncation(1500, random_state=8, follow_up=(0.8, 0.5))
    est = _Recording(missing="at_random").fit(data.X, data.y, treatment=data.treatment,
                                              survival=data.survival)  # fmt: skip
    _Recording.seen.clear()
    ps.quantile_effects(est, X=data.X, quantiles=[0.5], n_bootstrap=5, random_state=0)
    assert len(_Recording.seen) == 5
    assert all(count > 0 for count in _Recording.seen)
