"""Hostile inputs: one table of cases, each with its error (type and words) or its correct result.

Counts over this table (library side of issue 14; a case is one row of ``FIT_CASES`` run over
the four estimators, one row of ``CASES``, one predict_proba column check or one other test
below; 58 cases), measured before and after the fixes:

    before: 17 silently wrong, 32 unclear,  5 clear,  4 correct
    after:   0 silently wrong,  0 unclear, 43 clear, 15 correct

("numeric text weights" was a correct answer before and is now a clear refusal, as
scikit-learn refuses text where numbers are needed.)

"Correct" results are checked against the same analysis in plain numeric form (the answer may
not depend on how the data are represented or scaled), against scipy's t quantiles, or against
the identity the case names. Rescaled covariates (X * 1e8, X * 1e-8) are covered by
tests/test_user_sandwich.py::test_rescaled_covariates_give_the_same_answer and
::test_rescaled_covariates_bounds (agreement to 1e-6).
"""

import warnings

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sparse
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats
from sklearn.ensemble import RandomForestClassifier
from sklearn.linear_model import LinearRegression, LogisticRegression

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

DATA = make_truncation(400, n_features=3, random_state=0)
X = np.asarray(DATA.X)
XDF = pd.DataFrame(X, columns=["a", "b", "c"])
Y = np.asarray(DATA.y, dtype=float)
T = np.asarray(DATA.treatment)
S = np.asarray(DATA.survival)
N = len(Y)
ESTIMATORS = [ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust,
              ps.TrimmingBounds]  # fmt: skip
POINT = ESTIMATORS[:3]
FOREST = RandomForestClassifier(n_estimators=10)


def _fit(cls, X=X, y=Y, treatment=T, survival=S, fit=None, **params):
    return cls(**params).fit(X, y, treatment=treatment, survival=survival, **(fit or {}))


def _result(est):
    if hasattr(est, "effect_"):
        return np.array([est.effect_, est.std_error_])
    return np.array([est.lower_, est.upper_, est.std_error_lower_, est.std_error_upper_])


def _object_outcome(fill):
    values = zip(np.nan_to_num(Y), S, strict=True)
    return np.array([v if s else fill for v, s in values], dtype=object)


def _text_for_survivor():
    values = _object_outcome("")
    values[np.flatnonzero(S == 1)[2]] = "high"
    return values


def _nullable_boolean():
    values = pd.array(T.astype(bool), dtype="boolean")
    values[3] = pd.NA
    return values


def _zero_weight_arm():
    return np.where(T == 1, 0.0, 1.0)


def _tiny():
    return dict(X=X[:6], y=np.arange(1.0, 7.0), treatment=np.array([1, 1, 1, 0, 0, 0]),
                survival=np.array([1, 0, 1, 1, 0, 1]))  # fmt: skip


