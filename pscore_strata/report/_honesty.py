"""Which printed intervals are honest, and what the report does about the others.

An interval is printed only when its standard error carries the estimation of the nuisance
models: the M-estimation sandwich of the default GLMs, the (cross-fitted) efficient influence
function of the multiply robust estimator (Neyman-orthogonal, so first-order insensitive to the
nuisance fits; Chernozhukov et al. 2018, Econometrics Journal), or a bootstrap that refits every
model. A standard error that treats fitted boosting models as known can be far too small (an
outcome-regression SE of 0.047 against 0.27 from its own refitting bootstrap was seen with
``--learner boosting``), so for such an estimator the report bootstraps it too when
``--bootstrap N`` is given, and otherwise prints the estimate with "interval not available".
"""

from __future__ import annotations

from ._options import fit_arguments, number

__all__ = [
    "HONEST_METHODS",
    "MIN_PERCENTILE_RESAMPLES",
    "accounts_for_nuisance",
    "bootstrap_warning",
    "honest_bounds",
    "honest_estimates",
    "honest_sensitivity",
    "unavailable_reason",
]

#: ``std_error_method_`` values whose standard errors account for the nuisance fits.
HONEST_METHODS = ("sandwich", "influence function", "bootstrap")
#: Fewer resamples than this give unstable percentile limits (common practice: at least a few
#: hundred for a 95% interval; Efron & Tibshirani 1993, ch. 13, recalled from memory).
MIN_PERCENTILE_RESAMPLES = 200


def accounts_for_nuisance(std_error_method):
    """Whether a standard error from ``std_error_method`` carries the nuisance estimation."""
    return str(std_error_method) in HONEST_METHODS or str(std_error_method).startswith(
        "bootstrap"
    )


def bootstrap_warning(n_resamples, option="--bootstrap"):
    """The warning for too few bootstrap resamples, or ``None``."""
    if 0 < n_resamples < MIN_PERCENTILE_RESAMPLES:
        return (
            f"{option} {n_resamples}: percentile intervals need more resamples (at least "
            f"{MIN_PERCENTILE_RESAMPLES}, common practice; 1000 or more for stable 95% limits); "
            "treat these bootstrap limits as rough."
        )
    return None


def unavailable_reason(std_error_method, learner):
    """The sentence printed instead of an interval whose standard error is not honest."""
    models = "boosting" if learner == "boosting" else "nuisance"
    return (
        f"interval not available: this estimator's standard error ({std_error_method}) treats "
        f"the fitted {models} models as known, so an interval from it could be much too "
        "narrow. Rerun with --bootstrap 200 (or more) for a bootstrap interval that refits "
        "every model, or read the multiply robust estimate, whose cross-fitted influence "
        "function accounts for the fitted models."
    )


def _bootstrap_record(collector, method, options, data):
    from ..exceptions import BootstrapFailureError
    from ._sections import run_bootstrap

    try:
        result = run_bootstrap(collector, method, options, data)
    except BootstrapFailureError:
        return None, None, None  # refused: too many resamples could not be estimated
    low, high = result.conf_int(options.level, kind="percentile")
    return float(result.std_error), float(low), float(high)


