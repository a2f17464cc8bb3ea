"""Simulated outcomes truncated by death, generated stratum first so the SACE is known."""

from functools import lru_cache

import numpy as np
from scipy.special import expit
from sklearn.utils import Bunch

from ._checks import check_choice, check_positive_int, check_real, resolve_rng
from ._missing import apply_missingness, check_missingness

STRATUM_LABELS = ("always_survivor", "protected", "harmed", "doomed")
DESIGNS = ("observational", "randomized")
OUTCOMES = ("linear", "nonlinear", "binary")
MONOTONICITY = ("increasing", "decreasing")
STRATUM_MODELS = ("logistic", "multinomial")

# The population truth is an average over X only, so it is computed once on a sample whose
# seed does not depend on random_state: every dataset of a setting shares the same truth.
_TRUTH_SEED = 20_517_903
_TRUTH_DRAWS = 2_000_000


# Bends of one model family at a time, each a curve that the main-effects working model
# (logistic in X, or linear in X) cannot represent; see the ``*_misspecified`` scenarios.
def _treatment_bend(x1, x2):
    return 0.8 * (x1**2 - 1.0)


def _survival_bend(x1, x2):
    return 1.5 * (x2**2 - 1.0)


def _outcome_bend(x1, x2):
    return 2.0 * (np.abs(x1) - 0.8)


def _active_columns(X):
    """The covariates that enter the model; x3 is zero when only two features exist."""
    x3 = X[:, 2] if X.shape[1] > 2 else np.zeros(X.shape[0])
    return X[:, 0], X[:, 1], x3


def _stratum_logits(X, outcome, bends=frozenset()):
    """Logit of the always-survivor share, and the lift of the logit that treatment adds.

    Survival under the pure arm is ``expit(always)`` and under the mixed arm (monotonicity
    holding) ``expit(always + lift)`` with ``lift > 0``: both are main-effects logistic models in
    the linear and binary settings, so the default survival models are correctly specified there.
    The helped share ``expit(always + lift) - expit(always)`` is largest where the always-survivor
    logit is low, i.e. at high x1, and the outcome rises with x1: the units whose fate treatment
    changes have high outcomes, which is what biases survivor-only contrasts.
    """
    x1, x2, _ = _active_columns(X)
    always = 0.05 - 0.8 * x1 + 0.5 * x2
    lift = np.full(X.shape[0], 1.0)
    if outcome == "nonlinear":
        # Curvature that a main-effects logistic model cannot represent; the lift stays positive.
        always = always + 0.6 * (np.abs(x2) - 0.8)
        lift = 0.6 + 0.5 * x1**2
    if "survival" in bends:
        always = always + _survival_bend(x1, x2)
    return always, lift


def _treatment_logit(X, outcome, scale, bends=frozenset()):
    x1, x2, _ = _active_columns(X)
    logit = 0.6 * x1 - 0.6 * x2
    if outcome == "nonlinear":
        logit = logit + 0.5 * (np.abs(x1) - 0.8) - 0.3 * x1 * x2
    if "treatment" in bends:
        logit = logit + _treatment_bend(x1, x2)
    return scale * logit


def _control_index(X, outcome, bends=frozenset()):
    """Mean of Y(0) (continuous outcomes) or its logit (binary), given X, for survivors."""
    x1, x2, x3 = _active_columns(X)
    if "outcome" in bends:
        return _control_index(X, outcome) + _outcome_bend(x1, x2)
    if outcome == "linear":
        return 1.0 + 1.0 * x1 + 0.5 * x2 - 0.5 * x3
    if outcome == "nonlinear":
        return 1.0 + 2.0 * np.sin(x1) + 0.5 * x1 + 0.5 * x2**2 + 0.5 * x1 * x3
    return -0.2 + 0.8 * x1 + 0.4 * x2 - 0.4 * x3


