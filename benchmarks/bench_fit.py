"""Time and peak memory of the weighting estimator (estimate + sandwich standard error).

For n = 1e4, 1e5, 1e6 rows x 10 covariates, beside (a) the bare scikit-learn fits of the three
logistic models the estimator needs and (b) the same estimate and sandwich written by hand on
statsmodels GLMs. Targets at 1e6 rows: estimate + SE within 1.5x the bare fits and within 0.5x
the statsmodels version; peak traced memory under 3x the size of X.

Usage: python benchmarks/bench_fit.py [--sizes 10000 100000 1000000] [--repeats 3]
"""

from __future__ import annotations

import argparse
import gc
import time
import tracemalloc
import warnings

import numpy as np
import statsmodels.api as sm
from scipy.special import expit
from sklearn.base import clone

import pscore_strata as ps
from pscore_strata.datasets import make_truncation
from pscore_strata.nuisance import default_binary_model


def ours(data):
    est = ps.PrincipalScoreWeighting().fit(
        data.X, data.y, treatment=data.treatment, survival=data.survival
    )
    return est.effect_, est.std_error_


def bare_fits(data):
    X, T, S = data.X, data.treatment, data.survival
    model = default_binary_model()
    clone(model).fit(X, T)
    clone(model).fit(X[T == 1], S[T == 1])
    clone(model).fit(X[T == 0], S[T == 0])


def statsmodels_version(data):
    """The same estimator and M-estimation sandwich, hand-written on statsmodels GLM fits."""
    X, T, S = data.X, data.treatment, data.survival
    y = np.nan_to_num(data.y)
    design = sm.add_constant(X)
    n = len(T)
    fits = [
        sm.GLM(T, design, family=sm.families.Binomial()).fit(),
        sm.GLM(S[T == 1], design[T == 1], family=sm.families.Binomial()).fit(),
        sm.GLM(S[T == 0], design[T == 0], family=sm.families.Binomial()).fit(),
    ]
    pi, p1, p0 = (expit(design @ f.params) for f in fits)
    w1 = T * S * p0 / (pi * p1)
    w0 = (1 - T) * S / (1 - pi)
    mu1 = np.sum(w1 * y) / np.sum(w1)
    mu0 = np.sum(w0 * y) / np.sum(w0)
    r1, r0 = w1 * (y - mu1), w0 * (y - mu0)
    influence_rows = []
    for fit, rows, p in ((fits[0], np.ones(n, bool), pi), (fits[1], T == 1, p1),
                         (fits[2], T == 0, p0)):
        info = (design * (rows * p * (1 - p))[:, None]).T @ design / n
        scores = design * (rows * ((T if fit is fits[0] else S) - p))[:, None]
        influence_rows.append(scores @ np.linalg.inv(info))
    i_g, i_b1, i_b0 = influence_rows
    if1 = r1 + i_g @ (design * (r1 * -(1 - pi))[:, None]).mean(0)
    if1 += i_b1 @ (design * (r1 * -(1 - p1))[:, None]).mean(0)
    if1 += i_b0 @ (design * (r1 * (1 - p0))[:, None]).mean(0)
    if1 /= w1.mean()
    if0 = (r0 + i_g @ (design * (r0 * pi)[:, None]).mean(0)) / w0.mean()
    influence = if1 - if0
    return mu1 - mu0, influence.std(ddof=1) / np.sqrt(n)


def timed(function, data, repeats):
    best = np.inf
    for _ in range(repeats):
        gc.collect()
        start = time.perf_counter()
        result = function(data)
        best = min(best, time.perf_counter() - start)
    return best, result


def peak_memory(function, data):
    gc.collect()
    tracemalloc.start()
    function(data)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 1_000_000])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    warnings.simplefilter("ignore")
    header = (
        "| rows | ours (s) | bare fits (s) | statsmodels (s) | ours / bare | ours / statsmodels "
        "| peak MB | X MB | peak / X | |estimate diff| |"
    )
    print(header)
    print("|" + "---|" * 10)
    for n in args.sizes:
        data = make_truncation(n, n_features=10, random_state=0)
        t_ours, (effect, _se) = timed(ours, data, args.repeats)
        t_bare, _ = timed(bare_fits, data, args.repeats)
        t_sm, (effect_sm, _se_sm) = timed(statsmodels_version, data, max(1, args.repeats - 1))
        peak = peak_memory(ours, data) / 2**20
        x_mb = data.X.nbytes / 2**20
        print(
            f"| {n:,} | {t_ours:.3f} | {t_bare:.3f} | {t_sm:.3f} | {t_ours / t_bare:.2f} "
            f"| {t_ours / t_sm:.2f} | {peak:.1f} | {x_mb:.1f} | {peak / x_mb:.2f} "
            f"| {abs(effect - effect_sm):.1e} |"
        )


if __name__ == "__main__":
    main()
