"""Arm-wise survival models against the joint principal score model.

Part 1 (simulation): in the multinomial setting of ``make_truncation`` (strata drawn from a
multinomial logistic model, so the arm-wise logistic survival models are misspecified and the
stratum model is right) and in the default setting (survival logistic in each arm, so the
arm-wise models are right and the stratum model is misspecified), the three estimators with
default models and with ``survival_model=ps.PrincipalScoreModel()``: bias against the known
SACE, empirical standard deviation, mean reported standard error, coverage of the 95% interval,
and the mean number of rows whose fitted survival contradicts monotonicity. The three estimators
of one replicate share one nuisance fit per survival model (``fit(..., nuisance=)``).

Part 2 (demo): the same comparison on the bundled invented registry (true SACE 4.0): estimate,
error, standard error, whether the interval covers the truth, violations, and the observed-data
log-likelihood of each survival model (both have 2 x (features + 1) coefficients).

Part 3 (time): ``PrincipalScoreModel().fit`` against the two arm-wise default logistic fits it
replaces, and ``PrincipalScoreWeighting().fit`` (estimate and sandwich) with either survival
model, on ``make_truncation(n, n_features=10, stratum_model="multinomial")``; best of 2 runs.

Part 4 (EM, ``--em``): ``PrincipalScoreModel(estimator=HistGradientBoostingClassifier(...))``
with the report's boosting settings, on the demo registry and on ``make_truncation(2000,
stratum_model="multinomial")``: the cost of one M-step (one boosting fit on the duplicated
rows), EM iterations, whether it settled, total time, time per iteration, the observed-data
log-likelihood, and (simulation) the mean absolute error of the fitted principal scores against
the simulated ones. ``--em-only`` runs only this part; on code without the ``init`` parameter
only the default row runs (that is how the "before" row of benchmarks/README.md was made).

Run: ``python benchmarks/bench_stratum_model.py [--replicates 300] [--sizes 2000 5000]
[--timing-sizes 100000 1000000] [--em | --em-only]``.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

import pscore_strata as ps

sys.path.insert(0, str(Path(__file__).parent))
from run_all import markdown_table  # noqa: E402

ESTIMATORS = {
    "weighting": ps.PrincipalScoreWeighting,
    "regression": ps.OutcomeRegression,
    "robust": ps.MultiplyRobust,
}
MODELS = {"arm-wise": lambda: None, "joint": ps.PrincipalScoreModel}


def fit_all(X, y, treatment, survival, survival_model):
    """The three estimators, sharing the multiply robust fit's nuisance models."""
    fit = dict(treatment=treatment, survival=survival)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        robust = ps.MultiplyRobust(survival_model=survival_model).fit(X, y, **fit)
        fits = {"robust": robust}
        for name in ("weighting", "regression"):
            fits[name] = ESTIMATORS[name](survival_model=survival_model).fit(
                X, y, nuisance=robust.nuisance_, **fit
            )
    return fits


def simulate(setting, n, replicates):
    rows = {}
    for seed in range(replicates):
        data = ps.datasets.make_truncation(n, stratum_model=setting, random_state=10_000 + seed)
        for label, make in MODELS.items():
            for name, est in fit_all(data.X, data.y, data.treatment, data.survival,
                                     make()).items():  # fmt: skip
                low, high = est.conf_int()
                rows.setdefault((label, name), []).append(
                    (est.effect_ - data.true_effect, est.std_error_,
                     low <= data.true_effect <= high, est.n_monotonicity_violations_)
                )  # fmt: skip
    table = []
    for (label, name), values in rows.items():
        values = np.asarray(values, dtype=float)
        table.append({
            "setting": setting, "n": n, "survival model": label, "estimator": name,
            "bias": values[:, 0].mean(),
            "MC error of bias": values[:, 0].std(ddof=1) / np.sqrt(len(values)),
            "empirical SD": values[:, 0].std(ddof=1), "mean SE": values[:, 1].mean(),
            "coverage": values[:, 2].mean(), "violations (mean rows)": values[:, 3].mean(),
        })  # fmt: skip
    return table


def demo_table():
    frame = ps.datasets.load_demo()
    roles = ps.datasets.DEMO_ROLES
    X = pd.get_dummies(frame[roles["covariates"]], columns=roles["categorical"],
                       drop_first=True, dtype=float)  # fmt: skip
    y, t, s = frame[roles["outcome"]], frame[roles["treatment"]], frame[roles["survival"]]
    truth = ps.datasets.DEMO_TRUE_EFFECT
    table = []
    for label, make in MODELS.items():
        fits = fit_all(X, y, t, s, make())
        p = fits["robust"].nuisance_.survival
        observed = np.where(t == 1, p[1], p[0])
        log_likelihood = float(np.sum(np.where(s == 1, np.log(observed), np.log1p(-observed))))
        for name, est in fits.items():
            low, high = est.conf_int()
            table.append({
                "survival model": label, "estimator": name, "estimate": est.effect_,
                "error": est.effect_ - truth, "SE": est.std_error_,
                "covers 4.0": bool(low <= truth <= high),
                "violations (rows)": est.n_monotonicity_violations_,
                "reversed by > 0.05": int(np.sum(p[0] - p[1] > 0.05)),
                "log-likelihood": log_likelihood,
            })  # fmt: skip
    return pd.DataFrame(table)