def _multinomial_strata(X):
    """Always-survivor and changed-fate shares from a multinomial logistic model in x1, x2.

    Doomed is the reference stratum: ``e_k = exp(eta_k) / (1 + exp(eta_a) + exp(eta_c))``.
    Neither arm's survival (``e_a`` and ``e_a + e_c``) is then a logistic function of X, so
    arm-wise main-effects logistic survival models are misspecified while a multinomial
    principal score model is right. The changed share is small at low x1 and large at high x1
    (where the outcome is high), as in the logistic setting.
    """
    x1, x2, _ = _active_columns(X)
    eta_always = 0.6 - 0.9 * x1 + 0.6 * x2
    eta_changed = -0.6 + 1.2 * x1 - 0.5 * x2
    top = np.maximum(np.maximum(eta_always, eta_changed), 0.0)
    a, c, d = np.exp(eta_always - top), np.exp(eta_changed - top), np.exp(-top)
    total = a + c + d
    return a / total, c / total


def _always_and_changed(X, outcome, stratum_model, bends=frozenset()):
    if stratum_model == "multinomial":
        return _multinomial_strata(X)
    always_logit, lift = _stratum_logits(X, outcome, bends)
    always = expit(always_logit)
    return always, expit(always_logit + lift) - always


def _principal_scores(X, outcome, harmed_ratio, monotonicity, stratum_model="logistic",
                      bends=frozenset()):
    """True stratum probabilities given X, columns in ``STRATUM_LABELS`` order."""
    always, changed = _always_and_changed(X, outcome, stratum_model, bends)
    helped = changed / (1.0 + harmed_ratio)
    opposite = harmed_ratio * helped
    protected, harmed = (helped, opposite) if monotonicity == "increasing" else (opposite, helped)
    doomed = 1.0 - always - protected - harmed
    return np.column_stack([always, protected, harmed, doomed])


def _always_survivor_means(X, outcome, effect, effect_heterogeneity, bends=frozenset()):
    """Conditional means of Y(0) and Y(1) among always-survivors (risks if binary)."""
    _, x2, _ = _active_columns(X)
    index0 = _control_index(X, outcome, bends)
    index1 = index0 + effect + effect_heterogeneity * x2
    if outcome == "binary":
        return expit(index0), expit(index1)
    return index0, index1


@lru_cache(maxsize=64)
def _population_truth(outcome, effect, effect_heterogeneity, n_active, stratum_model="logistic",
                      bends=frozenset()):
    """Monte Carlo SACE ``E[e_a (mu1 - mu0)] / E[e_a]`` and its delta-method error.

    Returns ``(sace, mc_error, mu1, mu0)``; the stratum shares do not depend on the
    monotonicity direction, harmed_ratio or pi_difference, so neither does the truth.
    """
    rng = np.random.default_rng(_TRUTH_SEED)
    X = rng.standard_normal((_TRUTH_DRAWS, n_active))
    always = _always_and_changed(X, outcome, stratum_model, bends)[0]
    mean0, mean1 = _always_survivor_means(X, outcome, effect, effect_heterogeneity, bends)
    share = always.mean()
    mu1 = float(np.mean(always * mean1) / share)
    mu0 = float(np.mean(always * mean0) / share)
    sace = mu1 - mu0
    # Delta method for a ratio of means A/B: Var ~ Var(A - R B) / (n E[B]^2).
    linearized = always * (mean1 - mean0) - sace * always
    mc_error = float(np.std(linearized, ddof=1) / (np.sqrt(_TRUTH_DRAWS) * share))
    return sace, mc_error, mu1, mu0


