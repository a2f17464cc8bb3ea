"""Diagnostics: balance, weights, overlap, monotonicity checks, warnings and their plots."""

import io
import subprocess
import sys
import warnings

import matplotlib
import matplotlib.pyplot  # the plots are drawn with pyplot figures
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from sklearn.compose import ColumnTransformer
from sklearn.exceptions import NotFittedError
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import PolynomialFeatures, StandardScaler
from sklearn.utils import Bunch
from statsmodels.stats.proportion import confint_proportions_2indep, proportions_ztest

import pscore_strata as ps
from pscore_strata import plotting

matplotlib.use("Agg")


def _fit(estimator, data, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return estimator.fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival, **kwargs
        )


def _flexible_survival_model():
    # P(S=1 | T=1, X) in make_truncation mixes two logistic strata, so it is not main-effects
    # logistic; a quadratic logit approximates it closely.
    return make_pipeline(
        PolynomialFeatures(2, include_bias=False),
        StandardScaler(),
        LogisticRegression(C=np.inf, max_iter=1000),
    )


def _blind_survival_model(column):
    drop = ColumnTransformer([("blind", "drop", [column])], remainder="passthrough")
    return Pipeline([("drop", drop), ("logit", LogisticRegression(C=np.inf))])


@pytest.fixture(scope="module")
def large():
    return ps.datasets.make_truncation(20_000, random_state=11)


@pytest.fixture(scope="module")
def correct_fit(large):
    model = ps.PrincipalScoreWeighting(survival_model=_flexible_survival_model(), n_bootstrap=0)
    return _fit(model, large)


@pytest.fixture(scope="module")
def small():
    return ps.datasets.make_truncation(3000, random_state=5)


@pytest.fixture(scope="module")
def small_fit(small):
    return _fit(ps.PrincipalScoreWeighting(), small)


def _logit_predictions(X, target, rows, freq_weights=None):
    """Independent maximum likelihood fit (statsmodels GLM) predicted on every row."""
    design = sm.add_constant(X)
    weights = None if freq_weights is None else freq_weights[rows]
    fit = sm.GLM(target[rows], design[rows], family=sm.families.Binomial(), freq_weights=weights)
    return fit.fit(tol=1e-12).predict(design)


def _independent_weights(data, sample_weight=None, monotonicity="increasing"):
    X, T, S = data.X, data.treatment, data.survival
    pi = _logit_predictions(X, T, np.ones_like(T, bool), sample_weight)
    p1 = _logit_predictions(X, S, T == 1, sample_weight)
    p0 = _logit_predictions(X, S, T == 0, sample_weight)
    base = np.ones(len(T)) if sample_weight is None else sample_weight
    if monotonicity == "increasing":
        treated, control, everyone = p0 / (pi * p1), 1 / (1 - pi), p0
    else:
        treated, control, everyone = 1 / pi, p1 / ((1 - pi) * p0), p1
    return {
        "treated_survivors": base * T * S * treated,
        "control_survivors": base * (1 - T) * S * control,
        "everyone": base * everyone,
    }


# -- balance ------------------------------------------------------------------------------------
def test_correct_models_balance_every_covariate(correct_fit, large):
    table = ps.balance_table(correct_fit, large.X)
    weighted = table.filter(regex="^smd_").abs()
    # 0.1 is the common-practice limit for negligible imbalance.
    assert weighted.to_numpy().max() < 0.1
    # The survivor-only comparison is badly imbalanced in x0 and x1 (they drive treatment and
    # survival in the simulation), which is the bias the weighting removes.
    assert table.loc[["x0", "x1"], "raw_smd_treated_vs_control"].abs().min() > 0.5


