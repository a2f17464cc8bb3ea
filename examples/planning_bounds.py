"""
Planning a trial: how wide the bounds will be
=============================================

The trimming bounds drop principal ignorability, and their width does not shrink with the
sample size: it is set by the share of treated survivors the treatment saved and by the spread
of their outcomes. What the sample size buys is a confidence interval close to the bounds. This
example plans an invented trial (a quality-of-life score from 0 to 100 six months after
intensive care): it computes the bounds the design implies, the sample size at which the
Imbens-Manski interval is expected to exclude no effect with 80% probability, and checks that
sample size by simulating the trial many times.

Run: ``python examples/planning_bounds.py [--fast]``.
"""

import matplotlib.pyplot as plt
import numpy as np
from _common import fast_mode, show
from scipy import optimize, stats

import pscore_strata as ps
from pscore_strata.assumptions import imbens_manski_interval

FAST = fast_mode()

# %%
# The planning assumptions
# ------------------------
# Survival to six months of 60% under usual care and 70% under the new treatment; among
# survivors the score has an SD of 20 points; the effect hoped for among always-survivors is 8
# points. Randomization 1:1, analysed without covariates (the bounds' width would only shrink
# with prognostic covariates and ``strata="score"``).
SURVIVAL_CONTROL, SURVIVAL_TREATED = 0.60, 0.70
SD, EFFECT, CONTROL_MEAN = 20.0, 8.0, 50.0
POWER, LEVEL = 0.80, 0.95


def simulate_trial(n, rng):
    """One trial of ``n`` patients drawn from the planning assumptions (principal strata first)."""
    treatment = rng.binomial(1, 0.5, n)
    u = rng.uniform(size=n)
    always = u < SURVIVAL_CONTROL
    protected = (u >= SURVIVAL_CONTROL) & (u < SURVIVAL_TREATED)
    survival = np.where(treatment == 1, always | protected, always).astype(float)
    # Principal ignorability holds in the plan: saved patients score like always-survivors.
    outcome = CONTROL_MEAN + EFFECT * treatment + SD * rng.normal(size=n)
    return np.where(survival == 1, outcome, np.nan), treatment, survival


# %%
# The bounds the design implies
# -----------------------------
# The always-survivors are a share q = 0.60 / 0.70 of the treated survivors. If the treated
# survivors' scores are roughly normal with SD sigma, the mean of their highest (lowest) q-part
# lies sigma phi(z_q) / q above (below) their mean, so the identified set for the SACE has width
# 2 sigma phi(z_q) / q, centred on the effect when principal ignorability holds, whatever n.
q = SURVIVAL_CONTROL / SURVIVAL_TREATED
half_width = SD * stats.norm.pdf(stats.norm.ppf(q)) / q
lower, upper = EFFECT - half_width, EFFECT + half_width
print(f"always-survivor share among treated survivors q = {q:.3f}")
print(f"identified set for the SACE: {lower:.2f} to {upper:.2f} (width {2 * half_width:.2f})")

# One very large simulated trial checks the formula and gives the standard errors per patient:
# the influence-function standard error of each bound falls as 1 / sqrt(n).
rng = np.random.default_rng(2026)
n_large = 100_000 if FAST else 1_000_000
y, t, s = simulate_trial(n_large, rng)
large = ps.TrimmingBounds().fit(None, y, treatment=t, survival=s)
print(f"large simulated trial (n = {n_large:,}): bounds {large.lower_:.2f} to {large.upper_:.2f}")
sd_lower = large.std_error_lower_ * np.sqrt(n_large)
sd_upper = large.std_error_upper_ * np.sqrt(n_large)


# %%
# The sample size
# ---------------
# With n patients the bounds' standard errors are about sd / sqrt(n), and the Imbens-Manski
# interval reaches c(n) standard errors beyond each bound. The interval excludes no effect when
# its lower end is above 0, which happens with probability about
# Phi(lower / se_lower(n) - c(n)).
def expected_interval(n):
    se_low, se_high = sd_lower / np.sqrt(n), sd_upper / np.sqrt(n)
    return imbens_manski_interval(lower, upper, se_low, se_high, LEVEL)


def power(n):
    low, _ = expected_interval(n)
    se_low = sd_lower / np.sqrt(n)
    critical = (lower - low) / se_low
    return stats.norm.cdf(lower / se_low - critical)


n_needed = int(np.ceil(optimize.brentq(lambda n: power(n) - POWER, 20, 10**7)))
n_needed += n_needed % 2  # 1:1 randomization
print(f"patients needed for {POWER:.0%} probability that the {LEVEL:.0%} Imbens-Manski "
      f"interval excludes 0: {n_needed}")  # fmt: skip
for n in (n_needed // 2, n_needed, 2 * n_needed):
    low, high = expected_interval(n)
    print(f"  n = {n:>5}: expected interval {low:6.2f} to {high:6.2f}, probability {power(n):.2f}")

# %%
# Checked by simulation
# ---------------------
# The planned trial, run many times: the share of trials whose interval excludes 0.
replicates = 200 if FAST else 2000
excluded = 0
for _ in range(replicates):
    y, t, s = simulate_trial(n_needed, rng)
    bounds = ps.TrimmingBounds().fit(None, y, treatment=t, survival=s)
    excluded += bounds.conf_int(LEVEL)[0] > 0
share = excluded / replicates
mcse = np.sqrt(share * (1 - share) / replicates)
print(f"simulated: {share:.3f} of {replicates} trials of n = {n_needed} exclude 0 "
      f"(Monte Carlo SE {mcse:.3f}; planned {POWER:.2f})")  # fmt: skip

# %%
# The bounds stay as wide as the design makes them; the interval closes in on them as n grows.
sizes = np.geomspace(100, 8 * n_needed, 40)
ends = np.array([expected_interval(n) for n in sizes])
figure, axis = plt.subplots(figsize=(7, 4))
axis.fill_between(sizes, lower, upper, color="tab:blue", alpha=0.25,
                  label="identified set (any n)")  # fmt: skip
axis.plot(sizes, ends[:, 0], color="tab:blue", label="expected 95% Imbens-Manski interval")
axis.plot(sizes, ends[:, 1], color="tab:blue")
axis.axhline(0, color="black", linewidth=0.8)
axis.axvline(n_needed, color="tab:red", linestyle="--", label=f"n = {n_needed}")
axis.set_xscale("log")
axis.set_xlabel("patients randomized")
axis.set_ylabel("SACE, points")
axis.legend(loc="lower right", fontsize=8)
figure.tight_layout()

print("\nA plan rests on guessed survival shares and spread; the bounds also rest on "
      "monotonicity. The always-survivor stratum is latent; see the guide's cautions.")  # fmt: skip
show()
