"""Bad inputs met while analysing real trials: each gets a clear refusal or an honest answer.

Each test builds the exact input of the finding it guards against. External references: the
rows' own labels (a shuffled Series must give the same subgroup effects as the aligned one),
JSON's grammar (no NaN literal), and hand-built text columns.
"""

import json
import warnings

import numpy as np
import pandas as pd
import pytest

import pscore_strata as ps
from pscore_strata.cli import main
from pscore_strata.report import InputError


@pytest.fixture(scope="module")
def fitted():
    data = ps.datasets.make_truncation(600, random_state=4)
    X = pd.DataFrame(data.X, columns=[f"x{j}" for j in range(data.X.shape[1])])
    est = ps.MultiplyRobust().fit(X, data.y, treatment=data.treatment, survival=data.survival)
    return est, X, data


def test_effect_by_aligns_a_shuffled_series_on_its_index(fitted):
    est, X, data = fitted
    labels = pd.Series(np.where(X["x0"] > 0, "high", "low"), index=X.index)
    aligned = est.effect_by(labels)
    shuffled = labels.sample(frac=1.0, random_state=0)  # same rows, another order
    # Reference: the aligned Series; a positional reading would mix the groups.
    pd.testing.assert_frame_equal(est.effect_by(shuffled), aligned)


def test_effect_by_refuses_a_series_from_other_rows(fitted):
    est, X, data = fitted
    labels = pd.Series(np.where(X["x0"] > 0, "high", "low"), index=X.index + 1000)
    with pytest.raises(ValueError, match="index does not match the rows"):
        est.effect_by(labels)


def test_tiny_subgroup_gets_no_interval(fitted):
    est, X, data = fitted
    labels = np.array(["main"] * len(X), dtype=object)
    labels[:3] = "tiny"  # a 3-row subgroup (61% coverage of a nominal 95% interval)
    table = est.effect_by(labels).set_index("label")
    assert np.isnan(table.loc["tiny", "ci_low"]) and np.isnan(table.loc["tiny", "ci_high"])
    assert np.isfinite(table.loc["main", "ci_low"])
    assert any("'tiny' has" in note and "no interval" in note for note in table.attrs["notes"])


def test_quantile_effects_with_a_constant_arm_say_why_there_is_no_interval():
    data = ps.datasets.make_truncation(400, random_state=1)
    y = data.y.copy()
    y[(data.treatment == 0) & (data.survival == 1)] = 2.5  # constant among control survivors
    est = ps.PrincipalScoreWeighting().fit(data.X, y, treatment=data.treatment,
                                           survival=data.survival)  # fmt: skip
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        table = ps.quantile_effects(est, [0.25, 0.5, 0.75])
    texts = [str(w.message) for w in caught]
    assert not any("divide" in text for text in texts)  # no numpy divide warning
    assert any("single value (2.5" in text for text in texts)
    assert (table["control"] == 2.5).all() and table["std_error"].isna().all()


def write(frame, tmp_path, name="data.csv"):
    path = tmp_path / name
    frame.to_csv(path, index=False)
    return path


def trial_frame(n=120, seed=0):
    rng = np.random.default_rng(seed)
    t = rng.integers(0, 2, n)
    s = (rng.random(n) < 0.7 + 0.15 * t).astype(int)
    return pd.DataFrame({
        "id": np.arange(n), "arm": np.where(t == 1, "active", "placebo"), "alive": s,
        "score": np.where(s == 1, rng.integers(1, 6, n), np.nan), "age": rng.normal(60, 8, n),
        "site": rng.choice(list("ABC"), n),
    })  # fmt: skip


ARGS = ["--outcome", "score", "--treatment", "arm", "--treated-value", "active",
        "--survival", "alive"]  # fmt: skip


def test_identifier_column_as_categorical_is_refused(tmp_path, capsys):
    path = write(trial_frame(), tmp_path)
    assert main(["analyze", str(path), *ARGS, "--categorical", "id", "--out",
                 str(tmp_path / "o")]) != 0  # fmt: skip
    assert "--categorical column 'id'" in capsys.readouterr().err
    assert not (tmp_path / "o" / "results.json").exists()


def test_thousands_separators_are_named(tmp_path, capsys):
    frame = trial_frame()
    frame["income"] = [f"{11234.5 + 10 * i:,.1f}" for i in range(len(frame))]  # "11,234.5"
    path = write(frame, tmp_path)
    assert main(["analyze", str(path), *ARGS, "--covariates", "income", "--out",
                 str(tmp_path)]) != 0  # fmt: skip
    err = capsys.readouterr().err
    assert "thousands separators" in err and "'11,234.5'" in err
    assert "--categorical" not in err