@pytest.mark.parametrize("column", [0, 1])
def test_survival_model_blind_to_a_covariate_is_caught(large, column):
    model = ps.PrincipalScoreWeighting(survival_model=_blind_survival_model(column), n_bootstrap=0)
    fitted = _fit(model, large)
    worst = ps.balance_table(fitted, large.X).filter(regex="^smd_").abs().max(axis=1)
    assert worst.idxmax() == f"x{column}"
    assert worst.max() > 0.1
    messages = ps.diagnostic_warnings(fitted, large.X)
    assert any("balance" in m and f"x{column}" in m for m in messages)


def test_weighted_means_match_independent_computation(small_fit, small):
    table = ps.balance_table(small_fit, small.X)
    weights = _independent_weights(small)
    T, S, X = small.treatment, small.survival, small.X
    raw_t, raw_c = X[(T == 1) & (S == 1)], X[(T == 0) & (S == 1)]
    pooled = np.sqrt((raw_t.var(axis=0) + raw_c.var(axis=0)) / 2)
    means = {g: np.average(X, axis=0, weights=w) for g, w in weights.items()}
    for group, mean in means.items():
        np.testing.assert_allclose(table[f"mean_{group}"], mean, atol=1e-7)
    np.testing.assert_allclose(
        table["smd_treated_vs_control"],
        (means["treated_survivors"] - means["control_survivors"]) / pooled,
        atol=1e-6,
    )
    variance = {g: np.average((X - means[g]) ** 2, axis=0, weights=w) for g, w in weights.items()}
    np.testing.assert_allclose(
        table["variance_ratio_treated_vs_everyone"],
        variance["treated_survivors"] / variance["everyone"],
        rtol=1e-6,
    )
    np.testing.assert_allclose(
        table["raw_smd_treated_vs_control"], (raw_t.mean(0) - raw_c.mean(0)) / pooled, atol=1e-10
    )


def test_effective_sample_size_is_kish(small_fit, small):
    # Kish (1965): n_eff = (sum w)^2 / sum w^2, from independently fitted weights.
    expected = {g: w.sum() ** 2 / np.sum(w**2) for g, w in _independent_weights(small).items()}
    from_table = ps.balance_table(small_fit, small.X).attrs["effective_sample_size"]
    summary = ps.weight_summary(small_fit)
    for group, value in expected.items():
        assert from_table[group] == pytest.approx(value, rel=1e-6)
        assert summary.loc[group, "effective_sample_size"] == pytest.approx(value, rel=1e-6)


def test_sample_weights_enter_every_weight(small):
    rng = np.random.default_rng(3)
    sample_weight = rng.uniform(0.5, 2.0, size=small.treatment.size)
    fitted = _fit(ps.PrincipalScoreWeighting(), small, sample_weight=sample_weight)
    table = ps.balance_table(fitted, small.X)
    weights = _independent_weights(small, sample_weight)
    for group, w in weights.items():
        np.testing.assert_allclose(
            table[f"mean_{group}"], np.average(small.X, axis=0, weights=w), atol=1e-6
        )
    T, S = small.treatment, small.survival
    raw = sample_weight * T * S
    np.testing.assert_allclose(
        table["raw_mean_treated_survivors"], np.average(small.X, axis=0, weights=raw), atol=1e-12
    )


def test_decreasing_monotonicity_swaps_the_arms():
    data = ps.datasets.make_truncation(3000, monotonicity="decreasing", random_state=2)
    fitted = _fit(ps.PrincipalScoreWeighting(monotonicity="decreasing"), data)
    table = ps.balance_table(fitted, data.X)
    for group, w in _independent_weights(data, monotonicity="decreasing").items():
        np.testing.assert_allclose(
            table[f"mean_{group}"], np.average(data.X, axis=0, weights=w), atol=1e-7
        )


@pytest.mark.parametrize("estimator", [ps.OutcomeRegression, ps.MultiplyRobust])
def test_every_estimator_gives_the_same_balance(estimator, small_fit, small):
    other = _fit(estimator(), small)
    pd.testing.assert_frame_equal(
        ps.balance_table(other, small.X), ps.balance_table(small_fit, small.X)
    )


