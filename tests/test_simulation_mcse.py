"""summarize's Monte Carlo standard errors, relative efficiency, unknown truth and bounds rows.

Source of every expected value: Morris, White & Crowther (2019), "Using simulation studies to
evaluate statistical methods", Stat Med 38:2074-2102, Table 6, written out below term by term
with plain Python sums, independently of the library's vectorized code.
"""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.base import BaseEstimator
from sklearn.utils import Bunch

import pscore_strata as ps
from pscore_strata.simulation import plot_summary, run_study, summarize


def _table(estimates, std_errors, truth, estimator="e", replicates=None, **extra):
    k = len(estimates)
    z = stats.norm.ppf(0.975)
    frame = pd.DataFrame({
        "scenario": "s", "n_samples": 100, "estimator": estimator,
        "replicate": list(range(k)) if replicates is None else replicates,
        "estimate": estimates, "std_error": std_errors,
        "ci_low": np.asarray(estimates) - z * np.asarray(std_errors),
        "ci_high": np.asarray(estimates) + z * np.asarray(std_errors),
        "truth": truth, "failed": False, "fit_seconds": np.linspace(0.1, 0.3, k),
    })  # fmt: skip
    return frame.assign(**extra)


def morris(estimates, std_errors, truth):
    """Table 6 of Morris, White & Crowther (2019), one sum at a time."""
    n = len(estimates)
    mean = sum(estimates) / n
    dev2 = sum((t - mean) ** 2 for t in estimates)
    emp_se = math.sqrt(dev2 / (n - 1))
    out = {
        "bias": mean - truth,
        "bias_mcse": math.sqrt(dev2 / (n * (n - 1))),
        "sd": emp_se,
        "sd_mcse": emp_se / math.sqrt(2 * (n - 1)),
    }
    mse = sum((t - truth) ** 2 for t in estimates) / n
    mse_mcse = math.sqrt(sum(((t - truth) ** 2 - mse) ** 2 for t in estimates) / (n * (n - 1)))
    out["rmse"] = math.sqrt(mse)
    out["rmse_mcse"] = mse_mcse / (2 * math.sqrt(mse))  # delta method for the square root
    variances = [s**2 for s in std_errors]
    mean_var = sum(variances) / n
    var_var = sum((v - mean_var) ** 2 for v in variances) / (n - 1)
    mod_se = math.sqrt(mean_var)
    out["model_se"] = mod_se
    out["model_se_mcse"] = math.sqrt(var_var / (4 * n * mod_se**2))
    # Relative error in ModSE: 100 (ModSE / EmpSE - 1), MCSE 100 (ModSE / EmpSE)
    # sqrt(Var[Var-hat] / (4 n ModSE^4) + 1 / (2 (n - 1))); the ratio drops the 100 and the -1.
    out["se_sd_ratio"] = mod_se / emp_se
    out["se_sd_ratio_mcse"] = (mod_se / emp_se) * math.sqrt(
        var_var / (4 * n * mod_se**4) + 1 / (2 * (n - 1)))
    z = stats.norm.ppf(0.975)
    hits = sum(t - z * s <= truth <= t + z * s for t, s in zip(estimates, std_errors, strict=True))
    cover = hits / n
    out["coverage"] = cover
    out["coverage_mcse"] = math.sqrt(cover * (1 - cover) / n)
    return out


def test_every_measure_and_its_mcse_matches_morris_white_crowther_table_6():
    rng = np.random.default_rng(3)
    estimates = list(1.0 + 0.2 * rng.standard_normal(40) + 0.05)
    std_errors = list(0.2 * np.exp(0.2 * rng.standard_normal(40)))
    row = summarize(_table(estimates, std_errors, 1.0)).iloc[0]
    for name, value in morris(estimates, std_errors, 1.0).items():
        assert row[name] == pytest.approx(value, rel=1e-10), name
    assert row.median_fit_seconds == pytest.approx(0.2)
    assert row.interval == ""  # a hand-made table does not say how its intervals were made


def test_relative_efficiency_and_paired_difference_match_morris():
    rng = np.random.default_rng(4)
    shared = rng.standard_normal(60)
    a = 1.0 + 0.1 * shared + 0.05 * rng.standard_normal(60)
    b = 1.0 + 0.1 * shared + 0.12 * rng.standard_normal(60)
    table = pd.concat([_table(list(a), [0.1] * 60, 1.0, "ref"),
                       _table(list(b), [0.1] * 60, 1.0, "new")])  # fmt: skip
    summary = summarize(table, reference="ref").set_index("estimator")
    n = 60
    mean_a, mean_b = sum(a) / n, sum(b) / n
    var_a = sum((x - mean_a) ** 2 for x in a) / (n - 1)
    var_b = sum((x - mean_b) ** 2 for x in b) / (n - 1)
    cov = sum((x - mean_a) * (y - mean_b) for x, y in zip(a, b, strict=True)) / (n - 1)
    rho = cov / math.sqrt(var_a * var_b)
    # Morris et al. Table 6: relative % increase in precision of B against A,
    # 100 ((EmpSE_A / EmpSE_B)^2 - 1), MCSE 200 (EmpSE_A / EmpSE_B)^2 sqrt((1 - rho^2) / (n - 1)).
    efficiency = var_a / var_b
    assert summary.loc["new", "relative_efficiency"] == pytest.approx(efficiency)
    assert summary.loc["new", "relative_efficiency_mcse"] == pytest.approx(
        2 * efficiency * math.sqrt((1 - rho**2) / (n - 1)))
    differences = b - a
    assert summary.loc["new", "mean_difference"] == pytest.approx(differences.mean())
    assert summary.loc["new", "mean_difference_mcse"] == pytest.approx(
        differences.std(ddof=1) / math.sqrt(n))
    assert summary.loc["ref", "relative_efficiency"] == 1.0
    assert (summary["n_paired"] == 60).all() and (summary["reference"] == "ref").all()
    with pytest.raises(ValueError, match="`reference` must be one of the study's estimators"):
        summarize(table, reference="other")


