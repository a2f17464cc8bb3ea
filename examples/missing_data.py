"""
Lost to follow-up and missing questionnaires
============================================

A simulated trial-like study in which some units are lost to follow-up before their survival
status is known, and some survivors never return the outcome questionnaire. Both depend on a
covariate that also drives the effect, so dropping the incomplete rows (complete-case analysis)
is biased. ``missing="at_random"`` models follow-up and response per arm and weights every
observed residual by the inverse probability of being observed. The data are invented (the
simulator's ``missing_outcomes`` scenario), so the true SACE is known.

Run:  python examples/missing_data.py [--fast]
"""

import os
import warnings

import numpy as np
from _common import fast_mode

import pscore_strata as ps

FAST = fast_mode() or os.environ.get("PSCORE_STRATA_FAST") == "1"
N = 4000 if FAST else 40_000

# %%
# Data: blank survival = status unknown, blank outcome of a survivor = not observed.
data = ps.datasets.make_scenario("missing_outcomes", N, random_state=0)
unknown = np.isnan(data.survival)
no_outcome = (data.survival == 1) & np.isnan(data.y)
print(f"{N} units; status unknown for {unknown.mean():.1%}; "
      f"{no_outcome.sum() / np.sum(data.survival == 1):.1%} of known survivors without an "
      f"outcome; true SACE {data.true_effect:.3f}")  # fmt: skip

# %%
# By default every estimator refuses blanks and says what to do.
try:
    ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment, survival=data.survival)
except ValueError as error:
    print("default:", str(error)[:160], "...")

# %%
# Missing at random given X within each arm, beside complete cases on the same data.
keep = ~unknown & ~no_outcome
print(f"\n{'estimator':>26} {'at random':>22} {'complete cases':>22}")
fitted = {}
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ps.MonotonicityWarning)
    for cls in (ps.PrincipalScoreWeighting, ps.OutcomeRegression, ps.MultiplyRobust):
        est = cls(missing="at_random").fit(
            data.X, data.y, treatment=data.treatment, survival=data.survival
        )
        complete = cls().fit(data.X[keep], data.y[keep], treatment=data.treatment[keep],
                             survival=data.survival[keep])  # fmt: skip
        fitted[cls.__name__] = est
        print(f"{cls.__name__:>26} {est.effect_:9.3f} (SE {est.std_error_:.3f})"
              f" {complete.effect_:9.3f} (SE {complete.std_error_:.3f})")  # fmt: skip

robust = fitted["MultiplyRobust"]
for note in robust.summary().attrs["notes"]:
    if note.startswith("Missing data"):
        print("\n" + note)

# %%
# Do the reweighted responders resemble all survivors? (|SMD| under 0.1 is common practice.)
balance = ps.diagnostics.missing_data_balance(robust, data.X)
print("\nLargest |SMD| of the response check, raw and reweighted:")
print(balance.filter(like="response").abs().max().round(3).to_string())

# %%
# If non-responders differ from responders with the same covariates (not at random): the
# delta adjustment, without refitting.
grid = ps.sensitivity_grid(robust, outcome_shift=[-1.0, -0.5, 0.0, 0.5, 1.0])
print("\nOutcome shift of non-responders (both arms):")
print(grid[["outcome_shift", "effect", "ci_low", "ci_high"]].round(3).to_string(index=False))
print("\nCaution: missing at random cannot be tested, and the always-survivor stratum is latent;"
      " no individual decisions. Follow the study protocol and consult a qualified"
      " statistician.")  # fmt: skip
