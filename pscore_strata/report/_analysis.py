"""One complete SACE analysis of prepared data: estimates, diagnostics, bounds, sensitivity.

The result is a plain dictionary that follows ``results.schema.json`` (written to
``results.json``) plus the fitted objects the figures are drawn from. Every number comes from the
library's public estimators and functions, called exactly as a Python user would call them, so
the report and the API always agree.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone

import numpy as np

from .. import __version__
from ..estimands import METHODS as METHOD_RECORDS
from ._distributions import distributions_section, share_bounds
from ._honesty import bootstrap_warning, honest_bounds, honest_estimates, honest_sensitivity
from ._missing import missing_section
from ._options import (
    METHOD_LABELS,
    METHODS,
    AnalysisOptions,
    build_estimator,
    fit_arguments,
    model_settings,
    number,
)
from ._sections import bootstrap_section, bounds_section, diagnostics_section
from ._sensitivity import sensitivity_section
from ._strata import outcome_for_everyone, strata_section
from ._text import assumptions, cautions, estimand, in_command_line_words, plain_warning
from ._visits import visits_section
from ._wording import study_wording

__all__ = ["AnalysisOptions", "Analysis", "run_analysis", "build_estimator", "SCHEMA_VERSION"]

SCHEMA_VERSION = "1.4.0"


@dataclass
class Analysis:
    """What :func:`run_analysis` hands back: the JSON-ready results and the fitted objects.

    Attributes
    ----------
    results : dict
        The JSON-ready results (what ``results.json`` holds).
    estimators : dict
        The fitted estimators by method name.
    primary : estimator or None
        The fitted primary estimator.
    covariates : pandas.DataFrame or None
        The analysed covariates.
    bounds : TrimmingBounds or None
    visits : pandas.DataFrame or None
        The :func:`~pscore_strata.visit_effects` table of repeated visits.
    """

    results: dict
    estimators: dict = field(default_factory=dict)
    primary: object = None
    covariates: object = None
    bounds: object = None
    visits: object = None


class _Collector:
    """Runs steps, reports progress and gathers warnings as plain messages."""

    def __init__(self, progress):
        self.progress = progress or (lambda message: None)
        self.steps = {}  # warning text -> steps that raised it
        self.last_label = None

    def run(self, label, step, *args, **kwargs):
        if label != self.last_label:
            self.progress(label)
            self.last_label = label
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            value = step(*args, **kwargs)
        for warning in caught:
            steps = self.steps.setdefault(plain_warning(warning), [])
            if label not in steps:
                steps.append(label)
        return value

    @property
    def messages(self):
        return [f"{'; '.join(steps)}: {text}" for text, steps in self.steps.items()]


def _overview(data, roles):
    arms = []
    w = np.ones(len(data.treatment)) if data.sample_weight is None else data.sample_weight
    for arm, label in ((1, "treated"), (0, "control")):
        # Under --missing at_random: shares among rows of known status, means among observed
        # outcomes (the "Missing data" section gives the counts).
        rows = (data.treatment == arm) & ~np.isnan(data.survival.astype(float))
        survivors = rows & (data.survival == 1) & ~np.isnan(data.outcome)
        y = data.outcome[survivors]
        arms.append({
            "arm": label,
            "n": int(np.sum(data.treatment == arm)),
            "n_survivors": int(np.sum(rows & (data.survival == 1))),
            "survival_share": number(np.sum(w[rows] * data.survival[rows]) / np.sum(w[rows])),
            "outcome_mean_survivors": number(np.average(y, weights=w[survivors]))
            if y.size else None,
            # Weighted like the mean beside it (np.cov with aweights: ddof=1 for unit weights).
            "outcome_sd_survivors": number(np.sqrt(np.cov(y, aweights=w[survivors])))
            if y.size > 1 else None,
        })  # fmt: skip
    return {
        "n_rows_read": data.n_rows_read,
        "n_rows_analyzed": int(len(data.treatment)),
        "n_rows_dropped": data.n_rows_dropped,
        "missing_values": dict(data.missing_counts),
        "n_clusters": None if data.groups is None else int(len(np.unique(data.groups))),
        "n_model_features": 0 if data.design is None else int(data.design.shape[1]),
        "arms": arms,
    }


def _estimate_record(method, estimator, level, primary, table):
    low, high = estimator.conf_int(level)
    return {
        "method": method,
        "label": METHOD_LABELS[method],
        "estimator": type(estimator).__name__,
        "primary": primary,
        "effect": float(estimator.effect_),
        "std_error": float(estimator.std_error_),
        "ci_low": float(low),
        "ci_high": float(high),
        "mean_treated": float(estimator.mean_treated_),
        "mean_control": float(estimator.mean_control_),
        "std_error_method": str(estimator.std_error_method_),
        "notes": _method_notes(estimator, table.attrs["notes"]),
        "separation": [_separation_words(m) for m in getattr(estimator, "separation_", [])],
    }


def _separation_words(message):
    """The separation advice in the command line's terms (no Python model to pass there)."""
    return message.replace(
        "Merge or drop the level, use a penalized model (e.g. LogisticRegression(C=1.0)), or run "
        "the unadjusted analysis (no covariates).",
        "Merge or drop the level (recode the column, or leave it out of --covariates and "
        "--categorical), or run the unadjusted analysis (no --covariates or --categorical).",
    )


