"""
Principal scores that never cross: one model of stratum membership
==================================================================

The default survival side fits a survival model in each arm and takes the principal scores as
differences of the two fits, which can cross (the fitted survival under treatment falls below
that under control for some rows, against monotonicity). ``ps.PrincipalScoreModel`` instead
models each unit's stratum (always-survivor, protected, doomed) with one multinomial logistic
model fitted on both arms, so the scores are monotone by construction. Here both are fitted to
simulated data whose strata come from a multinomial logistic model, so the truth is known
(SACE = 1) and the arm-wise survival models are misspecified.

Run: ``python examples/stratum_model.py [--fast]``.
"""

import warnings

import matplotlib.pyplot as plt
import numpy as np
from _common import fast_mode, show

import pscore_strata as ps

FAST = fast_mode()

# %%
# Simulated data with multinomial strata
# --------------------------------------
data = ps.datasets.make_truncation(
    3000 if FAST else 10000, stratum_model="multinomial", random_state=1
)
fit_args = dict(treatment=data.treatment, survival=data.survival)
shares = {name: np.mean(data.stratum == name) for name in np.unique(data.stratum)}
print(f"{len(data.y)} units; true SACE {data.true_effect}; strata "
      + ", ".join(f"{name} {share:.1%}" for name, share in shares.items()))

# %%
# Arm-wise survival models against the stratum model
# --------------------------------------------------
# The weighting estimator uses the scores row by row (weights ``p0 / (pi p1)``), so it is the
# one that a misspecified survival side moves most.
fits = {}
with warnings.catch_warnings():
    warnings.simplefilter("ignore", ps.MonotonicityWarning)  # counted in the table below
    warnings.simplefilter("ignore", ps.OverlapWarning)  # ps.overlap_summary(est) lists them
    for label, survival_model in [("arm-wise", None), ("stratum model", ps.PrincipalScoreModel())]:
        est = ps.PrincipalScoreWeighting(survival_model=survival_model)
        fits[label] = est.fit(data.X, data.y, **fit_args)

print(f"{'survival side':>14}  {'SACE':>6}  {'SE':>6}  95% CI            crossing rows")
for label, est in fits.items():
    low, high = est.conf_int()
    print(f"{label:>14}  {est.effect_:6.3f}  {est.std_error_:6.3f}  {low:6.3f} to {high:6.3f}"
          f"  {est.n_monotonicity_violations_:>8}")

# %%
# The stratum model itself
# ------------------------
# Fitted by maximum likelihood of the observed cells (treated survivors are always-survivors or
# protected, control deaths protected or doomed); its scores sum the stratum probabilities.
model = ps.PrincipalScoreModel().fit(data.X, treatment=data.treatment, survival=data.survival)
print(f"converged: {model.converged_} after {model.n_iter_} Newton steps; "
      f"log-likelihood {model.log_likelihood_:.1f}")
scores = model.predict_proba(data.X)
print("mean principal scores: " + ", ".join(
    f"{name} {share:.3f}" for name, share in zip(model.classes_, scores.mean(axis=0), strict=True)))

# %%
# Which survival side fits the observed survival better?
# ------------------------------------------------------
# ``survival_fit_check`` compares fitted with observed survival within tenths of the fitted
# probability in each arm. A small p-value says the fitted probabilities disagree with the data;
# a large one cannot show that anything about the latent strata is right.
for label, est in fits.items():
    check = ps.survival_fit_check(est)
    both = check.attrs["tests"]["both arms"]
    print(f"{label:>14}: chi-square {both['statistic']:.1f} on {both['df']} df, "
          f"p = {both['p_value']:.3f}; AIC {check.attrs['aic']:.1f}")

# %%
# The fitted always-survivor score of each unit under the two survival sides, beside its true
# stratum (known only because the data are simulated).
arm_wise = fits["arm-wise"].predict_proba(data.X)[:, 0]
joint = fits["stratum model"].predict_proba(data.X)[:, 0]
always = data.stratum == "always_survivor"
fig, ax = plt.subplots(figsize=(5.5, 4))
ax.scatter(arm_wise[~always], joint[~always], s=4, alpha=0.3, label="other strata")
ax.scatter(arm_wise[always], joint[always], s=4, alpha=0.3, label="always-survivors")
ax.plot([0, 1], [0, 1], color="grey", lw=0.8, ls="--")
ax.set_xlabel("always-survivor score, arm-wise survival models")
ax.set_ylabel("always-survivor score, stratum model")
ax.legend(loc="upper left", markerscale=3)
fig.tight_layout()
show()

# %%
# Cautions
# --------
# The always-survivor stratum is latent: neither model can be checked against it on real data,
# and monotonicity and principal ignorability remain untestable assumptions. Results describe
# groups, not patients, and should be interpreted under the study protocol and local regulation,
# with a qualified statistician.
