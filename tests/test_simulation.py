"""Tests of the Monte Carlo harness: summaries, reproducibility, resuming, scenario truth."""

import matplotlib
import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.base import BaseEstimator
from sklearn.utils import Bunch

import pscore_strata as ps
from pscore_strata.datasets import SCENARIOS, make_scenario
from pscore_strata.simulation import plot_summary, run_study, summarize

matplotlib.use("Agg")

TIMING = ["fit_seconds"]


def _same(a, b):
    pd.testing.assert_frame_equal(a.drop(columns=TIMING), b.drop(columns=TIMING))


# -- toy pieces with a textbook answer -----------------------------------------------------------
class DifferenceInMeans(BaseEstimator):
    """Survivor-only difference in means with the Welch standard error (valid when nobody dies)."""

    def __init__(self, *, random_state=None):
        self.random_state = random_state

    def fit(self, X, y, *, treatment, survival, groups=None):
        y1, y0 = y[treatment == 1], y[treatment == 0]
        self.effect_ = y1.mean() - y0.mean()
        self.std_error_ = np.sqrt(y1.var(ddof=1) / y1.size + y0.var(ddof=1) / y0.size)
        return self

    def conf_int(self, level=0.95):
        z = stats.norm.ppf(0.5 + level / 2)
        return self.effect_ - z * self.std_error_, self.effect_ + z * self.std_error_


def trial_without_deaths(n_samples, random_state):
    """A randomized trial in which everyone survives, so the SACE is the average effect 0.5."""
    rng = np.random.default_rng(random_state)
    treatment = rng.integers(0, 2, n_samples)
    y = 0.5 * treatment + rng.standard_normal(n_samples)
    return Bunch(
        X=rng.standard_normal((n_samples, 2)),
        y=y,
        treatment=treatment,
        survival=np.ones(n_samples, dtype=int),
        true_effect=0.5,
    )


# The first covariate of replicate 0 of trial_without_deaths at n = 50 under random_state=0.
FIRST_X = ps.simulation.simulate_cell({"trial": trial_without_deaths}, 50, 0, 0).X[0, 0]


class Broken(DifferenceInMeans):
    """Fails in replicate 0 only (the study then records it and goes on)."""

    def fit(self, X, y, *, treatment, survival, groups=None):
        if abs(X[0, 0] - FIRST_X) < 1e-12:
            raise ValueError("cannot fit this replicate")
        return super().fit(X, y, treatment=treatment, survival=survival)


class AlwaysBroken(DifferenceInMeans):
    def fit(self, X, y, *, treatment, survival, groups=None):
        raise ValueError("cannot fit this replicate")


class NotANumber(DifferenceInMeans):
    def fit(self, X, y, *, treatment, survival, groups=None):
        super().fit(X, y, treatment=treatment, survival=survival)
        if abs(X[0, 0] - FIRST_X) < 1e-12:
            self.effect_ = np.nan
        return self


class Interrupting(DifferenceInMeans):
    """Raises KeyboardInterrupt once ``budget`` fits have run, as a user pressing Ctrl-C would."""

    budget = None
    fits = 0

    def fit(self, X, y, *, treatment, survival, groups=None):
        if Interrupting.budget is not None and Interrupting.fits >= Interrupting.budget:
            raise KeyboardInterrupt
        Interrupting.fits += 1
        return super().fit(X, y, treatment=treatment, survival=survival)


