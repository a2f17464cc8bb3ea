"""
Beyond the mean: quantile effects among always-survivors
========================================================

A skewed outcome (an invented one-year care cost, in thousands, that exists only for patients
alive at one year) is summarized better by its median and quartiles than by its mean. This
example estimates the always-survivor outcome distribution under each arm, the quantile effects
with their standard errors, the trimming bounds on them without principal ignorability, and, for
a five-level functional scale, the probability that a treated always-survivor has a better level
than a control one. The data are simulated, so the true always-survivor quantiles are known.

Run:  python examples/distributions.py [--fast]
"""

import os
import warnings

import numpy as np
from _common import fast_mode, show

import pscore_strata as ps
from pscore_strata.datasets import make_truncation

FAST = fast_mode() or os.environ.get("PSCORE_STRATA_FAST") == "1"
n = 1500 if FAST else 6000
QUANTILES = (0.25, 0.5, 0.75)

# %%
# Simulated study and the truth
# -----------------------------
# ``make_truncation`` draws potential outcomes for every unit; ``exp(Y / 2)`` turns them into a
# right-skewed cost. The true always-survivor quantiles come from a large simulation of the same
# setting (the potential outcomes of the always-survivors themselves).
data = make_truncation(n, n_features=3, random_state=11)
cost = np.exp(0.5 * data.y)
big = make_truncation(200_000 if FAST else 1_000_000, n_features=3, random_state=12)
always = big.stratum == "always_survivor"
truth = (np.quantile(np.exp(0.5 * big.y1[always]), QUANTILES)
         - np.quantile(np.exp(0.5 * big.y0[always]), QUANTILES))  # fmt: skip
print(f"{n} patients, {data.survival.mean():.0%} alive at one year")
print("true quantile effects:", np.round(truth, 3).tolist())

# %%
# Always-survivor distributions and quantile effects
# --------------------------------------------------
# Principal score weighting: the survivors of each arm reweighted to represent the
# always-survivors. The quantile effects' standard errors come from the influence function
# of the quantile; the bootstrap refits every model as a check.
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ps.MonotonicityWarning)
    est = ps.PrincipalScoreWeighting().fit(
        data.X, cost, treatment=data.treatment, survival=data.survival
    )
distribution = ps.survivor_distribution(est)
print(f"\nSimultaneous 95% band: +/- {distribution.band_critical_treated:.2f} standard errors "
      "(pointwise: 1.96)")  # fmt: skip
table = ps.quantile_effects(est, QUANTILES, X=data.X, n_bootstrap=30 if FAST else 200)
print("\nQuantile effects (weighting):")
print(table[["quantile", "treated", "control", "effect", "std_error", "ci_low", "ci_high",
             "bootstrap_std_error"]].round(3).to_string(index=False))  # fmt: skip

robust = ps.MultiplyRobust().fit(data.X, cost, treatment=data.treatment, survival=data.survival)
print("\nQuantile effects (multiply robust, distribution regression):")
print(ps.quantile_effects(robust, QUANTILES, X=data.X)[["quantile", "effect", "std_error"]]
      .round(3).to_string(index=False))  # fmt: skip

# %%
# Without principal ignorability
# ------------------------------
# Trimming bounds: the treated always-survivors' distribution lies between the lowest and the
# highest share ``q`` of the treated survivors' distribution.
bounds = ps.TrimmingBounds(quantiles=QUANTILES).fit(
    data.X, cost, treatment=data.treatment, survival=data.survival
)
print("\nBounds on the quantile effects:")
print(bounds.quantile_bounds_[["quantile", "lower", "upper", "ci_low", "ci_high"]]
      .round(3).to_string(index=False))  # fmt: skip

# %%
# An ordinal outcome
# ------------------
# A five-level functional scale (0 worst, 4 best): level distributions per arm and the
# probability that a treated always-survivor drawn at random has a higher level than a control
# one, ties counted half. It compares two distributions, not the same patient under two arms.
scale = np.clip(np.round(data.y), 0, 4) + 0.0  # + 0.0 turns -0.0 into 0.0
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ps.MonotonicityWarning)
    levels_fit = ps.PrincipalScoreWeighting().fit(
        data.X, scale, treatment=data.treatment, survival=data.survival
    )
comparison = ps.ordinal_comparison(levels_fit)
print("\nLevel distributions among always-survivors:")
print(comparison.levels[["level", "treated", "control"]].round(3).to_string(index=False))
print(f"P(better level) = {comparison.probability:.3f} "
      f"(95% CI {comparison.ci_low:.3f} to {comparison.ci_high:.3f})")  # fmt: skip

print("\nThe always-survivor stratum is latent and the assumptions are untestable: these are "
      "group summaries, not guidance for individual patients.")  # fmt: skip

# %%
# The two always-survivor CDFs with their bands beside the naive survivor CDFs, and the quantile
# effects with the bounds that drop principal ignorability.
ps.plotting.plot_survivor_distribution(distribution, outcome="cost")
ps.plotting.plot_quantile_effects(table, outcome="cost", bounds=bounds.quantile_bounds_)
show()
