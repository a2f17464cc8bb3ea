"""Efficiency of the SACE estimators against the semiparametric bound, and fit times.

Part 1 (efficiency): Monte Carlo variance of the weighting, regression and multiply robust
estimators (default parametric models) at ``n`` rows, against the semiparametric efficiency bound
``Var(EIF) / n``. The efficient influence function (Jiang, Yang & Ding 2022, JRSSB) is evaluated
with the TRUE nuisance functions on a very large simulated sample:

    EIF = (phi_1 - phi_0 - tau phi_e) / E[p0]

with ``phi_e = (1-T)(S-p0)/(1-pi) + p0``,
``phi_1 = (1-T)(S-p0) m1/(1-pi) + p0 T S (Y-m1)/(pi p1) + p0 m1`` and
``phi_0 = (1-T)(S Y - p0 m0)/(1-pi) + p0 m0``.

``make_truncation`` returns the true propensity and principal scores; the true survivor outcome
means ``m_t(X) = E[Y | T=t, S=1, X]`` follow from its generating model (datasets/_simulate.py,
linear outcome, principal ignorability and monotonicity holding): every survivor of arm t has
``E[Y(t) | X]`` equal to ``1 + x1 + 0.5 x2 - 0.5 x3`` under control, plus ``effect`` under
treatment. The benchmark checks that against the simulated potential outcomes before using it.

Part 2 (time): multiply robust fits on 1,000,000 rows with the default linear models, and on
100,000 rows with 5-fold cross-fitted histogram gradient boosting.

Run: ``.venv/bin/python benchmarks/bench_efficiency.py [--replicates 1000] [--n 5000]``.
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from threadpoolctl import threadpool_limits

import pscore_strata as ps
from pscore_strata.estimands import _formulas

EFFECT = 1.0


def true_outcome_means(X):
    """``m0, m1`` of the generating model (linear outcome, ``effect_heterogeneity=0``)."""
    x1, x2, x3 = X[:, 0], X[:, 1], X[:, 2]
    m0 = 1.0 + x1 + 0.5 * x2 - 0.5 * x3
    return m0, m0 + EFFECT


def efficiency_bound(n_large, seed):
    """Variance of the efficient influence function with the true nuisance functions."""
    data = ps.datasets.make_truncation(n_large, random_state=seed)
    labels = list(data.stratum_labels)
    scores = data.principal_scores
    always = scores[:, labels.index("always_survivor")]
    p0 = always + scores[:, labels.index("harmed")]
    p1 = always + scores[:, labels.index("protected")]
    pi = data.propensity
    m0, m1 = true_outcome_means(data.X)
    # Check the outcome means against the simulated potential outcomes (mean residual ~ 0).
    for name, potential, mean in (("y0", data.y0, m0), ("y1", data.y1, m1)):
        seen = ~np.isnan(potential)
        residual = potential[seen] - mean[seen]
        if abs(residual.mean()) > 5 * residual.std() / np.sqrt(seen.sum()):
            raise RuntimeError(f"True outcome means disagree with the simulated {name}.")
    T, S = data.treatment, data.survival
    Y = np.where(S == 1, data.y, 0.0)
    phi_e = (1 - T) * (S - p0) / (1 - pi) + p0
    phi_1 = (1 - T) * (S - p0) * m1 / (1 - pi) + p0 * T * S * (Y - m1) / (pi * p1) + p0 * m1
    phi_0 = (1 - T) * (S * Y - p0 * m0) / (1 - pi) + p0 * m0
    tau = data.true_effect
    eif = (phi_1 - phi_0 - tau * phi_e) / np.mean(p0)
    return float(np.var(eif)), float(np.mean(eif)), float(tau)


def monte_carlo(n, replicates, seed):
    """One nuisance fit per replicate, three estimand formulas on it (DESIGN.md section 6)."""
    rows = []
    for r in range(replicates):
        data = ps.datasets.make_truncation(n, random_state=seed + r)
        robust = ps.MultiplyRobust().fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )
        oriented = _formulas.orient(robust.training_data_, robust.nuisance_, "increasing")
        row = {"replicate": r, "multiply robust": robust.effect_, "se_mr": robust.std_error_}
        for name, formula in (
            ("weighting", _formulas.weighting_means),
            ("regression", _formulas.regression_means),
        ):
            parts = formula(oriented)
            row[name] = parts.mean_treated - parts.mean_control
        rows.append(row)
    return pd.DataFrame(rows)


def efficiency_table(n, replicates, n_large, seed):
    bound_variance, eif_mean, tau = efficiency_bound(n_large, seed=seed)
    draws = monte_carlo(n, replicates, seed=seed + 1)
    lines = []
    for name in ("weighting", "regression", "multiply robust"):
        values = draws[name].to_numpy()
        variance = values.var(ddof=1)
        mse = np.mean((values - tau) ** 2)
        lines.append(
            {
                "estimator": name,
                "mean": values.mean(),
                "bias": values.mean() - tau,
                "n x MC variance": n * variance,
                "variance / bound": variance / (bound_variance / n),
                "n x MSE": n * mse,
            }
        )
    table = pd.DataFrame(lines)
    mean_se = draws["se_mr"].mean()
    # A variance estimated from R draws has relative sd sqrt(2 / (R - 1)) (normal theory).
    extra = {
        "bound n x Var(EIF)": bound_variance,
        "EIF mean (should be ~0)": eif_mean,
        "MC relative error of a variance": np.sqrt(2 / (replicates - 1)),
        "multiply robust mean SE / MC SD": mean_se / draws["multiply robust"].std(ddof=1),
    }
    return table, extra


def timing(n_linear, n_boosted, folds, threads):
    rows = []
    data = ps.datasets.make_truncation(n_linear, random_state=0)
    for estimator in (ps.PrincipalScoreWeighting(), ps.OutcomeRegression(), ps.MultiplyRobust()):
        start = time.perf_counter()
        estimator.fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
        rows.append(
            {
                "estimator": type(estimator).__name__,
                "models": "default linear / logistic",
                "rows": n_linear,
                "folds": "-",
                "seconds": time.perf_counter() - start,
            }
        )
    del data
    data = ps.datasets.make_truncation(n_boosted, outcome="nonlinear", random_state=0)
    params = dict(max_iter=100, max_leaf_nodes=31, early_stopping=False)
    estimator = ps.MultiplyRobust(
        treatment_model=HistGradientBoostingClassifier(**params),
        survival_model=HistGradientBoostingClassifier(**params),
        outcome_model=HistGradientBoostingRegressor(**params),
        n_folds=folds,
        random_state=0,
    )
    with threadpool_limits(threads):
        start = time.perf_counter()
        estimator.fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
        seconds = time.perf_counter() - start
    rows.append(
        {
            "estimator": "MultiplyRobust",
            "models": f"HistGradientBoosting (100 iterations, {threads} thread(s))",
            "rows": n_boosted,
            "folds": folds,
            "seconds": seconds,
        }
    )
    return pd.DataFrame(rows)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=5000)
    parser.add_argument("--replicates", type=int, default=1000)
    parser.add_argument("--n-large", type=int, default=2_000_000)
    parser.add_argument("--n-linear", type=int, default=1_000_000)
    parser.add_argument("--n-boosted", type=int, default=100_000)
    parser.add_argument("--folds", type=int, default=5)
    parser.add_argument("--threads", type=int, default=1)
    parser.add_argument("--skip-timing", action="store_true")
    args = parser.parse_args()
    warnings.simplefilter("ignore", ps.MonotonicityWarning)
    pd.set_option("display.width", 120)
    with threadpool_limits(args.threads):
        table, extra = efficiency_table(args.n, args.replicates, args.n_large, seed=20_000)
    print(f"Efficiency at n = {args.n}, {args.replicates} replicates, linear scenario")
    print(table.to_string(index=False, float_format=lambda v: f"{v:.4f}"))
    for key, value in extra.items():
        print(f"{key}: {value:.4f}")
    if not args.skip_timing:
        print("\nFit times")
        print(
            timing(args.n_linear, args.n_boosted, args.folds, args.threads).to_string(
                index=False, float_format=lambda v: f"{v:.1f}"
            )
        )


if __name__ == "__main__":
    main()
