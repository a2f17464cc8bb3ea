"""Estimators of the survivor average causal effect (SACE).

A small shared base (fit, repeats, the bootstrap fallback, intervals, principal scores, subgroup
effects) and one estimand formula per estimator over the nuisance predictions: principal-score
weighting, outcome regression and the multiply robust estimator.
"""

from ._estimators import MultiplyRobust, OutcomeRegression, PrincipalScoreWeighting
from ._together import fit_estimators

__all__ = ["PrincipalScoreWeighting", "OutcomeRegression", "MultiplyRobust", "fit_estimators"]
