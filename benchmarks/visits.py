"""Repeated visits: truth recovery, coverage at each visit, band coverage and the Wald test's size.

Simulates ``make_visits`` (deaths between three visits depending on covariates and treatment,
known effects for both populations) and runs ``ps.visit_effects`` on every replicate:

- "complete": no missing data, multiply robust, populations "each" and "last";
- "missing": a quarter of units with follow-up ending early and 15% missed visits, both missing
  at random given x2 (which drives the effect), multiply robust with ``missing="at_random"``;
- "null": no effect at any visit, for the size of the 5% Wald test (multiply robust).

Prints, per setting and visit, the truth, bias, Monte Carlo SD, mean standard error, coverage of
the 95% pointwise interval, the mean estimated and the Monte Carlo correlation of the first and
last visits' estimates; per setting, the coverage of the 95% simultaneous band and the Wald
test's rejection rate at 5%.

Usage: ``python benchmarks/visits.py [n_reps] [n_samples]`` (default 300 replicates of 1,000
units; ``--quick``: 20).
"""

import sys
import time
import warnings

import numpy as np
import pandas as pd

import pscore_strata as ps
from pscore_strata.datasets import make_visits

SETTINGS = [
    # name, data options, estimator, populations
    ("complete", {}, "robust", ("each", "last")),
    ("missing", {"end_of_follow_up": 0.25, "missed_visits": 0.15}, "robust", ("each", "last")),
    ("null", {"effects": (0.0, 0.0, 0.0), "effect_heterogeneity": 0.0}, "robust", ("each",)),
]


def _estimator(name, missing):
    cls = ps.PrincipalScoreWeighting if name == "weighting" else ps.MultiplyRobust
    return cls(missing="at_random" if missing else "error")


def one_replicate(n, seed):
    rows, joint = [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for setting, options, name, populations in SETTINGS:
            data = make_visits(n, random_state=seed, **options)
            estimator = _estimator(name, setting == "missing")
            for population in populations:
                table = ps.visit_effects(estimator, data.X, data.y, treatment=data.treatment,
                                         survival=data.survival, population=population)  # fmt: skip
                truth = data.true_effects[population].to_numpy()
                covariance = table.attrs["covariance"].to_numpy()
                key = {"setting": setting, "estimator": name, "population": population}
                for k, visit in enumerate(data.visits):
                    rows.append({
                        **key, "visit": visit, "truth": truth[k],
                        "estimate": table["effect"][k], "se": table["std_error"][k],
                        "covered": table["ci_low"][k] <= truth[k] <= table["ci_high"][k],
                    })  # fmt: skip
                inside = (table["band_low"] <= truth) & (truth <= table["band_high"])
                joint.append({
                    **key, "band_covered": bool(np.all(inside)),
                    "rejected": table.attrs["wald_test"]["p_value"] < 0.05,
                    "correlation": covariance[0, -1]
                    / np.sqrt(covariance[0, 0] * covariance[-1, -1]),
                    "first": table["effect"].iloc[0], "last": table["effect"].iloc[-1],
                })  # fmt: skip
    return rows, joint


def main():
    args = [a for a in sys.argv[1:] if a != "--quick"]
    reps = int(args[0]) if args else (20 if "--quick" in sys.argv else 300)
    n = int(args[1]) if len(args) > 1 else 1000
    start = time.perf_counter()
    rows, joint = [], []
    for seed in range(reps):
        r, j = one_replicate(n, 10_000 + seed)
        rows += r
        joint += j
        if (seed + 1) % 50 == 0 and seed + 1 < reps:
            print(f"... {seed + 1} replicates", file=sys.stderr, flush=True)
            report(rows, joint, seed + 1, n, start, sys.stderr)
    report(rows, joint, reps, n, start, sys.stdout)


def report(rows, joint, reps, n, start, stream):
    per_visit = pd.DataFrame(rows)
    keys = ["setting", "estimator", "population"]
    table = per_visit.groupby([*keys, "visit"], sort=False).apply(
        lambda g: pd.Series({
            "truth": g["truth"].iloc[0], "bias": (g["estimate"] - g["truth"]).mean(),
            "mc_sd": g["estimate"].std(ddof=1), "mean_se": g["se"].mean(),
            "coverage": g["covered"].mean(),
        }), include_groups=False,
    )  # fmt: skip
    print(f"Per visit: {reps} replicates of {n} units (95% pointwise intervals)", file=stream)
    print(table.round(4).to_string(), file=stream)
    joint = pd.DataFrame(joint)
    summary = joint.groupby(keys, sort=False).apply(
        lambda g: pd.Series({
            "band_coverage": g["band_covered"].mean(), "wald_rejection": g["rejected"].mean(),
            "corr_first_last_est": g["correlation"].mean(),
            "corr_first_last_mc": np.corrcoef(g["first"], g["last"])[0, 1],
        }), include_groups=False,
    )  # fmt: skip
    print("\nJoint: 95% simultaneous band, 5% Wald test of no effect at any visit, and the\n"
          "correlation of the first and last visits' estimates (estimated mean vs Monte Carlo)",
          file=stream)  # fmt: skip
    print(summary.round(3).to_string(), file=stream)
    print(f"\n{time.perf_counter() - start:.0f} s", file=stream, flush=True)


if __name__ == "__main__":
    main()