# -- summaries -----------------------------------------------------------------------------------
def test_summary_matches_hand_computation():
    table = pd.DataFrame(
        {
            "scenario": ["s"] * 4,
            "estimator": ["e"] * 4,
            "n_samples": [100] * 4,
            "replicate": [0, 1, 2, 3],
            "estimate": [1.2, 0.9, 1.5, np.nan],
            "std_error": [0.2, 0.4, 0.3, np.nan],
            "ci_low": [0.8, 0.1, 1.1, np.nan],
            "ci_high": [1.6, 1.7, 1.9, np.nan],
            "truth": [1.0] * 4,
            "failed": [False, False, False, True],
        }
    )
    row = summarize(table).iloc[0]
    # Source: hand arithmetic. Errors 0.2, -0.1, 0.5 -> bias 0.6/3 = 0.2. Mean estimate 1.2;
    # squared deviations 0, 0.09, 0.09 -> SD sqrt(0.18/2) = 0.3. RMSE sqrt((0.04+0.01+0.25)/3)
    # = sqrt(0.1). Mean SE 0.3; model SE sqrt((0.04+0.16+0.09)/3) (root mean squared SE,
    # Morris, White & Crowther 2019) -> SE/SD sqrt(0.29/3)/0.3. Intervals [0.8,1.6] and
    # [0.1,1.7] hold 1.0, [1.1,1.9] does not -> coverage 2/3; widths 0.8, 1.6, 0.8 -> mean 3.2/3.
    assert (row.n_reps, row.n_failed) == (4, 1)
    assert row.bias == pytest.approx(0.2)
    assert row.mean_estimate == pytest.approx(1.2)
    assert row.sd == pytest.approx(0.3)
    assert row.rmse == pytest.approx(np.sqrt(0.1))
    assert row.mean_se == pytest.approx(0.3)
    assert row.se_sd_ratio == pytest.approx(np.sqrt(0.29 / 3) / 0.3)
    assert row.coverage == pytest.approx(2 / 3)
    assert row.mean_width == pytest.approx(3.2 / 3)
    # Monte Carlo errors (Morris, White & Crowther 2019, Stat Med; formulas recalled from
    # memory): SD / sqrt(k) and sqrt(c (1 - c) / k) with k = 3.
    assert row.bias_mcse == pytest.approx(0.3 / np.sqrt(3))
    assert row.coverage_mcse == pytest.approx(np.sqrt(2 / 9 / 3))


def test_summary_groups_in_order_of_appearance_and_carries_cautions():
    table = pd.DataFrame(
        {
            "scenario": ["b", "b", "a", "a"],
            "estimator": ["x", "y", "x", "y"],
            "n_samples": [50] * 4,
            "estimate": [1.0, 2.0, 3.0, 4.0],
            "std_error": [1.0] * 4,
            "ci_low": [0.0] * 4,
            "ci_high": [5.0] * 4,
            "truth": [1.0] * 4,
            "failed": [False] * 4,
        }
    )
    summary = summarize(table)
    assert summary[["scenario", "estimator"]].values.tolist() == [
        ["b", "x"],
        ["b", "y"],
        ["a", "x"],
        ["a", "y"],
    ]
    assert np.isnan(summary["sd"]).all()  # one replicate: no Monte Carlo SD
    assert "latent" in summary.attrs["notes"][0]


def test_wald_interval_for_a_difference_in_means_has_nominal_coverage():
    # Source: normal theory. With no deaths the SACE is the average effect, and the Welch
    # interval for a difference in means covers it 95% of the time at n = 400. 400 replicates
    # give a binomial SD of 1.1 points; allow 4 of them.
    results = run_study(
        {"diff": DifferenceInMeans()},
        {"trial": trial_without_deaths},
        400,
        n_reps=400,
        random_state=3,
    )
    row = summarize(results).iloc[0]
    assert abs(row.coverage - 0.95) < 4 * np.sqrt(0.95 * 0.05 / 400)
    assert abs(row.bias) < 4 * row.bias_mcse
    # The true SD of the difference is sqrt(1/200 + 1/200) = 0.1.
    assert row.sd == pytest.approx(0.1, rel=0.15)
    assert row.se_sd_ratio == pytest.approx(1.0, rel=0.15)


# -- the study -----------------------------------------------------------------------------------
ESTIMATORS = {
    "weighting": ps.PrincipalScoreWeighting(),
    "robust_crossfit": ps.MultiplyRobust(n_folds=2),
}


def test_rows_columns_and_truth():
    results = run_study(ESTIMATORS, ["linear", "clustered"], [300, 400], n_reps=2, random_state=0)
    assert len(results) == 2 * 2 * 2 * 2
    assert list(results.columns[:4]) == ["scenario", "n_samples", "replicate", "estimator"]
    assert results["scenario"].unique().tolist() == ["linear", "clustered"]
    assert (results["truth"] == 1.0).all()
    assert not results["failed"].any()
    assert (results["ci_low"] < results["estimate"]).all()
    assert (results["fit_seconds"] > 0).all()


def test_results_do_not_depend_on_n_jobs_or_on_other_cells():
    full = run_study(
        ESTIMATORS, ["linear", "binary"], [300, 500], n_reps=3, random_state=7, n_jobs=1
    )
    parallel = run_study(
        ESTIMATORS,
        ["linear", "binary"],
        [300, 500],
        n_reps=3,
        random_state=7,
        n_jobs=2,
        batch_size=5,
    )
    _same(full, parallel)
    subset = run_study(
        {"robust_crossfit": ESTIMATORS["robust_crossfit"]},
        ["binary"],
        500,
        n_reps=3,
        random_state=7,
    )
    expected = full[
        (full.scenario == "binary")
        & (full.n_samples == 500)
        & (full.estimator == "robust_crossfit")
    ].reset_index(drop=True)
    _same(subset, expected)
    other_seed = run_study(ESTIMATORS, ["linear"], 300, n_reps=1, random_state=8)
    assert other_seed["estimate"].iloc[0] != full["estimate"].iloc[0]


