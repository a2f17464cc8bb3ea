"""Covariate formulas: the design equals a hand-built matrix (numpy dummies and scipy's B-spline
basis) and patsy's (statsmodels' formula engine) for the same formula; new data get the columns
learned at fit; bad formulas and data get clear errors."""

import numpy as np
import pandas as pd
import patsy
import pytest
from scipy.interpolate import BSpline

from pscore_strata._formula import FormulaDesign

FORMULA = "age + severity + C(site) + bs(bmi, 4)"


@pytest.fixture(scope="module")
def frame():
    rng = np.random.default_rng(7)
    n = 300
    return pd.DataFrame({
        "age": rng.normal(60, 10, n),
        "severity": rng.normal(size=n),
        "site": rng.choice(["north", "harbour", "valley"], n),
        "bmi": rng.gamma(20, 1.4, n),
    })  # fmt: skip


def _hand_built(frame, train):
    """The design built from its definition: treatment (dummy) coding against the first level in
    sorted order, and a cubic B-spline basis with df = 4 (one interior knot at the training
    median, boundary knots at the training range, the first basis function dropped because the
    model has an intercept) evaluated with scipy."""
    levels = sorted(train["site"].unique())
    dummies = np.column_stack([(frame["site"] == lv).to_numpy(float) for lv in levels[1:]])
    low, high = train["bmi"].min(), train["bmi"].max()
    knots = np.r_[[low] * 4, np.median(train["bmi"]), [high] * 4]
    basis = BSpline.design_matrix(frame["bmi"].to_numpy(), knots, 3).toarray()[:, 1:]
    return np.column_stack([frame["age"], frame["severity"], dummies, basis])


def test_design_equals_the_hand_built_matrix(frame):
    design = FormulaDesign(FORMULA)
    matrix = design.fit_transform(frame)
    assert matrix.shape == (len(frame), 8)
    np.testing.assert_allclose(matrix.to_numpy(), _hand_built(frame, frame), atol=1e-10)
    assert design.variables == ["age", "bmi", "severity", "site"]


def test_design_equals_patsy(frame):
    # patsy (the formula engine of statsmodels) orders the columns differently; match by name.
    ours = FormulaDesign(FORMULA).fit_transform(frame)
    theirs = patsy.dmatrix(FORMULA, frame, return_type="dataframe").drop(columns="Intercept")
    rename = {f"bs(bmi, 4)[{j}]": f"bs(bmi, 4)[{j + 1}]" for j in range(4)}
    theirs = theirs.rename(columns=rename)[ours.columns]
    np.testing.assert_allclose(ours.to_numpy(), theirs.to_numpy(), atol=1e-10)


def test_new_rows_get_the_learned_columns(frame):
    design = FormulaDesign(FORMULA)
    design.fit_transform(frame)
    new = frame.iloc[:20].copy()
    new["bmi"] = new["bmi"].clip(frame["bmi"].min(), frame["bmi"].max())
    # Knots and levels from the training rows, not from the 20 new ones.
    np.testing.assert_allclose(design.transform(new).to_numpy(), _hand_built(new, frame),
                               atol=1e-10)  # fmt: skip
    one_level = frame[frame["site"] == "valley"].iloc[:5]
    assert design.transform(one_level).shape == (5, 8)


def test_caller_frame_is_not_mutated(frame):
    before = frame.copy()
    FormulaDesign(FORMULA).fit_transform(frame)
    pd.testing.assert_frame_equal(frame, before)


@pytest.mark.parametrize(
    "formula, error, message",
    [
        (None, TypeError, "must be a formula string"),
        ("y ~ age", ValueError, "right-hand side only"),
        ("age + nope", ValueError, r"uses column\(s\) \['nope'\]"),
        ("age + C(site", ValueError, "cannot build `covariates`"),
        ("1", ValueError, "no covariate term"),
    ],
)
def test_bad_formulas(frame, formula, error, message):
    with pytest.raises(error, match=message):
        FormulaDesign(formula).fit_transform(frame)


def test_bad_data(frame):
    design = FormulaDesign(FORMULA)
    with pytest.raises(TypeError, match="must be a pandas DataFrame"):
        design.fit_transform(frame.to_numpy())
    design.fit_transform(frame)
    new = frame.iloc[:3].copy()
    new.loc[new.index[0], "site"] = "summit"
    with pytest.raises(ValueError, match="categories not seen at fit.*summit"):
        design.transform(new)
    holes = frame.assign(age=frame["age"].where(frame.index != 4))
    with pytest.raises(ValueError, match="age has missing values"):
        FormulaDesign(FORMULA).fit_transform(holes)


