"""Simulated intermediate variables after which the outcome still exists, with known effects
in every principal stratum.

Noncompliance (the intermediate is the treatment received) and intercurrent events after which
the outcome is still measured (rescue medication, switching) share this structure: every unit
has an outcome, so the effect exists in each principal stratum, not only among the
always-survivors (docs/guide/derivations/strata.md).

Units are drawn stratum first, as in :func:`make_truncation`: covariates, then the principal
stratum from its true probabilities given X, then treatment, then potential outcomes
``Y(t) = base(X) + c[g][t] + noise``. The constants ``c`` are chosen so that principal
ignorability holds in each observed cell that mixes two strata (their means given X agree), so
the effect in stratum ``g`` is exactly ``c[g][1] - c[g][0]``.
"""

import numpy as np
from scipy.special import expit
from sklearn.utils import Bunch

from ._checks import check_choice, check_positive_int, check_real, resolve_rng
from ._family import Scenario
from ._missing import apply_missingness, check_missingness

__all__ = ["make_intermediate", "INTERMEDIATE_SCENARIOS"]

MONOTONICITY = ("increasing", "decreasing")
DESIGNS = ("observational", "randomized")

# Strata in the order of the oriented view: the always stratum, the stratum whose intermediate
# the treatment changes (protected under "increasing", harmed under "decreasing"), the doomed.
_STRATA = {
    "increasing": ("always_survivor", "protected", "doomed"),
    "decreasing": ("always_survivor", "harmed", "doomed"),
}

# Mean shift of Y(1) and Y(0) by stratum, (c1, c0). Principal ignorability ties the constants
# of the two strata mixed in each observed cell. "increasing": cell (T=1, S=1) mixes
# always-survivors and protected units (equal c1), cell (T=0, S=0) protected and doomed units
# (equal c0). "decreasing": cell (T=0, S=1) mixes always-survivors and harmed (equal c0), cell
# (T=1, S=0) harmed and doomed (equal c1). The exclusion restriction adds c1 = c0 for the
# strata whose intermediate the assignment does not change.
_CONSTANTS = {
    ("increasing", False): {"always_survivor": (2.0, 1.0), "protected": (2.0, 0.0),
                            "doomed": (0.5, 0.0)},
    ("decreasing", False): {"always_survivor": (2.0, 1.0), "harmed": (0.5, 1.0),
                            "doomed": (0.5, 0.0)},
    ("increasing", True): {"always_survivor": (2.0, 2.0), "protected": (2.0, 0.0),
                           "doomed": (0.0, 0.0)},
    ("decreasing", True): {"always_survivor": (1.0, 1.0), "harmed": (0.0, 1.0),
                           "doomed": (0.0, 0.0)},
}  # fmt: skip


def _base(X):
    x1, x2, x3 = X[:, 0], X[:, 1], X[:, 2]
    return 1.0 + 1.0 * x1 + 0.5 * x2 - 0.5 * x3


def _intermediate_probabilities(X):
    """``P(S=1 | pure arm, X)`` and ``P(S=1 | mixed arm, X)``: main-effects logistic models.

    The changed-intermediate share is largest at high x1, where the outcome is high, so the
    strata differ in their outcomes and the naive contrasts of the observed cells are biased.
    """
    x1, x2 = X[:, 0], X[:, 1]
    low_logit = 0.05 - 0.8 * x1 + 0.5 * x2
    return expit(low_logit), expit(low_logit + 1.0)


