"""Which model produces the principal scores: arm-wise survival models or one stratum model.

``--survival-model arm-wise`` (the default) fits a survival model in each arm, the scores being
differences of the two; ``--survival-model strata`` fits one principal score model of stratum
membership on both arms (``ps.PrincipalScoreModel``). ``survival_model="by_fit"`` (from Python
only) fits both and keeps the one that fits the observed survival statuses better. Both give
those statuses the same Bernoulli likelihood (a row of arm ``t`` survives with probability
``P(S=1 | T=t, X)``), so their log-likelihoods compare directly; with the parameter counts, by
AIC (Akaike 1974).
"""

from __future__ import annotations

from dataclasses import replace

__all__ = ["SURVIVAL_MODELS", "survival_model_argument", "choose_survival_model",
           "survival_model_record"]  # fmt: skip

SURVIVAL_MODELS = ("arm-wise", "strata")
# Fit both and keep the better: from Python only (the demo pre-specifies the stratum model).
BY_FIT = "by_fit"
LABELS = {"arm-wise": "arm-wise survival models", "strata": "stratum model"}
DESCRIPTIONS = {
    "arm-wise": "a survival model fitted in each arm; the principal scores are differences of "
    "the two (clipped where they cross)",
    "strata": "one principal score model of stratum membership (multinomial logistic, "
    "whichever learner fits the other models), fitted on both arms; monotone by construction",
}


def survival_model_argument(options, classifier=None):
    """The estimators' ``survival_model`` for ``options.survival_model``.

    ``classifier`` is the learner's survival model (``None``: the default logistic models).
    The stratum model is the default multinomial logistic ``PrincipalScoreModel()`` with every
    learner; ``--learner boosting`` applies to the treatment and outcome models. The boosting
    classifier fitted by EM settles in 13-16 iterations (about 6 s per fit on the demo
    registry), but the report fits it once per fold: on the demo, 65 s end to end against 12 s,
    and its cross-fitted survival fit was worse (fit check chi-square 220 on 16 df, against 30
    for the multinomial model and 123 for arm-wise boosting); see benchmarks/README.md.
    """
    if options.survival_model == "arm-wise":
        return classifier
    if options.survival_model != "strata":
        raise ValueError(
            f"`survival_model` must be one of {', '.join(SURVIVAL_MODELS)}; got "
            f"{options.survival_model!r}."
        )
    from ..nuisance import PrincipalScoreModel

    return PrincipalScoreModel(monotonicity=options.monotonicity)


def choose_survival_model(collector, options, data, build_estimator, fit_arguments):
    """Fit both survival sides and return the record of the better one (see module doc)."""
    from ..diagnostics._fit_check import survival_log_likelihood, survival_parameter_count

    candidates = []
    for name in SURVIVAL_MODELS:
        estimator = build_estimator("weighting", replace(options, survival_model=name),
                                    len(data.treatment))  # fmt: skip
        estimator.set_params(n_bootstrap=0)  # only the survival side is compared
        collector.run(
            "choosing the survival model by its fit",
            estimator.fit,
            data.design,
            data.outcome,
            **fit_arguments(data),
        )
        log_likelihood = survival_log_likelihood(estimator)
        n_parameters = survival_parameter_count(estimator)
        candidates.append({
            "model": name,
            "log_likelihood": log_likelihood,
            "n_parameters": n_parameters,
            "aic": None if n_parameters is None else 2 * n_parameters - 2 * log_likelihood,
        })  # fmt: skip
    by_aic = all(c["aic"] is not None for c in candidates)
    # Smaller AIC, or (out-of-fold fits, no parameter count) larger log-likelihood; a tie keeps
    # the arm-wise models, listed first.
    key = (lambda c: c["aic"]) if by_aic else (lambda c: -c["log_likelihood"])
    best = min(candidates, key=key)
    other = next(c for c in candidates if c is not best)
    if by_aic:
        numbers = (f"AIC {best['aic']:.1f} against {other['aic']:.1f} (log-likelihood "
                   f"{best['log_likelihood']:.1f} with {best['n_parameters']} parameters against "
                   f"{other['log_likelihood']:.1f} with {other['n_parameters']})")  # fmt: skip
    else:
        numbers = (f"out-of-fold log-likelihood {best['log_likelihood']:.1f} against "
                   f"{other['log_likelihood']:.1f}")  # fmt: skip
    reason = (f"The {LABELS[best['model']]} fit the observed survival statuses better than the "
              f"{LABELS[other['model']]}: {numbers}.")  # fmt: skip
    return {
        "model": best["model"],
        "criterion": "aic" if by_aic else "log_likelihood",
        "comparison": candidates,
        "reason": reason,
    }


def survival_model_record(options, choice=None):
    """The ``survival_model`` record of results.json."""
    return {
        "model": options.survival_model,
        "label": LABELS[options.survival_model],
        "description": DESCRIPTIONS[options.survival_model],
        "chosen_by": "fit" if choice else "option",
        "criterion": choice["criterion"] if choice else None,
        "comparison": choice["comparison"] if choice else None,
        "reason": choice["reason"] if choice else None,
    }
