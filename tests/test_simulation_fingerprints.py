"""Checkpoints refuse results of changed code or arguments, naming what changed.

Each case runs a study into a checkpoint, changes one thing that makes a result (a partial's
argument, a closure's value, an estimator's fit code with an unchanged repr, the library
version, the user's version tag) and expects the rerun to be refused with the change named, or,
with ``overwrite="changed"``, recomputed to equal a fresh run. Also: scenarios are called with
keyword arguments, parameter grids, and ``simulate_cell`` against the stored rows.
"""

import functools
import importlib
import sys
import textwrap

import numpy as np
import pandas as pd
import pytest
from sklearn.base import BaseEstimator
from sklearn.utils import Bunch

import pscore_strata as ps
from pscore_strata.simulation import run_study, simulate_cell


def same(a, b):
    pd.testing.assert_frame_equal(a.drop(columns="fit_seconds"), b.drop(columns="fit_seconds"))


class MeanDifference(BaseEstimator):
    """Survivor-only difference in means (valid when nobody dies); no conf_int: Wald interval."""

    fits = 0

    def fit(self, X, y, *, treatment, survival):
        MeanDifference.fits += 1
        keep = survival == 1
        y1, y0 = y[keep & (treatment == 1)], y[keep & (treatment == 0)]
        self.effect_ = y1.mean() - y0.mean()
        self.std_error_ = np.sqrt(y1.var(ddof=1) / y1.size + y0.var(ddof=1) / y0.size)
        return self


def trial(n_samples, random_state, effect=0.5):
    rng = np.random.default_rng(random_state)
    treatment = rng.integers(0, 2, n_samples)
    return Bunch(X=rng.standard_normal((n_samples, 1)),
                 y=effect * treatment + rng.standard_normal(n_samples), treatment=treatment,
                 survival=np.ones(n_samples, dtype=int), true_effect=effect)  # fmt: skip


def make_trial(effect):
    def shifted(n_samples, random_state):
        return trial(n_samples, random_state, effect=effect)

    return shifted


STUDY = dict(estimators={"diff": MeanDifference()}, n_samples=40, n_reps=3, random_state=2,
             batch_size=2, n_jobs=1)  # fmt: skip


def refused(checkpoint, *words, **study):
    with pytest.raises(ValueError) as caught:
        run_study(**{**STUDY, **study}, checkpoint=checkpoint)
    message = str(caught.value)
    for word in ("`checkpoint`", "overwrite='changed'", *words):
        assert word in message, message
    return message


def test_a_partial_of_make_truncation_is_a_scenario_and_its_arguments_are_fingerprinted(tmp_path):
    # The case that used to return stale rows: the same name, pi_difference 0.0 then 2.0.
    old = {"shifted": functools.partial(ps.datasets.make_truncation, pi_difference=0.0)}
    new = {"shifted": functools.partial(ps.datasets.make_truncation, pi_difference=2.0)}
    study = dict(estimators={"w": ps.PrincipalScoreWeighting()}, n_samples=400, n_reps=2,
                 random_state=0)  # fmt: skip
    first = run_study(**study, scenarios=old, checkpoint=tmp_path)
    with pytest.raises(ValueError, match=r"scenario 'shifted': keywords.pi_difference 0.0 -> 2.0"):
        run_study(**study, scenarios=new, checkpoint=tmp_path)
    redone = run_study(**study, scenarios=new, checkpoint=tmp_path, overwrite="changed")
    same(redone, run_study(**study, scenarios=new))
    assert redone["estimate"].mean() > first["estimate"].mean() + 0.3  # the new setting's rows
    same(run_study(**study, scenarios=new, checkpoint=tmp_path), redone)  # now stored


def test_a_closure_value_and_the_scenario_code_are_fingerprinted(tmp_path):
    run_study(**STUDY, scenarios={"trial": make_trial(0.5)}, checkpoint=tmp_path)
    refused(tmp_path, "scenario 'trial': closure.effect 0.5 -> 0.8",
            scenarios={"trial": make_trial(0.8)})
    # Code typed at a prompt has no source file: its compiled code is fingerprinted instead.
    namespace = {"trial": trial}
    for shift in ("0.5", "0.9"):
        exec(f"def typed(n_samples, random_state):\n    return trial(n_samples, random_state, "
             f"effect={shift})\n", namespace)  # fmt: skip
        if shift == "0.5":
            run_study(**STUDY, scenarios={"typed": namespace["typed"]}, checkpoint=tmp_path / "p")
    refused(tmp_path / "p", "scenario 'typed': the code of the callable changed",
            scenarios={"typed": namespace["typed"]})


def test_changed_fit_code_with_the_same_repr_is_refused(tmp_path):
    module = tmp_path / "my_estimators.py"
    source = textwrap.dedent('''
        import numpy as np
        from sklearn.base import BaseEstimator

        class MyEstimator(BaseEstimator):
            def fit(self, X, y, *, treatment, survival):
                self.effect_ = float(np.mean(y[treatment == 1]) - np.mean(y[treatment == 0]))
                self.std_error_ = 0.1
                return self
        ''')
    module.write_text(source)
    sys.path.insert(0, str(tmp_path))
    try:
        mine = importlib.import_module("my_estimators")
        study = {**STUDY, "estimators": {"mine": mine.MyEstimator()}}
        before = repr(mine.MyEstimator())
        run_study(**study, scenarios={"trial": trial}, checkpoint=tmp_path / "ck")
        module.write_text(source.replace("self.std_error_ = 0.1", "self.std_error_ = 0.2"))
        mine = importlib.reload(mine)
        assert repr(mine.MyEstimator()) == before
        study["estimators"] = {"mine": mine.MyEstimator()}
        changed = "estimator 'mine': the code of class my_estimators.MyEstimator changed"
        with pytest.raises(ValueError, match=changed):
            run_study(**study, scenarios={"trial": trial}, checkpoint=tmp_path / "ck")
        redone = run_study(**study, scenarios={"trial": trial}, checkpoint=tmp_path / "ck",
                           overwrite="changed")  # fmt: skip
        assert (redone["std_error"] == 0.2).all()
    finally:
        sys.path.remove(str(tmp_path))
        sys.modules.pop("my_estimators", None)