# -- on the estimators ----------------------------------------------------------------------------
import pscore_strata as ps  # noqa: E402


@pytest.fixture(scope="module")
def study():
    data = ps.datasets.make_truncation(800, random_state=11)
    X = data.X
    frame = pd.DataFrame({
        "age": X[:, 0], "severity": X[:, 1],
        "site": np.array(["north", "harbour", "valley"])[np.digitize(X[:, 2], [-0.5, 0.5])],
        "bmi": X[:, 3] if X.shape[1] > 3 else X[:, 2] ** 2,
    })  # fmt: skip
    return data, frame


@pytest.mark.parametrize("cls", [ps.PrincipalScoreWeighting, ps.OutcomeRegression,
                                 ps.MultiplyRobust])  # fmt: skip
def test_estimator_on_a_formula_equals_the_hand_built_design(study, cls):
    data, frame = study
    arguments = dict(treatment=data.treatment, survival=data.survival)
    by_formula = cls(covariates=FORMULA).fit(frame, data.y, **arguments)
    by_hand = cls().fit(_hand_built(frame, frame), data.y, **arguments)
    assert by_formula.effect_ == pytest.approx(by_hand.effect_, rel=1e-9)
    assert by_formula.std_error_ == pytest.approx(by_hand.std_error_, rel=1e-7)
    # scikit-learn's convention: feature_names_in_ are the columns the caller passed (checked again
    # at predict time); the design's own columns are those the formula built from them.
    assert list(by_formula.feature_names_in_) == list(frame.columns)
    assert by_formula.design_.feature_names[:2] == ["age", "severity"]
    new = frame.iloc[:25]
    new_by_hand = _hand_built(new, frame)
    np.testing.assert_allclose(np.asarray(by_formula.predict_proba(new)),
                               by_hand.predict_proba(new_by_hand), atol=1e-9)
    groups = frame["site"].to_numpy()
    pd.testing.assert_frame_equal(by_formula.effect_by(groups), by_hand.effect_by(groups))
    if hasattr(by_formula, "predict_effect"):
        np.testing.assert_allclose(by_formula.predict_effect(new),
                                   by_hand.predict_effect(new_by_hand), atol=1e-9)


def test_fit_estimators_learns_the_design_once(study):
    data, frame = study
    fits = ps.fit_estimators(frame, data.y, treatment=data.treatment, survival=data.survival,
                             covariates=FORMULA)  # fmt: skip
    assert fits["weighting"].design_ is fits["robust"].design_ is fits["regression"].design_
    alone = ps.PrincipalScoreWeighting(covariates=FORMULA).fit(
        frame, data.y, treatment=data.treatment, survival=data.survival)
    assert fits["weighting"].effect_ == pytest.approx(alone.effect_, rel=1e-12)


def test_formula_estimator_errors(study):
    data, frame = study
    arguments = dict(treatment=data.treatment, survival=data.survival)
    with pytest.raises(TypeError, match="must be a pandas DataFrame"):
        ps.MultiplyRobust(covariates=FORMULA).fit(frame.to_numpy(), data.y, **arguments)
    with pytest.raises(TypeError, match="got None"):
        ps.MultiplyRobust(covariates=FORMULA).fit(None, data.y, **arguments)
    est = ps.OutcomeRegression(covariates="age + C(site)").fit(frame, data.y, **arguments)
    new = frame.iloc[:2].assign(site="summit")
    with pytest.raises(ValueError, match="categories not seen at fit"):
        est.predict_proba(new)
    # Without a formula nothing changes, and a refit without it forgets the design.
    est.set_params(covariates=None).fit(frame[["age", "severity"]], data.y, **arguments)
    assert not hasattr(est, "design_")


@pytest.mark.parametrize("strata", ["none", "score"])
def test_bounds_on_a_formula_equal_the_hand_built_design(study, strata):
    # The bounds' treatment (and, with strata="score", survival) models see the same design.
    data, frame = study
    arguments = dict(treatment=data.treatment, survival=data.survival)
    by_formula = ps.TrimmingBounds(covariates=FORMULA, strata=strata).fit(frame, data.y,
                                                                            **arguments)
    by_hand = ps.TrimmingBounds(strata=strata).fit(_hand_built(frame, frame), data.y, **arguments)
    assert by_formula.lower_ == pytest.approx(by_hand.lower_, rel=1e-9)
    assert by_formula.upper_ == pytest.approx(by_hand.upper_, rel=1e-9)
    assert by_formula.std_error_lower_ == pytest.approx(by_hand.std_error_lower_, rel=1e-7)
    assert by_formula.design_.feature_names[:2] == ["age", "severity"]
