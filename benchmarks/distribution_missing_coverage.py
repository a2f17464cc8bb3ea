"""Coverage of the always-survivor distributions under data missing at random.

For each kind of missingness (loss to follow-up: unknown survival status; non-response:
survivors without an outcome; both), each estimator fitted with ``missing="at_random"`` and the
default models, and ``--replicates`` samples of ``make_truncation(n, n_features=3)`` with the
missingness depending on x2 (``(0.75, 0.5)``: 75% observed at x2 = 0, odds rising with x2):

- pointwise 95% intervals of the always-survivor CDF under each arm at the true quartiles of
  that arm's always-survivor distribution;
- the 95% simultaneous band of each arm's CDF over 25 values between the 15% and 85% points of
  the pooled always-survivor outcomes (as in ``distribution_band_coverage.py``; covers when the
  true CDF lies inside at all 25);
- 95% intervals of the quantile effects at 0.25, 0.5 and 0.75.

The truth comes from the potential outcomes of 10^6 simulated units (missingness does not change
it). Prints one table (bias, Monte Carlo SD, mean SE, coverage); the Monte Carlo standard error
of a 95% coverage over 300 replicates is 1.3 points.

Usage: nice -n 15 env OMP_NUM_THREADS=1 python benchmarks/distribution_missing_coverage.py \\
           [--replicates 300] [--n 2000] [--estimators weighting regression robust]
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

QUANTILES = np.array([0.25, 0.5, 0.75])
KINDS = {
    "follow-up": {"follow_up": (0.75, 0.5)},
    "response": {"response": (0.75, -0.5)},
    "both": {"follow_up": (0.8, 0.5), "response": (0.8, -0.5)},
}
ESTIMATORS = {
    "weighting": ps.PrincipalScoreWeighting,
    "regression": ps.OutcomeRegression,
    "robust": ps.MultiplyRobust,
}


def truth():
    big = make_truncation(1_000_000, n_features=3, random_state=12345)
    always = big.stratum == "always_survivor"
    y1, y0 = np.sort(big.y1[always]), np.sort(big.y0[always])
    band = np.quantile(np.concatenate([y1, y0]), np.linspace(0.15, 0.85, 25))
    return {"treated": y1, "control": y0, "band": band,
            "quantile_effect": np.quantile(y1, QUANTILES) - np.quantile(y0, QUANTILES)}


def true_cdf(sorted_outcomes, values):
    return np.searchsorted(sorted_outcomes, values, side="right") / sorted_outcomes.size


def one_replicate(kind, name, seed, n, true):
    data = make_truncation(n, n_features=3, random_state=seed, **KINDS[kind])
    est = ESTIMATORS[name](missing="at_random").fit(
        data.X, data.y, treatment=data.treatment, survival=data.survival)
    X = None if name == "weighting" else data.X
    out = {}
    for arm in ("treated", "control"):
        quartiles = np.quantile(true[arm], QUANTILES)
        dist = ps.survivor_distribution(est, values=quartiles, X=X, n_draws=500)
        frame = dist.to_frame()
        target = true_cdf(true[arm], quartiles)
        covered = (frame[f"{arm}_ci_low"] <= target) & (target <= frame[f"{arm}_ci_high"])
        out[f"cdf_{arm}"] = (frame[arm].to_numpy(), frame[f"{arm}_std_error"].to_numpy(),
                             covered, target)  # fmt: skip
    band = ps.survivor_distribution(est, values=true["band"], X=X, n_draws=1000).to_frame()
    for arm in ("treated", "control"):
        target = true_cdf(true[arm], band["value"].to_numpy())
        inside = (band[f"{arm}_band_low"] <= target) & (target <= band[f"{arm}_band_high"])
        out[f"band_{arm}"] = (None, None, np.array([inside.all()]), None)
    table = ps.quantile_effects(est, QUANTILES, X=X)
    target = true["quantile_effect"]
    out["quantile_effect"] = (table["effect"].to_numpy(), table["std_error"].to_numpy(),
                              (table["ci_low"] <= target) & (target <= table["ci_high"]), target)
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=300)
    parser.add_argument("--n", type=int, default=2000)
    parser.add_argument("--kinds", nargs="+", default=list(KINDS))
    parser.add_argument("--estimators", nargs="+", default=list(ESTIMATORS))
    args = parser.parse_args()
    true = truth()
    print(f"n = {args.n}, {args.replicates} replicates per cell; truth from 10^6 units")
    print("| missing | estimator | quantity | at | bias | MC SD | mean SE | coverage |")
    print("|---|---|---|---|---|---|---|---|")
    for kind in args.kinds:
        for name in args.estimators:
            start = time.perf_counter()
            results = {}
            failed = 0
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                for seed in range(args.replicates):
                    try:
                        replicate = one_replicate(kind, name, seed, args.n, true)
                    except (ValueError, RuntimeError):
                        failed += 1
                        continue
                    for key, value in replicate.items():
                        results.setdefault(key, []).append(value)
            for key, rows in results.items():
                hits = np.mean([r[2] for r in rows], axis=0)
                if rows[0][0] is None:
                    print(f"| {kind} | {name} | {key} | 25 values | | | | {hits[0]:.3f} |")
                    continue
                estimates = np.array([r[0] for r in rows])
                ses = np.array([r[1] for r in rows])
                target = rows[0][3]
                for j, u in enumerate(QUANTILES):
                    print(f"| {kind} | {name} | {key} | {u:g} | "
                          f"{estimates[:, j].mean() - target[j]:+.4f} | "
                          f"{estimates[:, j].std(ddof=1):.4f} | {ses[:, j].mean():.4f} | "
                          f"{hits[j]:.3f} |")  # fmt: skip
            print(f"<!-- {kind} {name}: {len(results.get('quantile_effect', []))} replicates, "
                  f"{failed} failed, {time.perf_counter() - start:.0f} s -->", flush=True)


if __name__ == "__main__":
    main()