def honest_estimates(records, collector, options, data, primary_bootstrap=None):
    """Replace each interval whose standard error ignores the nuisance fits.

    With ``options.bootstrap`` the estimator is bootstrapped (the primary reuses the
    report's bootstrap), its standard error and percentile interval replace the
    influence-value ones, and ``interval_source`` says so; without it the standard error and
    interval become ``None`` and ``interval_note`` says why. ``std_error_method`` keeps the
    estimator's own ``std_error_method_`` so that the choice can be checked.
    """
    for record in records:
        if accounts_for_nuisance(record["std_error_method"]):
            record["interval_source"] = record["std_error_method"]
            record["interval_note"] = None
            continue
        if options.bootstrap:
            if record["primary"] and primary_bootstrap:
                values = (primary_bootstrap["std_error"], primary_bootstrap["ci_low"],
                          primary_bootstrap["ci_high"])  # fmt: skip
            else:
                values = _bootstrap_record(collector, record["method"], options, data)
            record["std_error"], record["ci_low"], record["ci_high"] = map(number, values)
            if values[0] is None:
                record["interval_source"] = None
                record["interval_note"] = (
                    "interval not available: the estimator's own standard error ignores the "
                    "fitted models, and its bootstrap was refused because more than 1% of the "
                    "resamples could not be estimated (e.g. no deaths in an arm)."
                )
                continue
            record["interval_source"] = (
                f"bootstrap ({options.bootstrap} resamples refitting every model, percentile)"
            )
            record["interval_note"] = (
                "The estimator's own standard error ignores the fitted models, so the report "
                "bootstrapped it: standard error and interval come from the resamples."
            )
        else:
            record["std_error"] = record["ci_low"] = record["ci_high"] = None
            record["interval_source"] = None
            record["interval_note"] = unavailable_reason(
                record["std_error_method"], options.learner
            )
    return records


def honest_bounds(record, bounds, collector, options, data):
    """The bounds' interval, bootstrapped or withheld when the treatment model is not a GLM.

    :class:`~pscore_strata.TrimmingBounds` carries the estimation of the default logistic
    treatment model by M-estimation and treats any other treatment model as known.
    """
    if "lower" not in record:
        return record
    record["interval_note"] = None
    if options.learner == "linear":
        return record
    if not options.bootstrap:
        record["std_error_lower"] = record["std_error_upper"] = None
        record["ci_low"] = record["ci_high"] = None
        record["interval_note"] = (
            "interval not available: the bounds' standard errors treat the fitted boosting "
            "treatment model as known. Rerun with --bootstrap 200 (or more) for bootstrap "
            "standard errors."
        )
        return record
    from ..assumptions import imbens_manski_interval
    from ..inference import bootstrap

    result = collector.run(
        f"bootstrap: {options.bootstrap} resamples refitting every model",
        bootstrap,
        bounds,
        data.design,
        data.outcome,
        n_resamples=options.bootstrap,
        random_state=options.seed,
        progress=None,
        **fit_arguments(data),
    )
    se = result.std_error
    record["std_error_lower"], record["std_error_upper"] = number(se["lower"]), number(se["upper"])
    low, high = imbens_manski_interval(
        bounds.lower_, bounds.upper_, float(se["lower"]), float(se["upper"]), options.level
    )
    record["ci_low"], record["ci_high"] = number(low), number(high)
    record["interval_note"] = (
        f"Standard errors of the bounds from {options.bootstrap} bootstrap resamples that refit "
        "every model (the boosting treatment model is not covered by the M-estimation formula)."
    )
    return record


def honest_sensitivity(record, primary):
    """Withhold the sensitivity intervals and tipping points when they would not be honest.

    The grid's standard errors come from influence values that carry the nuisance estimation
    exactly when the primary estimator's do (sandwich or influence function); a bootstrap
    standard error of the primary does not carry over to the grid.
    """
    keys = [key for key in ("pi_difference", "pi_difference_doomed", "harmed_ratio")
            if key in record]  # fmt: skip
    if not keys:
        return record
    method = str(primary.std_error_method_)
    if method in ("sandwich", "influence function"):
        record["interval_note"] = None
        return record
    for key in keys:
        for row in record[key]["grid"]:
            row["std_error"] = row["ci_low"] = row["ci_high"] = None
        record[key]["tipping_point"] = None
        record[key]["tipping_status"] = "not_available"
    record["interval_note"] = (
        "intervals and tipping points not available: the primary estimator's standard error "
        f"({method}) does not come from influence values that carry the fitted models, so the "
        "grid shows the estimates only. Choose --method robust for intervals here."
    )
    return record
