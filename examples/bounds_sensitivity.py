"""
Bounds and sensitivity analyses
===============================

What to report when principal ignorability or monotonicity is in doubt. The data are simulated
so that principal ignorability fails by a known amount: treated units saved by the treatment
(the protected stratum) have a mean outcome 0.8 above that of the always-survivors with the same
covariates. The true SACE is 1. An analysis that assumes principal ignorability is then biased;
the trimming bounds, which drop the assumption, still contain the truth, and the sensitivity
analysis recovers the truth when given the true departure, something no real analysis can know.

Run: ``python examples/bounds_sensitivity.py [--fast]``.
"""

import numpy as np
from _common import fast_mode, show

import pscore_strata as ps

FAST = fast_mode()
N = 3000 if FAST else 20000
DEPARTURE = 0.8  # E[Y(1) | protected, X] - E[Y(1) | always-survivor, X], known only here

data = ps.datasets.make_truncation(N, design="randomized", pi_difference=DEPARTURE,
                                   random_state=1)  # fmt: skip
fit_args = dict(treatment=data.treatment, survival=data.survival)
print(f"n = {N}; true SACE {data.true_effect}; principal ignorability broken by {DEPARTURE}")

# %%
# The estimate under principal ignorability
# -----------------------------------------
robust = ps.MultiplyRobust(treatment_model=0.5).fit(data.X, data.y, **fit_args)
low, high = robust.conf_int()
print(f"multiply robust: {robust.effect_:.3f} (95% CI {low:.3f} to {high:.3f}), "
      f"biased by the violation")  # fmt: skip

# %%
# Trimming bounds
# ---------------
# Without principal ignorability the SACE is only partially identified. The unadjusted bounds
# trim the treated survivors' outcome distribution; trimming within strata of the fitted
# principal score narrows them (the covariates carry information about who is an
# always-survivor).
plain = ps.TrimmingBounds().fit(None, data.y, **fit_args)
scored = ps.TrimmingBounds(treatment_model=0.5, strata="score").fit(data.X, data.y, **fit_args)
for name, bounds in (("unadjusted", plain), ("score strata", scored)):
    low, high = bounds.conf_int(0.95)
    print(f"{name:>13}: bounds {bounds.lower_:.3f} to {bounds.upper_:.3f}; "
          f"95% CI for the SACE {low:.3f} to {high:.3f}")  # fmt: skip
print(scored.summary().round(3).to_string())

# %%
# A sensitivity grid
# ------------------
# The departure is a sensitivity parameter: each row of the grid is the SACE had principal
# ignorability failed by that much. No model is refitted. The row at the true departure lands
# near the truth.
values = np.round(np.linspace(-1.6, 1.6, 9), 2)
grid = ps.sensitivity_grid(robust, pi_difference=values)
print(grid.round(3).to_string(index=False))

# %%
# The tipping point is the departure at which the interval first covers zero: how strong a
# violation would have to be to explain the effect away.
tip = ps.tipping_point(robust, "pi_difference")
print(f"tipping point: pi_difference = {tip:.3f}")
ps.plotting.plot_sensitivity(robust, "pi_difference")

# %%
# Monotonicity too
# ----------------
# ``harmed_ratio`` lets some units be harmed by the treatment (their share relative to the
# protected stratum). The contour plot varies both assumptions at once; the lines mark where
# the estimate (solid) and the interval's near end (dashed) reach zero.
print(ps.sensitivity_grid(robust, harmed_ratio=[0, 0.1, 0.2, 0.3]).round(3).to_string(index=False))
ps.plotting.plot_sensitivity_contour(robust)

print("\nThe departures cannot be estimated from the data: a grid says how strong a violation")
print("would have to be, not how strong it is. Discuss plausible ranges with subject experts.")
show()
