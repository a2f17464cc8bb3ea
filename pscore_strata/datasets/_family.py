"""The record of one named scenario, shared by every scenario family.

A family (outcomes truncated by death, and any other kind of simulated study) is a module that
builds a dict of :class:`Scenario` records; ``_registry.py`` merges the families, one line each.
"""

from dataclasses import dataclass, field

__all__ = ["Scenario", "BIAS_DIRECTIONS"]

BIAS_DIRECTIONS = ("none", "up", "down")


@dataclass(frozen=True)
class Scenario:
    """A named simulation setting with a known truth.

    ``make(n_samples, rng, **params)`` draws one dataset (a Bunch with ``true_effect``) from a
    :class:`numpy.random.Generator`; ``params`` are the scenario's defaults, each of which
    :func:`~pscore_strata.datasets.make_scenario` may override. ``truth`` says how the truth is
    known (``"exact"``, ``"quadrature"`` or ``"monte_carlo"``, a large simulation with a fixed
    seed). ``bias`` states, for the built-in estimators fitted with their default models
    (``"weighting"``, ``"regression"``, ``"multiply_robust"``; ``"complete_cases"`` for the
    multiply robust estimator on complete cases where data are missing), the direction of the
    large-sample bias: ``"none"``, ``"up"`` or ``"down"``. The statements are checked by
    simulation in the test suite. ``bounds(**params)``, when given, returns the identified set
    ``(lower, upper)`` that covariate-free trimming bounds estimate, for studies of bounds.
    """

    make: object
    description: str
    truth: str
    bias: dict = field(default_factory=dict)
    params: dict = field(default_factory=dict)
    family: str = "truncation"
    bounds: object = None

    def __post_init__(self):
        wrong = {k: v for k, v in self.bias.items() if v not in BIAS_DIRECTIONS}
        if wrong:
            raise ValueError(f"bias directions must be one of {BIAS_DIRECTIONS}; got {wrong}.")
