"""Repeated visits: the survivor average causal effect at each follow-up visit, jointly.

``visit_effects`` fits one single-visit analysis per visit and stacks their influence values for a
joint covariance, a simultaneous band over visits and a Wald test of no effect at any visit.
"""

from ._effects import visit_effects

__all__ = ["visit_effects"]
