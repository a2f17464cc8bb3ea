"""The method registry: one record per estimation method, read by every consumer.

The estimators, the sensitivity analysis and tipping points, the distributions, the report,
the command line and ``fit_estimators`` take the list of methods and each method's formula from
:data:`METHODS`; none of them names a formula function or compares functions.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

from ._formulas import regression_means, robust_harmed_terms, robust_means, weighting_means
from ._setting import NULL_SETTING, Scores

__all__ = ["Method", "METHODS", "METHOD_NAMES", "method_named", "method_of"]


@dataclass(frozen=True)
class Method:
    """One estimation method.

    Attributes
    ----------
    name : str
        The key used everywhere (``"weighting"``, ``"regression"``, ``"robust"``).
    title : str
        The method's name in text.
    estimator : str
        The name of its estimator class in :mod:`pscore_strata`.
    uses_outcome_model : bool
        Whether the formula reads the outcome models.
    std_error : str
        How its standard error is obtained: ``"sandwich"`` (the formula's M-estimation terms
        for the default parametric models; a refitting bootstrap for other learners) or
        ``"influence function"`` (the efficient influence function, orthogonal to the
        nuisance fits, so no terms are added).
    formula : callable
        ``formula(view, setting=NULL_SETTING, subset=None) -> MeanParts``.
    harmed_terms : callable or None
        ``harmed_terms(view) -> {"e": (A, B), "mixed": (A, B), "pure": (A, B)}``: the
        always-survivor estimating functions along ``harmed_ratio`` alone, ``A + s B`` per
        unclipped row with ``s = xi / (1 - xi)`` and 0 on clipped rows, for methods whose
        influence values are these functions (no nuisance-estimation terms); ``None`` otherwise.
    """

    name: str
    title: str
    estimator: str
    uses_outcome_model: bool
    std_error: str
    formula: Callable
    harmed_terms: Callable | None = None

    @property
    def orthogonal(self):
        """Whether its influence values need no nuisance-estimation terms."""
        return self.std_error == "influence function"

    def means(self, view, setting=NULL_SETTING, subset=None):
        """The target stratum's means and influence values on ``view`` at ``setting``.

        Parameters
        ----------
        view : oriented view
            The per-row nuisance predictions as the formulas read them (``estimands._view``).
        setting : Setting, default=NULL_SETTING
            The sensitivity parameters; the null setting is the estimator itself.
        subset : ndarray of shape (n_rows,), optional
            A 0/1 row indicator that restricts the estimand to the stratum's members in it
            (subgroup effects).

        Returns
        -------
        MeanParts
        """
        return self.formula(view, setting, subset)

    def adjusted(self, view, setting):
        """``(MeanParts, n_clipped)`` at ``setting``: the means, and the rows whose implied
        always-survivor score was negative under ``harmed_ratio`` (set to 0).

        Parameters
        ----------
        view : oriented view
            As in :meth:`means`.
        setting : Setting

        Returns
        -------
        parts : MeanParts
        n_clipped : int
        """
        scores = Scores(view, setting)
        return self.formula(view, setting, scores=scores), scores.clipped


METHODS = {
    method.name: method
    for method in (
        Method("weighting", "Principal score weighting", "PrincipalScoreWeighting", False,
               "sandwich", weighting_means),
        Method("regression", "Outcome regression", "OutcomeRegression", True, "sandwich",
               regression_means),
        Method("robust", "Multiply robust", "MultiplyRobust", True, "influence function",
               robust_means, robust_harmed_terms),
    )
}  # fmt: skip
METHOD_NAMES = tuple(METHODS)


def method_named(name, argument="method"):
    """The :class:`Method` called ``name``, or a clear error naming ``argument``."""
    if name not in METHODS:
        raise ValueError(f"`{argument}` must be one of {list(METHODS)}; got {name!r}.")
    return METHODS[name]


def method_of(estimator, what="`estimator`"):
    """The :class:`Method` of an estimator object, or a ``TypeError`` naming ``what``."""
    method = METHODS.get(getattr(type(estimator), "method", None))
    if method is None:
        titles = [m.estimator for m in METHODS.values()]
        raise TypeError(
            f"{what} must be a fitted {', '.join(titles[:-1])} or {titles[-1]}; got "
            f"{type(estimator).__name__}."
        )
    return method