def _simulate(n_samples, n_features, design, outcome, effect, effect_heterogeneity,
              pi_difference, harmed_ratio, monotonicity, noise, rng, *,
              treatment_scale=1.0, n_clusters=None, cluster_sd=1.0, stratum_model="logistic",
              misspecified=(), harmed_difference=0.0):
    """Draw one dataset; the keyword-only knobs serve the named scenarios.

    ``misspecified`` names the model families (``"treatment"``, ``"survival"``, ``"outcome"``)
    whose true model is bent away from the main-effects working model; ``harmed_difference``
    shifts the potential outcome of the opposite-direction stratum under the arm in which it
    survives (principal ignorability failing in the stratum that monotonicity rules out).
    """
    bends = frozenset(misspecified)
    X = rng.standard_normal((n_samples, n_features))
    scores = _principal_scores(X, outcome, harmed_ratio, monotonicity, stratum_model, bends)
    cumulative = np.cumsum(scores, axis=1)
    stratum_code = (rng.random(n_samples)[:, None] > cumulative[:, :-1]).sum(axis=1)
    stratum = np.asarray(STRATUM_LABELS, dtype=object)[stratum_code].astype(str)
    s1 = np.isin(stratum_code, (0, 1)).astype(int)
    s0 = np.isin(stratum_code, (0, 2)).astype(int)

    if design == "randomized":
        propensity = np.full(n_samples, 0.5)
    else:
        propensity = expit(_treatment_logit(X, outcome, treatment_scale, bends))
    treatment = (rng.random(n_samples) < propensity).astype(int)

    _, x2, _ = _active_columns(X)
    index0 = _control_index(X, outcome, bends)
    index1 = index0 + effect + effect_heterogeneity * x2
    # Principal ignorability is broken, in difference form, for the helped stratum: its
    # potential outcome under the arm in which it survives is shifted by pi_difference; and for
    # the opposite stratum (present only when monotonicity fails) by harmed_difference.
    helped_code = 1 if monotonicity == "increasing" else 2
    shift = np.where(stratum_code == helped_code, pi_difference, 0.0)
    opposite = np.where(stratum_code == 3 - helped_code, harmed_difference, 0.0)
    if monotonicity == "increasing":
        index1, index0 = index1 + shift, index0 + opposite
    else:
        index0, index1 = index0 + shift, index1 + opposite

    groups = None
    if n_clusters is not None:
        groups = rng.integers(0, n_clusters, size=n_samples)
        # A mean-zero cluster effect shared by both arms cancels in Y(1) - Y(0).
        cluster_effect = rng.normal(0.0, cluster_sd, size=n_clusters)[groups]
        index0 = index0 + cluster_effect
        index1 = index1 + cluster_effect

    if outcome == "binary":
        y0 = (rng.random(n_samples) < expit(index0)).astype(float)
        y1 = (rng.random(n_samples) < expit(index1)).astype(float)
    else:
        y0 = index0 + noise * rng.standard_normal(n_samples)
        y1 = index1 + noise * rng.standard_normal(n_samples)
    # Y(t) does not exist for a unit that would die under arm t.
    y0[s0 == 0] = np.nan
    y1[s1 == 0] = np.nan
    survival = np.where(treatment == 1, s1, s0)
    y = np.where(treatment == 1, y1, y0)

    is_always = stratum_code == 0
    sample_sace = float(np.mean(y1[is_always] - y0[is_always])) if is_always.any() else np.nan
    sace, mc_error, mu1, mu0 = _population_truth(
        outcome, float(effect), float(effect_heterogeneity), min(n_features, 3), stratum_model,
        bends,
    )
    if outcome != "binary" and effect_heterogeneity == 0.0:
        sace, mc_error = float(effect), 0.0
    data = Bunch(
        X=X, y=y, treatment=treatment, survival=survival, stratum=stratum,
        true_effect=sace, true_effect_mc_error=mc_error, true_effect_sample=sample_sace,
        y0=y0, y1=y1, s0=s0, s1=s1, propensity=propensity, principal_scores=scores,
        stratum_labels=list(STRATUM_LABELS), true_means={"mu1": mu1, "mu0": mu0},
    )
    if groups is not None:
        data.groups = groups
    return data


