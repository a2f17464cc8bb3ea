"""Simulated data with known SACE and an invented demo registry.

``make_truncation`` and ``make_scenario`` simulate outcomes truncated by death with a
known survivor average causal effect; ``load_demo`` returns an invented critical-care
registry whose true effect is ``DEMO_TRUE_EFFECT``.
"""

from ._demo import DEMO_ROLES, DEMO_TRUE_EFFECT, load_demo
from ._intermediate import make_intermediate
from ._registry import SCENARIOS, list_scenarios, make_scenario
from ._simulate import make_truncation
from ._visits import make_visits

__all__ = [
    "DEMO_ROLES",
    "DEMO_TRUE_EFFECT",
    "SCENARIOS",
    "list_scenarios",
    "load_demo",
    "make_intermediate",
    "make_scenario",
    "make_truncation",
    "make_visits",
]