def make_intermediate(n_samples=2000, *, stratum="protected", monotonicity="increasing",
                      design="observational", exclusion=False, pi_difference=0.0,
                      n_features=5, noise=1.0, random_state=None, pi_difference_doomed=0.0,
                      follow_up=None, response=None):
    """Simulate a binary intermediate after which the outcome exists, with known stratum effects.

    Parameters
    ----------
    n_samples : int, default=2000
        Number of units.
    stratum : str, default="protected"
        The stratum whose effect is ``true_effect``: ``"always_survivor"``, ``"doomed"``, and
        ``"protected"`` (``monotonicity="increasing"``) or ``"harmed"`` (``"decreasing"``).
        Every stratum's effect is in ``true_effects`` whatever this is.
    monotonicity : {"increasing", "decreasing"}, default="increasing"
        ``"increasing"``: ``S(1) >= S(0)`` (no harmed units; in a trial with noncompliance,
        no defiers); ``"decreasing"``: ``S(1) <= S(0)`` (no protected units).
    design : {"observational", "randomized"}, default="observational"
        ``"randomized"`` assigns treatment with probability 0.5; ``"observational"`` with a
        logistic propensity ``expit(0.6 x1 - 0.6 x2)``.
    exclusion : bool, default=False
        Whether the exclusion restriction also holds: the assignment does not change the
        outcome of the strata whose intermediate it does not change (always-survivors and
        doomed: always-takers and never-takers), so their effects are 0 and the effect in the
        changed stratum is the instrumental-variable (Wald) estimand.
    pi_difference : float, default=0.0
        Principal ignorability broken in difference form: the changed stratum's potential
        outcome under the arm in which its intermediate is 1 is shifted by this amount (the
        truths include the shift). 0 means principal ignorability holds there.
    n_features : int, default=5
        Number of covariates, at least 3; only x1, x2, x3 enter the model.
    noise : float, default=1.0
        Standard deviation of the outcome noise.
    random_state : None, int, numpy.random.Generator or numpy.random.RandomState
        Seed or generator. A passed generator is advanced, never copied.
    pi_difference_doomed : float, default=0.0
        Principal ignorability broken in the other mixed cell: the changed stratum's potential
        outcome under the arm in which its intermediate is 0 (where it shares the cell with the
        doomed) is shifted by this amount, the sensitivity parameter of the same name of
        :func:`~pscore_strata.sensitivity_grid` (the truths include the shift).
    follow_up, response : None, float, (float, float) or dict, default=None
        Loss to follow-up (the intermediate's value unknown) and outcome non-response, missing
        at random given X within each arm, as in :func:`make_truncation`; response is drawn
        for every unit with a known intermediate (the outcome exists for all). Adds
        ``intermediate_full``, ``y_full``, ``status_known``, ``outcome_observed`` and the
        probabilities ``follow_up_probability``, ``response_probability``; ``intermediate``
        (and ``survival``) become float with NaN where unknown, ``y`` NaN where not observed.
        The truths are unchanged.

    Returns
    -------
    data : sklearn.utils.Bunch
        ``X``, ``y`` (observed for every unit), ``treatment``, ``intermediate`` (the binary
        post-treatment variable) and ``survival`` (the same array, for code written for
        truncation by death), ``stratum`` (true labels), ``true_effect`` (the effect in
        ``target_stratum``, exact), ``true_effects`` (every stratum's effect), ``y0``, ``y1``,
        ``s0``, ``s1``, ``propensity``, ``principal_scores`` (columns in ``stratum_labels``
        order), ``stratum_labels``, ``target_stratum``, ``treatment_probability`` (0.5 when
        randomized, else None), ``params`` and ``DESCR``.

    See Also
    --------
    make_truncation : outcomes truncated by death, where only the always-survivor effect exists.

    Examples
    --------
    >>> from pscore_strata.datasets import make_intermediate
    >>> data = make_intermediate(500, stratum="protected", random_state=0)
    >>> data.true_effects
    {'always_survivor': 1.0, 'protected': 2.0, 'doomed': 0.5}
    >>> data.true_effect, data.target_stratum
    (2.0, 'protected')
    """
    n_samples = check_positive_int(n_samples, "n_samples")
    n_features = check_positive_int(n_features, "n_features", minimum=3)
    monotonicity = check_choice(monotonicity, "monotonicity", MONOTONICITY)
    labels = _STRATA[monotonicity]
    stratum = check_choice(stratum, "stratum", labels)
    design = check_choice(design, "design", DESIGNS)
    if not isinstance(exclusion, bool | np.bool_):
        raise TypeError(f"exclusion must be True or False; got {exclusion!r}.")
    pi_difference = check_real(pi_difference, "pi_difference")
    pi_difference_doomed = check_real(pi_difference_doomed, "pi_difference_doomed")
    noise = check_real(noise, "noise", low=0.0)
    rng = resolve_rng(random_state)
    increasing = monotonicity == "increasing"

    X = rng.standard_normal((n_samples, n_features))
    low, high = _intermediate_probabilities(X)
    scores = np.column_stack([low, high - low, 1.0 - high])
    u = rng.random(n_samples)
    code = (u[:, None] > np.cumsum(scores, axis=1)[:, :-1]).sum(axis=1)
    # Intermediate of each stratum under the mixed arm (always 1, changed 1, doomed 0) and
    # under the pure arm (1, 0, 0); the mixed arm is the treated one under "increasing".
    s_mixed = (code <= 1).astype(int)
    s_pure = (code == 0).astype(int)
    s1, s0 = (s_mixed, s_pure) if increasing else (s_pure, s_mixed)

    propensity = np.full(n_samples, 0.5) if design == "randomized" else expit(
        0.6 * X[:, 0] - 0.6 * X[:, 1])  # fmt: skip
    treatment = (rng.random(n_samples) < propensity).astype(int)

    constants = dict(_CONSTANTS[(monotonicity, bool(exclusion))])
    changed = labels[1]
    c1, c0 = constants[changed]
    constants[changed] = ((c1 + pi_difference, c0 + pi_difference_doomed) if increasing
                          else (c1 + pi_difference_doomed, c0 + pi_difference))  # fmt: skip
    shift1 = np.array([constants[g][0] for g in labels])[code]
    shift0 = np.array([constants[g][1] for g in labels])[code]
    base = _base(X)
    y1 = base + shift1 + noise * rng.standard_normal(n_samples)
    y0 = base + shift0 + noise * rng.standard_normal(n_samples)
    y = np.where(treatment == 1, y1, y0)
    intermediate = np.where(treatment == 1, s1, s0)

    true_effects = {g: float(constants[g][0] - constants[g][1]) for g in labels}
    params = dict(n_samples=n_samples, stratum=stratum, monotonicity=monotonicity, design=design,
                  exclusion=bool(exclusion), pi_difference=pi_difference, n_features=n_features,
                  noise=noise, pi_difference_doomed=pi_difference_doomed)  # fmt: skip
    follow_up_spec = check_missingness(follow_up, "follow_up")
    response_spec = check_missingness(response, "response")
    if follow_up is not None or response is not None:
        params.update(follow_up=follow_up, response=response)
    data = Bunch(
        X=X, y=y, treatment=treatment, intermediate=intermediate, survival=intermediate,
        stratum=np.asarray(labels, dtype=object)[code].astype(str),
        true_effect=true_effects[stratum], true_effects=true_effects,
        y0=y0, y1=y1, s0=s0, s1=s1, propensity=propensity, principal_scores=scores,
        stratum_labels=list(labels), target_stratum=stratum,
        treatment_probability=0.5 if design == "randomized" else None, params=params,
        DESCR=_describe(params, true_effects),
    )
    if follow_up_spec is None and response_spec is None:
        return data
    data = apply_missingness(data, follow_up_spec, response_spec, rng, every_outcome=True)
    data.intermediate_full = data.survival_full
    data.intermediate = data.survival
    return data