def test_estimator_parameters_library_version_and_version_tag_are_fingerprinted(tmp_path,
                                                                                 monkeypatch):
    run_study(**STUDY, scenarios={"trial": trial}, checkpoint=tmp_path, version="data v1")
    refused(tmp_path, "version= tag 'data v1' -> 'data v2'", scenarios={"trial": trial},
            version="data v2")
    monkeypatch.setattr("pscore_strata._version.__version__", "99.0")
    refused(tmp_path, "pscore_strata version", "-> '99.0'", scenarios={"trial": trial},
            version="data v1")


def test_overwrite_changed_recomputes_only_the_changed_scenario(tmp_path):
    # One part per scenario (three cells per batch): a part holding a changed scenario is
    # recomputed whole, so with mixed parts unchanged cells would be recomputed too.
    study = {**STUDY, "batch_size": 3}
    scenarios = {"a": make_trial(0.5), "b": make_trial(0.2)}
    run_study(**study, scenarios=scenarios, checkpoint=tmp_path)
    changed = {"a": make_trial(0.5), "b": make_trial(0.9)}
    MeanDifference.fits = 0
    redone = run_study(**study, scenarios=changed, checkpoint=tmp_path, overwrite="changed")
    assert MeanDifference.fits == 3  # scenario b's three replicates; a's part was kept
    same(redone, run_study(**STUDY, scenarios=changed))
    with pytest.raises(ValueError, match="`overwrite` must be None"):
        run_study(**STUDY, scenarios=changed, overwrite="always")
    with pytest.raises(TypeError, match="`version` must be None or a string"):
        run_study(**STUDY, scenarios=changed, version=2)


def test_parameter_grids_are_a_study_axis():
    grid = {"harmed_difference": [0.0, 1.5]}
    results = run_study({"r": ps.OutcomeRegression()}, "monotonicity_violated", 400, n_reps=2,
                        random_state=3, params=grid)  # fmt: skip
    assert results["params"].unique().tolist() == [
        '{"harmed_difference": 0.0}', '{"harmed_difference": 1.5}']
    # A cell of a grid equals the same cell run alone, and the callable gets the setting too.
    alone = run_study({"r": ps.OutcomeRegression()}, "monotonicity_violated", 400, n_reps=2,
                      random_state=3, params=[{"harmed_difference": 1.5}])  # fmt: skip
    same(alone, results[results["params"] == '{"harmed_difference": 1.5}'].reset_index(drop=True))
    own = run_study({"d": MeanDifference()}, {"trial": trial}, 40, n_reps=1, random_state=0,
                    params={"effect": [0.1, 0.7]})  # fmt: skip
    assert own["truth"].tolist() == [0.1, 0.7]


@pytest.mark.parametrize(
    "params, error, pattern",
    [
        ({"effect": 0.5}, TypeError, r"`params\['effect'\]` must be a list"),
        ({"effect": []}, ValueError, "is empty"),
        ("effect", TypeError, "`params` must be None"),
        ([{"effect": 0.5}, {"effect": 0.5}], ValueError, "repeats a setting"),
        ({"effect": [np.inf]}, ValueError, "must be finite"),
        ({"effect": [object()]}, TypeError, "must be a number"),
    ],
)
def test_bad_params_name_the_argument(params, error, pattern):
    with pytest.raises(error, match=pattern):
        run_study(**STUDY, scenarios={"trial": trial}, params=params)


def test_an_unknown_scenario_parameter_stops_the_study_with_the_allowed_names():
    with pytest.raises(TypeError, match="unknown scenario parameter.*'harmed_shift'.*accepts"):
        run_study(**STUDY, scenarios="linear", params={"harmed_shift": [1.0]})


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_simulate_cell_redraws_the_stored_rows(tmp_path):
    estimators = {"w": ps.PrincipalScoreWeighting(), "r": ps.OutcomeRegression()}
    scenarios = {"shifted": functools.partial(ps.datasets.make_truncation, pi_difference=0.5),
                 "linear": "linear"}  # fmt: skip
    results = run_study(estimators, scenarios, [300, 500], n_reps=2, random_state=9,
                        checkpoint=tmp_path, params=[{"effect": 1.0}, {"effect": 2.0}])
    stored = pd.concat([pd.read_parquet(p) for p in tmp_path.glob("part-*.parquet")])
    assert len(stored) == len(results)
    for row in results.sample(6, random_state=0).itertuples():
        setting = {"effect": 1.0} if row.params == '{"effect": 1.0}' else {"effect": 2.0}
        spec = {row.scenario: scenarios[row.scenario]}
        data = simulate_cell(spec, row.n_samples, row.replicate, 9, params=setting)
        est = type(estimators[row.estimator])().fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival)
        assert est.effect_ == row.estimate and data.true_effect == row.truth
    data = simulate_cell("linear", 300, 0, np.random.SeedSequence(9), params={"effect": 1.0})
    assert data.X.shape == (300, 5)
    with pytest.raises(TypeError, match="`random_state` must be the study's seed"):
        simulate_cell("linear", 300, 0, None)
    with pytest.raises(ValueError, match="`replicate` must be an integer >= 0"):
        simulate_cell("linear", 300, -1, 9)
    with pytest.raises(ValueError, match="exactly one name"):
        simulate_cell(scenarios, 300, 0, 9)