# Each fit case: (id, inputs and parameters, expectation). An expectation is
# ("raises", exception type, words the message must contain), ("warns", warning type, words)
# with the result equal to the plain fit's, or ("same", None, ()) for the plain fit's result.
# `point_only`/`bounds_only` cases use parameters only those classes have.
FIT_CASES = [
    # -- silently wrong before
    ("complex y", dict(y=Y.astype(complex) + 1j), ("raises", TypeError, ["`y`", "complex"])),
    ("complex treatment", dict(treatment=T.astype(complex)),
     ("raises", TypeError, ["`treatment`", "complex"])),
    ("complex weights", dict(fit={"sample_weight": np.ones(N) + 1j}),
     ("raises", TypeError, ["`sample_weight`", "complex"])),
    ("datetime y", dict(y=pd.to_datetime("2020-01-01") + pd.to_timedelta(np.nan_to_num(Y), "D")),
     ("raises", TypeError, ["`y`", "dates", "Convert"])),
    ("timedelta y", dict(y=pd.to_timedelta(np.nan_to_num(Y), unit="D").to_numpy()),
     ("raises", TypeError, ["`y`", "durations", "Convert"])),
    ("y times 1e300", dict(y=Y * 1e300), ("raises", ValueError, ["`y`", "overflow", "rescale"])),
    ("weights 1e300", dict(fit={"sample_weight": np.full(N, 1e300)}), ("same", None, [])),
    ("weights 1e-300", dict(fit={"sample_weight": np.full(N, 1e-300)}), ("same", None, [])),
    ("one cluster", dict(fit={"groups": np.zeros(N)}),
     ("raises", ValueError, ["`groups`", "1 cluster", "at least two"])),
    ("few clusters", dict(fit={"groups": np.arange(N) % 5}),
     ("warns", ps.FewClustersWarning, ["5 clusters", "t reference", "4 degrees of freedom"])),
    # -- unclear before (or already clear: measured)
    ("object 0/1 ints", dict(treatment=np.array([int(t) for t in T], dtype=object)),
     ("same", None, [])),
    ("nullable boolean with NA", dict(treatment=_nullable_boolean()),
     ("raises", ValueError, ["`treatment`", "1 missing value"])),
    ("object y, '' for the dead", dict(y=_object_outcome("")), ("same", None, [])),
    ("object y, 'dead' for the dead", dict(y=_object_outcome("dead")), ("same", None, [])),
    ("object y, pd.NA for the dead", dict(y=_object_outcome(pd.NA)), ("same", None, [])),
    ("object y, text for a survivor", dict(y=_text_for_survivor()),
     ("raises", TypeError, ["`y`", "survivor", "'high'", "row position(s) [3]"])),
    ("duplicated column names", dict(X=pd.DataFrame(X, columns=["a", "a", "c"])),
     ("raises", ValueError, ["`X`", "duplicated column name", "'a'"])),
    ("column names of mixed types", dict(X=pd.DataFrame(X, columns=["a", 1, "c"])),
     ("raises", TypeError, ["`X`", "mixed types", "astype(str)"])),
    ("zero weights empty an arm", dict(fit={"sample_weight": _zero_weight_arm()}),
     ("raises", ValueError, ["treated arm", "`sample_weight` > 0", "weight 0"])),
    ("numeric text weights", dict(fit={"sample_weight": np.array(["1.0"] * N, dtype=object)}),
     ("raises", TypeError, ["`sample_weight`", "numeric", "to_numeric"])),
    ("text weights", dict(fit={"sample_weight": np.array(["x"] * N, dtype=object)}),
     ("raises", TypeError, ["`sample_weight`", "'x'"])),
    ("model as a string", dict(survival_model="logistic"),
     ("raises", TypeError, ["`survival_model`", "'logistic'", "instance"])),
    ("model True", dict(survival_model=True), ("raises", TypeError, ["`survival_model`", "True"])),
    ("model an object", dict(survival_model=object()),
     ("raises", TypeError, ["`survival_model`", "fit and get_params"])),
    ("model a class", dict(survival_model=LogisticRegression),
     ("raises", TypeError, ["`survival_model`", "LogisticRegression()"])),
    ("regressor as a classifier", dict(survival_model=LinearRegression()),
     ("raises", TypeError, ["`survival_model`", "regressor", "classifier"])),
    ("sparse X", dict(X=sparse.csr_matrix(X)), ("raises", TypeError, ["`X`", "sparse", "toarray"])),
    ("six rows", _tiny(), ("tiny", None, [])),
    # -- parameters that only some classes have
    ("n_folds above the smallest cell", dict(n_folds=71, point_only=True),
     ("raises", ValueError, ["`n_folds`", "70 treated deaths", "n_folds <= 70"])),
    ("random_state text", dict(random_state="abc", point_only=True),
     ("raises", ValueError, ["`random_state`", "'abc'"])),
    ("random_state float", dict(random_state=1.5, point_only=True),
     ("raises", ValueError, ["`random_state`", "1.5"])),
    ("n_jobs text", dict(n_jobs="two", point_only=True, weighting_only=True),
     ("raises", ValueError, ["`n_jobs`", "'two'"])),
    ("n_jobs float", dict(n_jobs=1.5, point_only=True, weighting_only=True),
     ("raises", ValueError, ["`n_jobs`", "1.5"])),
    ("n_bootstrap 1", dict(n_bootstrap=1, point_only=True, weighting_only=True),
     ("raises", ValueError, ["`n_bootstrap`", ">= 2"])),
    ("n_bootstrap True", dict(n_bootstrap=True, point_only=True, weighting_only=True),
     ("raises", ValueError, ["`n_bootstrap`", "True"])),
    ("n_strata -5 (unused)", dict(n_strata=-5, bounds_only=True),
     ("raises", ValueError, ["`n_strata`", "-5"])),
    ("n_strata text (unused)", dict(n_strata="5", bounds_only=True),
     ("raises", TypeError, ["`n_strata`", "'5'"])),
    ("quantiles out of range", dict(quantiles=[2.0], bounds_only=True),
     ("raises", ValueError, ["`quantiles`"])),
]


