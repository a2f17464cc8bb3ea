"""
Job training, wages and employment: the NSW experiment
======================================================

Data: the National Supported Work demonstration as shipped by the ``causaldata`` package
(``nsw_mixtape``: the Dehejia & Wahba 1999 subsample of LaLonde 1986's experimental data; 445
men, 185 randomized to job training). The 1978 wage ``re78`` exists only for men who were
employed, and training may change who is employed, so comparing the wages of employed men is
biased. Here "survival" is employment in 1978 (``re78 > 0``) and the outcome is ``re78``: the
SACE is the effect of training on the wages of men who would be employed either way.

Run: ``python examples/nsw_job_training.py [--fast]``.
"""

import warnings

import numpy as np
from _common import fast_mode, show
from causaldata import nsw_mixtape

import pscore_strata as ps

FAST = fast_mode()
N_RESAMPLES = 99 if FAST else 999

# %%
# The data and the two indicators
# --------------------------------
nsw = nsw_mixtape.load_pandas().data
employed = (nsw["re78"] > 0).astype(int)
wage = nsw["re78"].where(employed == 1)  # a wage exists only for the employed
covariates = ["age", "educ", "black", "hisp", "marr", "nodegree", "re74", "re75"]
X = nsw[covariates].astype(float)
# Earnings in thousands of dollars: on the dollar scale the logistic models' Hessian is
# ill-conditioned (columns differ in scale by four orders of magnitude).
X[["re74", "re75"]] /= 1000
treat = nsw["treat"]
rates = employed.groupby(treat).mean()
print(f"{len(nsw)} men, {treat.sum()} trained. Employment in 1978: "
      f"trained {rates[1]:.1%}, control {rates[0]:.1%}")  # fmt: skip

# %%
# The naive comparison
# --------------------
# The wages of employed men compared across arms: biased if training changes who works.
naive = wage[treat == 1].mean() - wage[treat == 0].mean()
print(f"Naive wage difference among the employed: {naive:,.0f} dollars")

# %%
# Two estimators of the SACE
# --------------------------
# Randomized treatment: the treatment probability is known by design.
share = float(treat.mean())
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ps.MonotonicityWarning)
    weighting = ps.PrincipalScoreWeighting(treatment_model=share, n_bootstrap=0).fit(
        X, wage, treatment=treat, survival=employed
    )
    robust = ps.MultiplyRobust(treatment_model=share).fit(
        X, wage, treatment=treat, survival=employed
    )
for name, est in (("weighting", weighting), ("multiply robust", robust)):
    low, high = est.conf_int()
    print(f"SACE, {name}: {est.effect_:,.0f} dollars (95% CI {low:,.0f} to {high:,.0f})")

# %%
# A bootstrap that refits every model
# -----------------------------------
# The weighting estimator's standard error above ignores the fitted survival models
# (``n_bootstrap=0``); a bootstrap that refits them gives an honest interval.
with warnings.catch_warnings():
    # Some resamples have nearly collinear earnings columns; their fits still converge.
    warnings.simplefilter("ignore")
    result = ps.bootstrap(
        ps.PrincipalScoreWeighting(treatment_model=share), X, wage, treatment=treat,
        survival=employed, n_resamples=N_RESAMPLES, random_state=0,
    )  # fmt: skip
low, high = result.conf_int(0.95, kind="percentile")
print(f"Bootstrap ({N_RESAMPLES} refits): SE {result.std_error:,.0f}, "
      f"95% percentile CI {low:,.0f} to {high:,.0f}")  # fmt: skip

# %%
# Diagnostics
# -----------
# Principal-score overlap, and survival by arm against monotonicity.
check = ps.diagnostics.monotonicity_check(robust)
print("\nEmployment by arm (overall row):")
print(check.loc[["overall"], ["survival_treated", "survival_control", "difference"]].round(3))
ps.plotting.plot_overlap(robust, score="always_survivor")

# %%
# Bounds
# ------
# Bounds that drop principal ignorability (trimming, unadjusted: the design is randomized).
bounds = ps.TrimmingBounds().fit(None, wage, treatment=treat, survival=employed)
low, high = bounds.conf_int()
print(f"\nTrimming bounds: {bounds.lower_:,.0f} to {bounds.upper_:,.0f} dollars "
      f"(95% CI for the SACE {low:,.0f} to {high:,.0f}); "
      f"{bounds.trimming_share_:.1%} of trained employed men trimmed")  # fmt: skip

# %%
# Sensitivity
# -----------
# Wages of men employed only because of training, relative to the always-employed.
spread = float(np.nanstd(wage))
grid = ps.sensitivity_grid(robust, pi_difference=np.linspace(-0.5, 0.5, 5) * spread)
print("\nSensitivity to principal ignorability (dollars):")
print(grid[["pi_difference", "effect", "ci_low", "ci_high"]].round(0).to_string(index=False))
ps.plotting.plot_sensitivity(robust, "pi_difference", np.linspace(-1, 1, 41) * spread)
print("\nThe employed-either-way stratum is latent and the assumptions are untestable; the SACE "
      "describes a group, not any one man.")  # fmt: skip
show()
