"""Named simulation settings for benchmarking SACE estimators against known truth."""

import pandas as pd

from ._checks import check_choice, check_positive_int, resolve_rng
from ._intermediate import INTERMEDIATE_SCENARIOS
from ._missing import apply_missingness, check_missingness
from ._simulate import _simulate, describe

_BASE = dict(
    n_features=5, design="observational", outcome="linear", effect=1.0,
    effect_heterogeneity=0.0, pi_difference=0.0, harmed_ratio=0.0,
    monotonicity="increasing", noise=1.0,
)

# Each entry: the make_truncation settings that differ from _BASE, private knobs that the
# public simulator does not expose, and a one-line description.
SCENARIOS = {
    "linear": dict(
        settings={}, knobs={},
        description="Every model linear or main-effects logistic; all assumptions hold.",
    ),
    "nonlinear": dict(
        settings={"outcome": "nonlinear"}, knobs={},
        description="Curved outcome, stratum and treatment models; linear working models "
                    "are misspecified.",
    ),
    "weak_overlap": dict(
        settings={}, knobs={"treatment_scale": 3.0},
        description="Treatment logits tripled: a quarter of units have propensities "
                    "below 0.05 or above 0.95.",
    ),
    "pi_violated": dict(
        settings={"pi_difference": 1.0}, knobs={},
        description="Principal ignorability fails: protected units' Y(1) is 1.0 above "
                    "always-survivors' given X.",
    ),
    "monotonicity_violated": dict(
        settings={"harmed_ratio": 0.3}, knobs={},
        description="Monotonicity fails: harmed units make up 0.3 times the protected share.",
    ),
    "binary": dict(
        settings={"outcome": "binary"}, knobs={},
        description="Binary outcome, effect 1.0 on the logit scale; truth is the risk "
                    "difference.",
    ),
    "clustered": dict(
        settings={}, knobs={"cluster_size": 20, "cluster_sd": 1.0},
        description="Units in clusters of about 20 with a shared outcome random effect; "
                    "returns groups.",
    ),
    "high_dimensional": dict(
        settings={"n_features": 100}, knobs={},
        description="100 covariates of which 3 matter.",
    ),
    # Missing at random given X: complete-case analysis is biased in both (the effect varies
    # with x2, and losses depend on x2).
    "lost_to_follow_up": dict(
        settings={"effect_heterogeneity": 0.5}, knobs={},
        missing={"follow_up": {"treated": (0.7, -1.5), "control": (0.8, -1.5)}},
        description="Survival status unknown for about a quarter of units, mostly at high x2, "
                    "where the effect is largest: complete cases understate the SACE.",
    ),
    "missing_outcomes": dict(
        settings={"effect_heterogeneity": 0.5}, knobs={},
        missing={"follow_up": (0.9, 0.5),
                 "response": {"treated": (0.7, -1.5), "control": (0.7, 1.5)}},
        description="A tenth of units lost to follow-up and 30% of survivors without an "
                    "outcome, both depending on x2 (which drives the effect), in opposite "
                    "directions in the two arms.",
    ),
}
SCENARIOS.update(INTERMEDIATE_SCENARIOS)  # an outcome after a binary intermediate (every stratum)


def list_scenarios():
    """Describe the named scenarios.

    Returns
    -------
    table : pandas.DataFrame
        Columns ``name``, ``description`` and ``truth`` (``"exact"`` when the SACE equals
        the ``effect`` setting exactly, ``"monte_carlo"`` when it is a Monte Carlo average).

    Examples
    --------
    >>> from pscore_strata.datasets import list_scenarios
    >>> list_scenarios()["name"].tolist()[:3]
    ['linear', 'nonlinear', 'weak_overlap']
    """
    rows = []
    for name, spec in SCENARIOS.items():
        settings = {**_BASE, **spec["settings"]}
        exact = settings["outcome"] != "binary" and settings["effect_heterogeneity"] == 0
        rows.append({"name": name, "description": spec["description"],
                     "truth": "exact" if exact else "monte_carlo"})
    return pd.DataFrame(rows, columns=["name", "description", "truth"])


