"""The report's trimming bounds for a stratum other than the always-survivors (``--stratum``).

Without principal ignorability the stratum's mean in an arm is bounded by trimming: its units are
some share ``k`` of the arm's observed cell it belongs to (the stratum's principal score over the
cell's probability), so its mean lies between the means of the lowest and of the highest ``k``
of that cell's outcomes; a cell that holds the stratum only (``k = 1``) gives its mean
(docs/guide/derivations/strata.md section 8). The numbers are those of
:class:`pscore_strata.TrimmingBounds` with ``stratum=``, fitted by the report as a Python user
would; this module only words them for the study: which cell in which arm, shared with which
stratum, trimmed by what share.
"""

from __future__ import annotations

import numpy as np

from ..estimands._strata import arm_cells, resolve_stratum
from ._options import number
from ._strata import _display
from ._strata import stratum_label as _label
from ._text import _DEFAULT_WORDS

__all__ = ["stratum_bounds_record", "QUANTILE_NOTE"]

#: Why the distributions section has no quantile bounds for this stratum.
QUANTILE_NOTE = (
    "Bounds on quantile effects are computed for the always-survivor stratum only; for this "
    "stratum the report bounds the mean effect."
)

# The strata that make up an arm's observed cell, by the arm's role in the oriented view (the
# mixed arm is the one where treatment changes the intermediate of some units) and the cell's
# intermediate value (docs/guide/derivations/strata.md section 1).
_CELL_STRATA = {
    ("mixed", 1): ("always_survivor", "changed"),
    ("mixed", 0): ("doomed",),
    ("pure", 1): ("always_survivor",),
    ("pure", 0): ("changed", "doomed"),
}


def _arm_bounds(bounds, role):
    """``(share of the cell that is the stratum, mean lower, mean upper)`` in one arm's cell.

    Averaged over the trimming cells with the weights of ``cells_`` (one cell in the report).
    """
    cells, weight = bounds.cells_, bounds.cells_["weight"].to_numpy()
    if bounds.stratum_ == "always_survivor":  # --stratum always_taker: the always-survivor table
        if role == "mixed":
            columns = ("always_survivor_share", "mixed_mean_lower", "mixed_mean_upper")
        else:
            return 1.0, *(float(np.dot(weight, cells["pure_mean"])),) * 2
    else:
        columns = (f"share_{role}", f"{role}_mean_lower", f"{role}_mean_upper")
    return tuple(float(np.dot(weight, cells[c])) for c in columns)


def stratum_bounds_record(record, bounds, given, words):
    """The bounds record of the always-survivor report, worded and completed for ``given``.

    Adds ``trimming_shares`` (the share of the stratum's cell trimmed in each arm, as
    ``TrimmingBounds.trimming_shares_``) and ``arms``: per arm the observed cell, the strata
    mixed in it, the stratum's share of it, the share trimmed from each end in turn and the
    bounds on the stratum's mean there.
    """
    w = {**_DEFAULT_WORDS, **words}
    monotonicity = bounds.monotonicity
    stratum = resolve_stratum(given, monotonicity)
    increasing = monotonicity == "increasing"
    changed = "protected" if increasing else "harmed"
    cells = arm_cells(stratum, monotonicity)
    arms = []
    for arm, cell in (("treated", cells[1]), ("control", cells[0])):
        role = "mixed" if (arm == "treated") == increasing else "pure"
        share, low, high = _arm_bounds(bounds, role)
        condition = w["survived_condition"] if cell == 1 else w["event_condition"]
        strata = [changed if s == "changed" else s for s in _CELL_STRATA[(role, cell)]]
        arms.append({
            "arm": arm,
            "arm_name": w[f"{arm}_arm"],
            "cell": f"{w['units']} in the {w[f'{arm}_arm']} arm ('{w[f'{arm}_condition']}') "
            f"with '{condition}'",
            "strata_in_cell": [_label(s, monotonicity, plural=True) for s in strata],
            "stratum_share": number(share),
            "trimmed_share": number(1.0 - share),
            "mean_lower": number(low),
            "mean_upper": number(high),
        })  # fmt: skip
    label = _display(given, stratum)
    record["interval"] = (
        f"Imbens-Manski interval (it covers the true effect in the {label} stratum)"
    )
    record["trimming_shares"] = {arm: float(bounds.trimming_shares_[arm])
                                 for arm in ("treated", "control")}  # fmt: skip
    record["arms"] = arms
    # The summary's note on the trimmed shares in the library's arm names: the table has them.
    record["notes"] = [
        *record["notes"][1:],
        "Neither principal ignorability nor the exclusion restriction (that treatment does not "
        "change the outcome of the strata whose intermediate it leaves unchanged) is assumed.",
        QUANTILE_NOTE,
    ]
    return record
