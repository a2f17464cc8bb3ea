"""
Repeated visits: the survivor effect at each follow-up visit
============================================================

An invented trial measures a functional score at 3, 6 and 12 months; patients die between the
visits, more often at high x1 and in the control arm. ``ps.visit_effects`` estimates the survivor
average causal effect at every visit, a band that covers all visits at once and a test of no
effect at any visit, for two populations: the always-survivors to each visit (a different group
per visit) and the always-survivors to the last visit (one group at every visit). The data are
simulated, so the true effects are known.

Run:  python examples/repeated_visits.py [--fast]
"""

import os
import warnings

from _common import fast_mode, show

import pscore_strata as ps
from pscore_strata.datasets import make_visits

FAST = fast_mode() or os.environ.get("PSCORE_STRATA_FAST") == "1"
n = 1500 if FAST else 4000

# %%
# Simulated trial with deaths between visits
# ------------------------------------------
# A quarter of the patients' follow-up ends early (administratively, not because of their
# health) and some visits are missed; both are handled as missing at random given X.
data = make_visits(n, end_of_follow_up=0.25, missed_visits=0.1, random_state=7)
print(f"{n} patients; recorded alive: "
      + ", ".join(f"{v} {data.survival[v].mean():.0%}" for v in data.visits))  # fmt: skip
print("true effects (each):", data.true_effects["each"].round(3).tolist())
print("true effects (last):", data.true_effects["last"].round(3).tolist())

# %%
# Effects at each visit, jointly
# ------------------------------
estimator = ps.MultiplyRobust(missing="at_random")
tables = {}
for population in ("each", "last"):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ps.OverlapWarning)
        tables[population] = ps.visit_effects(
            estimator, data.X, data.y, treatment=data.treatment, survival=data.survival,
            population=population,
        )  # fmt: skip
    table = tables[population]
    print(f"\npopulation {population!r}:")
    print(table[["visit", "effect", "ci_low", "ci_high", "band_low", "band_high",
                 "always_survivor_share"]].round(3).to_string(index=False))  # fmt: skip
    truth = data.true_effects[population].to_numpy()
    covered = bool(((table["band_low"] < truth) & (truth < table["band_high"])).all())
    print(f"the band covers the true effect at every visit: {covered}")
    test = table.attrs["wald_test"]
    print(f"no effect at any visit: chi-square {test['statistic']:.1f} on {test['df']} df, "
          f"p = {test['p_value']:.2g}")  # fmt: skip

# %%
# The figure
# ----------
# The band (shaded boxes) is wider than each pointwise interval: it covers every visit at once.
ps.plotting.plot_visit_effects(tables["last"], outcome="functional score")
show()
