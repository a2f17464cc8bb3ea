"""Bounds on the SACE without principal ignorability, by trimming (Zhang & Rubin 2003; Lee 2009).

Under monotonicity the survivors of the *pure* arm are all always-survivors, while the survivors
of the *mixed* arm (treated, when treatment can only help survival) mix always-survivors, in
share ``q = P(S=1 | pure arm) / P(S=1 | mixed arm)``, with units the treatment kept alive. Without
principal ignorability nothing says *which* mixed-arm survivors are the always-survivors, so their
mean lies between the mean of the lowest ``q``-fraction and of the highest ``q``-fraction of the
mixed-arm survivors' outcomes (Zhang & Rubin 2003; Lee 2009). Inverse probability of treatment
weights make the arms represent the same population in observational data; trimming within
covariate cells and averaging the cell bounds (weights: estimated always-survivor counts) can only
narrow the bounds when ``q`` varies between cells (Lee 2009, Remark; Long & Hudgens 2013).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator
from sklearn.utils.validation import check_is_fitted

from .._arguments import check_estimator_arguments, check_positive_integer
from .._features import check_feature_names
from .._results import BOUNDS
from .._validation import check_choice, check_level, check_truncation_data, intermediate_alias
from ..distributions._quantiles import check_quantiles
from ..estimands._strata import needs_zero_cells, resolve_stratum, stratum_words
from ..estimands._view import orient
from ..estimators._design import design_at_fit
from ..inference._standard_errors import (
    count_clusters,
    estimator_dof,
    reference_quantile,
)
from ..nuisance._fit import fit_nuisance
from ..nuisance._share import shared_nuisance
from ..tables import SummaryTable
from ._display import BoundsDisplay
from ._quantile_bounds import add_quantile_bounds
from ._trimming import imbens_manski_interval, trimmed_means, trimming_bounds

__all__ = ["TrimmingBounds", "trimmed_means", "imbens_manski_interval"]


class TrimmingBounds(BoundsDisplay, BaseEstimator):
    """Bounds on the survivor average causal effect that drop principal ignorability.

    Parameters
    ----------
    treatment_model : estimator, float in (0, 1) or None, default=None
        Model of ``P(T=1|X)`` for the inverse probability weights ``1/pi`` (treated) and
        ``1/(1-pi)`` (control); a number is a known randomization probability. Unused when
        ``X`` is ``None`` (the unadjusted bounds of a randomized trial).
    survival_model : estimator, PrincipalScoreModel or None, default=None
        Classifier of ``P(S=1|T=t,X)``, fitted per arm (a
        :class:`~pscore_strata.PrincipalScoreModel`: fitted once on both arms); used only by
        ``strata="score"``.
    monotonicity : {"increasing", "decreasing"}, default="increasing"
        ``"increasing"``: treatment can only help survival; ``"decreasing"``: only harm it.
    strata : {"none", "score"}, default="none"
        ``"score"`` trims within ``n_strata`` quantile groups of the fitted always-survivor
        probability among mixed-arm survivors, ``p_pure(X) / p_mixed(X)``, and averages.
        Covariate cells of your own go to ``fit(cells=...)``.
    n_strata : int, default=5
        Number of score strata.
    missing : {"error", "at_random"}, default="error"
        As in :class:`PrincipalScoreWeighting`: ``"at_random"`` accepts unknown survival status
        and missing outcomes of survivors, assumed missing at random given X within each arm;
        the trimming is then done on the observed survivors weighted by the inverse
        probability of being observed (follow-up ``c_t(X)`` times response ``r_t(X)``), and
        arm survival shares use the rows with known status weighted by ``1 / c_t(X)``.
    response_model, follow_up_model : classifier or None, default=None
        Models for ``r_t`` and ``c_t``; ``None`` is unpenalized logistic regression.
    quantiles : sequence of float in (0, 1) or None, default=None
        Also bound the always-survivor quantile effects at these probabilities
        (``quantile_bounds_``; construction in :mod:`pscore_strata.assumptions._quantile_bounds`).
    covariates : str or None, default=None
        The covariates as a formula over the DataFrame ``X`` given to :meth:`fit`, as in
        :class:`PrincipalScoreWeighting` (``"age + C(site) + bs(bmi, 4)"``): the treatment and
        survival models see the design it builds (``design_``). ``None``: ``X`` as given.
    stratum : str, default="always_survivor"
        The principal stratum whose effect is bounded, as in :class:`PrincipalScoreWeighting`
        (``"protected"``/``"complier"``, ``"doomed"``/``"never_taker"``, ``"harmed"``); the
        strata other than the always-survivors need the outcome of every unit. In each arm the
        stratum's cell is trimmed to the stratum's share of it (for compliers under increasing
        monotonicity: the treated units with intermediate 1 to ``(p1 - p0) / p1``, the control
        units with intermediate 0 to ``(p1 - p0) / (1 - p0)``), a cell that holds the stratum
        only is averaged, and the bounds are ``[low_1 - high_0, high_1 - low_0]``. Neither
        principal ignorability nor the exclusion restriction is assumed.

    Attributes
    ----------
    identification : str
        ``"bounds"`` (class attribute): without principal ignorability the effect is only known
        to lie in an interval, estimated by ``lower_`` and ``upper_``; the point estimators have
        ``"point"``.
    lower_, upper_ : float
        Estimated bounds on the SACE.
    std_error_lower_, std_error_upper_ : float
        Standard errors of the bounds from their influence values (see Notes).
    influence_lower_, influence_upper_ : ndarray of shape (n_samples,)
    trimming_share_ : float
        Share of mixed-arm survivors trimmed, ``1 - q`` (always-survivor-weighted over cells);
        for another stratum, the larger of the two arms' shares in ``trimming_shares_``.
    trimming_shares_ : dict
        ``{"treated": share, "control": share}``: the share of the stratum's cell trimmed in
        each arm (stratum-weighted over cells; 0 for a cell that holds the stratum only).
    cells_ : DataFrame
        Per cell: weight, always-survivor share among mixed-arm survivors ``q``, bounds on the
        mixed-arm always-survivor mean and the pure-arm mean; for another stratum the
        stratum's share of its cell in each arm (``share_mixed``, ``share_pure``) and bounds on
        its mean in each (``mixed_mean_lower``, ..., ``pure_mean_upper``).
    stratum_ : str
        The canonical name of the stratum bounded.
    n_clusters_ : int or None
        Number of clusters in ``groups``; below 30 the intervals use Student's t with
        ``n_clusters_ - 1`` degrees of freedom.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Only when ``X`` is a DataFrame with string column names.
    n_clipped_cells_ : int
        Cells where the data gave ``q > 1`` (contradicting monotonicity); ``q`` was set to 1.
    quantile_bounds_ : DataFrame or None
        With ``quantiles``: per quantile, bounds on the effect, their standard errors and 95%
        Imbens-Manski intervals (``quantile_intervals`` gives other levels).

    Notes
    -----
    Standard errors use influence functions of the trimmed means: for the lower mean
    ``L = E[Y | Y <= y_q]`` of a distribution ``F``, ``IF(y) = ((y - y_q) 1{y <= y_q} +
    q y_q) / q - L`` plus ``(y_q - L) / q`` times the influence of the estimated share ``q``
    (Lee 2009, in influence-function form), and the mirror image for the upper
    mean. When the treatment model is the default logistic regression its estimation is carried
    through by M-estimation (as in :class:`PrincipalScoreWeighting`); other treatment models are
    treated as known. Score strata are treated as fixed cells.

    The always-survivor stratum is latent and monotonicity is untestable: these bounds describe
    what the data say without principal ignorability, not an individual's benefit.

    References
    ----------
    Zhang, J. L. & Rubin, D. B. (2003). Estimation of causal effects via principal
    stratification when some outcomes are truncated by "death". JEBS 28.
    Lee, D. S. (2009). Training, wages, and sample selection: estimating sharp bounds on
    treatment effects. Review of Economic Studies 76.
    Imbens, G. W. & Manski, C. F. (2004). Confidence intervals for partially identified
    parameters. Econometrica 72.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(4000, design="randomized", random_state=0)
    >>> bounds = ps.TrimmingBounds().fit(
    ...     None, data.y, treatment=data.treatment, survival=data.survival)
    >>> bounds.lower_ < data.true_effect < bounds.upper_
    True
    """

    identification = BOUNDS

    def __init__(
        self,
        *,
        treatment_model=None,
        survival_model=None,
        monotonicity="increasing",
        strata="none",
        n_strata=5,
        missing="error",
        response_model=None,
        quantiles=None,
        follow_up_model=None,
        stratum="always_survivor",
        covariates=None,
    ):
        self.treatment_model = treatment_model
        self.survival_model = survival_model
        self.monotonicity = monotonicity
        self.strata = strata
        self.n_strata = n_strata
        self.missing = missing
        self.response_model = response_model
        self.quantiles = quantiles
        self.follow_up_model = follow_up_model
        self.stratum = stratum
        self.covariates = covariates

    def fit(self, X, y, *, treatment, survival=None, intermediate=None, sample_weight=None,
            groups=None, cells=None, nuisance=None):  # fmt: skip
        """Estimate the bounds.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features) or None
            Covariates for the treatment (and survival) models; ``None`` gives unadjusted
            bounds.
        y, treatment, survival, intermediate, sample_weight, groups
            As in :meth:`PrincipalScoreWeighting.fit`; ``intermediate`` is ``survival`` under
            its general name (give exactly one).
        cells : array-like of shape (n_samples,), optional
            Covariate cell labels (functions of pre-treatment covariates only). Bounds are
            computed within each cell and averaged.
        nuisance : NuisanceFit, optional
            The ``nuisance_`` of an estimator fitted on the same rows with the same treatment
            and survival models and monotonicity, without cross-fitting: its models are reused
            (same numbers as a separate fit).

        Returns
        -------
        self
        """
        check_choice(self.monotonicity, "monotonicity", ("increasing", "decreasing"))
        check_choice(self.strata, "strata", ("none", "score"))
        check_choice(self.missing, "missing", ("error", "at_random"))
        # Every parameter is checked, also those the chosen options leave unused.
        check_estimator_arguments(self)
        check_positive_integer(self.n_strata, "n_strata")
        if self.quantiles is not None:
            check_quantiles(self.quantiles)
        stratum = resolve_stratum(self.stratum, self.monotonicity)
        other = needs_zero_cells(stratum)
        if other and self.quantiles is not None:
            raise ValueError(
                f"`quantiles` is not available yet with `stratum`={self.stratum!r} (only for "
                "the always-survivor stratum); use quantiles=None."
            )
        survival, name = intermediate_alias(survival, intermediate)
        data = check_truncation_data(
            design_at_fit(self, X), y, treatment, survival, sample_weight, groups,
            survival_name=name,
            models=(self.treatment_model, self.survival_model, self.response_model,
                    self.follow_up_model),
            missing=self.missing, stratum=stratum if other else None,
        )  # fmt: skip
        self.n_clusters_ = count_clusters(data.groups)
        if X is not None:  # scikit-learn's convention, as the estimators keep it
            check_feature_names(self, X if hasattr(X, "columns") else data.X, reset=True)
        if self.strata == "score":
            if data.X is None:
                raise ValueError(
                    "`strata='score'` needs covariates X to fit the survival model; pass X or "
                    "use strata='none'."
                )
            if cells is not None:
                raise ValueError(
                    "Give either `cells` or `strata='score'`, not both: both define the cells "
                    "the trimming is done in."
                )
        if nuisance is None:
            nuisance = fit_nuisance(
                data, self.treatment_model, self.survival_model, random_state=None,
                response_model=self.response_model, monotonicity=self.monotonicity,
                follow_up_model=self.follow_up_model, zero_cells=other,
            )  # fmt: skip
        else:
            nuisance = shared_bounds_nuisance(self, nuisance, data)
        self.stratum_ = stratum
        o = orient(data, nuisance, self.monotonicity, stratum)
        labels = self._cell_labels(cells, data, o)
        for name, value in trimming_bounds(o, labels, data).items():
            setattr(self, name, value)
        add_quantile_bounds(self, o, labels, data)
        return self

    def _cell_labels(self, cells, data, o):
        if self.strata == "score":
            # The stratum's principal score (for the always-survivors, their share among the
            # mixed arm's survivors).
            score = (np.minimum(o.p_pure / o.p_mixed, 1.0) if o.stratum.role == "always"
                     else o.stratum.score(o.p_mixed, o.p_pure))  # fmt: skip
            edges = np.unique(np.quantile(score, np.linspace(0, 1, self.n_strata + 1)[1:-1]))
            return np.searchsorted(edges, score, side="right")
        if cells is None:
            return np.zeros(data.n_samples, dtype=int)
        if isinstance(cells, pd.Series | pd.DataFrame):
            cells = cells.to_numpy()
        cells = np.asarray(cells)
        if cells.ndim != 1 or cells.shape[0] != data.n_samples:
            raise ValueError(
                f"`cells` must be one label per row ({data.n_samples} rows); got shape "
                f"{cells.shape}."
            )
        if pd.isna(cells).any():
            raise ValueError(
                f"`cells` has {int(pd.isna(cells).sum())} missing label(s); give every row a "
                "cell (or drop the rows yourself)."
            )
        return pd.factorize(cells, sort=True)[0]

    def conf_int(self, level=0.95, coverage="effect"):
        """Confidence interval for a partially identified SACE.

        The same call and shape as the point estimators' ``conf_int(level)``: a ``(low, high)``
        pair for the SACE. It differs in what it covers: the effect is only known to lie in
        ``[lower_, upper_]``, so the interval widens the bounds by their sampling error instead
        of surrounding one estimate.

        Parameters
        ----------
        level : float, default=0.95
            Confidence level, strictly between 0 and 1.
        coverage : {"effect", "identified_set"}, default="effect"
            ``"effect"`` covers the true SACE (every point of the identified set) with
            probability ``level`` (Imbens & Manski 2004); ``"identified_set"`` covers the whole
            set ``[lower, upper]`` at once, using ``z_{(1+level)/2}`` at each end (union
            bound), and is wider. With fewer than 30 clusters in ``groups`` both use Student's
            t with ``n_clusters_ - 1`` degrees of freedom instead of the normal.

        Returns
        -------
        (low, high) : tuple of float
        """
        check_is_fitted(self, "lower_")
        level = check_level(level)
        check_choice(coverage, "coverage", ("effect", "identified_set"))
        dof = estimator_dof(self)
        if coverage == "identified_set":
            z = reference_quantile(level, dof)
            return (
                float(self.lower_ - z * self.std_error_lower_),
                float(self.upper_ + z * self.std_error_upper_),
            )
        return imbens_manski_interval(
            self.lower_, self.upper_, self.std_error_lower_, self.std_error_upper_, level, dof
        )

    def summary(self, level=0.95):
        """Bounds, standard errors and intervals as a DataFrame (cautions in ``attrs``).

        Parameters
        ----------
        level : float, default=0.95
            Level of the Imbens-Manski interval.

        Returns
        -------
        pandas.DataFrame
            Rows ``SACE lower bound`` and ``SACE upper bound``: ``estimate``, ``std_error`` and
            ``interval_end`` (the interval's end on that side); ``attrs["notes"]`` holds the
            notes and cautions.
        """
        check_is_fitted(self, "lower_")
        low, high = self.conf_int(level)
        stratum = getattr(self, "stratum_", "always_survivor")
        always = stratum == "always_survivor"
        name = "SACE" if always else f"{stratum_words(stratum)} effect"
        table = pd.DataFrame(
            {
                "estimate": [self.lower_, self.upper_],
                "std_error": [self.std_error_lower_, self.std_error_upper_],
            },
            index=pd.Index([f"{name} lower bound", f"{name} upper bound"], name="quantity"),
        )
        table["interval_end"] = [low, high]
        if always:
            trimmed = (f"{self.trimming_share_:.1%} of the "
                       f"{'treated' if self.monotonicity == 'increasing' else 'control'} "
                       "survivors were trimmed from each end in turn.")  # fmt: skip
        else:
            trimmed = "Trimmed from each end in turn, of the stratum's cell in each arm: " + (
                ", ".join(f"{arm} {share:.1%}" for arm, share in self.trimming_shares_.items())
            ) + "."
        table.attrs["notes"] = [
            f"interval_end: the {level:.0%} Imbens-Manski interval for the {name} "
            f"[{low:.4g}, {high:.4g}], which covers the true effect, not the whole bounds.",
            trimmed,
            "The bounds drop principal ignorability but keep monotonicity and, with covariates, "
            "no unmeasured confounding of treatment; these assumptions are untestable.",
            f"The {stratum_words(stratum)} stratum is latent: the bounds concern a group that "
            "cannot be identified person by person and must not guide decisions about "
            "individuals.",
            "Interpret them under the study protocol, local regulation and with a qualified "
            "statistician.",
        ]
        return SummaryTable(table, title=f"TrimmingBounds: bounds on the {name}", level=level)


def shared_bounds_nuisance(bounds, nuisance, data):
    """A shared nuisance for the bounds: fitted on all rows (the bounds never cross-fit)."""
    if getattr(nuisance, "cross_fitted", False):
        raise ValueError(
            "`nuisance` is cross-fitted, but TrimmingBounds fits its models on all rows; drop "
            "`nuisance` (the bounds then fit their own models) or share a fit without n_folds."
        )
    view = _BoundsSettings(bounds)
    return shared_nuisance(view, nuisance, data, uses_outcome=False, sandwich=True)


class _BoundsSettings:
    """The bounds' model settings as the sharing check reads them (never cross-fitted)."""

    n_folds = None
    random_state = None

    def __init__(self, bounds):
        self.treatment_model = bounds.treatment_model
        self.survival_model = bounds.survival_model
        self.monotonicity = bounds.monotonicity
        self.response_model = bounds.response_model
        self.follow_up_model = bounds.follow_up_model
