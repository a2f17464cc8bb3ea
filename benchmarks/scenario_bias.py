"""Every named scenario's stated bias directions, by a Monte Carlo study with MC errors.

Usage::

    python benchmarks/scenario_bias.py                 # 100 replicates at n = 5000
    python benchmarks/scenario_bias.py --quick         # 20 replicates
    python benchmarks/scenario_bias.py --reps 200 --n 20000 --checkpoint ck_bias

For each scenario of ``ps.datasets.SCENARIOS``: the three estimators with their default models
and ``missing="at_random"`` (plus the multiply robust estimator on complete cases where the
scenario states its bias), bias and coverage with Monte Carlo standard errors (Morris, White &
Crowther 2019), and the direction each scenario states (``SCENARIOS[name].bias``); the last
column says whether the study shows it (beyond 3 MC s.e. in the stated direction, or within 4
of zero for "none"). The table is printed as Markdown (recorded in benchmarks/README.md).
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
from sklearn.base import BaseEstimator

import pscore_strata as ps


class CompleteCases(BaseEstimator):
    """Multiply robust on rows with a known status and, among survivors, an observed outcome."""

    def fit(self, X, y, *, treatment, survival, groups=None):
        keep = ~np.isnan(survival) & ~((survival == 1) & np.isnan(y))
        inner = ps.MultiplyRobust().fit(X[keep], y[keep], treatment=treatment[keep],
                                        survival=survival[keep])  # fmt: skip
        self.effect_, self.std_error_ = inner.effect_, inner.std_error_
        return self


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[1])
    parser.add_argument("--reps", type=int, default=100)
    parser.add_argument("--n", type=int, default=5000)
    parser.add_argument("--n-jobs", type=int, default=1)
    parser.add_argument("--checkpoint", default=None)
    parser.add_argument("--quick", action="store_true", help="20 replicates")
    args = parser.parse_args()
    reps = 20 if args.quick else args.reps
    warnings.simplefilter("ignore")
    estimators = {
        "weighting": ps.PrincipalScoreWeighting(missing="at_random"),
        "regression": ps.OutcomeRegression(missing="at_random"),
        "multiply_robust": ps.MultiplyRobust(missing="at_random"),
        "complete_cases": CompleteCases(),
    }
    start = time.perf_counter()
    rows = []
    for name, record in ps.datasets.SCENARIOS.items():
        if not record.bias:
            continue
        chosen = {k: v for k, v in estimators.items() if k in record.bias}
        results = ps.simulation.run_study(
            chosen, name, args.n, reps, n_jobs=args.n_jobs, random_state=2029,
            checkpoint=None if args.checkpoint is None else f"{args.checkpoint}/{name}",
        )
        summary = ps.simulation.summarize(results)
        for row in summary.itertuples():
            stated = record.bias[row.estimator]
            z = row.bias / row.bias_mcse
            shown = {"up": z > 3, "down": z < -3, "none": abs(z) < 4}[stated]
            rows.append({
                "scenario": name, "estimator": row.estimator,
                "bias (MC s.e.)": f"{row.bias:+.3f} ({row.bias_mcse:.3f})",
                "coverage (MC s.e.)": f"{row.coverage:.3f} ({row.coverage_mcse:.3f})",
                "SE/SD (MC s.e.)": f"{row.se_sd_ratio:.2f} ({row.se_sd_ratio_mcse:.2f})",
                "stated": stated, "shown": "yes" if shown else "NO",
            })  # fmt: skip
    import pandas as pd

    frame = pd.DataFrame(rows)
    print(f"{reps} replicates per row at n = {args.n}; {time.perf_counter() - start:.0f} s.\n")
    header = "| " + " | ".join(frame.columns) + " |"
    print(header)
    print("| " + " | ".join("---" for _ in frame.columns) + " |")
    for values in frame.itertuples(index=False):
        print("| " + " | ".join(map(str, values)) + " |")


if __name__ == "__main__":
    main()
