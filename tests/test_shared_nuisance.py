"""One nuisance fit shared between estimators gives the numbers of separate fits (issue 12)."""

import numpy as np
import pytest
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.linear_model import LogisticRegression

import pscore_strata as ps
from pscore_strata.datasets import make_truncation
from pscore_strata.estimators._repeats import repeat_seeds

FIELDS = ("effect_", "std_error_", "mean_treated_", "mean_control_")


@pytest.fixture(scope="module")
def data():
    return make_truncation(1200, random_state=5)


def _fit(est, data, **kwargs):
    return est.fit(data.X, data.y, treatment=data.treatment, survival=data.survival, **kwargs)


@pytest.mark.parametrize("params", [{}, {"monotonicity": "decreasing"}])
def test_shared_fit_gives_identical_numbers(data, params):
    monotonicity = {k: v for k, v in params.items() if k == "monotonicity"}
    source = _fit(ps.MultiplyRobust(**params), data)
    for cls in (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust):
        separate = _fit(cls(**params), data)
        shared = _fit(cls(**params), data, nuisance=source.nuisance_)
        for name in FIELDS:
            assert getattr(shared, name) == getattr(separate, name), (cls, name)
        assert shared.std_error_method_ == separate.std_error_method_
        np.testing.assert_array_equal(shared.influence_, separate.influence_)
        assert shared.summary().equals(separate.summary())
    separate = ps.TrimmingBounds(strata="score", **monotonicity)
    shared = ps.TrimmingBounds(strata="score", **monotonicity)
    _fit(separate, data)
    _fit(shared, data, nuisance=source.nuisance_)
    for name in ("lower_", "upper_", "std_error_lower_", "std_error_upper_"):
        assert getattr(shared, name) == getattr(separate, name)


def test_shared_cross_fitted_learners(data):
    model = HistGradientBoostingClassifier(max_iter=20, random_state=0)
    params = dict(treatment_model=model, survival_model=model, n_folds=3, random_state=1)
    source = _fit(ps.PrincipalScoreWeighting(n_bootstrap=0, **params), data)
    separate = _fit(ps.PrincipalScoreWeighting(n_bootstrap=0, **params), data)
    shared = _fit(ps.PrincipalScoreWeighting(n_bootstrap=0, **params), data,
                  nuisance=source.nuisance_)  # fmt: skip
    assert shared.effect_ == separate.effect_
    assert shared.std_error_ == separate.std_error_
    with pytest.raises(ValueError, match="cross-fitted"):
        _fit(ps.TrimmingBounds(**{k: params[k] for k in ("treatment_model", "survival_model")}),
             data, nuisance=source.nuisance_)  # fmt: skip


def test_sandwich_rebuilt_for_the_receiving_estimator(data):
    # The multiply robust fit builds no sandwich pieces; weighting gets its own from the models.
    source = _fit(ps.MultiplyRobust(), data)
    assert source.nuisance_.parametric is None
    shared = _fit(ps.PrincipalScoreWeighting(), data, nuisance=source.nuisance_)
    assert shared.std_error_method_ == "sandwich"


@pytest.mark.parametrize(
    "change, words",
    [
        (lambda d: d.update(rows=slice(0, 1000)), "fitted on 1200 rows"),
        (lambda d: d.update(flip=True), "other data"),
        (lambda d: d.update(params={"survival_model": LogisticRegression()}), "survival_model="),
        (lambda d: d.update(params={"monotonicity": "decreasing"}), "monotonicity="),
        (lambda d: d.update(params={"n_folds": 3}), "n_folds="),
        (lambda d: d.update(cls=ps.OutcomeRegression, source=ps.PrincipalScoreWeighting),
         "without the outcome model"),
        (lambda d: d.update(columns=slice(0, 3)), "covariates"),
    ],
)
def test_mismatched_nuisance_is_refused(data, change, words):
    setting = {"rows": slice(None), "flip": False, "params": {}, "cls": ps.MultiplyRobust,
               "source": ps.MultiplyRobust, "columns": slice(None)}  # fmt: skip
    change(setting)
    source = _fit(setting["source"](), data)
    rows, columns = setting["rows"], setting["columns"]
    treatment = data.treatment[rows].copy()
    if setting["flip"]:
        treatment[0] = 1 - treatment[0]
    est = setting["cls"](**setting["params"])
    with pytest.raises(ValueError, match=words):
        est.fit(data.X[rows, columns], data.y[rows], treatment=treatment,
                survival=data.survival[rows], nuisance=source.nuisance_)  # fmt: skip


def test_nuisance_must_be_a_fit(data):
    with pytest.raises(TypeError, match="NuisanceFit"):
        _fit(ps.MultiplyRobust(), data, nuisance={"pi": 1})
    source = _fit(ps.MultiplyRobust(n_folds=2, random_state=0), data)
    with pytest.raises(ValueError, match="n_repeats"):
        _fit(ps.MultiplyRobust(n_folds=2, n_repeats=2, random_state=0), data,
             nuisance=source.nuisance_)  # fmt: skip


def test_groups_may_differ(data):
    source = _fit(ps.MultiplyRobust(), data)
    groups = np.arange(data.y.size) % 40
    separate = _fit(ps.OutcomeRegression(), data, groups=groups)
    shared = _fit(ps.OutcomeRegression(), data, groups=groups, nuisance=source.nuisance_)
    assert shared.std_error_ == separate.std_error_


