"""A model of principal stratum membership, fitted on both arms at once.

The arm-wise survival models give ``p0`` and ``p1`` separately, so their difference (the helped
stratum's score) can be negative. :class:`PrincipalScoreModel` models the strata themselves:
``P(always_survivor | X)``, ``P(helped | X)``, ``P(doomed | X)``, fitted to the observed cells
by maximum likelihood of the mixture each cell is (:mod:`._mixture`), so ``p_mixed = e_always +
e_helped >= p_pure = e_always`` by construction.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, clone
from sklearn.exceptions import ConvergenceWarning
from sklearn.pipeline import Pipeline
from sklearn.utils import get_tags
from sklearn.utils.validation import check_array, check_is_fitted

from .._arguments import positional_still_accepted
from .._warnings import warn_at_caller
from ..inference._resampling import seed_models, spawn_seeds
from ._mixture import (
    MixtureLikelihood,
    _with_intercept,
    compatible_strata,
    posterior_strata,
    strata_probabilities,
)
from ._stratum_fitting import (
    check_cells,
    check_fit_input,
    check_prediction_input,
    check_stratum_params,
    newton_maximize,
    not_converged_message,
    starting_strata,
    weighted_fit,
)

__all__ = ["PrincipalScoreModel"]

# Probabilities are floored here before logs in the EM path (a classifier may predict 0).
_TINY = 1e-300
# tol="auto": the default model's bound on the gradient (as before "auto" existed), and EM's
# bound on the relative rise of the observed-data log-likelihood per iteration (1e-6: common
# practice for EM stopping rules; EM's linear rate makes a tighter bound costly for little).
_NEWTON_TOL = 1e-8
_EM_TOL = 1e-6
# EM iterations in a row without a new best log-likelihood (by more than tol) before it stops.
_EM_PATIENCE = 3


class PrincipalScoreModel(BaseEstimator):
    """Principal score model: stratum probabilities given covariates, fitted on both arms.

    Each observed cell is a mixture of principal strata. Under ``"increasing"`` monotonicity
    treated survivors are always-survivors or protected, treated deaths doomed, control
    survivors always-survivors, control deaths protected or doomed (``"decreasing"`` mirrors
    the arms, with ``harmed`` in place of ``protected``). The model is fitted to the
    observed-data likelihood ``prod_i sum_{k in C_i} e_k(X_i)`` over the strata ``C_i``
    compatible with each unit's cell (Ding & Lu 2017). Pass it as ``survival_model`` of an
    estimator: it then supplies both arms' survival probabilities (under ``"increasing"``,
    ``p0 = e_always`` and ``p1 = e_always + e_protected``), which never contradict
    monotonicity.

    Parameters
    ----------
    estimator : classifier or None, default=None
        ``None``: multinomial logistic model in X (linear predictors for the always-survivor
        and helped strata, doomed the reference), fitted by direct maximum likelihood (Newton's
        method on the exact gradient and observed information, with step halving, on
        standardized columns, coefficients mapped back). Otherwise a scikit-learn classifier
        (or pipeline) that accepts ``sample_weight`` and has ``predict_proba``, fitted by EM:
        the E-step gives each unit its posterior stratum probabilities, the M-step fits a
        clone of the classifier to the units duplicated once per compatible stratum (labels
        0, 1, 2 in ``classes_`` order), weighted by those posteriors times ``sample_weight``.
        ``LogisticRegression(C=np.inf)`` gives the EM fit of the default model (same maximum,
        more iterations). Standard errors of estimators using a classifier come from the
        bootstrap.
    monotonicity : {"increasing", "decreasing"}, default="increasing"
        Must match the estimator the model is passed to.
    max_iter : int, default=200
        Newton iterations (default model) or EM iterations (classifier).
    tol : "auto" or float, default="auto"
        Default model: largest absolute gradient of the mean log-likelihood (standardized
        coefficients) at convergence (``"auto"``: 1e-8). EM: the relative rise of the
        observed-data log-likelihood below which an iteration counts as no improvement
        (``"auto"``: 1e-6); EM stops after 3 iterations in a row without a rise of more than
        ``tol`` over the best so far, and keeps the best iteration. An exact M-step (a
        logistic classifier) never lowers the log-likelihood, so this is the usual rule; a
        learner whose fit is not an exact M-step (trees, early stopping) wanders around its
        plateau instead, and the rule stops it there.
    init : {"multinomial", "shares"}, default="multinomial"
        EM only: start from the posteriors of the default multinomial logistic fit (when ``X``
        is numeric and complete; otherwise, as with ``"shares"``, from the stratum shares
        implied by the arms' survival shares).
    random_state : int, RandomState or None, default=None
        EM only: seeds the classifier's ``random_state`` parameters (also those of pipeline
        steps) that are ``None``, once per fit, so that every M-step uses the same randomness
        and the iterations can settle. Parameters already set are left as they are.

    Attributes
    ----------
    classes_ : ndarray of str
        ``["always_survivor", "protected", "doomed"]`` (``"harmed"`` under ``"decreasing"``).
    coef_ : ndarray of shape (3, n_features)
        Default model: coefficients of each stratum's linear predictor on the original scale
        (the doomed row is 0: it is the reference).
    intercept_ : ndarray of shape (3,)
    estimator_ : classifier
        The fitted classifier of the EM iteration with the highest observed-data
        log-likelihood (classifier path only).
    n_iter_ : int
        Iterations run.
    log_likelihood_path_ : ndarray of shape (n_iterations,)
        EM only: the weighted observed-data log-likelihood after each iteration.
    converged_ : bool
    log_likelihood_ : float
        Weighted observed-data log-likelihood at the fit, ``sum_i w_i log L_i`` (EM: of the
        kept iteration).
    n_features_in_ : int

    See Also
    --------
    PrincipalScoreWeighting, OutcomeRegression, MultiplyRobust : estimators that accept this
        model as ``survival_model``.

    References
    ----------
    Ding, P. & Lu, J. (2017). Principal stratification analysis using principal scores.
    JRSSB 79(3), 757-777.

    Examples
    --------
    >>> import numpy as np
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, stratum_model="multinomial", random_state=0)
    >>> model = ps.PrincipalScoreModel().fit(
    ...     data.X, treatment=data.treatment, survival=data.survival)
    >>> model.converged_, model.classes_.tolist()
    (True, ['always_survivor', 'protected', 'doomed'])
    >>> scores = model.predict_proba(data.X)
    >>> bool(np.allclose(scores.sum(axis=1), 1.0) and (scores >= 0).all())
    True
    >>> est = ps.PrincipalScoreWeighting(survival_model=ps.PrincipalScoreModel()).fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> est.n_monotonicity_violations_, est.std_error_method_
    (0, 'sandwich')
    """

    def __init__(self, estimator=None, *, monotonicity="increasing", max_iter=200, tol="auto",
                 init="multinomial", random_state=None):  # fmt: skip
        self.estimator = estimator
        self.monotonicity = monotonicity
        self.max_iter = max_iter
        self.tol = tol
        self.init = init
        self.random_state = random_state

    def __sklearn_tags__(self):
        # Missing covariates are the classifier's business (a pipeline may impute them); the
        # default model needs complete numeric covariates.
        tags = super().__sklearn_tags__()
        if isinstance(self.estimator, Pipeline):
            tags.input_tags.allow_nan = True
        elif self.estimator is not None:
            tags.input_tags.allow_nan = get_tags(self.estimator).input_tags.allow_nan
        return tags

    # -- fitting -----------------------------------------------------------------------------
    @positional_still_accepted
    def fit(self, X, *, treatment, survival, sample_weight=None):
        """Fit the stratum model to the observed cells.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features) or None
            Covariates (``None``: stratum shares only).
        treatment, survival : array-like of shape (n_samples,)
            0/1 indicators, by keyword (by position: a ``FutureWarning``, until the next release).
        sample_weight : array-like of shape (n_samples,), optional
            Non-negative weights of the log-likelihood terms.

        Returns
        -------
        self
        """
        check_stratum_params(self)
        treatment, survival, weights = check_cells(X, treatment, survival, sample_weight)
        if X is None:
            self.n_features_in_ = 0
        else:
            X = check_fit_input(self, X, treatment.size)
        self.classes_ = np.array(
            ["always_survivor", "protected" if self._increasing else "harmed", "doomed"]
        )
        allowed = compatible_strata(treatment, survival, self._increasing)
        if self.estimator is None:
            self._fit_multinomial(X, allowed, weights)
        else:
            self._fit_em(X, allowed, weights)
        if not self.converged_:
            warn_at_caller(not_converged_message(self, _EM_PATIENCE), ConvergenceWarning)
        return self

    @property
    def _increasing(self):
        return self.monotonicity == "increasing"

    # -- default: multinomial logistic by direct maximum likelihood --------------------------
    def _design(self, X):
        if X is None:
            return None
        return check_array(X, dtype=float, ensure_min_features=1)

    def _fit_multinomial(self, X, allowed, weights):
        values = self._design(X)
        n = allowed.shape[0]
        if values is None:
            self._center, self._scale = np.zeros(0), np.ones(0)
            Z = np.empty((n, 0))
        else:
            self.n_features_in_ = values.shape[1]
            self._center = values.mean(axis=0)
            spread = values.std(axis=0)
            self._scale = np.where(np.isfinite(spread) & (spread > 0), spread, 1.0)
            Z = (values - self._center) / self._scale
        Zd = _with_intercept(Z)
        likelihood = MixtureLikelihood(Zd, allowed, weights)
        start = np.zeros((2, Zd.shape[1]))
        shares = starting_strata(allowed, weights)
        start[:, 0] = np.log(shares[:2] / shares[2])
        tol = _NEWTON_TOL if self.tol == "auto" else self.tol
        theta, self.n_iter_ = newton_maximize(likelihood, start.ravel(), self.max_iter, tol)
        self._coef_standardized = theta.reshape(2, -1)
        gradient = np.max(np.abs(likelihood.score(theta)))
        self.converged_ = bool(gradient <= tol)
        self.log_likelihood_ = likelihood.log_likelihood(theta) * likelihood.total
        coef = self._coef_standardized[:, 1:] / self._scale
        intercept = self._coef_standardized[:, 0] - coef @ self._center
        self.coef_ = np.vstack([coef, np.zeros((1, coef.shape[1]))])
        self.intercept_ = np.append(intercept, 0.0)

    def _standardized(self, X, n_rows=1):
        values = self._design(X)
        if values is None:
            return np.empty((n_rows, 0))
        return (values - self._center) / self._scale

    def _standardized_coef(self):
        return self._coef_standardized

    # -- any classifier: EM ------------------------------------------------------------------
    def _classifier_input(self, X, n):
        return np.zeros((n, 1)) if X is None else X

    def _classifier_strata(self, model, X):
        proba = np.asarray(model.predict_proba(X), dtype=float)
        strata = np.zeros((proba.shape[0], 3))
        for column, label in enumerate(model.classes_):
            strata[:, int(label)] = proba[:, column]
        return strata

    def _fit_em(self, X, allowed, weights):
        n = allowed.shape[0]
        inputs = self._classifier_input(X, n)
        if X is not None:
            self.n_features_in_ = inputs.shape[1]
        rows = np.repeat(np.arange(n), allowed.sum(axis=1))
        labels = np.nonzero(allowed)[1]
        duplicated = inputs.iloc[rows] if isinstance(inputs, pd.DataFrame) else (
            np.asarray(inputs)[rows]
        )
        base = self._seeded_estimator()
        post = self._starting_posteriors(X, allowed, weights)
        tol = _EM_TOL if self.tol == "auto" else float(self.tol)
        total = weights.sum()
        best, stalled, path = -np.inf, 0, []
        self.converged_ = False
        for iteration in range(1, int(self.max_iter) + 1):
            model = weighted_fit(
                clone(base), duplicated, labels, weights[rows] * post[rows, labels]
            )
            strata = self._classifier_strata(model, inputs)
            post, log_cell = posterior_strata(np.log(np.clip(strata, _TINY, None)), allowed)
            current = float(weights @ log_cell) / total
            path.append(current * total)
            self.n_iter_ = iteration
            # Relative rise of the best mean log-likelihood so far. An exact M-step never lowers
            # it, so one iteration without a rise is the usual stop; a learner whose fit is not
            # an exact M-step (trees, early stopping) wanders around its plateau instead, and
            # _EM_PATIENCE iterations without a new best stop it there.
            stalled = stalled + 1 if current - best <= tol * abs(best) else 0
            if current > best:
                best, self.estimator_ = current, model
            if stalled >= _EM_PATIENCE:
                self.converged_ = True
                break
        self.log_likelihood_ = best * total
        self.log_likelihood_path_ = np.asarray(path)

    def _seeded_estimator(self):
        """A clone of ``estimator`` whose unset ``random_state`` parameters are fixed integers.

        Every M-step refits a clone; with ``random_state=None`` each refit would draw new
        randomness (validation split of early stopping, feature subsampling) and the iterations
        could not settle. The seeds, drawn from ``self.random_state`` as the estimators seed their
        learners, serve all iterations of a fit.
        """
        return seed_models(clone(self.estimator), spawn_seeds(self.random_state, 1)[0])

    def _starting_posteriors(self, X, allowed, weights):
        """Posterior strata of the EM start (see ``init``)."""
        strata = None
        if self.init == "multinomial":
            try:
                values = None if X is None else check_array(X, dtype=float, ensure_min_features=1)
            except (TypeError, ValueError):  # text columns or missing values: a pipeline's job
                values = None
            if values is not None:
                start = PrincipalScoreModel(monotonicity=self.monotonicity)
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", ConvergenceWarning)  # only a starting point
                    start._fit_multinomial(values, allowed, weights)
                strata = strata_probabilities(
                    _with_intercept(start._standardized(values)) @ start._coef_standardized.T
                )
        if strata is None:
            strata = np.broadcast_to(starting_strata(allowed, weights), allowed.shape)
        return posterior_strata(np.log(np.clip(strata, _TINY, None)), allowed)[0]

    # -- predictions -------------------------------------------------------------------------
    def predict_proba(self, X):
        """Principal scores per row, columns in ``classes_`` order.

        Parameters
        ----------
        X : array-like of shape (n_rows, n_features) or None

        Returns
        -------
        ndarray of shape (n_rows, 3)
        """
        check_is_fitted(self, "classes_")
        check_prediction_input(self, X)
        if self.estimator is None:
            if X is None:
                return strata_probabilities(np.tile(self._coef_standardized[:, 0], (1, 1)))
            Z = self._standardized(X)
            if Z.shape[1] != self.n_features_in_:
                raise ValueError(
                    f"`X` has {Z.shape[1]} features but the model was fitted with "
                    f"{self.n_features_in_}."
                )
            return strata_probabilities(_with_intercept(Z) @ self._coef_standardized.T)
        n = 1 if X is None else len(X)
        return self._classifier_strata(self.estimator_, self._classifier_input(X, n))

    def predict(self, X):
        """The most probable principal stratum per row.

        Parameters
        ----------
        X : array-like of shape (n_rows, n_features) or None
            As in :meth:`predict_proba`.

        Returns
        -------
        ndarray of shape (n_rows,)
            Labels from ``classes_``: the most probable (latent) stratum, not a diagnosis.
        """
        return self.classes_[np.argmax(self.predict_proba(X), axis=1)]

    def survival_probability(self, X):
        """Survival probabilities ``(p0, p1)`` implied by the stratum probabilities.

        Parameters
        ----------
        X : array-like of shape (n_rows, n_features) or None

        Returns
        -------
        p0, p1 : ndarray of shape (n_rows,)
        """
        scores = self.predict_proba(X)
        pure = scores[:, 0]
        mixed = scores[:, 0] + scores[:, 1]
        return (pure, mixed) if self._increasing else (mixed, pure)
