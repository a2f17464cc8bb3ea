"""Small randomized trials: which estimator, how far the sandwich holds, what the bootstrap adds.

Randomized ``make_truncation(n, design="randomized")`` (five covariates, linear outcome, true
SACE 1, about 60% survival) at small sizes. For each replicate it fits, on the same data:

- weighting, regression and multiply robust with the default models and the treatment
  probability estimated (``treatment_model=None``) or declared (``treatment_model=0.5``);
- the unadjusted analysis (``X=None``, weighting; every estimator gives the same number there);

and records the estimate, its standard error (sandwich / influence function) and whether the
95% interval covers the truth. A fit that raises or returns a non-finite estimate or standard
error is counted as failed. With ``--bootstrap B`` the weighting estimator (probability
estimated) also gets a percentile interval from ``ps.bootstrap`` with ``B`` refitting resamples
(slow: B fits per replicate).

Run: ``python benchmarks/bench_small_trials.py [--replicates 400] [--sizes 100 200 400 800]
[--bootstrap 0]``; prints one table (results recorded in benchmarks/README.md).
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import pandas as pd

import pscore_strata as ps

TRUTH = 1.0
Z = 1.959963984540054


def _fits(n, seed, n_bootstrap):
    data = ps.datasets.make_truncation(n, design="randomized", random_state=seed)
    X, y, t, s = data.X, data.y, data.treatment, data.survival
    settings = {
        ("weighting", "estimated"): (ps.PrincipalScoreWeighting(), X),
        ("weighting", "declared 0.5"): (ps.PrincipalScoreWeighting(treatment_model=0.5), X),
        ("regression", "estimated"): (ps.OutcomeRegression(), X),
        ("regression", "declared 0.5"): (ps.OutcomeRegression(treatment_model=0.5), X),
        ("multiply robust", "estimated"): (ps.MultiplyRobust(), X),
        ("multiply robust", "declared 0.5"): (ps.MultiplyRobust(treatment_model=0.5), X),
        ("unadjusted", "X=None"): (ps.PrincipalScoreWeighting(treatment_model=0.5), None),
    }
    rows = []
    for (method, probability), (estimator, design) in settings.items():
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                estimator.fit(design, y, treatment=t, survival=s)
            effect, se = float(estimator.effect_), float(estimator.std_error_)
            ok = np.isfinite(effect) and np.isfinite(se)
        except Exception:  # a failed fit is a result of this study, counted below
            effect, se, ok = np.nan, np.nan, False
        rows.append({"n": n, "method": method, "treatment probability": probability,
                     "effect": effect, "se": se, "ok": ok,
                     "covered": ok and abs(effect - TRUTH) <= Z * se})  # fmt: skip
    if n_bootstrap:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                boot = ps.bootstrap(ps.PrincipalScoreWeighting(), X, y, treatment=t,
                                    survival=s, n_resamples=n_bootstrap, random_state=seed)
                low, high = boot.conf_int(0.95, kind="percentile")
            effect, se = float(boot.estimate), float(boot.std_error)
            ok = np.isfinite(low) and np.isfinite(high)
        except Exception:
            effect, se, low, high, ok = np.nan, np.nan, np.nan, np.nan, False
        rows.append({"n": n, "method": "weighting, bootstrap", "treatment probability":
                     "estimated", "effect": effect, "se": se, "ok": ok,
                     "covered": ok and low <= TRUTH <= high})  # fmt: skip
    return rows


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--replicates", type=int, default=400)
    parser.add_argument("--sizes", type=int, nargs="+", default=[100, 200, 400, 800])
    parser.add_argument("--bootstrap", type=int, default=0)
    args = parser.parse_args()
    started = time.perf_counter()
    rows = [row for n in args.sizes for seed in range(args.replicates)
            for row in _fits(n, seed, args.bootstrap)]  # fmt: skip
    frame = pd.DataFrame(rows)
    good = frame[frame["ok"]]
    table = good.groupby(["n", "method", "treatment probability"], sort=False).agg(
        bias=("effect", lambda e: e.mean() - TRUTH),
        mc_sd=("effect", "std"),
        mean_se=("se", "mean"),
        coverage=("covered", "mean"),
    )
    table["se_over_sd"] = table["mean_se"] / table["mc_sd"]
    table["failed"] = frame.groupby(["n", "method", "treatment probability"], sort=False)[
        "ok"].apply(lambda ok: int((~ok).sum()))  # fmt: skip
    pd.set_option("display.width", 140)
    print(f"{args.replicates} replicates per size, true SACE {TRUTH}, "
          f"{time.perf_counter() - started:.0f} s")  # fmt: skip
    print(table.round(3).to_string())


if __name__ == "__main__":
    main()
