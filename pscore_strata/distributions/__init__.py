"""Beyond the mean: outcome distributions and quantile effects among always-survivors.

Replacing the outcome ``Y`` by the indicator ``1{Y <= v}`` in any of the SACE estimators gives
the always-survivor CDF at ``v`` under each arm (Ding & Lu 2017); this family evaluates it from a
fitted estimator's stored nuisance predictions, with pointwise standard errors and a
simultaneous band (multiplier bootstrap of the influence values), inverts it into quantiles and
quantile effects (influence function of the quantile, kernel density), and, for binary and
ordinal outcomes, compares the level distributions of the two arms. Bounds on quantile effects
without principal ignorability are in :class:`pscore_strata.TrimmingBounds` (``quantiles=``).
"""

from ._cdf import SurvivorDistribution, survivor_distribution
from ._ordinal import OrdinalComparison, ordinal_comparison
from ._quantiles import quantile_effects

__all__ = [
    "survivor_distribution",
    "SurvivorDistribution",
    "quantile_effects",
    "ordinal_comparison",
    "OrdinalComparison",
]
