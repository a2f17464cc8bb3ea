"""``visit_effects``: the survivor average causal effect at each follow-up visit, jointly.

Each visit is an ordinary single-visit analysis with the caller's estimator settings (DESIGN.md
section 5c); the visits' per-unit influence values stack into an n x K matrix that gives their joint
covariance, a simultaneous band and a Wald test without refits.
"""

from __future__ import annotations

import inspect
import warnings

import numpy as np
import pandas as pd
from sklearn.base import clone

from .._results import POINT, identification_of
from .._validation import check_choice, check_level
from .._warnings import warn_at_caller
from ..estimators._summary import CAUTIONS as SUMMARY_CAUTIONS
from ..inference import normal_interval
from ..inference._standard_errors import reference_dof
from ._inputs import POPULATIONS, check_visits
from ._joint import band_critical, influence_covariance, rescale, wald_test
from ._refits import joint_replicates

__all__ = ["visit_effects", "VISIT_COLUMNS"]

VISIT_COLUMNS = [
    "visit", "effect", "std_error", "ci_low", "ci_high", "band_low", "band_high",
    "always_survivor_share", "n_survivors_treated", "n_survivors_control",
    "survival_share_treated", "survival_share_control",
]  # fmt: skip

_POPULATION_NOTES = {
    "each": (
        "Population 'each': the effect at each visit is for the always-survivors to that visit "
        "(units who would be alive then under either arm). These are different populations at "
        "different visits, shrinking as deaths accumulate, so a change over visits mixes a "
        "change in the effect with a change in who is described."
    ),
    "last": (
        "Population 'last': every visit's effect is for the always-survivors to the last visit, "
        "whose outcomes exist at every earlier visit, so the trajectory describes one "
        "population (a smaller one than at the early visits)."
    ),
}

CAUTION = (
    "The always-survivor strata are latent and the assumptions (monotonicity, principal "
    "ignorability at every visit) cannot be tested; these are population-level effects, not a "
    "basis for decisions about individual patients. Interpret them under the study protocol and "
    "local regulation, with a qualified statistician."
)


