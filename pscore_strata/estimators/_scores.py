"""Principal scores of a fitted SACE estimator: ``principal_scores_``, ``predict_proba`` and
``predict`` from the stored survival models (or the stratum model's own scores)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.utils.validation import check_is_fitted

from .._features import check_feature_names
from .._validation import check_features
from .._warnings import warn_at_caller
from ..diagnostics._arrays import ROW_SHARE_TOLERANCE, SCORE_FLOOR, VIOLATION_TOLERANCE
from ..exceptions import MonotonicityWarning
from ..nuisance._models import predict_models
from ..nuisance._stratum_arms import StratumArm
from ._design import design_for_new_rows

__all__ = ["PrincipalScoresMixin", "check_feature_names", "count_crossings"]


class PrincipalScoresMixin:
    """``principal_scores_``, ``predict_proba`` and ``predict`` of a fitted SACE estimator."""

    @property
    def principal_scores_(self):
        """Principal scores of the training rows, shape (n_samples, 3), ``classes_`` order.

        Computed from the stored survival predictions on each access (not kept, so three
        estimators sharing one nuisance fit do not hold three n x 3 copies).
        """
        if "nuisance_" not in self.__dict__:
            raise AttributeError("principal_scores_ is set by fit")
        mixed, pure = (1, 0) if self.monotonicity == "increasing" else (0, 1)
        survival = self.nuisance_.survival
        return _principal_scores(survival[mixed], survival[pure])

    def predict_proba(self, X):
        """Principal scores per row, columns in ``classes_`` order.

        Columns are checked as scikit-learn checks them: a DataFrame must have the names and
        order seen in ``fit`` (``feature_names_in_``; otherwise a ValueError), and mixing a
        DataFrame with an array between ``fit`` and here warns and matches columns by position.

        Under monotonicity the always-survivor score is the survival probability in the pure arm,
        the helped stratum's score the difference of the arms' survival probabilities, and the
        doomed score the rest. Where the fitted models contradict monotonicity (survival in the
        mixed arm below that in the pure arm) the helped score is 0 and the always-survivor
        score the smaller of the two survival probabilities, so that each row sums to one. The
        estimates do not use these clipped scores: their formulas take the pure arm's survival
        probability itself as the always-survivor score on every row (``p0`` under increasing
        monotonicity, even where it exceeds ``p1``), so on crossing rows the estimate's score is
        larger than the one reported here; elsewhere the two agree. With
        cross-fitting, the predictions average every fold model (of every repeat).

        Parameters
        ----------
        X : array-like of shape (n_rows, n_features) or None
            Covariates, in the columns (and, for a DataFrame, the names) seen in ``fit``.

        Returns
        -------
        ndarray of shape (n_rows, 3), or DataFrame
            A pandas DataFrame (columns ``classes_``, the index of ``X``) when ``X`` is a
            DataFrame, as scikit-learn's ``set_output(transform="pandas")`` labels its output;
            an ndarray otherwise.
        """
        check_is_fitted(self, "effect_")
        if getattr(self, "design_", None) is not None:
            # A formula: the caller's columns are checked as seen in fit, then the learned
            # design builds the models' columns from them.
            check_feature_names(self, X, reset=False)
            X = design_for_new_rows(self, X)
            index = X.index if isinstance(X, pd.DataFrame) else None
        else:
            index = X.index if isinstance(X, pd.DataFrame) else None
            X = _match_feature_names(self, X)
        X, n_features, _ = check_features(X, self._models())
        if n_features != self.n_features_in_:
            raise ValueError(
                f"`X` has {n_features} features but the estimator was fitted with "
                f"{self.n_features_in_}."
            )
        mixed, pure = (1, 0) if self.monotonicity == "increasing" else (0, 1)
        scores = {}
        for arm in (mixed, pure):
            models = [m for fit in self._repeat_fits for m in fit.models[("survival", arm)]]
            scores[arm] = predict_models(models, X)
        result = _principal_scores(scores[mixed], scores[pure])
        if isinstance(models[0], StratumArm):  # a stratum model's own scores, fold-averaged
            result = np.mean([m.strata.predict_proba(X) for m in models], axis=0)
        if index is not None:
            return pd.DataFrame(result, index=index, columns=list(self.classes_))
        return result

    def predict(self, X):
        """The most probable principal stratum per row.

        Parameters
        ----------
        X : array-like of shape (n_rows, n_features) or None
            As in :meth:`predict_proba`.

        Returns
        -------
        ndarray of shape (n_rows,)
            Labels from ``classes_``. The strata are latent: this is the stratum the fitted
            scores make most probable, not a classification of the person.
        """
        return self.classes_[np.argmax(np.asarray(self.predict_proba(X)), axis=1)]


def _match_feature_names(estimator, X):
    """scikit-learn's feature-name check; after its warning, ``X`` takes the fitted form so the
    nuisance models do not warn again."""
    if X is None:
        return X
    check_feature_names(estimator, X, reset=False)
    names = getattr(estimator, "feature_names_in_", None)
    if isinstance(X, pd.DataFrame) and names is None:
        return X.to_numpy()
    if not getattr(estimator, "_fitted_on_frame", True) and hasattr(X, "columns"):
        # A polars table (or another frame) was converted to an array for the models at fit.
        return np.asarray(X)
    if names is not None and not isinstance(X, pd.DataFrame):
        values = np.asarray(X)
        if values.ndim == 2 and values.shape[1] == len(names):
            return pd.DataFrame(values, columns=names)
    return X


def _principal_scores(p_mixed, p_pure):
    # Written into one array (three n-vectors at the peak, not six).
    scores = np.empty((p_mixed.shape[0], 3))
    always, helped, doomed = scores[:, 0], scores[:, 1], scores[:, 2]
    np.minimum(p_pure, p_mixed, out=always)
    np.subtract(p_mixed, p_pure, out=helped)
    np.clip(helped, 0.0, None, out=helped)
    np.subtract(1.0, always, out=doomed)
    doomed -= helped
    return scores


def count_crossings(oriented, n_samples):
    """Rows whose fitted survival models contradict monotonicity, with the warning.

    Crossings within rounding (``VIOLATION_TOLERANCE``: two arms fitted to the same shares) are
    no contradiction. Small reversals are estimation noise where the arms' survival is close;
    the warning needs more than 5% of rows reversed by more than 0.05 (thresholds: common
    practice, shared with diagnostics.diagnostic_warnings).
    """
    violations = int(np.sum(oriented.p_pure - oriented.p_mixed > VIOLATION_TOLERANCE))
    marked = int(np.sum(oriented.p_pure - oriented.p_mixed > SCORE_FLOOR))
    if marked > ROW_SHARE_TOLERANCE * n_samples:
        warn_at_caller(
            f"For {marked} of {n_samples} rows ({marked / n_samples:.1%}) the fitted survival "
            f"probability under {'treatment' if oriented.increasing else 'control'} is more "
            f"than {SCORE_FLOOR} below that under the other arm ({violations} rows are reversed "
            f"by more than {VIOLATION_TOLERANCE:g}), contradicting the monotonicity "
            "assumption. The estimates use the fitted survival probabilities as they are "
            "(unclipped); only the principal scores that predict_proba reports are clipped "
            "at zero there so that each row's scores add to one. Check the survival model, "
            "and see the sensitivity analysis for monotonicity.",
            MonotonicityWarning)
    return violations