def _method_notes(estimator, notes):
    """The summary's notes on how the estimate was obtained.

    The cautions and diagnostic warnings that the summary repeats have their own sections in
    the report, so they are left out here.
    """
    from ..estimators._summary import CAUTIONS as SUMMARY_CAUTIONS

    repeated = {SUMMARY_CAUTIONS}
    stratum = getattr(estimator, "stratum_", "always_survivor")
    if stratum != "always_survivor":  # the stratum's assumptions and cautions have sections
        from ..estimands._strata import ignorability_statement, stratum_words
        from ..estimators._summary import STRATUM_CAUTIONS

        repeated.add(ignorability_statement(stratum, estimator.monotonicity))
        repeated.add(STRATUM_CAUTIONS.format(words=stratum_words(stratum)))
    try:
        from ..diagnostics import diagnostic_warnings

        repeated.update(diagnostic_warnings(estimator))
    except ImportError:
        pass
    # Separation has its own box in the Estimates section (estimates[].separation).
    return [in_command_line_words(note) for note in notes
            if note not in repeated and not note.startswith("Separation in the")]  # fmt: skip


def _summary_rows(table):
    rows = {}
    for name, row in table.iterrows():
        rows[name] = {
            "estimate": number(row["estimate"]),
            "std_error": number(row["std_error"]),
            "ci_low": number(row["ci_low"]),
            "ci_high": number(row["ci_high"]),
        }
    shares = {key.replace("share ", "").replace("-", "_"): value for key, value in rows.items()
              if key.startswith("share ")}  # fmt: skip
    # The last row is the naive contrast (of the survivors, or of the stratum's cells).
    return shares, rows[table.index[-1]]


def _unavailable(name, error):
    return {"available": False, "reason": f"{name} could not be computed: {error}"}