def test_dask_backend_gives_the_same_results():
    import joblib
    from distributed import Client, LocalCluster

    # One single-threaded worker: Python's warning filters are process-wide, so only the
    # ``warnings`` column could differ between threads fitting at once in one process.
    with (
        LocalCluster(
            n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None
        ) as cluster,
        Client(cluster),
    ):
        with joblib.parallel_config(backend="dask"):
            on_dask = run_study(ESTIMATORS, "linear", 300, n_reps=3, random_state=5)
    _same(on_dask, run_study(ESTIMATORS, "linear", 300, n_reps=3, random_state=5, n_jobs=1))


# Threads share the warning filters, so a warning may escape the per-fit recorder here.
@pytest.mark.filterwarnings("ignore")
def test_threads_give_the_same_estimates():
    import joblib

    with joblib.parallel_config(backend="threading", n_jobs=2):
        threaded = run_study(ESTIMATORS, "linear", 300, n_reps=3, random_state=5)
    alone = run_study(ESTIMATORS, "linear", 300, n_reps=3, random_state=5, n_jobs=1)
    _same(threaded.drop(columns="warnings"), alone.drop(columns="warnings"))


class SeedReporter(DifferenceInMeans):
    def fit(self, X, y, *, treatment, survival, groups=None):
        super().fit(X, y, treatment=treatment, survival=survival)
        self.effect_ = np.nan if self.random_state is None else float(self.random_state)
        return self


def test_unset_random_states_are_fixed_per_replicate():
    results = run_study(
        {"unset": SeedReporter(), "set": SeedReporter(random_state=1)},
        {"trial": trial_without_deaths},
        50,
        n_reps=3,
        random_state=0,
    )
    seeds = results.set_index("estimator")["estimate"]
    assert seeds["unset"].notna().all() and seeds["unset"].nunique() == 3
    assert (seeds["set"] == 1).all()
    # The harness fits clones; the passed estimator keeps its unset random_state.
    est = SeedReporter()
    run_study([est], {"trial": trial_without_deaths}, 50, n_reps=1, random_state=0)
    assert est.random_state is None and not hasattr(est, "effect_")


def test_failures_are_recorded_not_raised():
    results = run_study(
        {"ok": DifferenceInMeans(), "broken": Broken(), "nan": NotANumber()},
        {"trial": trial_without_deaths},
        50,
        n_reps=3,
        random_state=0,
    )
    by_name = results.set_index(["estimator", "replicate"])
    assert not by_name.loc["ok", "failed"].any()
    assert by_name.loc["broken", "failed"].tolist() == [True, False, False]
    assert by_name.loc[("broken", 0), "error"] == "ValueError: cannot fit this replicate"
    assert by_name.loc[("nan", 0), "error"] == "non-finite estimate"
    summary = summarize(results).set_index("estimator")
    assert summary.loc["broken", "n_failed"] == 1 and np.isfinite(summary.loc["broken", "bias"])
    assert summary.loc["ok", "n_failed"] == 0


def test_an_estimator_failing_every_replicate_stops_the_study_with_its_first_error():
    with pytest.raises(RuntimeError, match=r"'broken' failed in all 2 replicates of scenario "
                       r"'trial'.*replicate 0\): ValueError: cannot fit this replicate"):
        run_study({"ok": DifferenceInMeans(), "broken": AlwaysBroken()},
                  {"trial": trial_without_deaths}, 50, n_reps=2, random_state=0)
    # The default estimators on a scenario with missing survival statuses: the error says why.
    with pytest.raises(RuntimeError, match="PrincipalScoreWeighting.*failed in all.*at_random"):
        run_study([ps.PrincipalScoreWeighting()], "lost_to_follow_up", 300, n_reps=2,
                  random_state=0)


def test_warnings_are_recorded():
    results = run_study(
        [ps.PrincipalScoreWeighting()], "weak_overlap", 300, n_reps=2, random_state=0
    )
    assert results["warnings"].str.len().gt(0).any()


