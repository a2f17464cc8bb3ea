"""The report's sensitivity analysis, for the stratum the report is about.

Each sensitivity parameter of :func:`pscore_strata.sensitivity_grid` describes one observed cell
that mixes two strata, so each stratum's effect depends on some of them only
(docs/guide/derivations/strata.md section 7): the always-survivors' on ``pi_difference`` and
``harmed_ratio``; the helped stratum's (protected, compliers; harmed under decreasing
monotonicity) on ``pi_difference``, ``pi_difference_doomed`` and ``harmed_ratio``; the
doomed's on ``pi_difference_doomed`` and ``harmed_ratio``. The section holds one record per
parameter the fitted stratum's effect depends on: its description in the study's words, a grid
from ``sensitivity_grid`` and the tipping point from ``tipping_point``, both called on the
report's primary estimator exactly as a Python user would.

The always-survivor section is the one the report has always had (same grids, same words).
"""

from __future__ import annotations

import numpy as np

from ..estimands._strata import stratum_role
from ._options import number
from ._sections import _tipping_status, readable_step
from ._strata import stratum_label as _label
from ._text import _DEFAULT_WORDS

__all__ = ["sensitivity_section", "PARAMETERS", "parameters_of"]

#: The parameters the report shows, in its order, by the stratum's role in the oriented view.
PARAMETERS = {
    "always": ("pi_difference", "harmed_ratio"),
    "changed": ("pi_difference", "pi_difference_doomed", "harmed_ratio"),
    "doomed": ("pi_difference_doomed", "harmed_ratio"),
}
_DIFFERENCES = ("pi_difference", "pi_difference_doomed")


def parameters_of(primary):
    """The sensitivity parameters the primary estimator's effect depends on, in report order."""
    stratum = getattr(primary, "stratum_", "always_survivor")
    return PARAMETERS[stratum_role(stratum, primary.monotonicity).role]


def _grid_rows(table, parameter):
    return [
        {
            "value": float(r[parameter]),
            "effect": float(r["effect"]),
            "std_error": number(r["std_error"]),
            "ci_low": number(r["ci_low"]),
            "ci_high": number(r["ci_high"]),
        }
        for _, r in table.iterrows()
    ]


def _difference_grid(collector, primary, parameter, level, spread, tip):
    """Readable values: multiples of a round step near a tenth of the outcome SD, reaching a
    little past the tipping point so that the figure shows it."""
    from ..assumptions import sensitivity_grid

    step = readable_step(spread)
    reach = max(0.5 * spread, 1.25 * abs(tip or 0.0))
    n_steps = int(min(40, max(5, np.ceil(reach / step))))
    values = np.round(step * np.arange(-n_steps, n_steps + 1), 10)
    table = collector.run("sensitivity analysis", sensitivity_grid, primary,
                          **{parameter: values}, level=level)  # fmt: skip
    return step, _grid_rows(table, parameter)


def _harmed_grid(collector, primary, data, level, informative_only):
    """The harmed-ratio grid, cut where the data stop saying much.

    Beyond the ratio at which the always-survivor score is clipped at zero for more than 5% of
    rows (common practice, as in the diagnostics), the data say little: the grid stops.
    Returns the table and whether the effect stays put over it (within 1e-9 relative). The
    always-survivor grid shows at least three values; with ``informative_only`` it stops at the
    last informative one.
    """
    from ..assumptions import sensitivity_grid
    from ..diagnostics._arrays import ROW_SHARE_TOLERANCE

    harmed = np.round(np.arange(0.0, 0.951, 0.05), 2)
    table = collector.run("sensitivity analysis", sensitivity_grid, primary,
                          harmed_ratio=harmed.tolist(), level=level)  # fmt: skip
    informative = table["n_rows_clipped"] <= ROW_SHARE_TOLERANCE * len(data.treatment)
    last = int(np.flatnonzero(informative.to_numpy())[-1]) if informative.any() else 0
    shown = table.iloc[: last + 1] if informative_only else table.iloc[: max(last + 1, 3)]
    effects = shown["effect"].to_numpy(dtype=float)
    unchanged = bool(np.ptp(effects) <= 1e-9 * (1 + abs(primary.effect_)))
    return shown, unchanged