def test_text_and_categorical_columns_become_indicator_rows(small_fit, small):
    frame = pd.DataFrame(small.X, columns=[f"c{j}" for j in range(5)])
    frame["site"] = np.where(small.X[:, 0] > 0.5, "north", "south")
    frame["ward"] = pd.Categorical(np.where(small.X[:, 1] > 0, "A", "B"))
    frame["smoker"] = small.X[:, 2] > 0
    frame.loc[::7, "c4"] = np.nan
    before = frame.copy()
    table = ps.balance_table(small_fit, frame)
    pd.testing.assert_frame_equal(frame, before)  # the caller's data is not changed
    expected = ["c0", "c1", "c2", "c3", "c4", "c4 (missing)", "site=north", "site=south"]
    assert list(table.index) == expected + ["ward=A", "ward=B", "smoker"]
    w = _independent_weights(small)["control_survivors"]
    north = (frame["site"] == "north").to_numpy()
    assert table.loc["site=north", "mean_control_survivors"] == pytest.approx(
        np.average(north, weights=w), abs=1e-7
    )
    observed = frame["c4"].notna().to_numpy()
    assert table.loc["c4", "mean_control_survivors"] == pytest.approx(
        np.average(small.X[observed, 4], weights=w[observed]), abs=1e-7
    )
    np.testing.assert_allclose(
        table.loc[["site=north", "site=south"]].filter(like="mean_").sum(), 1.0
    )
    array = small.X.copy()
    array[::5, 3] = np.nan
    before = array.copy()
    ps.balance_table(small_fit, array)
    np.testing.assert_array_equal(array, before)  # NaN included: arrays are not changed either
    text_array = frame[["c0", "site"]].to_numpy()  # numpy object array: text and numbers
    assert list(ps.balance_table(small_fit, text_array).index) == ["x0", "x1=north", "x1=south"]


# -- weights and overlap ------------------------------------------------------------------------
def test_weight_summary_matches_numpy(small_fit, small):
    summary = ps.weight_summary(small_fit)
    w = _independent_weights(small)["treated_survivors"]
    w = w[w > 0]
    row = summary.loc["treated_survivors"]
    assert row["n_rows"] == w.size
    assert row["max"] == pytest.approx(w.max(), rel=1e-6)
    assert row["q99"] == pytest.approx(np.quantile(w, 0.99), rel=1e-6)
    top = np.sort(w)[-int(np.ceil(w.size / 100)) :]
    assert row["top1pct_share"] == pytest.approx(top.sum() / w.sum(), rel=1e-6)


def test_overlap_summary_matches_numpy(small_fit, small):
    table = ps.overlap_summary(small_fit)
    pi = small_fit.nuisance_.treatment_probability
    treated = small.treatment == 1
    assert table.loc[("treatment", "treated"), "median"] == pytest.approx(np.median(pi[treated]))
    assert table.loc[("treatment", "control"), "n_rows"] == (~treated).sum()
    always = small_fit.principal_scores_[:, 0]
    assert table.loc[("always_survivor", "control"), "q05"] == pytest.approx(
        np.quantile(always[~treated], 0.05)
    )
    share = np.mean((pi < 0.05) | (pi > 0.95))
    assert table.attrs["share_treatment_outside_bounds"] == pytest.approx(share)


# -- monotonicity -------------------------------------------------------------------------------
def test_crude_survival_comparison_matches_statsmodels(small_fit, small):
    strata = np.where(small.X[:, 0] > 0, "high x0", "low x0")
    table = ps.monotonicity_check(small_fit, strata=strata, adjust=False, level=0.9)
    assert list(table.index) == ["overall", "high x0", "low x0"]
    T, S = small.treatment, small.survival
    for name, rows in (("overall", np.ones_like(T, bool)), ("low x0", strata == "low x0")):
        counts = [S[rows & (T == 1)].sum(), S[rows & (T == 0)].sum()]
        sizes = [(rows & (T == 1)).sum(), (rows & (T == 0)).sum()]
        z, p_value = proportions_ztest(counts, sizes)  # statsmodels reference
        low, high = confint_proportions_2indep(
            counts[0], sizes[0], counts[1], sizes[1], method="wald", alpha=0.1
        )
        assert table.loc[name, "z"] == pytest.approx(z, rel=1e-9)
        assert table.loc[name, "p_value"] == pytest.approx(p_value, rel=1e-6, abs=1e-300)
        assert table.loc[name, ["ci_low", "ci_high"]].tolist() == pytest.approx([low, high])


