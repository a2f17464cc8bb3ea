"""How much the answer depends on untestable assumptions.

Trimming bounds drop principal ignorability altogether; sensitivity grids and tipping points
relax principal ignorability and monotonicity by a parameter, computed from the stored nuisance
predictions without refitting any model.
"""

from ._bounds import TrimmingBounds, imbens_manski_interval, trimmed_means
from ._sensitivity import adjusted_effect, sensitivity_grid
from ._tipping import tipping_point

__all__ = [
    "TrimmingBounds",
    "trimmed_means",
    "imbens_manski_interval",
    "sensitivity_grid",
    "tipping_point",
    "adjusted_effect",
]
