"""
Quickstart: three estimators on the demo registry
=================================================

The survivor average causal effect (SACE) on the bundled, invented demo registry: about 2000
simulated ventilated patients whose true SACE is known (4 points on a functional score), so you
can see each estimator land near it. The same analysis, with a shareable report, is one command:
``pscore-strata demo --out report``.

Run: ``python examples/quickstart.py [--fast]``.
"""

import warnings

import matplotlib.pyplot as plt
import pandas as pd
from _common import fast_mode, show

import pscore_strata as ps

FAST = fast_mode()

# %%
# The data
# --------
# One row per patient. The functional score exists only for survivors (NaN otherwise).
data = ps.datasets.load_demo()
roles = ps.datasets.DEMO_ROLES
X = pd.get_dummies(data[roles["covariates"]], columns=roles["categorical"], drop_first=True,
                   dtype=float)  # fmt: skip
y, t, s = data[roles["outcome"]], data[roles["treatment"]], data[roles["survival"]]
print(f"{len(data)} patients; survival {s.mean():.1%}; true SACE {ps.datasets.DEMO_TRUE_EFFECT}")

# %%
# Three estimators of the same effect
# -----------------------------------
# They rest on different models, so agreement is reassuring and disagreement is a reason to
# look at the diagnostics.
estimators = {
    "weighting": ps.PrincipalScoreWeighting(),
    "regression": ps.OutcomeRegression(),
    "multiply robust": ps.MultiplyRobust(),
}
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ps.MonotonicityWarning)  # reported by the diagnostics below
    for name, est in estimators.items():
        est.fit(X, y, treatment=t, survival=s)
        low, high = est.conf_int()
        print(f"{name:>16}: SACE {est.effect_:6.2f}  (95% CI {low:.2f} to {high:.2f})")

robust = estimators["multiply robust"]
print("\nSummary of the multiply robust fit:")
print(robust.summary().round(3).to_string())

# %%
# The three estimates with their intervals, beside the known truth of the invented registry.
fig, ax = plt.subplots(figsize=(6, 2.6))
for row, est in enumerate(estimators.values()):
    low, high = est.conf_int()
    ax.errorbar(est.effect_, row, xerr=[[est.effect_ - low], [high - est.effect_]], fmt="o",
                capsize=4)  # fmt: skip
ax.axvline(ps.datasets.DEMO_TRUE_EFFECT, color="grey", ls=":", label="true SACE (simulated)")
ax.set_yticks(range(len(estimators)), list(estimators))
ax.set_xlabel("SACE, functional score points (95% CI)")
ax.invert_yaxis()
ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)
fig.tight_layout()

# %%
# Diagnostics
# -----------
# Do the always-survivor reconstructions from the two arms agree?
balance = ps.balance_table(robust, data[roles["covariates"]])
print("\nLargest weighted |SMD|:", balance.filter(regex="^smd_").abs().max().max().round(3))
for message in ps.diagnostic_warnings(robust, data[roles["covariates"]]):
    print("warning:", message)
ps.plotting.plot_balance(balance)

# %%
# Bounds
# ------
# Without principal ignorability the effect is only bounded.
bounds = ps.TrimmingBounds().fit(X, y, treatment=t, survival=s)
print(f"\nBounds without principal ignorability: {bounds.lower_:.2f} to {bounds.upper_:.2f}")

# %%
# Sensitivity
# -----------
# How far would principal ignorability have to fail to make the interval cover zero?
tip = ps.tipping_point(robust, "pi_difference")
print(f"Tipping point (helped minus always-survivor mean): {tip:.2f} score points")
grid = ps.sensitivity_grid(robust, pi_difference=[-4, -2, 0, 2, 4])
print(grid.round(3).to_string(index=False))
ps.plotting.plot_sensitivity(robust, "pi_difference")

print("\nCaution: the always-survivor stratum is latent and the assumptions are untestable;")
print("these are population summaries, not guidance for individual patients.")
show()