def make_scenario(name, n_samples=2000, random_state=None):
    """Simulate one dataset from a named scenario.

    Parameters
    ----------
    name : str
        One of the keys of ``SCENARIOS`` (see :func:`list_scenarios`):

        - ``"linear"``: the default :func:`make_truncation` setting;
        - ``"nonlinear"``: curved outcome, stratum and treatment models;
        - ``"weak_overlap"``: treatment logits scaled by 3; the 5% and 95% quantiles of
          the propensity are about 0.015 and 0.985;
        - ``"pi_violated"``: ``pi_difference=1.0``;
        - ``"monotonicity_violated"``: ``harmed_ratio=0.3``;
        - ``"binary"``: binary outcome, truth a risk difference (Monte Carlo);
        - ``"clustered"``: about ``n_samples / 20`` clusters, each with a normal random
          effect (sd 1) added to both Y(0) and Y(1); the effect cancels in Y(1) - Y(0)
          and has mean zero, so the truth is that of ``"linear"``. Adds ``groups``;
        - ``"high_dimensional"``: 100 covariates of which 3 matter;
        - ``"lost_to_follow_up"``, ``"missing_outcomes"``: survival status (and outcomes)
          missing at random given x2, differently by arm, with ``effect_heterogeneity=0.5``;
          fit with ``missing="at_random"``. Complete-case analysis is biased there.
        - ``"intermediate_always_survivor"``, ``"intermediate_protected"``,
          ``"intermediate_doomed"``, ``"intermediate_harmed"``: an outcome observed for every
          unit after a binary intermediate (:func:`make_intermediate`); the truth is the
          named stratum's effect (fit with ``stratum=`` set to it).
          ``"intermediate_exclusion"``: randomized noncompliance where the exclusion
          restriction holds too; the truth is the complier effect.
    n_samples : int, default=2000
        Number of units.
    random_state : None, int, numpy.random.Generator or numpy.random.RandomState
        Seed or generator, as in :func:`make_truncation`.

    Returns
    -------
    data : sklearn.utils.Bunch
        The fields of :func:`make_truncation`, plus ``scenario`` (the name) and, for
        ``"clustered"``, ``groups`` (int cluster labels).

    See Also
    --------
    make_truncation : the simulator behind every scenario.

    Examples
    --------
    >>> from pscore_strata.datasets import make_scenario
    >>> data = make_scenario("clustered", 400, random_state=0)
    >>> bool(data.groups.max() < 20)
    True
    """
    name = check_choice(name, "name", tuple(SCENARIOS))
    n_samples = check_positive_int(n_samples, "n_samples")
    rng = resolve_rng(random_state)
    spec = SCENARIOS[name]
    if "simulate" in spec:
        data = spec["simulate"](n_samples, rng)  # its own simulator (datasets/_intermediate.py)
        data.scenario = name
        return data
    params = {"n_samples": n_samples, **_BASE, **spec["settings"]}
    knobs = dict(spec["knobs"])
    cluster_size = knobs.pop("cluster_size", None)
    if cluster_size is not None:
        knobs["n_clusters"] = max(1, round(n_samples / cluster_size))
    data = _simulate(**params, rng=rng, **knobs)
    missing = spec.get("missing", {})
    if missing:
        data = apply_missingness(
            data,
            check_missingness(missing.get("follow_up"), "follow_up"),
            check_missingness(missing.get("response"), "response"),
            rng,
        )
    data.params = {**params, **knobs, **missing}
    data.scenario = name
    data.treatment_probability = 0.5 if params["design"] == "randomized" else None
    data.DESCR = f"Scenario {name!r}: {spec['description']}\n" + describe(
        params, data.true_effect, data.true_effect_mc_error)
    return data
