"""Effects in every principal stratum: truth recovery and coverage against simulated truth.

Runs the scenario family ``intermediate_*`` of ``ps.datasets`` (an outcome observed for every
unit after a binary intermediate; exact effects in each stratum; derivations in
docs/guide/derivations/strata.md) through ``ps.simulation.run_study``, each scenario against
the three estimators targeting its stratum with their default models, and prints bias (with
its Monte Carlo standard error), Monte Carlo
SD, mean standard error, SE/SD and coverage of the 95% interval. The last block compares the
complier estimates with two-stage least squares under the exclusion restriction.

With ``--missing`` it runs the protected and doomed scenarios with loss to follow-up and outcome
non-response missing at random given X (``make_intermediate(follow_up=, response=)``) and the
estimators fitted with ``missing="at_random"`` instead.

Usage: ``python benchmarks/strata_coverage.py [n_reps] [n_samples] [--missing]`` (default 300
replicates of 2,000 rows; ``--quick``: 30).
"""

import sys
import time
import warnings

import numpy as np
import pandas as pd
import statsmodels.api as sm

import pscore_strata as ps

CASES = {
    "intermediate_always_survivor": ("increasing", "always_survivor"),
    "intermediate_protected": ("increasing", "protected"),
    "intermediate_doomed": ("increasing", "doomed"),
    "intermediate_harmed": ("decreasing", "harmed"),
}


MISSING = dict(follow_up=(0.85, 0.6), response=(0.8, -0.7))


def _estimators(monotonicity, stratum, **extra):
    common = dict(monotonicity=monotonicity, stratum=stratum, **extra)
    return {
        "weighting": ps.PrincipalScoreWeighting(**common),
        "regression": ps.OutcomeRegression(**common),
        "robust": ps.MultiplyRobust(**common),
    }


def _missing_scenario(stratum):
    def simulate(n_samples, random_state):
        return ps.datasets.make_intermediate(n_samples, stratum=stratum,
                                             random_state=random_state, **MISSING)  # fmt: skip

    simulate.__name__ = f"intermediate_{stratum}_missing"
    return simulate


def coverage_table(reps, n, missing=False):
    parts = []
    cases = CASES if not missing else {
        _missing_scenario(s): ("increasing", s) for s in ("protected", "doomed")}
    for scenario, (monotonicity, stratum) in cases.items():
        extra = {"missing": "at_random"} if missing else {}
        results = ps.simulation.run_study(_estimators(monotonicity, stratum, **extra),
                                          [scenario], n, n_reps=reps, random_state=2025,
                                          n_jobs=1)  # fmt: skip
        parts.append(results.assign(stratum=stratum))
    results = pd.concat(parts, ignore_index=True)
    results["error"] = results["estimate"] - results["truth"]
    results["covered"] = (results["ci_low"] <= results["truth"]) & (
        results["truth"] <= results["ci_high"])  # fmt: skip
    table = results.groupby(["stratum", "estimator"], sort=False).agg(
        truth=("truth", "first"), bias=("error", "mean"), sd=("error", "std"),
        mean_se=("std_error", "mean"), coverage=("covered", "mean"), failed=("failed", "sum"),
    )  # fmt: skip
    table.insert(2, "bias_mcse", table["sd"] / np.sqrt(reps))
    table["se_over_sd"] = table["mean_se"] / table["sd"]
    return table


def iv_comparison(reps, n):
    """Complier estimates against 2SLS on the exclusion-restriction scenario (same datasets)."""
    from linearmodels.iv import IV2SLS

    rows = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for seed in range(reps):
            data = ps.datasets.make_scenario("intermediate_exclusion", n, random_state=seed)
            iv = IV2SLS(data.y, sm.add_constant(data.X), data.intermediate.astype(float),
                        data.treatment.astype(float)).fit(cov_type="robust")  # fmt: skip
            row = {"2sls": float(iv.params.iloc[-1])}
            for name, est in _estimators("increasing", "complier").items():
                row[name] = est.fit(data.X, data.y, treatment=data.treatment,
                                    intermediate=data.intermediate).effect_  # fmt: skip
            rows.append(row)
    frame = pd.DataFrame(rows)
    truth = ps.datasets.make_scenario("intermediate_exclusion", 10, random_state=0).true_effect
    return pd.DataFrame({
        "mean": frame.mean(), "bias": frame.mean() - truth, "sd": frame.std(),
        "mean_abs_gap_to_2sls": frame.sub(frame["2sls"], axis=0).abs().mean(),
    })  # fmt: skip


def main():
    args = [a for a in sys.argv[1:] if a not in ("--quick", "--missing")]
    reps = int(args[0]) if args else (30 if "--quick" in sys.argv else 300)
    n = int(args[1]) if len(args) > 1 else 2000
    start = time.perf_counter()
    if "--missing" in sys.argv:
        table = coverage_table(reps, n, missing=True)
        print(f"Missing at random, {reps} replicates of {n:,} rows "
              f"({time.perf_counter() - start:.0f} s)")  # fmt: skip
        print(table.round(4).to_string())
        return
    table = coverage_table(reps, n)
    print(f"Every stratum, {reps} replicates of {n:,} rows ({time.perf_counter() - start:.0f} s)")
    print(table.round(4).to_string())
    start = time.perf_counter()
    iv = iv_comparison(min(reps, 100), n)
    print(f"\nComplier effect against 2SLS under the exclusion restriction, {min(reps, 100)} "
          f"replicates of {n:,} rows ({time.perf_counter() - start:.0f} s)")  # fmt: skip
    print(iv.round(4).to_string())


if __name__ == "__main__":
    main()