def _plain(cls, params):
    keep = {k: v for k, v in params.items() if k in ("n_folds", "random_state")}
    return _fit(cls, **keep)


@pytest.fixture(scope="module")
def plain():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {cls: _fit(cls) for cls in ESTIMATORS}


@pytest.mark.parametrize("cls", ESTIMATORS, ids=lambda c: c.__name__)
@pytest.mark.parametrize("case", FIT_CASES, ids=[c[0] for c in FIT_CASES])
def test_fit_case(case, cls, plain):
    _, inputs, (kind, error, words) = case
    inputs = dict(inputs)
    point_only = inputs.pop("point_only", False)
    bounds_only = inputs.pop("bounds_only", False)
    weighting_only = inputs.pop("weighting_only", False)
    is_bounds = cls is ps.TrimmingBounds
    if (point_only and is_bounds) or (bounds_only and not is_bounds) or (
        weighting_only and cls is not ps.PrincipalScoreWeighting
    ):
        pytest.skip("parameter not used by this class")
    if weighting_only:
        inputs["survival_model"] = FOREST
    if kind == "raises":
        with pytest.raises(error) as raised:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                _fit(cls, **inputs)
        for word in words:
            assert word in str(raised.value), (word, str(raised.value))
    elif kind == "warns":
        with pytest.warns(error) as record:
            est = _fit(cls, **inputs)
        message = " ".join(str(w.message) for w in record if issubclass(w.category, error))
        assert all(word in message for word in words), message
        _check_t_reference(est, n_clusters=5)
    elif kind == "same":
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est = _fit(cls, **inputs)
        np.testing.assert_allclose(_result(est), _result(plain[cls]), rtol=1e-9)
    else:  # six rows: an honest error or a finite answer with warnings, never an IndexError
        with warnings.catch_warnings(record=True) as record:
            warnings.simplefilter("always")
            try:
                est = _fit(cls, **inputs)
            except ValueError as error:
                assert "treatment probability is 0 or 1" in str(error)
                return
        assert np.all(np.isfinite(_result(est))) and record


def _check_t_reference(est, n_clusters):
    """Intervals with few clusters use Student's t with G - 1 df (quantile from scipy)."""
    t = stats.t.ppf(0.975, n_clusters - 1)
    if hasattr(est, "effect_"):
        low, high = est.conf_int()
        assert est.n_clusters_ == n_clusters
        assert low == pytest.approx(est.effect_ - t * est.std_error_, rel=1e-12)
        assert high == pytest.approx(est.effect_ + t * est.std_error_, rel=1e-12)
        row = est.summary().iloc[0]
        assert row["ci_low"] == pytest.approx(low, rel=1e-12)
    else:
        low, high = est.conf_int(coverage="identified_set")
        assert low == pytest.approx(est.lower_ - t * est.std_error_lower_, rel=1e-12)
        assert high == pytest.approx(est.upper_ + t * est.std_error_upper_, rel=1e-12)


# -- inputs that must keep working, with the caller's data untouched -------------------------
@pytest.mark.parametrize("cls", ESTIMATORS, ids=lambda c: c.__name__)
def test_polars_dataframe(cls, plain):
    pl = pytest.importorskip("polars")
    frame = pl.DataFrame(XDF)
    before = frame.clone()
    est = _fit(cls, X=frame)
    assert frame.equals(before)
    np.testing.assert_allclose(_result(est), _result(plain[cls]), rtol=1e-9)