def _describe(params, true_effects):
    exclusion = "holds" if params["exclusion"] else "does not hold"
    shifts = [f"{name} {params[name]:g}" for name in ("pi_difference", "pi_difference_doomed")
              if params.get(name, 0) != 0]  # fmt: skip
    ignorable = "holds" if not shifts else f"violated ({', '.join(shifts)})"
    effects = ", ".join(f"{g} {v:g}" for g, v in true_effects.items())
    return (
        f"Simulated intermediate variable (outcome observed for every unit): "
        f"{params['n_samples']} units, {params['n_features']} covariates, {params['design']} "
        f"treatment.\nMonotonicity ({params['monotonicity']}) holds; principal ignorability "
        f"{ignorable}; the exclusion restriction {exclusion}.\n"
        f"True effects (exact): {effects}; target stratum {params['stratum']}."
    )


def _scenario(stratum, monotonicity="increasing", **settings):
    def simulate(n_samples, rng, **params):
        chosen = {"stratum": stratum, "monotonicity": monotonicity, **settings, **params}
        return make_intermediate(n_samples, random_state=rng, **chosen)

    return simulate


# Entries for datasets.SCENARIOS (datasets/_registry.py): each draws with its own simulator.
INTERMEDIATE_SCENARIOS = {
    f"intermediate_{stratum}": Scenario(
        make=_scenario(stratum, monotonicity), truth="exact", family="intermediate",
        description=f"Outcome observed after a binary intermediate ({monotonicity} "
                    f"monotonicity, principal ignorability holds); truth: the {stratum} effect.",
    )
    for stratum, monotonicity in (("always_survivor", "increasing"), ("protected", "increasing"),
                                  ("doomed", "increasing"), ("harmed", "decreasing"))
}  # fmt: skip
INTERMEDIATE_SCENARIOS["intermediate_exclusion"] = Scenario(
    make=_scenario("protected", design="randomized", exclusion=True), truth="exact",
    family="intermediate",
    description="Randomized assignment with noncompliance: principal ignorability and the "
                "exclusion restriction hold; truth: the complier (protected) effect, which is "
                "also the Wald estimand.",
)  # fmt: skip