def test_relative_efficiency_pairs_only_replicates_where_both_succeeded():
    a = _table([1.0, 1.2, 0.9, 1.1, 1.3], [0.1] * 5, 1.0, "ref")
    b = _table([1.1, 1.0, 0.7, 1.4, 1.2], [0.1] * 5, 1.0, "new")
    b.loc[1, "failed"] = True
    row = summarize(pd.concat([a, b]), reference="ref").set_index("estimator").loc["new"]
    keep = [0, 2, 3, 4]
    ra, rb = a["estimate"].to_numpy()[keep], b["estimate"].to_numpy()[keep]
    assert row.n_paired == 4
    assert row.relative_efficiency == pytest.approx(ra.var(ddof=1) / rb.var(ddof=1))


def test_an_unknown_truth_gives_nan_bias_rmse_and_coverage_never_zero():
    row = summarize(_table([1.0, 1.2, 0.9], [0.1, 0.1, 0.1], np.nan)).iloc[0]
    for name in ("bias", "bias_mcse", "rmse", "coverage", "coverage_mcse"):
        assert np.isnan(row[name]), name
    assert row.sd == pytest.approx(np.std([1.0, 1.2, 0.9], ddof=1))
    assert row.se_sd_ratio > 0


def unknown_truth(n_samples, random_state):
    rng = np.random.default_rng(random_state)
    treatment = rng.integers(0, 2, n_samples)
    return Bunch(X=rng.standard_normal((n_samples, 1)), y=0.5 * treatment + rng.standard_normal(
        n_samples), treatment=treatment, survival=np.ones(n_samples, int), true_effect=np.nan)


def infinite_truth(n_samples, random_state):
    data = unknown_truth(n_samples, random_state)
    data.true_effect = np.inf
    return data


class PointOnly(BaseEstimator):
    """A difference in means with a standard error but no conf_int (the contract's minimum)."""

    def fit(self, X, y, *, treatment, survival):
        y1, y0 = y[treatment == 1], y[treatment == 0]
        self.effect_ = y1.mean() - y0.mean()
        self.std_error_ = np.sqrt(y1.var(ddof=1) / y1.size + y0.var(ddof=1) / y0.size)
        return self


def test_study_with_unknown_truth_and_without_conf_int():
    results = run_study([PointOnly()], {"unknown": unknown_truth}, 80, n_reps=3, random_state=0)
    assert results["truth"].isna().all() and (results["interval"] == "wald").all()
    z = stats.norm.ppf(0.975)
    # Source: the Wald interval effect +/- z_{0.975} SE, written out.
    np.testing.assert_allclose(results["ci_high"], results["estimate"] + z * results["std_error"])
    row = summarize(results).iloc[0]
    assert np.isnan(row.coverage) and np.isnan(row.bias) and row.interval == "wald"
    with pytest.raises(ValueError, match="true_effect=inf; it must be finite"):
        run_study([PointOnly()], {"inf": infinite_truth}, 80, n_reps=1, random_state=0)


def own_trial(n_samples, random_state):
    data = ps.datasets.make_truncation(n_samples, design="randomized", pi_difference=1.0,
                                       random_state=random_state)  # fmt: skip
    data.true_bounds = (0.5, 2.0)  # a scenario may state its identified set itself
    return data


def test_the_identified_set_matches_the_trimming_recipe_on_potential_outcomes():
    # Source: the population bounds written out as in benchmarks/bounds_sensitivity_coverage.py
    # (Zhang & Rubin 2003; Lee 2009): trim Y(1) of the S(1) = 1 units by q = P(S(0)=1)/P(S(1)=1)
    # and subtract the S(0) = 1 units' mean Y(0), on 10^6 units of another seed. (TrimmingBounds
    # on one randomized sample of 300,000 gave 0.592 and 2.147: the estimator's limit.)
    identified_set = ps.datasets.SCENARIOS["pi_violated"].bounds
    big = ps.datasets.make_truncation(1_000_000, design="randomized", pi_difference=1.0,
                                      random_state=99)  # fmt: skip
    q = big.s0.mean() / big.s1.mean()
    y1 = np.sort(big.y1[big.s1 == 1])
    k = int(round(q * y1.size))
    control = big.y0[big.s0 == 1].mean()
    lower, upper = identified_set(design="randomized", pi_difference=1.0)
    assert lower == pytest.approx(y1[:k].mean() - control, abs=0.01)
    assert upper == pytest.approx(y1[-k:].mean() - control, abs=0.01)