def _tipping_points(collector, primary, parameters, level, observed_range):
    from ..assumptions import tipping_point

    tips, status = {}, {}
    for parameter in parameters:
        value = collector.run("sensitivity analysis", tipping_point, primary, parameter,
                              level=level)  # fmt: skip
        tips[parameter] = number(value)
        status[parameter] = _tipping_status(tips[parameter], 0.0, parameter, observed_range)
    return tips, status


def sensitivity_section(collector, primary, data, level, words=None):
    """The ``sensitivity`` record of results.json for the primary estimator's stratum."""
    stratum = getattr(primary, "stratum_", "always_survivor")
    if stratum == "always_survivor":
        return _always_survivor_section(collector, primary, data, level)
    return _stratum_section(collector, primary, data, level, stratum, words or {})


def _always_survivor_section(collector, primary, data, level):
    survivors = data.outcome[data.survival == 1]
    spread = float(np.nanstd(survivors, ddof=1)) or 1.0
    observed_range = [float(np.nanmin(survivors)), float(np.nanmax(survivors))]
    tips, status = _tipping_points(collector, primary, ("pi_difference", "harmed_ratio"), level,
                                   observed_range)  # fmt: skip
    step, grid_pi = _difference_grid(collector, primary, "pi_difference", level, spread,
                                     tips["pi_difference"])  # fmt: skip
    grid_mono, unchanged = _harmed_grid(collector, primary, data, level, informative_only=False)
    mixed = "protected" if primary.monotonicity == "increasing" else "harmed"
    other = "harmed" if mixed == "protected" else "protected"
    if unchanged:
        # Constant principal scores (no covariates): the harmed ratio rescales every score
        # alike, so the normalized means do not move.
        status["harmed_ratio"] = "unchanged"
    return {
        "pi_difference": {
            "description": f"Mean outcome under treatment of the {mixed} stratum minus that of "
            "the always-survivors with the same covariates (0 = principal ignorability).",
            "outcome_sd_survivors": spread,
            "grid_step": step,
            "grid_digits": int(max(0, -np.floor(np.log10(step)))),
            "grid": grid_pi,
            "tipping_point": tips["pi_difference"],
            "tipping_status": status["pi_difference"],
            "outcome_range_survivors": observed_range,
        },
        "harmed_ratio": {
            "description": f"Size of the {other} stratum, which monotonicity rules out, relative "
            f"to the {mixed} stratum (0 = monotonicity).",
            "grid": _grid_rows(grid_mono, "harmed_ratio"),
            "informative_max": float(grid_mono["harmed_ratio"].iloc[-1]),
            "tipping_point": tips["harmed_ratio"],
            "tipping_status": status["harmed_ratio"],
        },
        "criterion": f"the {level:.0%} confidence interval first covers 0",
    }


