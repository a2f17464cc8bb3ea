"""Simulated follow-up visits: deaths accumulate between visits, known effects at every visit.

Each unit has a latent frailty ``U ~ Uniform(0, 1)`` and survives to visit k under arm t when
``U < h_k(t, X) = expit(a_k - 0.8 x1 + 0.5 x2 + lift * t)`` with ``a_k`` decreasing in k and
``lift > 0``: survival is monotone over visits (a unit dead at a visit stays dead) and in treatment
(monotonicity at every visit). The always-survivors to visit k are the units with
``U < h_k(0, X)``. Outcomes do not depend on ``U`` given X, so principal ignorability holds at every
visit and for either population, and the true effects are weighted means of the conditional effect
``delta_k + gamma x2`` with weights ``h_k(0, X)`` ("each") or ``h_K(0, X)`` ("last").
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import expit, logit
from sklearn.utils import Bunch

from ._checks import check_choice, check_positive_int, check_real, resolve_rng
from ._family import Scenario

__all__ = ["make_visits", "last_visit_view", "VISIT_LABELS", "VISIT_SCENARIOS"]

VISIT_LABELS = ("month_3", "month_6", "month_12")
_LIFT = 1.0
_QUADRATURE_POINTS = 80


def _baseline_logits(n_visits):
    """``a_k``: about 83% of controls alive at the first visit, about 58% at the last."""
    return np.linspace(2.0, 0.5, n_visits)


def _survival_probability(x1, x2, intercept, arm):
    return expit(intercept - 0.8 * x1 + 0.5 * x2 + _LIFT * arm)


def _true_effects(effects, effect_heterogeneity):
    """Always-survivor effects per visit for both populations, by Gauss-Hermite quadrature.

    ``tau_k = delta_k + gamma E[x2 h(X)] / E[h(X)]`` over independent standard normal x1, x2
    (the expectation is two-dimensional; 80 nodes per dimension make it exact to rounding).
    """
    nodes, weights = np.polynomial.hermite_e.hermegauss(_QUADRATURE_POINTS)
    weights = weights / weights.sum()
    x1, x2 = np.meshgrid(nodes, nodes, indexing="ij")
    w = np.outer(weights, weights)
    intercepts = _baseline_logits(len(effects))
    shares, tilts = [], []
    for a in intercepts:
        h = _survival_probability(x1, x2, a, 0)
        shares.append(float(np.sum(w * h)))
        tilts.append(float(np.sum(w * h * x2) / np.sum(w * h)))
    effects = np.asarray(effects, dtype=float)
    each = effects + effect_heterogeneity * np.asarray(tilts)
    last = effects + effect_heterogeneity * tilts[-1]
    return each, last, np.asarray(shares)


def _check_effects(effects, visits):
    try:
        values = [check_real(float(v), "effects") for v in effects]
    except TypeError:
        raise TypeError(f"effects must be a sequence of real numbers; got {effects!r}.") from None
    if len(values) != len(visits):
        raise ValueError(
            f"effects has {len(values)} values but there are {len(visits)} visits {list(visits)}; "
            "give one effect per visit."
        )
    return values


def _check_share(value, name):
    value = check_real(value, name, low=0.0, high=1.0, high_open=True)
    return value


def make_visits(n_samples=2000, *, visits=VISIT_LABELS, effects=(0.5, 1.0, 1.5),
                effect_heterogeneity=0.5, design="observational", noise=1.0,
                end_of_follow_up=0.0, missed_visits=0.0, random_state=None):  # fmt: skip
    """Simulate outcomes measured at several visits, truncated by deaths between them.

    Covariates ``x1, x2, x3 ~ N(0, 1)``; treatment logistic in x1 and x2 (or randomized);
    survival to visit k under arm t ``expit(a_k - 0.8 x1 + 0.5 x2 + t)`` from one latent frailty
    per unit, so deaths accumulate over visits, depend on covariates and treatment, and satisfy
    monotonicity; outcome at visit k
    ``Y_k(t) = 1 + x1 + 0.5 x2 - 0.5 x3 - 0.2 k + t tau_k(X) + b + e_k`` with the unit effect
    ``tau_k(X) = effects[k] + effect_heterogeneity x2``,
    with a unit effect ``b ~ N(0, (0.6 noise)^2)`` shared by the visits and ``e_k ~ N(0, (0.8
    noise)^2)``. Outcomes rise with x1 while the always-survivor share falls with it, so
    survivor-only contrasts are biased; survival rises with x2, which drives the effect, so
    the populations "each" and "last" have different effects.

    Parameters
    ----------
    n_samples : int, default=2000
    visits : sequence of str, default=("month_3", "month_6", "month_12")
        Visit labels, in time order (at least two).
    effects : sequence of float, default=(0.5, 1.0, 1.5)
        ``delta_k``: the effect at visit k where x2 = 0.
    effect_heterogeneity : float, default=0.5
        ``gamma``: slope of the effect in x2. With 0 the truth is ``effects`` at every visit for
        both populations.
    design : {"observational", "randomized"}, default="observational"
    noise : float, default=1.0
        Scales both outcome noise terms.
    end_of_follow_up : float in [0, 1), default=0.0
        Share of units whose follow-up ends before the last visit, at a visit drawn uniformly,
        more often at high x2 (``expit(logit(share) + x2)``) and never because of their health:
        their survival and outcomes are NaN from that visit on, dead or alive (missing at random
        given X at every visit).
    missed_visits : float in [0, 1), default=0.0
        Chance that a unit alive and under follow-up misses a visit (outcome NaN), more often at
        low x2 (``expit(logit(share) - x2)``).
    random_state : None, int, numpy.random.Generator or numpy.random.RandomState

    Returns
    -------
    data : sklearn.utils.Bunch
        ``X`` (DataFrame x1..x3), ``treatment``, ``y`` and ``survival`` (DataFrames, one column
        per visit), ``y_full`` and ``survival_full`` (before any loss), ``always_survivor``
        (True for the always-survivors to each visit), ``unit_effect`` (``Y_k(1) - Y_k(0)``),
        ``true_effects`` (DataFrame indexed by visit: columns ``each``, ``last``),
        ``always_survivor_shares`` (true share of the always-survivors to each visit),
        ``visits``, ``params`` and ``DESCR``.

    Examples
    --------
    >>> from pscore_strata.datasets import make_visits
    >>> data = make_visits(500, random_state=0)
    >>> data.y.shape, list(data.true_effects.columns)
    ((500, 3), ['each', 'last'])
    """
    n_samples = check_positive_int(n_samples, "n_samples")
    visits = [str(v) for v in visits]
    if len(visits) < 2 or len(set(visits)) != len(visits):
        raise ValueError(f"visits must be at least two distinct labels; got {visits}.")
    effects = _check_effects(effects, visits)
    effect_heterogeneity = check_real(effect_heterogeneity, "effect_heterogeneity")
    design = check_choice(design, "design", ("observational", "randomized"))
    noise = check_real(noise, "noise", low=0.0)
    end_of_follow_up = _check_share(end_of_follow_up, "end_of_follow_up")
    missed_visits = _check_share(missed_visits, "missed_visits")
    rng = resolve_rng(random_state)
    n_visits = len(visits)

    X = rng.standard_normal((n_samples, 3))
    x1, x2, x3 = X.T
    propensity = (np.full(n_samples, 0.5) if design == "randomized"
                  else expit(0.6 * x1 - 0.6 * x2))  # fmt: skip
    treatment = (rng.random(n_samples) < propensity).astype(int)
    frailty = rng.random(n_samples)
    intercepts = _baseline_logits(n_visits)
    survival = np.column_stack([
        (frailty < _survival_probability(x1, x2, a, treatment)).astype(float) for a in intercepts
    ])  # fmt: skip
    shared = 0.6 * noise * rng.standard_normal(n_samples)
    y = np.column_stack([
        1 + x1 + 0.5 * x2 - 0.5 * x3 - 0.2 * (k + 1)
        + treatment * (effects[k] + effect_heterogeneity * x2)
        + shared + 0.8 * noise * rng.standard_normal(n_samples)
        for k in range(n_visits)
    ])  # fmt: skip
    y[survival == 0] = np.nan
    always = np.column_stack([frailty < _survival_probability(x1, x2, a, 0) for a in intercepts])
    unit_effect = np.column_stack([effects[k] + effect_heterogeneity * x2 for k in range(n_visits)])
    y_full, survival_full = y.copy(), survival.copy()
    if end_of_follow_up > 0:
        ends = rng.random(n_samples) < expit(logit(end_of_follow_up) + x2)
        first_unseen = rng.integers(1, n_visits, size=n_samples)  # never before the first visit
        unseen = ends[:, None] & (np.arange(n_visits)[None, :] >= first_unseen[:, None])
        survival[unseen] = np.nan
        y[unseen] = np.nan
    if missed_visits > 0:
        missed = rng.random((n_samples, n_visits)) < expit(logit(missed_visits) - x2)[:, None]
        y[missed & (survival == 1)] = np.nan

    each, last, shares = _true_effects(effects, effect_heterogeneity)
    frame = lambda values: pd.DataFrame(values, columns=visits)  # noqa: E731
    params = dict(n_samples=n_samples, visits=visits, effects=effects,
                  effect_heterogeneity=effect_heterogeneity, design=design, noise=noise,
                  end_of_follow_up=end_of_follow_up, missed_visits=missed_visits)  # fmt: skip
    return Bunch(
        X=pd.DataFrame(X, columns=["x1", "x2", "x3"]), treatment=treatment,
        y=frame(y), survival=frame(survival), y_full=frame(y_full),
        survival_full=frame(survival_full), always_survivor=frame(always),
        unit_effect=frame(unit_effect),
        true_effects=pd.DataFrame({"each": each, "last": last},
                                  index=pd.Index(visits, name="visit")),
        always_survivor_shares=pd.Series(shares, index=visits), visits=visits, params=params,
        DESCR=(
            f"Simulated visits {visits}: {n_samples} units, {design} treatment, deaths between "
            "visits depending on x1, x2 and treatment (monotone in time and treatment). True "
            f"effects, population 'each': {np.round(each, 4).tolist()}; 'last': "
            f"{np.round(last, 4).tolist()}."
        ),
    )  # fmt: skip


def last_visit_view(n_samples, rng, **params):
    """:func:`make_visits` seen as a single-visit study of its last visit (for the scenario
    registry and Monte Carlo studies of single-visit estimators).

    ``X``, ``y``, ``treatment`` and ``survival`` are arrays of the last visit and
    ``true_effect`` its effect (the same for both populations); the visit matrices stay in
    ``y_visits``, ``survival_visits`` and ``true_effects``.
    """
    data = make_visits(n_samples, random_state=rng, **params)
    last = data.visits[-1]
    return Bunch(
        X=data.X.to_numpy(), y=data.y[last].to_numpy(), treatment=data.treatment,
        survival=data.survival[last].to_numpy(), y_full=data.y_full[last].to_numpy(),
        survival_full=data.survival_full[last].to_numpy(),
        true_effect=float(data.true_effects.loc[last, "each"]), true_effect_mc_error=0.0,
        y_visits=data.y, survival_visits=data.survival, true_effects=data.true_effects,
        visits=data.visits, params=data.params, DESCR=data.DESCR,
    )  # fmt: skip


VISIT_SCENARIOS = {
    "visits": Scenario(
        make=last_visit_view, family="visits", truth="quadrature", params={},
        bias={"weighting": "none", "regression": "none", "multiply_robust": "none"},
        description="Three visits with deaths between them (make_visits); the last visit as a "
                    "single-visit study, the visit matrices in y_visits and survival_visits.",
    ),
}
