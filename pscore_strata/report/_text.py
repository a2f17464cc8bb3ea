"""The report's fixed wording: estimand attributes, assumptions and cautions."""

from __future__ import annotations

__all__ = ["CAUTIONS", "estimand", "assumptions"]

CAUTIONS = (
    "The always-survivor stratum is latent: nobody can be identified as an always-survivor, so "
    "the effect describes a subpopulation that cannot be listed, not everyone in the data.",
    "Monotonicity and principal ignorability cannot be tested with these data; the estimate is "
    "only as good as they are. Read it together with the bounds and the sensitivity analysis.",
    "These are population-level summaries. Do not use them to decide anything about an "
    "individual patient or participant.",
    "Interpret the results under the study's protocol and statistical analysis plan and local "
    "regulation, and have a qualified statistician review the analysis before it informs "
    "practice.",
)


def estimand(roles, monotonicity):
    """The estimand described by the attributes of ICH E9(R1)."""
    return {
        "framework": "ICH E9(R1) estimand attributes",
        "population": (
            "Always-survivors: the units who would have "
            f"'{roles.survival}' = 1 whichever treatment they received (a latent principal "
            "stratum of the population the data represent)."
        ),
        "treatment": f"'{roles.treatment}' = 1 compared with '{roles.treatment}' = 0.",
        "variable": (
            f"'{roles.outcome}', which exists only for units with '{roles.survival}' = 1."
        ),
        "intercurrent_event": (
            f"Death ('{roles.survival}' = 0), after which the outcome does not exist; handled "
            "by the principal stratum strategy (the effect is defined within the stratum where "
            "the event would not occur under either treatment)."
        ),
        "summary_measure": (
            "Difference in mean outcome between treatment and control among always-survivors: "
            "the survivor average causal effect (SACE)."
        ),
        "monotonicity": (
            "treatment can only help survival (no unit dies because of it)"
            if monotonicity == "increasing"
            else "treatment can only harm survival (no unit survives because of it)"
        ),
    }


def assumptions(roles, monotonicity):
    """The assumptions behind the estimate, in plain words, with what checks them."""
    direction = (
        "Treatment never causes death in a unit that would survive without it."
        if monotonicity == "increasing"
        else "Treatment never saves a unit that would die without it."
    )
    return [
        {
            "name": "Consistency and no interference",
            "statement": "A unit's outcome depends only on its own treatment.",
            "checked_by": "Study design; use --cluster for clustered units.",
        },
        {
            "name": "Treatment ignorability and overlap",
            "statement": (
                "Given the covariates, treatment is as good as random, and every kind of unit "
                "could receive either treatment."
            ),
            "checked_by": "Overlap and balance diagnostics (overlap only; ignorability is "
            "untestable).",
        },
        {
            "name": "Monotonicity",
            "statement": direction,
            "checked_by": "Untestable; survival comparisons can only contradict it. See the "
            "harmed-ratio sensitivity analysis.",
        },
        {
            "name": "Principal ignorability",
            "statement": (
                "Given the covariates, units whose survival depends on treatment have the same "
                "mean outcome as the always-survivors."
            ),
            "checked_by": "Untestable; the bounds drop it and the sensitivity analysis relaxes it.",
        },
    ]
