"""
A small simulation study
========================

Bias, standard errors and coverage against known truth. Two estimators, two scenarios: one where
every assumption holds (``"linear"``) and one where principal ignorability fails
(``"pi_violated"``). Coverage near 95% in the first and below it in the second is what to
expect. With the fast setting used to build this page there are far too few replicates for the
coverage to mean much; run the script without ``--fast`` for the real study.

Run: ``python examples/simulation_study.py [--fast]``.
"""

import pandas as pd
from _common import fast_mode, show

import pscore_strata as ps

FAST = fast_mode()
N_REPS, N = (4, 500) if FAST else (200, 2000)

# %%
# Run the study
# -------------
# Every estimator is fitted on every replicate of every scenario; ``checkpoint=`` (not used
# here) would make the run resumable.
results = ps.simulation.run_study(
    {"weighting": ps.PrincipalScoreWeighting(), "multiply robust": ps.MultiplyRobust()},
    ["linear", "pi_violated"],
    N,
    n_reps=N_REPS,
    random_state=2024,
)

# %%
# Summarize
# ---------
summary = ps.simulation.summarize(results)
pd.set_option("display.width", 120)
columns = ["scenario", "estimator", "n_reps", "truth", "bias", "rmse", "se_sd_ratio", "coverage"]
print(summary[[c for c in columns if c in summary.columns]].round(3).to_string(index=False))
if FAST:
    print("(fast setting: too few replicates for the coverage to mean much)")

# %%
# One row of panels per scenario: bias, RMSE, the ratio of the mean standard error to the
# Monte Carlo standard deviation, and coverage.
ps.simulation.plot_summary(summary)
show()