def test_no_nan_reaches_results_json(tmp_path):
    from pscore_strata.report._html import finite_or_null

    record = finite_or_null({"a": float("nan"), "b": [1.0, np.inf, {"c": np.float64("nan")}]})
    assert record == {"a": None, "b": [1.0, None, {"c": None}]}
    json.dumps(record, allow_nan=False)


def test_by_errors_name_the_option(tmp_path, capsys):
    frame = trial_frame()
    frame.loc[(frame["site"] == "C") & (frame["arm"] == "active"), "alive"] = 0
    frame.loc[frame["alive"] == 0, "score"] = np.nan
    path = write(frame, tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        assert main(["analyze", str(path), *ARGS, "--by", "site", "--out",
                     str(tmp_path / "o"), "--quiet"]) != 0  # fmt: skip
    err = capsys.readouterr().err
    assert "--by column 'site'" in err and "`labels`" not in err


def test_value_labels_of_a_stata_outcome_become_level_labels(tmp_path):
    frame = trial_frame()
    frame["score"] = frame["score"].fillna(0).astype(int)
    labels = {0: "dead", 1: "much worse", 2: "worse", 3: "same", 4: "better", 5: "much better"}
    path = tmp_path / "trial.dta"
    frame.drop(columns=["arm"]).assign(arm=(frame["arm"] == "active").astype(int)).to_stata(
        path, write_index=False, value_labels={"score": labels}
    )
    from pscore_strata.report._data import ColumnRoles, prepare_data
    from pscore_strata.report._readers import read_table

    read = read_table(path)
    assert read["score"].dtype == "category"  # read as the labels
    data = prepare_data(read, ColumnRoles(outcome="score", treatment="arm", survival="alive"))
    assert data.levels["outcome"][4.0] == "better"
    survivors = data.outcome[data.survival == 1]
    np.testing.assert_array_equal(np.unique(survivors), [1, 2, 3, 4, 5])
    assert InputError is not None


# -- PrincipalScoreModel: the inputs the estimators already check ----------------------------


@pytest.fixture(scope="module")
def stratum_data():
    data = ps.datasets.make_truncation(500, random_state=0)
    X = pd.DataFrame(data.X, columns=[f"x{j}" for j in range(data.X.shape[1])])
    return X, data


def test_stratum_model_checks_column_names_like_the_estimators(stratum_data):
    X, data = stratum_data
    model = ps.PrincipalScoreModel().fit(X, treatment=data.treatment, survival=data.survival)
    assert list(model.feature_names_in_) == list(X.columns)
    # Reordered columns changed the scores by up to 0.85 before: now refused.
    with pytest.raises(ValueError, match="feature names"):
        model.predict_proba(X[X.columns[::-1]])
    with pytest.raises(ValueError, match="feature names"):
        model.predict_proba(X.rename(columns={"x0": "unrelated"}))
    np.testing.assert_allclose(model.predict_proba(X.to_numpy()), model.predict_proba(X))


@pytest.mark.parametrize("case", ["all treated", "weight in one arm"])
def test_stratum_model_refuses_unidentified_strata(stratum_data, case):
    X, data = stratum_data
    treatment, weights = data.treatment, None
    if case == "all treated":
        treatment = np.ones_like(data.treatment)
    else:
        weights = np.where(data.treatment == 1, 1.0, 0.0)
    with pytest.raises(ValueError, match="`treatment`"):
        ps.PrincipalScoreModel().fit(
            X, treatment=treatment, survival=data.survival, sample_weight=weights
        )


@pytest.mark.parametrize("case", ["text treatment", "NaN in X", "text in X"])
def test_stratum_model_names_the_argument(stratum_data, case):
    X, data = stratum_data
    treatment = data.treatment
    if case == "text treatment":
        treatment, name = np.where(data.treatment == 1, "a", "b"), "`treatment`"
    elif case == "NaN in X":
        X = X.copy()
        X.iloc[0, 0] = np.nan
        name = "`X`"
    else:
        X = X.astype(object)
        X.iloc[0, 0] = "x"
        name = "`X`"
    # The estimators' conventions: ValueError for values, TypeError for text columns.
    with pytest.raises((ValueError, TypeError), match=name):
        ps.PrincipalScoreModel().fit(X, treatment=treatment, survival=data.survival)


def test_stratum_model_fitted_without_covariates_refuses_covariates(stratum_data):
    X, data = stratum_data
    model = ps.PrincipalScoreModel().fit(None, treatment=data.treatment, survival=data.survival)
    assert model.predict_proba(None).shape[1] == 3
    with pytest.raises(ValueError, match="fitted without covariates"):
        model.predict_proba(X)


def test_polars_input_gives_no_feature_name_warning(stratum_data):
    pl = pytest.importorskip("polars")
    X, data = stratum_data
    frame = pl.from_pandas(X)
    est = ps.PrincipalScoreWeighting().fit(frame, data.y, treatment=data.treatment,
                                           survival=data.survival)  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a spurious "X does not have valid feature names"
        est.predict_proba(frame)


def test_quantile_effects_refuse_another_x(stratum_data):
    X, data = stratum_data
    est = ps.MultiplyRobust().fit(X, data.y, treatment=data.treatment, survival=data.survival)
    shuffled = X.sample(frac=1.0, random_state=1).reset_index(drop=True)  # 1.287 for 1.192
    with pytest.raises(ValueError, match="not the covariate table"):
        ps.quantile_effects(est, [0.5], X=shuffled)
    assert np.isfinite(ps.quantile_effects(est, [0.5], X=X)["effect"].iloc[0])


def test_one_observed_treated_survivor_is_named():
    data = ps.datasets.make_truncation(300, random_state=2)
    y = data.y.copy()
    treated_survivors = np.flatnonzero((data.treatment == 1) & (data.survival == 1))
    y[treated_survivors[1:]] = np.nan  # one treated survivor's outcome observed
    with pytest.warns(UserWarning, match="one row carries the arm's always-survivor mean"):
        ps.MultiplyRobust(missing="at_random").fit(
            data.X, y, treatment=data.treatment, survival=data.survival
        )


def _site_pipeline(model, handle_unknown="error"):
    from sklearn.compose import make_column_transformer
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import OneHotEncoder

    encoder = make_column_transformer((OneHotEncoder(handle_unknown=handle_unknown), ["site"]),
                                      remainder="passthrough")  # fmt: skip
    return make_pipeline(encoder, model)


@pytest.fixture(scope="module")
def text_covariates():
    data = ps.datasets.make_truncation(400, random_state=0)
    X = pd.DataFrame({"x0": data.X[:, 0], "site": np.where(data.X[:, 1] > 0, "a", "b")})
    X.loc[:2, "site"] = "rare"  # three rows: some cross-fitting fold lacks it
    return X, data


def test_stratum_model_around_a_text_encoding_pipeline_is_accepted(text_covariates):
    from sklearn.linear_model import LogisticRegression

    X, data = text_covariates
    # Refused before with "encode them first ... pipelines", which this already is.
    est = ps.PrincipalScoreWeighting(
        treatment_model=_site_pipeline(LogisticRegression(), "ignore"),
        survival_model=ps.PrincipalScoreModel(_site_pipeline(LogisticRegression(), "ignore")),
        n_bootstrap=0,
    ).fit(X, data.y, treatment=data.treatment, survival=data.survival)
    assert np.isfinite(est.effect_)


def test_rare_category_missing_from_a_fold_names_folds_and_handle_unknown(text_covariates):
    from sklearn.linear_model import LinearRegression, LogisticRegression

    X, data = text_covariates
    est = ps.MultiplyRobust(
        treatment_model=_site_pipeline(LogisticRegression()),
        survival_model=_site_pipeline(LogisticRegression()),
        outcome_model=_site_pipeline(LinearRegression()), n_folds=5, random_state=0,
    )  # fmt: skip
    with pytest.raises(ValueError, match="cross-fitting fold.*handle_unknown='ignore'"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est.fit(X, data.y, treatment=data.treatment, survival=data.survival)


def test_internal_bootstrap_refuses_when_many_resamples_fail():
    from sklearn.linear_model import LogisticRegression

    rng = np.random.default_rng(5)
    n = 120
    t = np.r_[np.ones(40, int), np.zeros(80, int)]
    s = np.r_[np.ones(38, int), 0, 0, (rng.random(80) < 0.7).astype(int)]  # 2 treated deaths
    X = rng.normal(size=(n, 2))
    y = np.where(s == 1, X[:, 0] + rng.normal(size=n), np.nan)
    # A penalized survival model has no sandwich: the estimator bootstraps. A resample keeps
    # no treated death with probability (38/40)^40, about 13%.
    est = ps.PrincipalScoreWeighting(survival_model=LogisticRegression(C=1.0), n_bootstrap=60,
                                     random_state=0)  # fmt: skip
    with pytest.warns(UserWarning, match=r"resamples \(.*\) could not be estimated"):
        est.fit(X, y, treatment=t, survival=s)
    assert est.n_bootstrap_failed_ > 1 and np.isnan(est.std_error_)
    assert np.isnan(est.conf_int()[0])