def test_fit_estimators_equals_separate_fits(data):
    fits = ps.fit_estimators(data.X, data.y, treatment=data.treatment, survival=data.survival)
    for key, cls in (("weighting", ps.PrincipalScoreWeighting),
                     ("regression", ps.OutcomeRegression), ("robust", ps.MultiplyRobust)):
        separate = _fit(cls(), data)
        for name in FIELDS:
            assert getattr(fits[key], name) == getattr(separate, name), (key, name)


def test_bootstrap_replicate_fits_only_the_statistic(data):
    # ps.bootstrap marks its refits: same effect, no standard error or diagnostics computed.
    full = _fit(ps.PrincipalScoreWeighting(), data)
    replicate = ps.PrincipalScoreWeighting()
    replicate._statistic_only = True
    _fit(replicate, data)
    assert replicate.effect_ == pytest.approx(full.effect_, abs=1e-12)
    assert replicate.mean_treated_ == pytest.approx(full.mean_treated_, abs=1e-12)
    assert not hasattr(replicate, "std_error_")


def test_report_fits_the_models_once_and_matches_separate_fits():
    from unittest import mock

    from pscore_strata import report
    from pscore_strata.assumptions import _bounds
    from pscore_strata.datasets import DEMO_ROLES, load_demo
    from pscore_strata.estimators import _base

    frame = load_demo()
    roles = report.ColumnRoles(
        outcome=DEMO_ROLES["outcome"], treatment=DEMO_ROLES["treatment"],
        survival=DEMO_ROLES["survival"], covariates=("age", "female", "severity_score"),
    )  # fmt: skip
    data = report.prepare_data(frame, roles)
    with mock.patch.object(_base, "fit_nuisance", wraps=_base.fit_nuisance) as fits, \
            mock.patch.object(_bounds, "fit_nuisance", wraps=_bounds.fit_nuisance) as bounds:
        analysis = report.run_analysis(data, roles, report.AnalysisOptions())
    assert fits.call_count == 1 and bounds.call_count == 0  # five models, fitted once
    options = report.AnalysisOptions()
    for record in analysis.results["estimates"]:
        separate = report.build_estimator(record["method"], options).fit(
            data.design, data.outcome, treatment=data.treatment, survival=data.survival
        )
        assert record["effect"] == separate.effect_
        assert record["std_error"] == separate.std_error_
    separate = ps.TrimmingBounds().fit(data.design, data.outcome, treatment=data.treatment,
                                       survival=data.survival)  # fmt: skip
    assert analysis.results["bounds"]["lower"] == separate.lower_
    assert analysis.results["bounds"]["upper"] == separate.upper_


def test_shared_fit_with_missing_data():
    import warnings

    data = make_truncation(1200, n_features=2, follow_up=(0.8, -1.0),
                           response={"treated": (0.7, -1.0), "control": (0.8, 1.0)},
                           random_state=6)  # fmt: skip
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        source = _fit(ps.MultiplyRobust(missing="at_random"), data)
        for cls in (ps.PrincipalScoreWeighting, ps.OutcomeRegression):
            separate = _fit(cls(missing="at_random"), data)
            shared = _fit(cls(missing="at_random"), data, nuisance=source.nuisance_)
            assert shared.std_error_method_ == separate.std_error_method_ == "sandwich"
            for name in FIELDS:
                assert getattr(shared, name) == getattr(separate, name), (cls, name)


def test_fit_estimators_takes_every_parameter_of_the_three_estimators():
    import inspect

    taken = set(inspect.signature(ps.fit_estimators).parameters)
    for cls in (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust):
        missing = set(cls().get_params(deep=False)) - taken
        assert not missing, (cls.__name__, sorted(missing))


def test_fit_estimators_passes_every_parameter_on(data):
    settings = dict(n_folds=3, n_repeats=3, n_bootstrap=0, random_state=2, n_jobs=2)
    fits = ps.fit_estimators(data.X, data.y, treatment=data.treatment, survival=data.survival,
                             **settings)  # fmt: skip
    for key, fitted in fits.items():
        params = fitted.get_params(deep=False)
        given = {k: v for k, v in settings.items() if k in params}
        assert {k: params[k] for k in given} == given, key
    robust = _fit(ps.MultiplyRobust(**settings), data)
    for name in FIELDS:
        assert getattr(fits["robust"], name) == getattr(robust, name), name
    # The other two read the same repeats: one fit per repeat, by hand, then the median.
    for key, cls in (("weighting", ps.PrincipalScoreWeighting),
                     ("regression", ps.OutcomeRegression)):  # fmt: skip
        table = fits[key].repeat_estimates_
        assert len(table) == 3
        single = {k: v for k, v in settings.items() if k not in ("n_repeats", "random_state")}
        by_hand = [
            _fit(cls(random_state=seed, **single), data, nuisance=fit).effect_
            for fit, seed in zip(robust._repeat_fits, repeat_seeds(2, 3), strict=True)
        ]
        np.testing.assert_allclose(table["effect"], by_hand, rtol=0, atol=1e-12)
        assert fits[key].effect_ == pytest.approx(np.median(by_hand), abs=1e-12)
