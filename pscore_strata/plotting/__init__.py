"""matplotlib figures of the diagnostics and of the sensitivity analysis (the ``plot`` extra).

matplotlib is imported inside each function, so ``import pscore_strata`` never loads it.
"""

from ._diagnostics import plot_balance, plot_overlap, plot_weights
from ._sensitivity import plot_sensitivity, plot_sensitivity_contour

__all__ = [
    "plot_balance",
    "plot_overlap",
    "plot_weights",
    "plot_sensitivity",
    "plot_sensitivity_contour",
]
