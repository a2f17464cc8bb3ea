"""One complete SACE analysis of prepared data: estimates, diagnostics, bounds, sensitivity.

The result is a plain dictionary that follows ``results.schema.json`` (written to
``results.json``) plus the fitted objects the figures are drawn from. Every number comes from the
library's public estimators and functions, called exactly as a Python user would call them, so
the report and the API always agree.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from datetime import datetime, timezone

import numpy as np

from .. import __version__
from ..estimators import MultiplyRobust, OutcomeRegression, PrincipalScoreWeighting
from ._text import CAUTIONS, assumptions, estimand

__all__ = ["AnalysisOptions", "Analysis", "run_analysis", "build_estimator", "SCHEMA_VERSION"]

SCHEMA_VERSION = "1.0.0"
METHODS = {
    "weighting": PrincipalScoreWeighting,
    "regression": OutcomeRegression,
    "robust": MultiplyRobust,
}
METHOD_LABELS = {
    "weighting": "Principal score weighting",
    "regression": "Outcome regression",
    "robust": "Multiply robust",
}
SENSITIVITY_POINTS = 21
# Shallow trees, a small learning rate and at least 40 rows per leaf: in samples of a few
# thousand, unregularized boosting pushes fitted probabilities to 0 or 1 and the weights explode
# (checked on the "nonlinear" scenario: 1500 rows, SE 1.3 unregularized against 0.14 here).
BOOSTING_PARAMS = dict(max_iter=200, learning_rate=0.05, max_leaf_nodes=8, min_samples_leaf=40)


@dataclass(frozen=True)
class AnalysisOptions:
    method: str = "robust"
    learner: str = "linear"
    folds: int | None = None
    bootstrap: int = 0
    level: float = 0.95
    monotonicity: str = "increasing"
    seed: int = 0


@dataclass
class Analysis:
    """What :func:`run_analysis` hands back: the JSON-ready results and the fitted objects."""

    results: dict
    estimators: dict = field(default_factory=dict)
    primary: object = None
    covariates: object = None
    bounds: object = None


def _models(options):
    """Nuisance models and fold count for the chosen learner."""
    if options.learner == "linear":
        return {}, options.folds
    from sklearn.ensemble import HistGradientBoostingClassifier

    classifier = HistGradientBoostingClassifier(random_state=options.seed, **BOOSTING_PARAMS)
    models = {"treatment_model": classifier, "survival_model": classifier}
    return models, options.folds or 5


def build_estimator(method, options):
    """The estimator the command line fits for ``method`` (exposed so tests can refit it)."""
    models, folds = _models(options)
    params = dict(models, monotonicity=options.monotonicity, n_folds=folds,
                  random_state=options.seed)  # fmt: skip
    if method != "weighting" and models:
        from sklearn.ensemble import HistGradientBoostingRegressor

        params["outcome_model"] = HistGradientBoostingRegressor(
            random_state=options.seed, **BOOSTING_PARAMS
        )
    if method != "robust" and models:
        # The refitting bootstrap inside these estimators would refit every boosting model
        # hundreds of times; --bootstrap N runs it once, for the primary estimator, instead.
        params["n_bootstrap"] = 0
    return METHODS[method](**params)


def _fit_arguments(data):
    return dict(
        treatment=data.treatment,
        survival=data.survival,
        sample_weight=data.sample_weight,
        groups=data.groups,
    )


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
            steps = self.steps.setdefault(" ".join(str(warning.message).split()), [])
            if label not in steps:
                steps.append(label)
        return value

    @property
    def messages(self):
        return [f"{'; '.join(steps)}: {text}" for text, steps in self.steps.items()]


def _number(value):
    value = float(value)
    return value if np.isfinite(value) else None


def _overview(data, roles):
    arms = []
    w = np.ones(len(data.treatment)) if data.sample_weight is None else data.sample_weight
    for arm, label in ((1, "treated"), (0, "control")):
        rows = data.treatment == arm
        survivors = rows & (data.survival == 1)
        y = data.outcome[survivors]
        arms.append({
            "arm": label,
            "n": int(rows.sum()),
            "n_survivors": int(survivors.sum()),
            "survival_share": _number(np.sum(w[rows] * data.survival[rows]) / np.sum(w[rows])),
            "outcome_mean_survivors": _number(np.average(y, weights=w[survivors]))
            if y.size else None,
            # Weighted like the mean beside it (np.cov with aweights: ddof=1 for unit weights).
            "outcome_sd_survivors": _number(np.sqrt(np.cov(y, aweights=w[survivors])))
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


def _estimate_record(method, estimator, level, primary):
    table = estimator.summary(level)
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
    }


def _method_notes(estimator, notes):
    """The summary's notes on how the estimate was obtained.

    The cautions and diagnostic warnings that the summary repeats have their own sections in
    the report, so they are left out here.
    """
    from .._summary import CAUTIONS as SUMMARY_CAUTIONS

    repeated = {SUMMARY_CAUTIONS}
    try:
        from ..diagnostics import diagnostic_warnings

        repeated.update(diagnostic_warnings(estimator))
    except ImportError:
        pass
    return [note for note in notes if note not in repeated]


def _summary_rows(estimator, level):
    table = estimator.summary(level)
    rows = {}
    for name, row in table.iterrows():
        rows[name] = {
            "estimate": _number(row["estimate"]),
            "std_error": _number(row["std_error"]),
            "ci_low": _number(row["ci_low"]),
            "ci_high": _number(row["ci_high"]),
        }
    shares = {key.replace("share ", "").replace("-", "_"): value for key, value in rows.items()
              if key.startswith("share ")}  # fmt: skip
    return shares, rows["naive survivor contrast (biased)"]


def _bootstrap(collector, options, data):
    from ..bootstrap import bootstrap

    template = build_estimator(options.method, options)
    result = collector.run(
        f"bootstrap: {options.bootstrap} resamples refitting every model",
        bootstrap,
        template,
        data.design,
        data.outcome,
        n_resamples=options.bootstrap,
        random_state=options.seed,
        progress=None,
        **_fit_arguments(data),
    )
    low, high = result.conf_int(options.level, kind="percentile")
    return {
        "n_resamples": int(result.n_resamples),
        "n_failed": int(result.n_failed),
        "method": str(result.method),
        "estimate": float(result.estimate),
        "std_error": float(result.std_error),
        "ci_low": float(low),
        "ci_high": float(high),
        "interval": "percentile",
        "notes": list(result.notes),
    }


def _diagnostics(collector, primary, covariates):
    from .. import diagnostics

    out = {"warnings": [], "balance": [], "effective_sample_size": {}, "weights": []}
    out["warnings"] = list(
        collector.run("diagnostics", diagnostics.diagnostic_warnings, primary, covariates)
    )
    if covariates is not None:
        table = diagnostics.balance_table(primary, covariates)
        for name, row in table.iterrows():
            out["balance"].append({
                "covariate": str(name),
                "raw_smd_treated_vs_control": _number(row["raw_smd_treated_vs_control"]),
                "smd_treated_vs_control": _number(row["smd_treated_vs_control"]),
                "smd_treated_vs_everyone": _number(row["smd_treated_vs_everyone"]),
                "smd_control_vs_everyone": _number(row["smd_control_vs_everyone"]),
            })  # fmt: skip
        ess = table.attrs["effective_sample_size"]
        out["effective_sample_size"] = {k: _number(v) for k, v in ess.items()}
    for name, row in diagnostics.weight_summary(primary).iterrows():
        out["weights"].append({
            "weights": str(name),
            "n_rows": int(row["n_rows"]),
            "median": _number(row["median"]),
            "max": _number(row["max"]),
            "max_over_median": _number(row["max_over_median"]),
            "effective_sample_size": _number(row["effective_sample_size"]),
        })  # fmt: skip
    overlap = diagnostics.overlap_summary(primary).attrs
    out["share_treatment_probability_outside_0.05_0.95"] = _number(
        overlap["share_treatment_outside_bounds"]
    )
    out["share_always_survivor_score_below_0.05"] = _number(
        overlap["share_always_survivor_below_floor"]
    )
    out["n_monotonicity_violations"] = int(primary.n_monotonicity_violations_)
    return out


def _bounds(collector, options, data):
    from ..bounds import TrimmingBounds

    models, _ = _models(options)
    bounds = TrimmingBounds(monotonicity=options.monotonicity, **models)
    collector.run(
        "bounds without principal ignorability",
        bounds.fit,
        data.design,
        data.outcome,
        **_fit_arguments(data),
    )
    low, high = bounds.conf_int(options.level)
    record = {
        "lower": float(bounds.lower_),
        "upper": float(bounds.upper_),
        "std_error_lower": _number(bounds.std_error_lower_),
        "std_error_upper": _number(bounds.std_error_upper_),
        "ci_low": _number(low),
        "ci_high": _number(high),
        "interval": "Imbens-Manski (covers the true SACE)",
        "trimming_share": float(bounds.trimming_share_),
        "notes": list(bounds.summary(options.level).attrs["notes"][:3]),
    }
    return record, bounds


def _sensitivity(collector, primary, data, level):
    from ..sensitivity import sensitivity_grid, tipping_point

    spread = float(np.nanstd(data.outcome[data.survival == 1], ddof=1)) or 1.0
    label = "sensitivity analysis"
    tips = {}
    for parameter in ("pi_difference", "harmed_ratio"):
        value = collector.run(label, tipping_point, primary, parameter, level=level)
        tips[parameter] = _number(value)
    # The grids reach a little past the tipping points so that the figure shows them.
    reach = max(0.5 * spread, 1.25 * abs(tips["pi_difference"] or 0.0))
    deltas = np.round(np.linspace(-reach, reach, SENSITIVITY_POINTS), 10)
    top = min(0.95, max(0.5, 1.1 * (tips["harmed_ratio"] or 0.0)))
    harmed = np.round(np.linspace(0.0, top, 11), 4)

    def rows(table, parameter):
        return [
            {
                "value": float(r[parameter]),
                "effect": float(r["effect"]),
                "std_error": _number(r["std_error"]),
                "ci_low": _number(r["ci_low"]),
                "ci_high": _number(r["ci_high"]),
            }
            for _, r in table.iterrows()
        ]

    grid_pi = collector.run(label, sensitivity_grid, primary, pi_difference=deltas, level=level)
    grid_mono = collector.run(
        label, sensitivity_grid, primary, harmed_ratio=harmed.tolist(), level=level
    )
    return {
        "pi_difference": {
            "description": "Mean outcome under treatment of the helped stratum minus that of the "
            "always-survivors with the same covariates (0 = principal ignorability).",
            "outcome_sd_survivors": spread,
            "grid": rows(grid_pi, "pi_difference"),
            "tipping_point": tips["pi_difference"],
        },
        "harmed_ratio": {
            "description": "Size of the stratum that monotonicity rules out relative to the "
            "helped stratum (0 = monotonicity).",
            "grid": rows(grid_mono, "harmed_ratio"),
            "tipping_point": tips["harmed_ratio"],
        },
        "criterion": f"the {level:.0%} confidence interval first covers 0",
    }


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
    collector = _Collector(progress)
    estimators = {}
    for method in (options.method, *[m for m in METHODS if m != options.method]):
        estimator = build_estimator(method, options)
        collector.run(
            f"{METHOD_LABELS[method].lower()} estimator",
            estimator.fit,
            data.design,
            data.outcome,
            **_fit_arguments(data),
        )
        estimators[method] = estimator
    primary = estimators[options.method]
    shares, naive = _summary_rows(primary, options.level)
    results = {
        "schema_version": SCHEMA_VERSION,
        "software": {"name": "pscore_strata", "version": __version__},
        "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "source": source,
        "columns": roles.as_dict(),
        "settings": {
            "method": options.method,
            "learner": options.learner,
            "folds": _models(options)[1],
            "bootstrap_resamples": options.bootstrap,
            "level": options.level,
            "monotonicity": options.monotonicity,
            "seed": options.seed,
        },
        "estimand": estimand(roles, options.monotonicity),
        "data_overview": _overview(data, roles),
        "estimates": [
            _estimate_record(m, est, options.level, m == options.method)
            for m, est in estimators.items()
        ],
        "stratum_shares": shares,
        "naive_survivor_contrast": naive,
    }
    results["bootstrap"] = _bootstrap(collector, options, data) if options.bootstrap else None
    analysis = Analysis(results, estimators, primary, data.covariates)
    try:
        results["diagnostics"] = _diagnostics(collector, primary, data.covariates)
    except ImportError as error:
        results["diagnostics"] = _unavailable("Diagnostics", error)
    try:
        results["bounds"], analysis.bounds = _bounds(collector, options, data)
    except (ImportError, ValueError) as error:
        results["bounds"] = _unavailable("Bounds", error)
    try:
        results["sensitivity"] = _sensitivity(collector, primary, data, options.level)
    except ImportError as error:
        results["sensitivity"] = _unavailable("Sensitivity analysis", error)
    results["assumptions"] = assumptions(roles, options.monotonicity)
    results["warnings"] = collector.messages
    results["cautions"] = list(CAUTIONS)
    return analysis