def run_analysis(data, roles, options, *, source="data", progress=None):
    """Fit every estimator and compute the report's contents.

    Parameters
    ----------
    data : PreparedData
    roles : ColumnRoles
    options : AnalysisOptions
    source : str
        Name of the data source, recorded in the results.
    progress : callable, optional
        Called with a short message before each step.

    Returns
    -------
    Analysis
    """
    from ._survival_model import (
        BY_FIT,
        SURVIVAL_MODELS,
        choose_survival_model,
        survival_model_record,
    )

    if options.survival_model not in (*SURVIVAL_MODELS, BY_FIT):
        raise ValueError(
            f"`survival_model` must be one of {', '.join(SURVIVAL_MODELS)} or {BY_FIT!r} (fit "
            f"both, keep the better); got {options.survival_model!r}."
        )
    collector = _Collector(progress)
    choice = None
    if options.survival_model == BY_FIT:
        choice = choose_survival_model(collector, options, data, build_estimator, fit_arguments)
        options = replace(options, survival_model=choice["model"])
    estimators = {}
    n_rows = int(len(data.treatment))
    order = (options.method, *[m for m in METHODS if m != options.method])
    shared = None
    # One fit of the five models serves every estimator: those with the outcome model first.
    for method in sorted(order, key=lambda m: not METHOD_RECORDS[m].uses_outcome_model):
        estimator = build_estimator(method, options, n_rows)
        collector.run(
            f"{METHOD_LABELS[method].lower()} estimator",
            estimator.fit,
            data.design,
            data.outcome,
            **fit_arguments(data),
            nuisance=shared,
        )
        shared = shared or estimator.nuisance_
        estimators[method] = estimator
    estimators = {method: estimators[method] for method in order}
    primary = estimators[options.method]
    tables = {method: est.summary(options.level) for method, est in estimators.items()}
    shares, naive = _summary_rows(tables[options.method])
    words = study_wording(options, data, roles)
    results = {
        "schema_version": SCHEMA_VERSION,
        "software": {"name": "pscore_strata", "version": __version__},
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "source": source,
        "columns": roles.as_dict(),
        "settings": {
            "method": options.method,
            "learner": options.learner,
            "folds": model_settings(options, n_rows)[1],
            "bootstrap_resamples": options.bootstrap,
            "level": options.level,
            "monotonicity": options.monotonicity,
            "seed": options.seed,
            "missing": options.missing,
            "survival_model": options.survival_model,
            "quantiles": list(options.quantiles),
            "distributions": options.distributions,
            "stratum": options.stratum,
            "treatment_probability": options.treatment_probability,
        },
        "survival_model": survival_model_record(options, choice),
        "wording": words,
        "estimand": estimand(roles, options.monotonicity, words),
        "data_overview": _overview(data, roles),
        "estimates": [
            _estimate_record(m, est, options.level, m == options.method, tables[m])
            for m, est in estimators.items()
        ],
        "stratum_shares": shares,
        "naive_survivor_contrast": naive,
    }
    if options.bootstrap:
        results["bootstrap"] = bootstrap_section(collector, options, data)
    else:
        results["bootstrap"] = None
    other_stratum = options.stratum != "always_survivor"
    if other_stratum or outcome_for_everyone(data):
        from ._strata import stratum_estimand, stratum_record

        results["stratum"] = stratum_record(options.stratum, options.monotonicity, words)
        if other_stratum:
            results["estimand"] = stratum_estimand(results["estimand"], roles,
                                                   options.monotonicity, options.stratum, words)
    results["strata"] = strata_section(collector, options, data)
    honest_estimates(results["estimates"], collector, options, data, results["bootstrap"])
    analysis = Analysis(results, estimators, primary, data.covariates)
    try:
        results["diagnostics"] = diagnostics_section(collector, primary, data.covariates)
    except ImportError as error:
        results["diagnostics"] = _unavailable("Diagnostics", error)
    # The trimming bounds of the report's stratum (for another stratum: its cell in each arm).
    _bounds(results, analysis, collector, options, data, shared, words)
    _sensitivity(results, collector, options, data, primary, words)
    try:
        results["missing_data"] = missing_section(collector, primary, data, options.level)
    except ImportError as error:
        results["missing_data"] = _unavailable("Missing-data checks", error)
    results["distributions"] = (
        _unavailable("Distributions", _DISTRIBUTIONS_IN_PYTHON) if other_stratum
        else distributions_section(collector, primary, data, options)
    )
    try:
        from ._model_checks import model_checks_section

        results["model_checks"] = model_checks_section(primary)
    except (ImportError, ValueError) as error:
        results["model_checks"] = _unavailable("Model checks", error)
    results["subgroups"] = None
    if roles.by is not None:
        from ._data import InputError
        from ._subgroups import subgroups_section

        results["subgroups"] = subgroups_section(
            collector, primary, data, roles, options.level, InputError
        )
    results["visits"], analysis.visits = visits_section(
        collector, data, options, options.visit_population
    )
    results["assumptions"] = assumptions(roles, options.monotonicity, words)
    if other_stratum:
        from ._strata import stratum_assumption

        results["assumptions"] = [
            stratum_assumption(options.stratum, options.monotonicity)
            if a["name"] == "Principal ignorability" else a for a in results["assumptions"]
        ]
    if results["missing_data"]:
        from ._missing import MISSING_ASSUMPTION_TEXT

        results["assumptions"].append({
            "name": "Missing at random (--missing at_random)",
            "statement": MISSING_ASSUMPTION_TEXT,
            "checked_by": "Untestable; the missing-data balance table checks only the models, "
            "and the outcome-shift table shows the sensitivity to non-responders differing.",
        })  # fmt: skip
    results["warnings"] = [f"data: {message}" for message in data.messages]
    results["warnings"] += collector.messages
    if bootstrap_warning(options.bootstrap):
        results["warnings"].append(bootstrap_warning(options.bootstrap))
    results["cautions"] = list(cautions(words))
    if other_stratum:
        from ._strata import stratum_cautions

        results["cautions"] = list(stratum_cautions(options.stratum, options.monotonicity, words))
    return analysis


_DISTRIBUTIONS_IN_PYTHON = (
    "the report shows them for the always-survivor stratum only so far; for the stratum of "
    "--stratum compute them in Python with ps.survivor_distribution and ps.quantile_effects "
    "on an estimator fitted with the same stratum"
)

_ALWAYS_SURVIVOR_ONLY = (
    "they concern the always-survivor stratum only, and the report is about another stratum "
    "(--stratum)"
)


def _bounds(results, analysis, collector, options, data, shared, words):
    try:
        results["bounds"], analysis.bounds = bounds_section(
            collector, options, data, None if shared.cross_fitted else shared, words
        )
        share_bounds(collector, analysis.bounds)  # the distribution section's quantile bounds
        honest_bounds(results["bounds"], analysis.bounds, collector, options, data)
    except (ImportError, ValueError) as error:
        results["bounds"] = _unavailable("Bounds", error)


def _sensitivity(results, collector, options, data, primary, words):
    try:
        results["sensitivity"] = sensitivity_section(collector, primary, data, options.level,
                                                     words)  # fmt: skip
        honest_sensitivity(results["sensitivity"], primary)
    except (ImportError, ValueError) as error:
        results["sensitivity"] = _unavailable("Sensitivity analysis", error)
