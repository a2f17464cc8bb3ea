"""
The demo analysis, step by step
===============================

What ``pscore-strata demo --out report`` does, from Python: one complete analysis of the
bundled, invented critical-care registry (simulated patients, not real people; true SACE 4
points on a 6-month functional score). ``ps.report.analyze_frame`` checks the columns, fits
the three estimators, the diagnostics, the bounds and the sensitivity analysis, and returns
every number of ``results.json`` together with the fitted objects, which the figures below
read without refitting anything.

Run: ``python examples/demo_analysis.py [--fast]``.
"""

import tempfile
from pathlib import Path

from _common import fast_mode, show

import pscore_strata as ps
from pscore_strata import report

FAST = fast_mode()

# %%
# The column roles
# ----------------
# The registry has one row per patient. The outcome is missing for patients who died, which is
# not missing data: their outcome does not exist.
frame = ps.datasets.load_demo()
demo = ps.datasets.DEMO_ROLES
roles = report.ColumnRoles(
    outcome=demo["outcome"], treatment=demo["treatment"], survival=demo["survival"],
    covariates=tuple(demo["covariates"]), categorical=tuple(demo["categorical"]),
)  # fmt: skip
print(frame.head().to_string())

# %%
# The analysis
# ------------
# The same settings as the demo command: the multiply robust estimator is primary, the default
# generalized linear models, no bootstrap (``--bootstrap N`` would add one). Like the demo, the
# analysis pre-specifies its survival side: one stratum model of the principal strata
# (``survival_model="strata"``), monotone by construction, rather than choosing it after seeing
# the data.
options = report.AnalysisOptions(seed=0, survival_model="strata")
analysis = report.analyze_frame(frame, roles, options,
                                source="bundled demo registry (invented)")  # fmt: skip
results = analysis.results
print(f"Principal scores from the {results['survival_model']['label']}, pre-specified")
print("Estimand:", results["estimand"]["summary_measure"])
for row in results["estimates"]:
    print(f"{row['label']:>40}: {row['effect']:6.2f}  "
          f"(95% CI {row['ci_low']:.2f} to {row['ci_high']:.2f}; {row['std_error_method']})")
naive = results["naive_survivor_contrast"]
print(f"{'naive survivor contrast (biased)':>40}: {naive['estimate']:6.2f}")
print(f"True SACE of the simulated registry: {ps.datasets.DEMO_TRUE_EFFECT}")

# %%
# Diagnostics
# -----------
# The three reconstructions of the always-survivors (from treated survivors, from control
# survivors, from everyone) should agree on every covariate if the models are right.
primary = analysis.primary
ps.plotting.plot_balance(primary, analysis.covariates)

# %%
# The principal scores need overlap: an always-survivor score near zero for many rows makes the
# treated survivors' weights large.
ps.plotting.plot_overlap(primary, score="always_survivor")

# %%
ps.plotting.plot_weights(primary)
for message in results["diagnostics"]["warnings"]:
    print("diagnostic:", message)

# %%
# The survival side can be checked against the data: per arm, the observed survival share of
# each tenth of the rows (by fitted survival) against its fitted share, with a chi-square test.
fit = ps.survival_fit_check(primary)
print(fit.round(3).to_string())
for arm, test in fit.attrs["tests"].items():
    print(f"{arm}: chi-square {test['statistic']:.2f} on {test['df']} df, "
          f"p = {test['p_value']:.3f}")  # fmt: skip

# %%
# Bounds and sensitivity
# ----------------------
bounds = results["bounds"]
print(f"Trimming bounds without principal ignorability: {bounds['lower']:.2f} to "
      f"{bounds['upper']:.2f}")  # fmt: skip
for name, part in results["sensitivity"].items():
    if isinstance(part, dict) and "tipping_point" in part:
        tip = part["tipping_point"]
        print(f"tipping point for {name}: {'not reached' if tip is None else f'{tip:.3g}'}")
ps.plotting.plot_sensitivity_contour(primary)
# sphinx_gallery_thumbnail_number = 4

# %%
# The shareable report
# --------------------
# ``report.write_report`` writes ``report.html``, ``results.json`` and the figures; here into a
# temporary folder. ``results.json`` follows the schema in :doc:`/guide/results-json`.
with tempfile.TemporaryDirectory() as folder:
    report.write_report(analysis, folder)
    print(sorted(p.name for p in Path(folder).iterdir()))

for caution in results["cautions"]:
    print("caution:", caution)
show()
