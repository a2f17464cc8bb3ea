"""The nuisance layer: treatment, survival and outcome models fitted per arm.

Everything downstream (estimators, bounds, sensitivity grids, diagnostics) reads the per-row
predictions fitted here (``pi``, ``p0``, ``p1``, ``m0``, ``m1``), optionally cross-fitted, and,
for the default generalized linear models, what the M-estimation sandwich needs from each fit.
"""

from ._fit import (
    MonotonicityWarning,
    NuisanceFit,
    OverlapWarning,
    ParametricFit,
    default_binary_model,
    fit_nuisance,
)
from ._strata import PrincipalScoreModel

__all__ = [
    "PrincipalScoreModel",
    "NuisanceFit",
    "ParametricFit",
    "fit_nuisance",
    "default_binary_model",
    "OverlapWarning",
    "MonotonicityWarning",
]
