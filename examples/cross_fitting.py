"""Cross-fitted machine-learning nuisance models against linear working models.

Run:  python examples/cross_fitting.py [--fast]

In the simulated "nonlinear" scenario every working linear model is misspecified. Gradient
boosting with K-fold cross-fitting (each row predicted by models that never saw it) lets the
multiply robust estimator use flexible learners and keep honest standard errors.
"""

import warnings

from _common import fast_mode
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

for name, est in (("linear working models", linear), (f"boosting, {FOLDS}-fold", boosted)):
    low, high = est.conf_int()
    print(f"{name:>24}: {est.effect_:.3f}  (95% CI {low:.3f} to {high:.3f}; "
          f"error vs truth {est.effect_ - data.true_effect:+.3f})")  # fmt: skip
print("\nThe same from the command line: pscore-strata analyze FILE ... --learner boosting")
