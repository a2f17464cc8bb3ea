"""Estimands: each method's formula over the per-unit nuisance predictions, written once.

The bottom layer above :mod:`pscore_strata.nuisance` and below :mod:`pscore_strata.estimators`:
the estimators, sensitivity analyses, bounds, distributions and the report evaluate these
formulas on the stored predictions of a fitted nuisance layer, so none of them refits a model.
:data:`METHODS` holds one :class:`Method` record per method (its formula for any stratum and
any :class:`Setting` of the sensitivity parameters, whether it needs the outcome model, how its
standard error is obtained); "Adding an estimand" in DEVELOPERS.md says how to extend it.
"""

from ._methods import METHODS, Method
from ._setting import Setting

__all__ = ["METHODS", "Method", "Setting"]