def visit_effects(estimator, X, y, *, treatment, survival, population="each", sample_weight=None,
                  groups=None, level=0.95):  # fmt: skip
    """Survivor average causal effect at each follow-up visit, with joint inference.

    Each visit is fitted as a single-visit analysis by a clone of ``estimator`` (the same
    settings at every visit): with ``population="each"`` the intermediate is survival to that
    visit and the outcome is that visit's; with ``population="last"`` the intermediate is
    survival to the last visit at every visit. The per-unit influence values of the visits are
    stacked into an n x K matrix ``IF``: the joint covariance is ``IF' IF / n^2`` (with the
    estimators' sample weights and cluster sums), the simultaneous band's critical value is the
    quantile of ``max_k |Z_k| / se_k`` over multiplier-bootstrap draws of its rows, and the Wald
    statistic tests no effect at any visit. When the estimator's standard errors come from the
    refitting bootstrap (``n_bootstrap > 0`` with models outside the sandwich), the units are
    resampled once per replicate for all visits together and every visit is refitted on that
    resample, so the replicates give the covariance and the band.

    Parameters
    ----------
    estimator : PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
        Unfitted template (cloned for every visit, never modified). Its ``missing="at_random"``
        setting handles missed visits (outcome NaN for a unit alive then) and survival unknown
        after the end of follow-up (survival NaN), assuming at each visit, given X and the arm,
        that whether the status is known does not depend on survival and whether a survivor's
        outcome is observed does not depend on the outcome. That holds when follow-up ends for
        reasons unrelated to health (administrative end, staggered entry) and the status after
        it is left unknown for every unit; it fails when deaths are always ascertained while
        living people are lost, because the dead then have known statuses more often.
    X : array-like of shape (n_samples, n_features) or None
        Baseline covariates, used at every visit.
    y : array-like of shape (n_samples, n_visits)
        Outcomes, one column per visit in time order (at least two). A DataFrame's column names
        are the visit labels (else 1..K). Values of units dead at a visit are ignored.
    treatment : array-like of shape (n_samples,)
    survival : array-like of shape (n_samples, n_visits)
        1 alive, 0 dead, NaN unknown, at each visit (the same visits as ``y``). Survival must be
        monotone: a row recorded dead at a visit and alive at a later one is refused. Unknown
        entries are left unknown, never deduced from other visits.
    population : {"each", "last"}, default="each"
        ``"each"``: the always-survivors to each visit, a different population at each visit.
        ``"last"``: the always-survivors to the last visit at every visit, one population; a
        unit whose status at the last visit is unknown enters as lost to follow-up at every
        visit (its earlier outcomes are not used).
    sample_weight : array-like of shape (n_samples,), optional
    groups : array-like of shape (n_samples,), optional
        Cluster labels, as in the estimator's ``fit``: cluster-robust covariance; with fewer
        than 30 clusters the intervals and the band use Student's t with G - 1 degrees of
        freedom and the Wald test an F reference.
    level : float, default=0.95
        Level of the pointwise intervals and of the simultaneous band.

    Returns
    -------
    pandas.DataFrame
        One row per visit: ``visit``, ``effect``, ``std_error``, ``ci_low``, ``ci_high``
        (pointwise), ``band_low``, ``band_high`` (simultaneous over visits),
        ``always_survivor_share`` (estimated share of the visit's population among all units),
        ``n_survivors_treated``, ``n_survivors_control`` (units recorded alive at the visit),
        ``survival_share_treated``, ``survival_share_control`` (weighted share alive among units
        of known status). ``attrs`` holds ``covariance`` (DataFrame, visits x visits, of the
        effects; of their logarithms for ratio scales), ``wald_test`` (dict: ``statistic``,
        ``df``, ``p_value``, ``reference``; null: no effect at any visit), ``band_critical``,
        ``population``, ``level``, ``scale``, ``std_error_method`` and ``notes``.

    See Also
    --------
    pscore_strata.plotting.plot_visit_effects : the figure of this table.

    References
    ----------
    Kurland, B. F. & Heagerty, P. J. (2005). Directly parameterized regression conditioning on
    being alive: analysis of longitudinal data truncated by deaths. Biostatistics 6.
    Ding, P. & Lu, J. (2017). Principal stratification analysis using principal scores. JRSSB 79.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_visits(1500, random_state=0)
    >>> table = ps.visit_effects(ps.PrincipalScoreWeighting(), data.X, data.y,
    ...     treatment=data.treatment, survival=data.survival)
    >>> table["visit"].tolist()
    ['month_3', 'month_6', 'month_12']
    >>> bool(table.attrs["wald_test"]["p_value"] < 0.05)
    True
    """
    template = _check_estimator(estimator)
    check_choice(population, "population", POPULATIONS)
    level = check_level(level)
    visits = check_visits(y, survival)
    n_bootstrap = template.get_params().get("n_bootstrap", 0)
    if n_bootstrap:
        template.set_params(n_bootstrap=0)  # the visits' bootstrap, if needed, is joint
    columns = [visits.columns(k, population) for k in range(visits.n_visits)]
    fits = _fit_visits(template, X, columns, visits.labels, treatment, sample_weight, groups)
    data = fits[0].training_data_
    estimate = np.array([fit.effect_ for fit in fits])
    log_scale = fits[0].scale != "difference"
    method = fits[0].std_error_method_
    notes = [_POPULATION_NOTES[population], *visits.notes]
    if n_bootstrap and method == "influence function (nuisance ignored)":
        replicates, n_failed = joint_replicates(
            template, X, columns, data.treatment, sample_weight, data.groups, n_bootstrap,
            template.random_state, template.get_params().get("n_jobs"),
        )  # fmt: skip
        scaled = np.log(replicates) if log_scale else replicates
        centre = np.log(estimate) if log_scale else estimate
        covariance = np.atleast_2d(np.cov(scaled, rowvar=False))
        std_error = np.sqrt(np.diag(covariance)) * (estimate if log_scale else 1.0)
        critical = band_critical(covariance, level, replicates=scaled, estimate=centre)
        method = "bootstrap"
        notes.append(
            f"Standard errors, covariance and band from {len(replicates)} refitting-bootstrap "
            "replicates that resample units within arms once for all visits and refit every "
            f"visit's models ({n_failed} failed)."
        )
    else:
        influence = np.column_stack([fit.influence_ for fit in fits])
        if log_scale:
            influence = influence / estimate  # delta method for log(effect)
        covariance = influence_covariance(influence, data.sample_weight, data.groups)
        std_error = np.array([fit.std_error_ for fit in fits])
        covariance = rescale(covariance, std_error / (estimate if log_scale else 1.0))
        critical = band_critical(covariance, level, dof=_dof(fits[0]))
        notes.append(
            "Joint covariance from the visits' stacked influence values; the simultaneous band "
            "from multiplier-bootstrap draws of them (no refits)."
        )
    dof = _dof(fits[0])
    table, fit_notes = _table(visits, fits, estimate, std_error, critical, level, log_scale, dof)
    if method == "bootstrap":  # the point fits' own note on their (replaced) standard errors
        fit_notes = [n for n in fit_notes if "ignore the estimation of the nuisance" not in n]
    centre = np.log(estimate) if log_scale else estimate
    labels = [str(v) for v in visits.labels]
    table.attrs.update(
        covariance=pd.DataFrame(covariance, index=labels, columns=labels),
        wald_test=wald_test(centre, covariance, dof=dof), band_critical=critical,
        population=population, level=level, scale=fits[0].scale, std_error_method=method,
        notes=[*notes, *fit_notes, CAUTION],
    )  # fmt: skip
    return table