def best_time(function, repeats=2):
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def time_one(n):
    data = ps.datasets.make_truncation(n, n_features=10, stratum_model="multinomial",
                                       random_state=0)  # fmt: skip
    X, t, s, y = data.X, data.treatment, data.survival, data.y
    fit = dict(treatment=t, survival=s)

    def arm_fits():
        for arm in (0, 1):
            rows = t == arm
            ps.nuisance.default_binary_model().fit(X[rows], s[rows])

    def weighting(survival_model):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return ps.PrincipalScoreWeighting(survival_model=survival_model).fit(X, y, **fit)

    joint, model = best_time(lambda: ps.PrincipalScoreModel().fit(X, treatment=t, survival=s))
    arms, _ = best_time(arm_fits)
    plain, _ = best_time(lambda: weighting(None))
    strata, _ = best_time(lambda: weighting(ps.PrincipalScoreModel()))
    return {
        "rows": n, "joint model fit (s)": joint, "Newton steps": model.n_iter_,
        "two arm-wise fits (s)": arms, "joint / arm-wise": joint / arms,
        "weighting, arm-wise (s)": plain, "weighting, joint (s)": strata,
    }  # fmt: skip


def timing_table(sizes):
    return pd.DataFrame([time_one(n) for n in sizes])


def _demo_design():
    frame = ps.datasets.load_demo()
    roles = ps.datasets.DEMO_ROLES
    X = pd.get_dummies(frame[roles["covariates"]], columns=roles["categorical"],
                       drop_first=True, dtype=float)  # fmt: skip
    return X, frame[roles["treatment"]].to_numpy(), frame[roles["survival"]].to_numpy(), None


def _simulated_design():
    data = ps.datasets.make_truncation(2000, stratum_model="multinomial", random_state=1)
    return data.X, data.treatment, data.survival, data.principal_scores[:, [0, 1, 3]]


def em_table():
    from sklearn.base import clone
    from sklearn.ensemble import HistGradientBoostingClassifier

    from pscore_strata.nuisance._mixture import compatible_strata
    from pscore_strata.report._options import boosting_params

    classifier = HistGradientBoostingClassifier(random_state=0, **boosting_params(2000))
    params = ps.PrincipalScoreModel().get_params()
    variants = {"default": {}}
    if "init" in params:  # the EM options of this branch
        variants["init='shares'"] = {"init": "shares"}
    table = []
    for name, design in (("demo", _demo_design), ("simulated", _simulated_design)):
        X, t, s, truth = design()
        allowed = compatible_strata(t, s, True)
        rows = np.repeat(np.arange(len(t)), allowed.sum(axis=1))
        labels = np.nonzero(allowed)[1]
        duplicated = np.asarray(X, dtype=float)[rows]
        m_step, _ = best_time(lambda: clone(classifier).fit(duplicated, labels))  # noqa: B023
        for label, options in variants.items():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                seconds, model = best_time(
                    lambda: ps.PrincipalScoreModel(classifier, **options).fit(  # noqa: B023
                        X, treatment=t, survival=s  # noqa: B023
                    ),
                    repeats=1,
                )
            row = {
                "data": name, "EM settings": label, "one M-step (s)": m_step,
                "iterations": model.n_iter_, "settled": model.converged_, "EM fit (s)": seconds,
                "s per iteration": seconds / model.n_iter_,
                "log-likelihood": model.log_likelihood_,
                "score MAE vs truth": np.nan if truth is None else float(
                    np.abs(model.predict_proba(X) - truth).mean()
                ),
            }  # fmt: skip
            table.append(row)
    return pd.DataFrame(table)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=200)
    parser.add_argument("--sizes", type=int, nargs="+", default=[2000, 5000])
    parser.add_argument("--timing-sizes", type=int, nargs="*", default=[100_000, 1_000_000])
    parser.add_argument("--em", action="store_true", help="also run part 4 (EM timings)")
    parser.add_argument("--em-only", action="store_true", help="run only part 4")
    args = parser.parse_args()
    start = time.perf_counter()
    pd.set_option("display.width", 200)
    if args.em or args.em_only:
        em = em_table()
        print("Part 4: EM with the report's boosting classifier (best of 1)")
        print(markdown_table(em, {c: ".2f" for c in em.columns} | {"score MAE vs truth": ".3f",
                                                                  "log-likelihood": ".1f"}))
        if args.em_only:
            print(f"\n({time.perf_counter() - start:.0f} s)")
            return
    table = []
    for n in args.sizes:
        for setting in ("multinomial", "logistic"):
            table += simulate(setting, n, args.replicates)
    frame = pd.DataFrame(table)
    pd.set_option("display.width", 200)
    print(f"Part 1: {args.replicates} replicates per cell, 95% intervals")
    formats = {c: ".3f" for c in frame.columns} | {"violations (mean rows)": ".1f"}
    print(markdown_table(frame, formats))
    print("\nPart 2: the invented demo registry (true SACE 4.0)")
    demo = demo_table()
    print(markdown_table(demo, {c: ".3f" for c in demo.columns} | {"log-likelihood": ".1f"}))
    if args.timing_sizes:
        timing = timing_table(args.timing_sizes)
        print("\nPart 3: fit times (best of 2)")
        print(markdown_table(timing, {c: ".2f" for c in timing.columns}))
    print(f"\n({time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main()