def test_bounds_estimators_are_studied():
    estimators = {"bounds": ps.TrimmingBounds(), "weighting": ps.PrincipalScoreWeighting()}
    results = run_study(estimators, "pi_violated", 1500, n_reps=4, random_state=1,
                        params=[{"design": "randomized"}])  # fmt: skip
    bounds = results[results["estimator"] == "bounds"]
    assert (bounds["kind"] == "bounds").all() and bounds["estimate"].isna().all()
    assert (bounds["lower"] < bounds["upper"]).all()
    assert (bounds["set_low"] <= bounds["ci_low"]).all()  # the set's interval is the wider
    identified_set = ps.datasets.SCENARIOS["pi_violated"].bounds
    true_lower, true_upper = identified_set(pi_difference=1.0, design="randomized")
    assert (bounds["truth_lower"] == true_lower).all()
    assert (bounds["truth_upper"] == true_upper).all()
    summary = summarize(results).set_index("estimator")
    row = summary.loc["bounds"]
    assert row.kind == "bounds" and row.coverage == 1.0 and row.set_coverage == 1.0
    assert row.lower_bias == pytest.approx(bounds["lower"].mean() - true_lower)
    assert row.mean_bounds_width == pytest.approx((bounds["upper"] - bounds["lower"]).mean())
    assert summary.loc["weighting", "kind"] == "point"
    fig = plot_summary(summarize(results))  # bounds rows are left out of the point panels
    assert len(fig.axes) == 4
    own = run_study({"bounds": ps.TrimmingBounds()}, {"own": own_trial}, 600, n_reps=1,
                    random_state=0)  # fmt: skip
    assert own[["truth_lower", "truth_upper"]].iloc[0].tolist() == [0.5, 2.0]


def test_plot_draws_monte_carlo_error_bars_on_every_panel():
    import matplotlib

    matplotlib.use("Agg")
    rng = np.random.default_rng(0)
    table = pd.concat([
        _table(list(1 + 0.1 * rng.standard_normal(20)), [0.1] * 20, 1.0).assign(n_samples=n)
        for n in (100, 400)
    ])  # fmt: skip
    summary = summarize(table)
    fig = plot_summary(summary)
    for ax, column in zip(fig.axes, ("bias", "rmse", "se_sd_ratio", "coverage"), strict=True):
        bars = ax.containers[0]  # an ErrorbarContainer: (line, caps, bar collections)
        segments = bars.lines[2][0].get_segments()
        halves = [abs(seg[1][1] - seg[0][1]) / 2 for seg in segments]
        np.testing.assert_allclose(halves, 2 * summary[f"{column}_mcse"], rtol=1e-8)
    matplotlib.pyplot.close(fig)


def test_summary_table_prints_every_measure_with_its_mcse_in_every_format(tmp_path):
    from _table_readers import read_latex, read_markdown

    rng = np.random.default_rng(5)
    table = pd.concat([
        _table(list(1 + 0.1 * rng.standard_normal(30)), [0.1] * 30, 1.0, name).assign(scenario=s)
        for s in ("first", "second") for name in ("ref", "new")
    ])  # fmt: skip
    summary = summarize(table, reference="ref")
    written = ps.simulation.summary_table(summary, caption="Monte Carlo study", label="tab:mc")
    written.write(tmp_path / "mc.tex")
    written.write(tmp_path / "mc.md")
    for read, path in ((read_latex, "mc.tex"), (read_markdown, "mc.md")):
        header, rows = read((tmp_path / path).read_text())["Monte Carlo study"]
        assert header[:3] == ["Estimator", "n", "Bias"]
        body = [r for r in rows if r[0] not in ("first", "second", "**first**", "**second**")]
        assert len(body) == 4
        for printed, row in zip(body, summary.itertuples(), strict=True):
            # Source: the summary's own numbers, formatted to three decimals by hand.
            assert printed[2] == f"{row.bias:.3f} ({row.bias_mcse:.3f})".replace("-0.000", "0.000")
            assert printed[6] == f"{row.coverage:.3f} ({row.coverage_mcse:.3f})"
            assert printed[7] == (f"{row.relative_efficiency:.3f} "
                                  f"({row.relative_efficiency_mcse:.3f})")  # fmt: skip
    assert "Morris, White & Crowther" in (tmp_path / "mc.md").read_text()
    with pytest.raises(ValueError, match="`measures` must name columns.*'power'"):
        ps.simulation.summary_table(summary, measures=["power"])
    with pytest.raises(TypeError, match="`summary` must be"):
        ps.simulation.summary_table(table)