def test_progress_bar_runs(capsys):
    run_study(
        [DifferenceInMeans()],
        {"trial": trial_without_deaths},
        30,
        n_reps=2,
        random_state=0,
        progress=True,
    )
    assert "2/2" in capsys.readouterr().err


# -- checkpoints ---------------------------------------------------------------------------------
def _interrupted_then_resumed(tmp_path, budget):
    study = dict(
        estimators={"diff": Interrupting()},
        scenarios={"trial": trial_without_deaths},
        n_samples=[40, 60],
        n_reps=5,
        random_state=11,
        batch_size=2,
    )
    Interrupting.budget, Interrupting.fits = budget, 0
    with pytest.raises(KeyboardInterrupt):
        run_study(**study, checkpoint=tmp_path / "ck", n_jobs=1)
    saved = len(list((tmp_path / "ck").glob("part-*.parquet")))
    Interrupting.budget, Interrupting.fits = None, 0
    resumed = run_study(**study, checkpoint=tmp_path / "ck", n_jobs=1)
    refits = Interrupting.fits
    uninterrupted = run_study(**study)
    return resumed, uninterrupted, saved, refits


def test_resume_after_interruption_equals_an_uninterrupted_run(tmp_path):
    resumed, uninterrupted, saved, refits = _interrupted_then_resumed(tmp_path, budget=7)
    # Seven fits finished: three whole batches of two cells were saved, the fourth was lost.
    assert saved == 3
    assert refits == 10 - 6
    _same(resumed, uninterrupted)


def test_deleted_part_files_are_recomputed(tmp_path):
    study = dict(
        estimators=ESTIMATORS,
        scenarios=["linear"],
        n_samples=300,
        n_reps=4,
        random_state=2,
        batch_size=1,
        checkpoint=tmp_path,
    )
    first = run_study(**study)
    parts = sorted(tmp_path.glob("part-*.parquet"))
    assert len(parts) == 4
    for part in parts[:2]:
        part.unlink()
    _same(run_study(**study), first)


def test_checkpoint_reuses_its_seed_and_extends_the_study(tmp_path):
    small = run_study(
        [DifferenceInMeans()], {"trial": trial_without_deaths}, 50, n_reps=2, checkpoint=tmp_path
    )
    larger = run_study(
        [DifferenceInMeans()], {"trial": trial_without_deaths}, 50, n_reps=4, checkpoint=tmp_path
    )
    _same(larger.iloc[:2], small)
    assert len(larger) == 4


def test_checkpoint_refuses_another_study(tmp_path):
    run_study(
        [DifferenceInMeans()],
        {"trial": trial_without_deaths},
        30,
        n_reps=1,
        random_state=1,
        checkpoint=tmp_path,
    )
    with pytest.raises(ValueError, match="`checkpoint`.*random_state"):
        run_study(
            [DifferenceInMeans()],
            {"trial": trial_without_deaths},
            30,
            n_reps=1,
            random_state=2,
            checkpoint=tmp_path,
        )
    with pytest.raises(ValueError, match="`checkpoint`.*random_state None -> 3"):
        run_study(
            [DifferenceInMeans(random_state=3)],
            {"trial": trial_without_deaths},
            30,
            n_reps=1,
            random_state=1,
            checkpoint=tmp_path,
        )
    a_file = tmp_path / "file.txt"
    a_file.write_text("x")
    with pytest.raises(ValueError, match="`checkpoint` must be a directory"):
        run_study([DifferenceInMeans()], "linear", 30, n_reps=1, checkpoint=a_file)


# -- bad input -----------------------------------------------------------------------------------
GOOD = dict(
    estimators=[DifferenceInMeans()], scenarios={"trial": trial_without_deaths}, n_samples=50,
    n_reps=1,
)


