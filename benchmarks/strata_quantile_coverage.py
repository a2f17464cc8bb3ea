"""Quantile effects in every principal stratum: coverage against simulated truth.

``make_intermediate`` (an outcome observed for every unit after a binary intermediate; normal
noise, so principal ignorability holds for the whole distribution) is drawn ``n_reps`` times;
each draw is fitted for the protected, doomed and harmed strata with the three estimators and
``ps.quantile_effects`` at the quartiles. The truth is the quantile difference of the simulated
potential outcomes ``y1``, ``y0`` of the stratum in one draw of 1,000,000 units. Prints bias,
Monte Carlo SD, mean standard error, SE/SD and coverage of the 95% interval.

Usage: ``python benchmarks/strata_quantile_coverage.py [n_reps] [n_samples]`` (default 200
replicates of 2,000 rows).
"""

import sys
import warnings

import numpy as np
import pandas as pd

import pscore_strata as ps
from pscore_strata.datasets import make_intermediate

CASES = [("increasing", "protected"), ("increasing", "doomed"), ("decreasing", "harmed")]
QUANTILES = (0.25, 0.5, 0.75)
ESTIMATORS = (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust)


def main(n_reps=200, n_samples=2000):
    rows = []
    for monotonicity, stratum in CASES:
        big = make_intermediate(1_000_000, monotonicity=monotonicity, stratum="doomed",
                                random_state=2026)  # fmt: skip
        members = big.stratum == stratum
        truth = (np.quantile(big.y1[members], QUANTILES)
                 - np.quantile(big.y0[members], QUANTILES))  # fmt: skip
        draws = {cls.__name__: [] for cls in ESTIMATORS}
        for rep in range(n_reps):
            data = make_intermediate(n_samples, monotonicity=monotonicity, stratum="doomed",
                                     random_state=rep)  # fmt: skip
            for cls in ESTIMATORS:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    est = cls(stratum=stratum, monotonicity=monotonicity).fit(
                        data.X, data.y, treatment=data.treatment,
                        intermediate=data.intermediate)  # fmt: skip
                    table = ps.quantile_effects(est, QUANTILES, X=data.X)
                draws[cls.__name__].append(table[["effect", "ci_low", "ci_high",
                                                  "std_error"]].to_numpy())  # fmt: skip
        for name, values in draws.items():
            values = np.asarray(values)
            for j, q in enumerate(QUANTILES):
                effect, low, high, se = values[:, j].T
                sd = effect.std(ddof=1)
                covered = (low <= truth[j]) & (truth[j] <= high)
                rows.append({"stratum": stratum, "estimator": name, "quantile": q,
                             "truth": truth[j], "bias": effect.mean() - truth[j],
                             "mc_sd": sd, "mean_se": se.mean(), "se/sd": se.mean() / sd,
                             "coverage": covered.mean()})  # fmt: skip
    table = pd.DataFrame(rows)
    print(f"{n_reps} replicates of {n_samples} rows")
    print(table.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    return table


if __name__ == "__main__":
    arguments = [int(a) for a in sys.argv[1:]]
    main(*arguments)
