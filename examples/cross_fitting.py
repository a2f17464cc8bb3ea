"""
Cross-fitting with gradient boosting
====================================

Cross-fitted machine-learning nuisance models against linear working models. In the simulated
``"nonlinear"`` scenario every working linear model is misspecified. Gradient boosting with
K-fold cross-fitting (each row predicted by models that never saw it) lets the multiply robust
estimator use flexible learners and keep honest standard errors.

Run: ``python examples/cross_fitting.py [--fast]``.
"""

import warnings

import matplotlib.pyplot as plt
from _common import fast_mode, show
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor

import pscore_strata as ps

FAST = fast_mode()
N, FOLDS = (2000, 3) if FAST else (8000, 5)
# Regularized boosting (shallow trees, slow learning, >= 40 rows per leaf): unregularized trees
# push fitted probabilities to 0 or 1 in small samples, and the weights explode.
SETTINGS = dict(max_iter=200, learning_rate=0.05, max_leaf_nodes=8, min_samples_leaf=40,
                random_state=0)  # fmt: skip

data = ps.datasets.make_scenario("nonlinear", N, random_state=0)
print(f"Scenario 'nonlinear', n = {N}; true SACE {data.true_effect:.3f}")

# %%
# Linear working models and cross-fitted boosting
# -----------------------------------------------
# Misspecified working models make the survival models cross; the warnings say so, and the
# comparison below is the point of the example.
warnings.simplefilter("ignore", ps.MonotonicityWarning)
linear = ps.MultiplyRobust().fit(data.X, data.y, treatment=data.treatment,
                                 survival=data.survival)  # fmt: skip
boosted = ps.MultiplyRobust(
    treatment_model=HistGradientBoostingClassifier(**SETTINGS),
    survival_model=HistGradientBoostingClassifier(**SETTINGS),
    outcome_model=HistGradientBoostingRegressor(**SETTINGS),
    n_folds=FOLDS,
    random_state=0,
).fit(data.X, data.y, treatment=data.treatment, survival=data.survival)

fits = (("linear working models", linear), (f"boosting, {FOLDS}-fold", boosted))
for name, est in fits:
    low, high = est.conf_int()
    print(f"{name:>24}: {est.effect_:.3f}  (95% CI {low:.3f} to {high:.3f}; "
          f"error vs truth {est.effect_ - data.true_effect:+.3f})")  # fmt: skip
print("\nThe same from the command line: pscore-strata analyze FILE ... --learner boosting")

# %%
# The two intervals against the simulated truth.
fig, ax = plt.subplots(figsize=(6, 2.2), layout="constrained")
for row, (_, est) in enumerate(fits):
    low, high = est.conf_int()
    ax.errorbar(est.effect_, row, xerr=[[est.effect_ - low], [high - est.effect_]], fmt="o",
                capsize=4)  # fmt: skip
ax.axvline(data.true_effect, color="grey", ls=":", label="true SACE (simulated)")
ax.set_yticks(range(len(fits)), [name for name, _ in fits])
ax.set_xlabel("SACE (95% CI)")
ax.invert_yaxis()
ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), fontsize=8, frameon=False)

# %%
# Flexible learners can push fitted probabilities towards 0 or 1; the overlap of the
# cross-fitted always-survivor score is worth a look before trusting the interval.
ps.plotting.plot_overlap(boosted, score="always_survivor")
show()