def make_truncation(n_samples=2000, *, n_features=5, design="observational", outcome="linear",
                    effect=1.0, effect_heterogeneity=0.0, pi_difference=0.0, harmed_ratio=0.0,
                    monotonicity="increasing", noise=1.0, follow_up=None, response=None,
                    stratum_model="logistic", random_state=None):
    """Simulate outcomes truncated by death with a known survivor average causal effect.

    Units are drawn stratum first: covariates ``X ~ N(0, I)``, then the principal stratum
    from its true probabilities given ``X``, then treatment, then potential outcomes. Only
    the first three columns of ``X`` enter the model (two when ``n_features == 2``); the
    rest are noise covariates.

    Parameters
    ----------
    n_samples : int, default=2000
        Number of units.
    n_features : int, default=5
        Number of covariates, at least 2.
    design : {"observational", "randomized"}, default="observational"
        ``"randomized"`` assigns treatment with probability 0.5; ``"observational"`` with a
        logistic propensity in x1 and x2 (mostly within [0.1, 0.9]).
    outcome : {"linear", "nonlinear", "binary"}, default="linear"
        ``"nonlinear"`` also bends the stratum and treatment logits, so main-effects logistic
        models are misspecified. ``"binary"`` draws 0/1 outcomes from a logistic model.
    effect : float, default=1.0
        Treatment effect for always-survivors (on the logit scale when binary).
    effect_heterogeneity : float, default=0.0
        Slope of the effect in x2.
    pi_difference : float, default=0.0
        ``E[Y(1) | protected, X] - E[Y(1) | always_survivor, X]`` (for ``"decreasing"``:
        the same for Y(0) of harmed units); 0 means principal ignorability holds. For a
        binary outcome it shifts the logit instead of the risk.
    harmed_ratio : float in [0, 1), default=0.0
        Share of the opposite-direction stratum relative to the helped one; 0 means
        monotonicity holds.
    monotonicity : {"increasing", "decreasing"}, default="increasing"
        Direction in which treatment changes survival: under ``"increasing"`` the helped
        stratum is ``"protected"``, under ``"decreasing"`` it is ``"harmed"``.
    noise : float, default=1.0
        Standard deviation of the outcome noise; ignored for binary outcomes.
    follow_up, response : None, float, (float, float) or dict, default=None
        Loss to follow-up and outcome non-response, missing at random given X within each arm.
        A probability ``p`` in (0, 1] is a constant chance that the survival status is known
        (``follow_up``) or that a survivor's outcome is observed (``response``); a pair
        ``(p, strength)`` makes it ``expit(logit(p) + strength * x2)``; a dict with keys
        ``"treated"`` and ``"control"`` sets each arm. ``None`` loses nothing. Unknown status
        is NaN in ``survival``, an unobserved outcome NaN in ``y``; the full values are kept in
        ``survival_full`` and ``y_full``, the indicators in ``status_known`` and
        ``outcome_observed``, the probabilities in ``follow_up_probability`` and
        ``response_probability``. The truth is unchanged.
    stratum_model : {"logistic", "multinomial"}, default="logistic"
        ``"logistic"``: survival in each arm is a main-effects logistic model in X (in the
        linear and binary settings), so arm-wise logistic survival models are right.
        ``"multinomial"``: the strata are drawn from a multinomial logistic model in x1 and x2
        (always-survivor and changed-fate linear predictors against doomed), so the arm-wise
        logistic survival models are misspecified and a multinomial principal score model
        (:class:`~pscore_strata.PrincipalScoreModel`) is right. The ``"nonlinear"`` bends of
        the stratum logits apply to ``"logistic"`` only.
    random_state : None, int, numpy.random.Generator or numpy.random.RandomState
        Seed or generator. A passed generator is advanced, never copied.

    Returns
    -------
    data : sklearn.utils.Bunch
        ``X``, ``y`` (NaN where ``survival == 0``), ``treatment``, ``survival``, ``stratum``,
        ``true_effect`` (population SACE), ``true_effect_mc_error``, ``true_effect_sample``
        (mean of ``y1 - y0`` among the sample's always-survivors), ``y0``, ``y1`` (potential
        outcomes, NaN where the unit would die under that arm), ``s0``, ``s1``,
        ``propensity``, ``principal_scores`` (columns in ``stratum_labels`` order),
        ``stratum_labels``, ``true_means`` (``mu1``, ``mu0`` among always-survivors),
        ``treatment_probability`` (0.5 when randomized, else None), ``params`` and
        ``DESCR``.

    Notes
    -----
    For continuous outcomes with ``effect_heterogeneity == 0`` the SACE equals ``effect``
    exactly and ``true_effect_mc_error`` is 0. Otherwise it is
    ``E[e_a(X) (mu1(X) - mu0(X))] / E[e_a(X)]`` averaged over 2,000,000 draws of ``X``
    from a fixed seed, so it is the same for every ``random_state``; the Monte Carlo error
    is the delta-method standard error of that ratio. ``true_means`` always come from
    that Monte Carlo sample. The risk difference is the truth for binary outcomes.

    Examples
    --------
    >>> from pscore_strata.datasets import make_truncation
    >>> data = make_truncation(500, random_state=0)
    >>> data.X.shape, data.true_effect
    ((500, 5), 1.0)
    """
    n_samples = check_positive_int(n_samples, "n_samples")
    n_features = check_positive_int(n_features, "n_features", minimum=2)
    design = check_choice(design, "design", DESIGNS)
    outcome = check_choice(outcome, "outcome", OUTCOMES)
    monotonicity = check_choice(monotonicity, "monotonicity", MONOTONICITY)
    effect = check_real(effect, "effect")
    effect_heterogeneity = check_real(effect_heterogeneity, "effect_heterogeneity")
    pi_difference = check_real(pi_difference, "pi_difference")
    harmed_ratio = check_real(harmed_ratio, "harmed_ratio", low=0.0, high=1.0, high_open=True)
    noise = check_real(noise, "noise", low=0.0)
    stratum_model = check_choice(stratum_model, "stratum_model", STRATUM_MODELS)
    follow_up_spec = check_missingness(follow_up, "follow_up")
    response_spec = check_missingness(response, "response")
    rng = resolve_rng(random_state)
    params = dict(
        n_samples=n_samples, n_features=n_features, design=design, outcome=outcome,
        effect=effect, effect_heterogeneity=effect_heterogeneity, pi_difference=pi_difference,
        harmed_ratio=harmed_ratio, monotonicity=monotonicity, noise=noise,
    )
    knobs = {} if stratum_model == "logistic" else {"stratum_model": stratum_model}
    data = _simulate(**params, rng=rng, **knobs)
    data = apply_missingness(data, follow_up_spec, response_spec, rng)
    if follow_up is not None or response is not None:
        params = dict(params, follow_up=follow_up, response=response)
    if knobs:
        params = dict(params, **knobs)
    data.params = params
    data.treatment_probability = 0.5 if design == "randomized" else None
    data.DESCR = describe(params, data.true_effect, data.true_effect_mc_error)
    return data


def describe(params, true_effect, mc_error):
    """Short text stating the setting, which assumptions hold and the true SACE."""
    monotone = "holds" if params["harmed_ratio"] == 0 else (
        f"violated (harmed/protected ratio {params['harmed_ratio']:g})")
    ignorable = "holds" if params["pi_difference"] == 0 else (
        f"violated (difference {params['pi_difference']:g})")
    if params.get("harmed_difference"):
        monotone += f", harmed units' outcome shifted by {params['harmed_difference']:g}"
    truth = "exact" if mc_error == 0 else f"Monte Carlo, error {mc_error:.2g}"
    multinomial = params.get("stratum_model") == "multinomial"
    bent = params.get("misspecified") or ()
    return (
        f"Simulated truncation by death: {params['n_samples']} units, "
        f"{params['n_features']} covariates, {params['design']} treatment, "
        f"{params['outcome']} outcome"
        f"{', strata from a multinomial logistic model' if multinomial else ''}"
        f"{', curved (misspecified) ' + ' and '.join(bent) + ' model' if bent else ''}.\n"
        f"Monotonicity ({params['monotonicity']}) {monotone}; "
        f"principal ignorability {ignorable}.\n"
        f"True SACE = {true_effect:.6g} ({truth})."
    )
