"""Every named scenario, from every scenario family, and the two functions that serve them.

A family builds a dict of :class:`~pscore_strata.datasets._family.Scenario` records in its own
module and is registered below with one line.
"""

import pandas as pd

from ._checks import check_choice, resolve_rng
from ._intermediate import INTERMEDIATE_SCENARIOS
from ._scenarios import TRUNCATION_SCENARIOS
from ._visits import VISIT_SCENARIOS

__all__ = ["SCENARIOS", "list_scenarios", "make_scenario"]

SCENARIOS = {}
SCENARIOS.update(TRUNCATION_SCENARIOS)
SCENARIOS.update(INTERMEDIATE_SCENARIOS)  # an outcome after a binary intermediate (every stratum)
SCENARIOS.update(VISIT_SCENARIOS)  # repeated visits with deaths between them
# Other families register here, one line each: SCENARIOS.update(FAMILY_SCENARIOS)


def list_scenarios():
    """Describe the named scenarios.

    Returns
    -------
    table : pandas.DataFrame
        One row per scenario: ``name``, ``family``, ``description``, ``truth`` (``"exact"``
        when the SACE is known in closed form, ``"quadrature"`` or ``"monte_carlo"`` when it is
        a numerical or large-simulation average with a fixed seed), ``params`` (the settings
        that :func:`make_scenario` may override) and ``bias`` (the stated direction of each
        built-in estimator's large-sample bias, checked by simulation in the test suite).

    Examples
    --------
    >>> from pscore_strata.datasets import list_scenarios
    >>> list_scenarios()["name"].tolist()[:3]
    ['linear', 'nonlinear', 'treatment_misspecified']
    """
    rows = [
        {
            "name": name,
            "family": spec.family,
            "description": spec.description,
            "truth": spec.truth,
            "params": dict(spec.params),
            "bias": ", ".join(f"{k} {v}" for k, v in spec.bias.items()),
        }
        for name, spec in SCENARIOS.items()
    ]
    return pd.DataFrame(rows, columns=["name", "family", "description", "truth", "params", "bias"])


def make_scenario(name, n_samples=2000, random_state=None, **params):
    """Simulate one dataset from a named scenario, optionally changing its parameters.

    Parameters
    ----------
    name : str
        One of the keys of ``SCENARIOS`` (see :func:`list_scenarios`). The truncation
        family:

        - ``"linear"``: the default :func:`make_truncation` setting;
        - ``"nonlinear"``: curved outcome, stratum and treatment models;
        - ``"treatment_misspecified"``, ``"survival_misspecified"``,
          ``"outcome_misspecified"``: one model family at a time curves away from its
          main-effects working model (``misspecified=``); the survival one adds
          ``effect_heterogeneity=0.5``;
        - ``"weak_overlap"``: treatment logits scaled by 3 (``treatment_scale=3``); the 5%
          and 95% quantiles of the propensity are about 0.015 and 0.985;
        - ``"pi_violated"``: ``pi_difference=1.0``;
        - ``"monotonicity_violated"``: ``harmed_ratio=0.4`` and ``harmed_difference=1.5``
          (the harmed units' Y(0) sits 1.5 above the always-survivors' given X);
        - ``"binary"``: binary outcome, truth a risk difference (Monte Carlo);
        - ``"clustered"``: about ``n_samples / 20`` clusters (``cluster_size=20``), each with
          a normal random effect (``cluster_sd=1``) added to both Y(0) and Y(1); the effect
          cancels in Y(1) - Y(0), so the truth is that of ``"linear"``. Adds ``groups``;
        - ``"high_dimensional"``: 100 covariates of which 3 matter;
        - ``"lost_to_follow_up"``, ``"missing_outcomes"``: survival status (and outcomes)
          missing at random given x2, differently by arm, with ``effect_heterogeneity=0.5``;
          fit with ``missing="at_random"``. Complete-case analysis is biased there.

        The intermediate family (:func:`make_intermediate`):

        - ``"intermediate_always_survivor"``, ``"intermediate_protected"``,
          ``"intermediate_doomed"``, ``"intermediate_harmed"``: an outcome observed for every
          unit after a binary intermediate; the truth is the named stratum's effect (fit with
          ``stratum=`` set to it). ``"intermediate_exclusion"``: randomized noncompliance
          where the exclusion restriction holds too; the truth is the complier effect.
          Their parameters are the arguments of :func:`make_intermediate`.

        The visits family: ``"visits"``, the last visit of :func:`make_visits` as a
        single-visit study (its parameters are those of :func:`make_visits`); the visit
        matrices are in ``y_visits`` and ``survival_visits``, their truths in
        ``true_effects``.
    n_samples : int, default=2000
        Number of units.
    random_state : None, int, numpy.random.Generator or numpy.random.RandomState
        Seed or generator, as in :func:`make_truncation`.
    **params
        Settings that replace the scenario's (a grid over a scenario parameter). For the
        truncation family: the keyword arguments of :func:`make_truncation` and
        ``treatment_scale``, ``cluster_size``, ``cluster_sd``, ``misspecified`` (a tuple of
        ``"treatment"``, ``"survival"``, ``"outcome"``) and ``harmed_difference`` (shift of
        the opposite-direction stratum's outcome under the arm in which it survives).

    Returns
    -------
    data : sklearn.utils.Bunch
        The fields of :func:`make_truncation`, plus ``scenario`` (the name), ``params`` (every
        setting used) and, for clustered settings, ``groups`` (int cluster labels).

    See Also
    --------
    make_truncation : the simulator behind the truncation scenarios.

    Examples
    --------
    >>> from pscore_strata.datasets import make_scenario
    >>> data = make_scenario("clustered", 400, random_state=0)
    >>> bool(data.groups.max() < 20)
    True
    >>> make_scenario("monotonicity_violated", 200, random_state=0, harmed_ratio=0.2).params[
    ...     "harmed_ratio"]
    0.2
    """
    name = check_choice(name, "name", tuple(SCENARIOS))
    spec = SCENARIOS[name]
    rng = resolve_rng(random_state)
    data = spec.make(n_samples, rng, **{**spec.params, **params})
    data.scenario = name
    if params:
        data.DESCR = f"Scenario {name!r} with {params}: {spec.description}\n" + data.DESCR
    else:
        data.DESCR = f"Scenario {name!r}: {spec.description}\n" + data.DESCR
    return data
