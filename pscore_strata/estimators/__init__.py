"""Estimators of the survivor average causal effect (SACE).

A small shared base (fit, repeats, the bootstrap fallback, intervals, principal scores, subgroup
effects) and one estimand formula per estimator over the nuisance predictions: principal-score
weighting, outcome regression and the multiply robust estimator.
"""

from ._estimators import MultiplyRobust, OutcomeRegression, PrincipalScoreWeighting

__all__ = ["PrincipalScoreWeighting", "OutcomeRegression", "MultiplyRobust"]
