"""Monte Carlo check of the weighting estimator's always-survivor CDFs and simultaneous band.

Setting: outcome ``exp(Y / 2)`` of ``make_truncation(n, n_features=3)`` (log-normal given X),
``PrincipalScoreWeighting`` with the default logistic models and sandwich standard errors,
25 values between the 15% and 85% points of the pooled always-survivor outcomes (truth from the
potential outcomes of 10^6 units), 95% pointwise intervals and simultaneous bands
(``survivor_distribution``, 400 multiplier draws). Per sample size and arm it prints, over the
25 values: the range of mean SE / Monte Carlo SD, the range of Monte Carlo SD / asymptotic SD
(the sandwich SE of one sample of 400,000 rows, rescaled), the range of pointwise coverage, the
band's coverage of the whole curve, and that coverage with the Monte Carlo SD in place of each
replicate's SE (same critical values), which separates the critical value from the SE's noise.

Usage: ``python benchmarks/distribution_band_coverage.py [--replicates 2000] [--quick]``.
"""

import argparse
import time
import warnings

import numpy as np
import pandas as pd

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

ARMS = ("treated", "control")


def truth():
    big = make_truncation(1_000_000, n_features=3, random_state=12345)
    always = big.stratum == "always_survivor"
    y1, y0 = np.exp(0.5 * big.y1[always]), np.exp(0.5 * big.y0[always])
    values = np.quantile(np.concatenate([y1, y0]), np.linspace(0.15, 0.85, 25))
    return values, {"treated": np.mean(y1[:, None] <= values, axis=0),
                    "control": np.mean(y0[:, None] <= values, axis=0)}  # fmt: skip


def distribution(n, seed, values, n_draws=400):
    data = make_truncation(n, n_features=3, random_state=seed)
    est = ps.PrincipalScoreWeighting().fit(
        data.X, np.exp(0.5 * data.y), treatment=data.treatment, survival=data.survival
    )
    return ps.survivor_distribution(est, values=values, n_draws=n_draws, random_state=seed)


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--replicates", type=int, default=2000)
    parser.add_argument("--sizes", type=int, nargs="+", default=[1500, 4000])
    parser.add_argument("--quick", action="store_true", help="200 replicates")
    args = parser.parse_args()
    reps = 200 if args.quick else args.replicates
    warnings.simplefilter("ignore")
    start = time.time()
    values, true_cdf = truth()
    large = 400_000
    asymptotic = distribution(large, 777, values, n_draws=100)
    rows = []
    for n in args.sizes:
        runs = [distribution(n, seed, values) for seed in range(reps)]
        for arm in ARMS:
            F = np.array([getattr(d, arm) for d in runs])
            se = np.array([getattr(d, f"std_error_{arm}") for d in runs])
            critical = np.array([getattr(d, f"band_critical_{arm}") for d in runs])[:, None]
            sd = F.std(axis=0, ddof=1)
            asymptotic_sd = getattr(asymptotic, f"std_error_{arm}") * np.sqrt(large / n)
            error = np.abs(F - true_cdf[arm])
            ratio, spread = se.mean(axis=0) / sd, sd / asymptotic_sd
            pointwise = np.mean(error <= 1.959964 * se, axis=0)
            rows.append({
                "n": n, "arm": arm, "replicates": reps,
                "SE/SD": f"{ratio.min():.3f}-{ratio.max():.3f}",
                "SD/asymptotic SD": f"{spread.min():.3f}-{spread.max():.3f}",
                "pointwise coverage": f"{pointwise.min():.3f}-{pointwise.max():.3f}",
                "band coverage": f"{np.mean(np.all(error <= critical * se, axis=1)):.3f}",
                "band with MC SD": f"{np.mean(np.all(error <= critical * sd, axis=1)):.3f}",
                "mean critical": f"{critical.mean():.3f}",
            })  # fmt: skip
    frame = pd.DataFrame(rows)
    print("| " + " | ".join(frame.columns) + " |")
    print("|" + "---|" * frame.shape[1])
    for row in frame.itertuples(index=False):
        print("| " + " | ".join(str(cell) for cell in row) + " |")
    print(f"\n{time.time() - start:.0f} s; Monte Carlo SE of a 95% coverage over {reps} "
          f"replicates: {100 * np.sqrt(0.95 * 0.05 / reps):.1f} points")  # fmt: skip


if __name__ == "__main__":
    main()