@pytest.mark.parametrize("cls", ESTIMATORS, ids=lambda c: c.__name__)
def test_pyarrow_table(cls, plain):
    pa = pytest.importorskip("pyarrow")
    table = pa.Table.from_pandas(XDF)
    before = pa.Table.from_pandas(XDF)
    est = _fit(cls, X=table)
    assert table.equals(before)
    np.testing.assert_allclose(_result(est), _result(plain[cls]), rtol=1e-9)


# -- cases outside fit ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def fitted():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return {
            "frame": ps.PrincipalScoreWeighting().fit(XDF, Y, treatment=T, survival=S),
            "array": ps.PrincipalScoreWeighting().fit(X, Y, treatment=T, survival=S),
            "robust": ps.MultiplyRobust().fit(XDF, Y, treatment=T, survival=S),
            "bounds": ps.TrimmingBounds().fit(XDF, Y, treatment=T, survival=S),
        }


def test_predict_proba_follows_feature_names(fitted):
    # scikit-learn's rules (sklearn.utils.validation): names must match in order, mixing a
    # DataFrame and an array warns and goes by position.
    est = fitted["frame"]
    assert list(est.feature_names_in_) == ["a", "b", "c"]
    reference = est.predict_proba(XDF).to_numpy()
    with pytest.raises(ValueError, match="feature names should match"):
        est.predict_proba(XDF[["c", "b", "a"]])
    with pytest.raises(ValueError, match="unseen at fit time"):
        est.predict_proba(XDF.rename(columns={"a": "z"}))
    with pytest.warns(UserWarning, match="PrincipalScoreWeighting was fitted with feature names"):
        np.testing.assert_allclose(est.predict_proba(X), reference)
    array_fit = fitted["array"]
    assert not hasattr(array_fit, "feature_names_in_")
    with pytest.warns(UserWarning, match="fitted without feature names") as record:
        np.testing.assert_allclose(array_fit.predict_proba(XDF).to_numpy(), reference)
    assert len(record) == 1  # the nuisance models do not warn a second time


@pytest.mark.parametrize("cls", POINT, ids=lambda c: c.__name__)
def test_random_state_seeds_learners(cls):
    # Two fits with random_state=0 and a forest left at random_state=None give one answer;
    # a forest with its own seed keeps it (the same as seeding it by hand).
    params = dict(survival_model=RandomForestClassifier(n_estimators=15), random_state=0)
    if "n_bootstrap" in cls().get_params():
        params["n_bootstrap"] = 0  # the bootstrap standard error is not the point here
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        first, second = _fit(cls, **params), _fit(cls, **params)
        assert first.effect_ == second.effect_
        assert first.get_params()["survival_model"].random_state is None  # params untouched
        params["survival_model"] = RandomForestClassifier(n_estimators=15, random_state=3)
        own = [_fit(cls, **params).effect_ for _ in range(2)]
    assert own[0] == own[1]


def test_tipping_point_refuses_a_jump():
    # The reproduction of the issue: harmed_ratio crossing where 520 of 600 rows are clipped
    # and the interval's lower end jumps over zero (0.23 at the point formerly returned).
    data = make_truncation(600, random_state=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                      survival=data.survival)  # fmt: skip
    with pytest.warns(UserWarning, match="Tipping point not reached.*clipped"):
        assert np.isnan(ps.tipping_point(est, "harmed_ratio"))
    grid = ps.sensitivity_grid(est, harmed_ratio=[0.0, 0.5, 0.95])
    assert grid["n_rows_clipped"].iloc[0] == 0 and grid["n_rows_clipped"].iloc[-1] > 300
    assert any("set to 0" in note for note in grid.attrs["notes"])


def test_tipping_point_roots_touch_zero():
    # Whenever a value is returned, the interval's end is zero there (the definition).
    checked = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for seed in (1, 3):
            data = make_truncation(600, random_state=seed, harmed_ratio=0.3)
            for cls in POINT:
                est = cls().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
                for parameter in ("harmed_ratio", "pi_difference"):
                    value = ps.tipping_point(est, parameter)
                    if np.isnan(value):
                        continue
                    checked += 1
                    row = ps.sensitivity_grid(est, **{parameter: value}).iloc[0]
                    end = row["ci_low"] if est.effect_ > 0 else row["ci_high"]
                    assert abs(end) <= 1e-6 * (abs(est.effect_) + est.std_error_)
    assert checked >= 6


