"""pscore_strata: survivor average causal effects for outcomes truncated by death.

The public names are re-exported here; each subpackage holds one family (see DEVELOPERS.md).
"""

from . import (
    assumptions,
    datasets,
    diagnostics,
    distributions,
    exceptions,
    inference,
    nuisance,
    plotting,
    simulation,
    tables,
    visits,
)
from ._version import __version__
from .assumptions import TrimmingBounds, sensitivity_grid, tipping_point
from .diagnostics import (
    balance_table,
    diagnostic_warnings,
    monotonicity_check,
    overlap_summary,
    survival_fit_check,
    weight_summary,
)
from .distributions import (
    OrdinalComparison,
    SurvivorDistribution,
    ordinal_comparison,
    quantile_effects,
    survivor_distribution,
)
from .estimators import MultiplyRobust, OutcomeRegression, PrincipalScoreWeighting, fit_estimators
from .inference import BootstrapResult, FewClustersWarning, bootstrap
from .nuisance import MonotonicityWarning, OverlapWarning, PrincipalScoreModel
from .visits import visit_effects


def __getattr__(name):
    # ``ps.report`` (the HTML / JSON report) loads on first use, so ``import pscore_strata``
    # stays light and the report's module can read ``__version__``.
    if name == "report":
        import importlib

        return importlib.import_module(".report", __name__)
    raise AttributeError(f"module 'pscore_strata' has no attribute {name!r}")

__all__ = [
    "PrincipalScoreWeighting",
    "OutcomeRegression",
    "MultiplyRobust",
    "fit_estimators",
    "PrincipalScoreModel",
    "OverlapWarning",
    "MonotonicityWarning",
    "FewClustersWarning",
    "TrimmingBounds",
    "bootstrap",
    "BootstrapResult",
    "sensitivity_grid",
    "tipping_point",
    "survivor_distribution",
    "SurvivorDistribution",
    "quantile_effects",
    "ordinal_comparison",
    "OrdinalComparison",
    "distributions",
    "datasets",
    "simulation",
    "tables",
    "diagnostics",
    "plotting",
    "assumptions",
    "inference",
    "nuisance",
    "exceptions",
    "balance_table",
    "weight_summary",
    "overlap_summary",
    "monotonicity_check",
    "survival_fit_check",
    "diagnostic_warnings",
    "visit_effects",
    "visits",
    "__version__",
]