def _dof(fit):
    return reference_dof(getattr(fit, "n_clusters_", None))


def _check_estimator(estimator):
    if isinstance(estimator, type):
        raise TypeError(
            f"`estimator` must be an estimator instance; got the class {estimator.__name__}. "
            f"Pass {estimator.__name__}() (with its settings) instead."
        )
    parameters = (
        inspect.signature(estimator.fit).parameters if hasattr(estimator, "fit") else {}
    )
    if not (hasattr(estimator, "get_params") and {"treatment", "survival"} <= set(parameters)):
        raise TypeError(
            "`estimator` must be a SACE estimator such as PrincipalScoreWeighting(), "
            f"OutcomeRegression() or MultiplyRobust(); got {type(estimator).__name__}."
        )
    return clone(estimator)


def _fit_visits(template, X, columns, labels, treatment, sample_weight, groups):
    fits, caught = [], []
    for label, (y, survival) in zip(labels, columns, strict=True):
        with warnings.catch_warnings(record=True) as records:
            warnings.simplefilter("always")
            try:
                fit = clone(template).fit(X, y, treatment=treatment, survival=survival,
                                          sample_weight=sample_weight, groups=groups)  # fmt: skip
            except (ValueError, TypeError) as exc:
                raise type(exc)(f"At visit {label!r}: {exc}") from exc
        if identification_of(fit) != POINT or not hasattr(fit, "influence_"):
            raise TypeError(
                f"`estimator` ({type(template).__name__}) has no `effect_` and `influence_` after "
                "fit; visit_effects needs a point estimator of the SACE (bounds are not "
                "supported)."
            )
        fits.append(fit)
        caught.extend((label, record) for record in records)
    _warn_once(caught)
    return fits


def _warn_once(caught):
    """Re-issue the visits' warnings once each, naming the visits that raised them."""
    seen = {}
    for label, record in caught:
        seen.setdefault((record.category, str(record.message)), []).append(label)
    for (category, message), labels in seen.items():
        where = ", ".join(repr(v) for v in labels)
        warn_at_caller(f"At visit(s) {where}: {message}", category)


def _table(visits, fits, estimate, std_error, critical, level, log_scale, dof):
    """The visits' rows, and the notes of their summaries (each once, the estimator's caution
    left out: the visits' own follows)."""
    rows, notes = [], {}
    for k, fit in enumerate(fits):
        summary = fit.summary(level)
        for note in summary.attrs["notes"]:
            if note != SUMMARY_CAUTIONS:
                notes.setdefault(note, []).append(visits.labels[k])
        low, high = normal_interval(estimate[k], std_error[k], level, log_scale, dof=dof)
        if not np.isfinite(critical):
            band = (float("nan"), float("nan"))
        elif log_scale:
            factor = np.exp(critical * std_error[k] / estimate[k])
            band = (estimate[k] / factor, estimate[k] * factor)
        else:
            band = (estimate[k] - critical * std_error[k], estimate[k] + critical * std_error[k])
        rows.append([
            visits.labels[k], float(estimate[k]), float(std_error[k]), low, high, *map(float, band),
            float(summary.loc["share always-survivor", "estimate"]),
            *_survival_counts(fit.training_data_, visits.survival[:, k]),
        ])  # fmt: skip
    # A note that holds at every visit is said once; the others name their visits.
    said = [note if len(labels) == len(fits) else
            f"At visit(s) {', '.join(repr(v) for v in labels)}: {note}"
            for note, labels in notes.items()]  # fmt: skip
    return pd.DataFrame(rows, columns=VISIT_COLUMNS), said


def _survival_counts(data, status):
    treated = data.treatment == 1
    known = ~np.isnan(status)
    alive = known & (status == 1)
    w = data.sample_weight
    counts = [int(np.sum(alive & treated)), int(np.sum(alive & ~treated))]
    shares = [
        float(np.sum(w * (alive & arm)) / np.sum(w * (known & arm))) if np.any(known & arm)
        else float("nan")
        for arm in (treated, ~treated)
    ]  # fmt: skip
    return [*counts, *shares]