def test_adjusted_comparison_equals_crude_when_randomized():
    data = ps.datasets.make_truncation(2000, design="randomized", random_state=4)
    fitted = _fit(ps.PrincipalScoreWeighting(treatment_model=0.5), data)
    adjusted = ps.monotonicity_check(fitted)
    T, S = data.treatment, data.survival
    z, _ = proportions_ztest([S[T == 1].sum(), S[T == 0].sum()], [(T == 1).sum(), (T == 0).sum()])
    assert adjusted.loc["overall", "z"] == pytest.approx(z, rel=1e-9)
    # Default strata are quintiles of the fitted always-survivor score.
    assert len(adjusted) == 6
    assert adjusted.iloc[1:][["n_treated", "n_control"]].to_numpy().sum() == T.size


def test_strata_from_a_column_of_X(small_fit, small):
    frame = pd.DataFrame(small.X, columns=list("abcde"))
    table = ps.monotonicity_check(small_fit, frame, strata="a")
    assert len(table) == 6 and table.attrs["strata"] == "column 'a' of X"
    assert table["n_fitted_violations"].iloc[0] == small_fit.n_monotonicity_violations_


def test_wrong_monotonicity_direction_is_contradicted():
    # The simulated treatment can only harm survival, yet the analysis assumes it only helps.
    data = ps.datasets.make_truncation(4000, monotonicity="decreasing", random_state=8)
    fitted = _fit(ps.PrincipalScoreWeighting(), data)
    table = ps.monotonicity_check(fitted)
    assert table.loc["overall", "contradicts_monotonicity"]
    assert any(m.startswith("Monotonicity") for m in ps.diagnostic_warnings(fitted))


# -- warnings -----------------------------------------------------------------------------------
def test_no_warnings_for_a_sound_analysis(correct_fit, large):
    assert ps.diagnostic_warnings(correct_fit, large.X) == []


def test_weak_overlap_is_reported():
    data = ps.datasets.make_scenario("weak_overlap", 3000, random_state=1)
    fitted = _fit(ps.PrincipalScoreWeighting(), data)
    messages = ps.diagnostic_warnings(fitted)
    assert any("treatment probability outside [0.05, 0.95]" in m for m in messages)


def test_rare_always_survivors_are_reported(small):
    survival = small.survival * (small.X[:, 1] > -0.3)  # nobody below x1 = -0.3 survives
    data = Bunch(**small)
    data.survival = survival
    fitted = _fit(ps.PrincipalScoreWeighting(), data)
    messages = ps.diagnostic_warnings(fitted)
    assert any("always-survivor score below 0.05" in m for m in messages)


# -- plots --------------------------------------------------------------------------------------
def _png(figure):
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    matplotlib.pyplot.close(figure)
    return buffer.getvalue()


