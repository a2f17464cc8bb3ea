"""
A small simulation study
========================

Bias, standard errors and coverage against known truth, each with its Monte Carlo standard
error. Three estimators (fitted with ``missing="at_random"``, which is the ordinary analysis
where nothing is missing and models the missing statuses where something is), four scenarios:
one where every assumption holds (``"linear"``), one where principal ignorability fails
(``"pi_violated"``), one where monotonicity fails in a way that biases every estimator assuming
it (``"monotonicity_violated"``) and one with survival statuses lost to follow-up
(``"lost_to_follow_up"``). With the fast setting used to build this page there are far too few
replicates for the numbers to mean much; run the script without ``--fast`` for the real study.

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
# here) would make the run resumable and refuse results of changed code.
estimators = {
    "weighting": ps.PrincipalScoreWeighting(missing="at_random"),
    "regression": ps.OutcomeRegression(missing="at_random"),
    "multiply robust": ps.MultiplyRobust(missing="at_random"),
}
results = ps.simulation.run_study(
    estimators,
    ["linear", "pi_violated", "monotonicity_violated", "lost_to_follow_up"],
    N,
    n_reps=N_REPS,
    random_state=2024,
)

# %%
# Summarize
# ---------
# Every measure has its Monte Carlo standard error (``*_mcse``); the relative efficiency is
# against the weighting estimator, on paired replicates.
summary = ps.simulation.summarize(results, reference="weighting")
pd.set_option("display.width", 140)
columns = ["scenario", "estimator", "bias", "bias_mcse", "rmse", "se_sd_ratio", "coverage",
           "relative_efficiency"]  # fmt: skip
print(summary[columns].round(3).to_string(index=False))
if FAST:
    print("(fast setting: too few replicates for the coverage to mean much)")

# %%
# The same table for a manuscript, Monte Carlo standard errors in parentheses (also
# ``.to_latex()`` or ``.write("study.docx")``).
print(ps.simulation.summary_table(summary, measures=["bias", "rmse", "coverage"]).to_markdown())

# %%
# One row of panels per scenario: bias, RMSE, the ratio of the model standard error to the
# empirical one, and coverage, each with bars of two Monte Carlo standard errors.
ps.simulation.plot_summary(summary)
show()
