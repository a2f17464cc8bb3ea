"""The report's "Missing data" section: counts, the assumption in plain words, checks, shifts.

Built from the primary estimator only (the counts and the response models are the same for
every estimator); nothing is refitted.
"""

from __future__ import annotations

import numpy as np

from ._options import SENSITIVITY_POINTS, number

__all__ = ["missing_section", "MISSING_ASSUMPTION_TEXT"]

MISSING_ASSUMPTION_TEXT = (
    "Within each arm, units whose survival status is unknown (lost to follow-up) are, given "
    "their covariates, like units of known status: losing track of a unit had nothing to do "
    "with whether it survived or with its outcome. Likewise, survivors without an observed "
    "outcome would, given their covariates and arm, have had the same mean outcome as "
    "survivors with one. The analysis reweights the observed units by the inverse of their "
    "fitted chance of being observed. This cannot be checked from the data: the table of "
    "outcome shifts shows how the result moves if non-responders differ."
)


MISSING_ASSUMPTION_TEXT_STRATA = (
    "Within each arm, units whose intermediate status is unknown (lost to follow-up) are, given "
    "their covariates, like units of known status. Likewise, units without an observed outcome "
    "would, given their covariates, arm and intermediate status, have had the same mean "
    "outcome as units with one (the outcome exists for every unit here). The analysis "
    "reweights the observed units by the inverse of their fitted chance of being observed, "
    "with a response model for each arm and intermediate value. This cannot be checked from "
    "the data."
)
OUTCOME_SHIFT_STRATA_NOTE = (
    "The table of outcome shifts (non-responders differing from responders) is computed for "
    "the always-survivor stratum only; it is not shown for this stratum."
)


def missing_section(collector, primary, data, level):
    """JSON-ready record of the section; ``None`` when no status or outcome was missing."""
    from ..assumptions import sensitivity_grid
    from ..diagnostics import missing_data_balance
    from ..nuisance._missing import missingness_counts

    fitted = primary.training_data_
    if fitted.status_known is None:
        return None
    other = getattr(primary, "stratum_", "always_survivor") != "always_survivor"
    record = {
        "assumption": MISSING_ASSUMPTION_TEXT_STRATA if other else MISSING_ASSUMPTION_TEXT,
        "by_arm": missingness_counts(fitted),
        "balance": [],
        "outcome_shift": None,
    }
    if other:
        record["outcome_shift_note"] = OUTCOME_SHIFT_STRATA_NOTE
    if data.design is not None:
        table = collector.run("missing-data checks", missing_data_balance, primary, data.design)
        for name, row in table.iterrows():
            record["balance"].append(
                {"covariate": str(name), **{k: number(v) for k, v in row.items()}}
            )
    if not other and fitted.outcome_observed is not None and np.any(
        (fitted.survival == 1) & (fitted.status_known == 1) & (fitted.outcome_observed == 0)
    ):
        spread = float(np.nanstd(fitted.outcome[fitted.outcome_observed == 1], ddof=1)) or 1.0
        shifts = np.round(np.linspace(-spread, spread, SENSITIVITY_POINTS // 2 + 1), 10)
        grid = collector.run(
            "missing-data checks", sensitivity_grid, primary, outcome_shift=shifts, level=level
        )
        rows = [
            {"value": float(r["outcome_shift"]), "effect": float(r["effect"]),
             "std_error": number(r["std_error"]), "ci_low": number(r["ci_low"]),
             "ci_high": number(r["ci_high"])}
            for _, r in grid.iterrows()
        ]  # fmt: skip
        record["outcome_shift"] = {
            "description": "Mean outcome of survivors without an observed outcome minus that of "
            "responders with the same covariates and arm, in both arms (0 = missing at random).",
            "outcome_sd_responders": spread,
            "grid": rows,
            "smallest_shift_covering_zero": _smallest_covering_zero(rows),
        }
    return record


def _smallest_covering_zero(rows):
    """The grid shift of smallest size whose interval covers 0 (``None`` if none does)."""
    covering = [r["value"] for r in rows
                if r["ci_low"] is not None and r["ci_high"] is not None
                and r["ci_low"] <= 0 <= r["ci_high"]]  # fmt: skip
    return min(covering, key=abs) if covering else None
