"""matplotlib figures: diagnostics, sensitivity analysis, distributions (the ``plot`` extra).

matplotlib is imported inside each function, so ``import pscore_strata`` never loads it.
"""

from ._diagnostics import plot_balance, plot_overlap, plot_weights
from ._distributions import plot_level_shares, plot_quantile_effects, plot_survivor_distribution
from ._sensitivity import plot_sensitivity, plot_sensitivity_contour
from ._visits import plot_visit_effects

__all__ = [
    "plot_balance",
    "plot_overlap",
    "plot_weights",
    "plot_sensitivity",
    "plot_sensitivity_contour",
    "plot_survivor_distribution",
    "plot_quantile_effects",
    "plot_level_shares",
    "plot_visit_effects",
]
