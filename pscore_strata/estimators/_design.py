"""Covariates given as a formula (``covariates="age + C(site) + bs(bmi, 4)"``): the design is
learned at fit and the same columns are built for new data (``predict_proba``, ``predict``,
``predict_effect``). Without a formula ``X`` passes through unchanged."""

from __future__ import annotations

from .._formula import FormulaDesign

__all__ = ["design_at_fit", "design_for_new_rows"]


def design_at_fit(estimator, X):
    """``X`` as the models see it; learns ``estimator.design_`` when ``covariates`` is set."""
    formula = getattr(estimator, "covariates", None)
    if formula is None:
        estimator.__dict__.pop("design_", None)
        return X
    if X is None:
        raise TypeError(
            f"`covariates` is the formula {formula!r}, so `X` must be the DataFrame holding its "
            "columns; got None."
        )
    # fit_estimators learns the design once and hands it to every estimator it fits.
    given = estimator.__dict__.pop("_given_design", None)
    if given is not None and given.formula == formula:
        estimator.design_ = given
        return given.transform(X)
    estimator.design_ = FormulaDesign(formula)
    return estimator.design_.fit_transform(X)


def design_for_new_rows(estimator, X):
    """New rows through the design learned at fit (unchanged without a formula)."""
    design = getattr(estimator, "design_", None)
    return X if design is None else design.transform(X)
