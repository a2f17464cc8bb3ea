"""pscore_strata: survivor average causal effects for outcomes truncated by death.

The public names are re-exported here; the modules hold one job each (see DEVELOPERS.md).
"""

from . import datasets, diagnostics, plotting, simulation
from .bootstrap import BootstrapResult, bootstrap
from .bounds import TrimmingBounds
from .diagnostics import (
    balance_table,
    diagnostic_warnings,
    monotonicity_check,
    overlap_summary,
    weight_summary,
)
from .estimators import MultiplyRobust, OutcomeRegression, PrincipalScoreWeighting
from .nuisance import MonotonicityWarning, OverlapWarning
from .sensitivity import sensitivity_grid, tipping_point

__version__ = "0.1.0"

__all__ = [
    "PrincipalScoreWeighting",
    "OutcomeRegression",
    "MultiplyRobust",
    "OverlapWarning",
    "MonotonicityWarning",
    "TrimmingBounds",
    "bootstrap",
    "BootstrapResult",
    "sensitivity_grid",
    "tipping_point",
    "datasets",
    "simulation",
    "diagnostics",
    "plotting",
    "balance_table",
    "weight_summary",
    "overlap_summary",
    "monotonicity_check",
    "diagnostic_warnings",
    "__version__",
]
