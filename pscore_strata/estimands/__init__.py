"""Estimands: each method's formula over the per-unit nuisance predictions, written once.

The bottom layer above :mod:`pscore_strata.nuisance` and below :mod:`pscore_strata.estimators`:
the estimators, sensitivity analyses, bounds, distributions and the report evaluate these
formulas on the stored predictions of a fitted nuisance layer, so none of them refits a model.
"""

__all__ = []
