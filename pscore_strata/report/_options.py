"""Settings of one analysis: the options, the estimator they build, the fit arguments."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import estimators
from ..estimands import METHODS as METHOD_RECORDS

__all__ = [
    "AnalysisOptions",
    "build_estimator",
    "check_treatment_probability",
    "fit_arguments",
    "model_settings",
    "number",
    "parse_levels",
    "add_trial_arguments",
    "trial_settings",
]

# The estimator class and the label of each method of the registry.
METHODS = {name: getattr(estimators, m.estimator) for name, m in METHOD_RECORDS.items()}
METHOD_LABELS = {name: m.title for name, m in METHOD_RECORDS.items()}
SENSITIVITY_POINTS = 21
# Shallow trees, a small learning rate and at least 40 rows per leaf: in samples of a few
# thousand, unregularized boosting pushes fitted probabilities to 0 or 1 and the weights explode
# (checked on the "nonlinear" scenario: 1500 rows, SE 1.3 unregularized against 0.14 here).
BOOSTING_PARAMS = dict(max_iter=200, learning_rate=0.05, max_leaf_nodes=8, min_samples_leaf=40)
# Above LARGE_N rows (common practice, not theory): stop adding trees when the loss on a 10%
# validation split has not improved for 10 iterations, take larger steps and larger leaves
# (about n / 10000 rows each), and cross-fit with 2 folds instead of 5. Each fold then trains
# on half the rows, which at this size loses little (Chernozhukov et al. 2018 use K = 2), and
# the boosting fits, the cost of the analysis, take about a third of the time.
LARGE_N = 200_000
LARGE_N_BOOSTING = dict(learning_rate=0.1, early_stopping=True, validation_fraction=0.1,
                        n_iter_no_change=10)  # fmt: skip
LARGE_N_FOLDS = 2


def boosting_params(n_rows=None):
    """Boosting settings for a data set of ``n_rows`` rows (None: the small-sample settings)."""
    params = dict(BOOSTING_PARAMS)
    if n_rows is not None and n_rows > LARGE_N:
        params.update(LARGE_N_BOOSTING, min_samples_leaf=max(40, n_rows // 10_000))
    return params


@dataclass(frozen=True)
class AnalysisOptions:
    """The settings of one analysis, as the command line's options give them.

    Attributes
    ----------
    method : {"weighting", "regression", "robust"}, default="robust"
        The primary estimator.
    learner : {"linear", "boosting"}, default="linear"
        The nuisance models: the default GLMs, or gradient boosting (cross-fitted).
    folds : int or None, default=None
        Cross-fitting folds (``None``: none with ``"linear"``, 5 or more with boosting).
    bootstrap : int, default=0
        Resamples of the refitting bootstrap of the primary estimator (``--bootstrap``).
    level : float, default=0.95
    monotonicity : {"increasing", "decreasing"}, default="increasing"
    seed : int, default=0
    event_name, unit_name : str, default="death", "unit"
        Words of the study (report/_wording.py): the event that truncates the outcome, and
        what one row is (``"SINGULAR"`` or ``"SINGULAR/PLURAL"``).
    arm_names : tuple of str or None, default=None
        ``(treated, control)`` arm names.
    missing : {"error", "at_random"}, default="error"
    survival_model : {"arm-wise", "strata", "by_fit"}, default="arm-wise"
        Source of the principal scores (report/_survival_model.py): ``"by_fit"`` fits both and
        keeps the one with the smaller AIC, a data-driven choice the standard errors do not
        see, so neither command uses it.
    stratum : str, default="always_survivor"
        The principal stratum whose effect the report is about (``--stratum``; derivation in
        docs/guide/derivations/strata.md).
    visit_population : {"each", "last"}, default="each"
        Repeated visits (several outcome columns; report/_visits.py).
    quantiles : tuple of float, default=(0.1, 0.25, 0.5, 0.75, 0.9)
        Quantiles of the quantile effects and their bounds (``--quantiles``).
    distributions : bool, default=True
        ``False`` skips the "Distributions" section (``--no-distributions``).
    treatment_probability : float or None, default=None
        A known randomization probability (``--treatment-probability``): the treatment model.
    outcome_label : str or None, default=None
        Headings and axes name the outcome so (``--outcome-label``); ``None``: the column name.
    levels : tuple or None, default=None
        Labels of the outcome's levels (``--levels "1=worse,2=same"``): ``((code, label), ...)``.
    """

    method: str = "robust"
    learner: str = "linear"
    folds: int | None = None
    bootstrap: int = 0
    level: float = 0.95
    monotonicity: str = "increasing"
    seed: int = 0
    event_name: str = "death"
    unit_name: str = "unit"
    arm_names: tuple | None = None
    missing: str = "error"
    survival_model: str = "arm-wise"
    stratum: str = "always_survivor"
    visit_population: str = "each"
    quantiles: tuple = (0.1, 0.25, 0.5, 0.75, 0.9)
    distributions: bool = True
    treatment_probability: float | None = None
    outcome_label: str | None = None
    levels: tuple | None = None


def parse_levels(text, input_error=ValueError):
    """``"1=worse,2=same,3=better"`` -> ``((1.0, "worse"), (2.0, "same"), (3.0, "better"))``."""
    pairs = []
    for part in str(text).split(","):
        code, sep, label = part.partition("=")
        try:
            value = float(code.strip())
        except ValueError:
            value = None
        if not sep or value is None or not label.strip():
            raise input_error(
                f"--levels must list code=label pairs separated by commas, such as "
                f"\"1=worse,2=same,3=better\"; got {part.strip()!r} in {text!r}."
            )
        pairs.append((value, label.strip()))
    codes = [code for code, _ in pairs]
    if len(set(codes)) != len(codes):
        raise input_error(f"--levels gives a code twice in {text!r}; give each level once.")
    return tuple(pairs)


def check_treatment_probability(value, input_error=ValueError):
    """A known randomization probability strictly between 0 and 1."""
    try:
        probability = float(value)
    except (TypeError, ValueError):
        probability = float("nan")
    if not 0 < probability < 1:
        raise input_error(
            f"--treatment-probability must be a number strictly between 0 and 1 (the design's "
            f"chance of being assigned treatment, e.g. 0.5 for 1:1); got {value!r}."
        )
    return probability


def model_settings(options, n_rows=None):
    """Nuisance models and fold count for the chosen learner (``n_rows``: size of the data).

    With ``survival_model="strata"`` the survival model is a ``PrincipalScoreModel`` (of the
    learner's classifier), the same for the estimators and the bounds.
    """
    models, folds = _learner_settings(options, n_rows)
    if options.treatment_probability is not None:
        # The design's known probability replaces the treatment model (treatment_model=P).
        models["treatment_model"] = float(options.treatment_probability)
    if options.survival_model == "strata":
        from ._survival_model import survival_model_argument

        models["survival_model"] = survival_model_argument(options, models.get("survival_model"))
    return models, folds


def _learner_settings(options, n_rows):
    if options.learner == "linear":
        return {}, options.folds
    from sklearn.ensemble import HistGradientBoostingClassifier

    classifier = HistGradientBoostingClassifier(
        random_state=options.seed, **boosting_params(n_rows)
    )
    models = {"treatment_model": classifier, "survival_model": classifier}
    large = n_rows is not None and n_rows > LARGE_N
    return models, options.folds or (LARGE_N_FOLDS if large else 5)


def build_estimator(method, options, n_rows=None):
    """The estimator the command line fits for ``method`` (exposed so tests can refit it).

    Parameters
    ----------
    method : {"weighting", "regression", "robust"}
    options : AnalysisOptions
    n_rows : int, optional
        Rows of the data (large data get more folds with the boosting learner).

    Returns
    -------
    PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust
        Unfitted.
    """
    models, folds = model_settings(options, n_rows)
    params = dict(models, monotonicity=options.monotonicity, n_folds=folds,
                  random_state=options.seed, missing=options.missing,
                  stratum=options.stratum)  # fmt: skip
    boosting = options.learner != "linear"
    if method != "weighting" and boosting:
        from sklearn.ensemble import HistGradientBoostingRegressor

        params["outcome_model"] = HistGradientBoostingRegressor(
            random_state=options.seed, **boosting_params(n_rows)
        )
    if method != "robust" and boosting:
        # The refitting bootstrap inside these estimators would refit every boosting model
        # hundreds of times; --bootstrap N runs it once, for the primary estimator, instead.
        params["n_bootstrap"] = 0
    return METHODS[method](**params)


def fit_arguments(data):
    return dict(
        treatment=data.treatment,
        survival=data.survival,
        sample_weight=data.sample_weight,
        groups=data.groups,
    )


def number(value):
    value = float(value)
    return value if np.isfinite(value) else None


def add_trial_arguments(parser):
    """The command line's options for a trial's known design and the outcome's words."""
    parser.add_argument(
        "--treatment-probability", type=float, default=None, metavar="P",
        help="known randomization probability of treatment (e.g. 0.5 for 1:1): used instead "
        "of a fitted treatment model",
    )  # fmt: skip
    parser.add_argument(
        "--outcome-label", default=None, metavar="TEXT",
        help="what headings and axes call the outcome (default: the column name)",
    )  # fmt: skip
    parser.add_argument(
        "--levels", default=None, metavar="CODE=LABEL,...",
        help='labels of an ordinal outcome\'s levels, e.g. "1=worse,2=same,3=better" '
        "(default: the data file's value labels, else the codes)",
    )  # fmt: skip


def trial_settings(args):
    """``AnalysisOptions`` fields from the options of :func:`add_trial_arguments`, checked."""
    probability = args.treatment_probability
    return {
        "treatment_probability": None if probability is None
        else check_treatment_probability(probability),
        "outcome_label": args.outcome_label,
        "levels": None if args.levels is None else parse_levels(args.levels),
    }  # fmt: skip