BOOT = dict(treatment=T, survival=S, n_resamples=20, random_state=0)

CASES = [
    ("sensitivity parameter 1e308",
     lambda f: ps.sensitivity_grid(f["robust"], pi_difference=1e308),
     ValueError, ["`pi_difference`", "overflow"]),
    ("tipping_point search as text",
     lambda f: ps.tipping_point(f["robust"], "pi_difference", search="wide"),
     ValueError, ["`search`", "'wide'"]),
    ("tipping_point search outside the range",
     lambda f: ps.tipping_point(f["robust"], "harmed_ratio", search=(0, 5)),
     ValueError, ["`search`", "harmed_ratio"]),
    ("bootstrap given a class",
     lambda f: ps.bootstrap(ps.PrincipalScoreWeighting, X, Y, **BOOT),
     TypeError, ["`estimator`", "class", "PrincipalScoreWeighting()"]),
    ("bootstrap given a non-SACE estimator",
     lambda f: ps.bootstrap(LogisticRegression(), X, Y, **BOOT),
     TypeError, ["`estimator`", "treatment", "OutcomeRegression()"]),
    ("bootstrap with one cluster",
     lambda f: ps.bootstrap(ps.OutcomeRegression(), X, Y, groups=np.zeros(N), **BOOT),
     ValueError, ["`groups`", "at least two"]),
    ("bootstrap n_resamples 1",
     lambda f: ps.bootstrap(ps.OutcomeRegression(), X, Y, **{**BOOT, "n_resamples": 1}),
     ValueError, ["`n_resamples`", ">= 2"]),
    ("balance_table given bounds", lambda f: ps.balance_table(f["bounds"], XDF),
     TypeError, ["TrimmingBounds", "PrincipalScoreWeighting"]),
    ("balance_table given a class", lambda f: ps.balance_table(ps.MultiplyRobust, XDF),
     TypeError, ["class", "fit"]),
    ("balance_table with duplicated names",
     lambda f: ps.balance_table(f["frame"], pd.DataFrame(X, columns=["a", "a", "c"])),
     ValueError, ["`X`", "duplicated", "'a'"]),
]


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_other_case(case, fitted):
    _, call, error, words = case
    with pytest.raises(error) as raised:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            call(fitted)
    for word in words:
        assert word in str(raised.value), (word, str(raised.value))


def test_bootstrap_normal_interval_with_few_clusters():
    groups = np.arange(N) % 5
    with pytest.warns(ps.FewClustersWarning):
        result = ps.bootstrap(ps.OutcomeRegression(), X, Y, groups=groups, **BOOT)
    low, high = result.conf_int(kind="normal")
    t = stats.t.ppf(0.975, 4)  # scipy's t quantile, G - 1 = 4 degrees of freedom
    assert low == pytest.approx(result.estimate - t * result.std_error, rel=1e-12)
    assert high == pytest.approx(result.estimate + t * result.std_error, rel=1e-12)


# -- property: random valid inputs never give a non-finite estimate without a word -----------
@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    n=st.integers(60, 300),
    n_features=st.integers(2, 4),
    design=st.sampled_from(["observational", "randomized"]),
    outcome=st.sampled_from(["linear", "nonlinear", "binary"]),
    scale=st.sampled_from([1e-6, 1.0, 1e6]),
    weighted=st.booleans(),
    cls=st.sampled_from(ESTIMATORS),
    seed=st.integers(0, 10_000),
)
def test_valid_inputs_give_finite_estimates_or_a_word(n, n_features, design, outcome, scale,
                                                      weighted, cls, seed):  # fmt: skip
    data = make_truncation(n, n_features=n_features, design=design, outcome=outcome,
                           random_state=seed)  # fmt: skip
    rng = np.random.default_rng(seed)
    fit = {"sample_weight": rng.uniform(0.1, 10.0, n)} if weighted else {}
    y = data.y * (1.0 if outcome == "binary" else scale)
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        try:
            est = cls().fit(data.X, y, treatment=data.treatment, survival=data.survival, **fit)
        except (ValueError, RuntimeError):
            return  # an error is an honest answer
    if not np.all(np.isfinite(_result(est))):
        assert record, "a non-finite estimate came without an error or a warning"