def stratum_parameter_words(monotonicity, words):
    """For each parameter: the cell it describes and its description, in the study's words.

    The mixed arm (treated under increasing monotonicity) holds the always-survivors and the
    helped stratum among its units with intermediate 1; the pure arm holds the helped and the
    doomed among its units with intermediate 0 (docs/guide/derivations/strata.md section 7).
    """
    w = {**_DEFAULT_WORDS, **words}
    increasing = monotonicity == "increasing"
    helped, opposite = ("protected", "harmed") if increasing else ("harmed", "protected")
    treated = (w["treated_arm"], w["treated_condition"])
    control = (w["control_arm"], w["control_condition"])
    (mixed_arm, mixed_condition), (pure_arm, pure_condition) = (
        (treated, control) if increasing else (control, treated))  # fmt: skip
    helped_units = f"{_label(helped, monotonicity)} {w['units']}"
    always = _label("always_survivor", monotonicity, plural=True)
    doomed = _label("doomed", monotonicity, plural=True)
    mixed_cell = (f"{w['units']} in the {mixed_arm} arm ('{mixed_condition}') with "
                  f"'{w['survived_condition']}'")  # fmt: skip
    pure_cell = (f"{w['units']} in the {pure_arm} arm ('{pure_condition}') with "
                 f"'{w['event_condition']}'")  # fmt: skip
    return {
        "pi_difference": {
            "cell": mixed_cell,
            "description": f"Mean outcome under {mixed_arm} of the {helped_units} minus that of "
            f"the {always} with the same covariates; the two strata make up the {mixed_cell} "
            "(0 = principal ignorability there).",
            "contrast": f"{_label(helped, monotonicity)} minus {always}",
        },
        "pi_difference_doomed": {
            "cell": pure_cell,
            "description": f"Mean outcome under {pure_arm} of the {helped_units} minus that of "
            f"the {doomed} with the same covariates; the two strata make up the {pure_cell} "
            "(0 = principal ignorability there).",
            "contrast": f"{_label(helped, monotonicity)} minus {doomed}",
        },
        "harmed_ratio": {
            "description": f"Size of the {opposite} stratum, which monotonicity rules out, "
            f"relative to the {_label(helped, monotonicity)} stratum (0 = monotonicity).",
            "contrast": f"{opposite} / {helped} stratum size",
        },
    }


def _stratum_section(collector, primary, data, level, stratum, words):
    """Every parameter the stratum's effect depends on; the scale is every unit's outcome.

    The outcome enters the formulas of strata other than the always-survivors for every unit,
    so its standard deviation and range over all analysed units set the grid's step, the
    tipping point's search range (as ``tipping_point`` does) and the "beyond the outcome's
    range" check.
    """
    parameters = parameters_of(primary)
    spread = float(np.nanstd(data.outcome, ddof=1)) or 1.0
    observed_range = [float(np.nanmin(data.outcome)), float(np.nanmax(data.outcome))]
    tips, status = _tipping_points(collector, primary, parameters, level, observed_range)
    texts = stratum_parameter_words(primary.monotonicity, words)
    record = {}
    for parameter in parameters:
        if parameter not in _DIFFERENCES:
            continue
        step, grid = _difference_grid(collector, primary, parameter, level, spread,
                                      tips[parameter])  # fmt: skip
        record[parameter] = {
            **texts[parameter],
            "outcome_sd": spread,
            "grid_step": step,
            "grid_digits": int(max(0, -np.floor(np.log10(step)))),
            "grid": grid,
            "tipping_point": tips[parameter],
            "tipping_status": status[parameter],
            "outcome_range": observed_range,
        }
    helped = stratum_role(stratum, primary.monotonicity).role == "changed"
    # The helped stratum's score is (p_m - p_p) / (1 - xi) in every row: the harmed ratio alone
    # rescales it alike everywhere, and its normalized means move only where scores are
    # clipped, so its grid stops at the last informative value (no clipping artefacts).
    grid_mono, unchanged = _harmed_grid(collector, primary, data, level, informative_only=helped)
    note = None
    if helped:
        note = (
            f"The effect in the {_label(stratum, primary.monotonicity)} stratum does not move "
            "with this parameter alone: a stratum that monotonicity rules out, of any size, "
            "rescales this stratum's principal score alike in every row. It moves only where "
            "scores are clipped at zero, or together with a departure from principal "
            "ignorability."
        )
    record["harmed_ratio"] = {
        **texts["harmed_ratio"],
        "grid": _grid_rows(grid_mono, "harmed_ratio"),
        "informative_max": float(grid_mono["harmed_ratio"].iloc[-1]),
        "tipping_point": tips["harmed_ratio"],
        "tipping_status": "unchanged" if unchanged else status["harmed_ratio"],
        "note": note,
    }
    record["criterion"] = f"the {level:.0%} confidence interval first covers 0"
    return record