@pytest.mark.parametrize(
    "change, error, pattern",
    [
        ({"estimators": DifferenceInMeans()}, TypeError, "`estimators` must be a dict"),
        ({"estimators": {}}, ValueError, "`estimators` is empty"),
        ({"estimators": [DifferenceInMeans(), DifferenceInMeans()]}, ValueError, "two Diff"),
        ({"estimators": {"a": object()}}, TypeError, r"`estimators\['a'\]`"),
        ({"estimators": {1: DifferenceInMeans()}}, TypeError, "names must be non-empty"),
        ({"scenarios": "easy"}, ValueError, "unknown scenario 'easy'"),
        ({"scenarios": []}, ValueError, "`scenarios` is empty"),
        ({"scenarios": 3}, TypeError, "`scenarios` must be"),
        ({"scenarios": {"a": 3}}, TypeError, "`scenarios` entries"),
        ({"scenarios": [lambda n, r: None]}, ValueError, "without a usable name"),
        (
            {"scenarios": {"linear": "linear", "x": "binary"}, "n_samples": [50, 50]},
            ValueError,
            "repeats",
        ),
        ({"scenarios": ["linear", {"linear": "binary"}]}, TypeError, "entries"),
        ({"n_samples": 1}, ValueError, "`n_samples` must be an integer >= 2"),
        ({"n_samples": []}, ValueError, "`n_samples`"),
        ({"n_samples": 5.5}, TypeError, "`n_samples`"),
        ({"n_reps": 0}, ValueError, "`n_reps`"),
        ({"n_reps": True}, ValueError, "`n_reps`"),
        ({"random_state": np.random.default_rng(0)}, TypeError, "`random_state`"),
        ({"random_state": -1}, TypeError, "`random_state`"),
        ({"level": 1.5}, ValueError, "`level`"),
        ({"batch_size": 0}, ValueError, "`batch_size`"),
    ],
)
def test_bad_arguments_name_the_argument(change, error, pattern):
    with pytest.raises(error, match=pattern):
        run_study(**{**GOOD, **change})


def test_duplicate_scenario_names_are_refused():
    def linear(n_samples, random_state):
        return make_scenario("linear", n_samples, random_state)

    with pytest.raises(ValueError, match="names 'linear' twice"):
        run_study(**{**GOOD, "scenarios": ["linear", linear]})


def test_a_scenario_callable_must_return_the_fields():
    def incomplete(n_samples, random_state):
        return Bunch(X=np.zeros((n_samples, 1)))

    with pytest.raises(ValueError, match="without y, treatment, survival, true_effect"):
        run_study(**{**GOOD, "scenarios": incomplete})


def test_summarize_and_plot_refuse_other_input():
    with pytest.raises(TypeError, match="`results` must be the DataFrame"):
        summarize([1, 2])
    with pytest.raises(ValueError, match="lacks the column.*truth"):
        summarize(pd.DataFrame({"scenario": ["a"]}))
    results = run_study(**GOOD)
    with pytest.raises(ValueError, match="has no rows"):
        summarize(results.iloc[:0])
    with pytest.raises(TypeError, match="`summary` must be"):
        plot_summary(results)


def test_caller_estimators_and_scenarios_are_not_mutated():
    estimators = {"w": ps.PrincipalScoreWeighting()}
    before = repr(estimators["w"])
    run_study(estimators, ["linear"], 200, n_reps=1, random_state=0)
    assert repr(estimators["w"]) == before and not hasattr(estimators["w"], "effect_")


# -- the figure ----------------------------------------------------------------------------------
def test_plot_summary_draws_one_row_per_scenario():
    results = run_study(ESTIMATORS, ["linear", "binary"], [300, 600], n_reps=3, random_state=0)
    fig = plot_summary(summarize(results))
    assert fig.axes[0].get_title().startswith("Bias")
    assert len(fig.axes) == 2 * 4
    assert fig.axes[0].get_ylabel() == "linear" and fig.axes[4].get_ylabel() == "binary"
    matplotlib.pyplot.close(fig)


# -- the scenario library's truth ----------------------------------------------------------------
# The intermediate family's stratum effects are checked in tests/test_strata_simulation.py.
@pytest.mark.parametrize(
    "name", [name for name, record in SCENARIOS.items() if record.family == "truncation"]
)
def test_scenario_truth_matches_its_potential_outcomes(name):
    # Source: simulated truth. By the law of large numbers the mean of Y(1) - Y(0) over the
    # always-survivors of a large sample converges to the SACE; allow 4 standard errors plus
    # the stated Monte Carlo error of the truth.
    data = make_scenario(name, 200_000 if name != "high_dimensional" else 60_000, random_state=4)
    always = data.stratum == "always_survivor"
    difference = data.y1[always] - data.y0[always]
    assert not np.isnan(difference).any()
    if name == "clustered":
        # Units share a cluster effect, but it cancels in Y(1) - Y(0); noise stays independent.
        assert data.groups.max() < 200_000 / 20
    tolerance = 4 * np.hypot(
        difference.std(ddof=1) / np.sqrt(always.sum()), data.true_effect_mc_error
    )
    assert abs(difference.mean() - data.true_effect) < tolerance