@pytest.mark.parametrize(
    "draw",
    [
        lambda est, X, ax: plotting.plot_balance(est, X, ax=ax),
        lambda est, X, ax: plotting.plot_balance(est, X, max_covariates=3, ax=ax),
        lambda est, X, ax: plotting.plot_balance(
            ps.balance_table(est, X), comparison="control_vs_everyone", ax=ax
        ),
        lambda est, X, ax: plotting.plot_overlap(est, ax=ax),
        lambda est, X, ax: plotting.plot_overlap(est, score="always_survivor", ax=ax),
        lambda est, X, ax: plotting.plot_weights(est, ax=ax),
    ],
)
@pytest.mark.parametrize("own_axes", [False, True])
def test_every_plot_renders_to_png(draw, own_axes, small_fit, small):
    ax = matplotlib.pyplot.subplots()[1] if own_axes else None
    figure = draw(small_fit, small.X, ax)
    assert isinstance(figure, matplotlib.figure.Figure)
    if own_axes:
        assert figure is ax.figure
    assert _png(figure).startswith(b"\x89PNG")


def test_import_does_not_load_matplotlib():
    code = (
        "import sys, pscore_strata as ps; ps.plotting.plot_balance; "
        "print('matplotlib' in sys.modules)"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    )
    assert result.stdout.strip() == "False"


# -- errors -------------------------------------------------------------------------------------
def test_unfitted_estimator_is_rejected():
    for function in (ps.weight_summary, ps.overlap_summary, ps.monotonicity_check):
        with pytest.raises(NotFittedError, match="not fitted yet; call fit"):
            function(ps.PrincipalScoreWeighting())
    with pytest.raises(NotFittedError, match="MultiplyRobust is not fitted yet"):
        ps.balance_table(ps.MultiplyRobust(), np.zeros((3, 1)))
    with pytest.raises(TypeError, match="`estimator` must be a fitted pscore_strata"):
        ps.diagnostic_warnings("model")


@pytest.mark.parametrize(
    ("X", "message"),
    [
        (np.zeros((10, 5)), "`X` has 10 rows but the estimator was fitted on 3000"),
        (None, "`X` is required for covariate balance"),
        (np.zeros(3000), "`X` must be two-dimensional"),
        (np.zeros((3000, 0)), "`X` has no columns"),
        (np.full((3000, 1), np.inf), "column 'x0' has infinite values"),
    ],
)
def test_bad_covariates_are_rejected(small_fit, X, message):
    with pytest.raises(ValueError, match=message):
        ps.balance_table(small_fit, X)


def test_bad_monotonicity_arguments_are_rejected(small_fit, small):
    with pytest.raises(ValueError, match="one label per fitted row"):
        ps.monotonicity_check(small_fit, strata=np.zeros(5))
    with pytest.raises(ValueError, match="names a column, so `X` must be a DataFrame"):
        ps.monotonicity_check(small_fit, strata="age")
    with pytest.raises(ValueError, match="1 missing label"):
        ps.monotonicity_check(small_fit, strata=np.r_[np.nan, np.ones(2999)])
    with pytest.raises(ValueError, match="`level` must be a number strictly between 0 and 1"):
        ps.monotonicity_check(small_fit, level=95)
    with pytest.raises(TypeError, match="`adjust` must be True or False"):
        ps.monotonicity_check(small_fit, adjust="yes")


def test_bad_plot_arguments_are_rejected(small_fit, small):
    with pytest.raises(ValueError, match="`comparison` must be one of"):
        plotting.plot_balance(small_fit, small.X, comparison="raw")
    with pytest.raises(ValueError, match="`max_covariates` must be a positive integer"):
        plotting.plot_balance(small_fit, small.X, max_covariates=0)
    with pytest.raises(ValueError, match="`score` must be one of"):
        plotting.plot_overlap(small_fit, score="harmed")


def test_monotonicity_check_on_tiny_data_gives_numbers_or_nan_not_an_exception():
    # Eight rows: an arm can be empty inside a score bin and bins can be narrow; the table must
    # still be built (NaN where a share has no rows), with one distinct label per bin.
    for seed in (1, 2, 3):
        data = ps.datasets.make_truncation(8, random_state=seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est = ps.PrincipalScoreWeighting().fit(
                data.X, data.y, treatment=data.treatment, survival=data.survival
            )
            table = ps.monotonicity_check(est)
        assert table.index.is_unique
        assert len(table) >= 2
