"""The report's fixed wording: estimand attributes, assumptions and cautions.

Nouns come from the study's wording record (:mod:`._wording`): the event, the unit and the arms.
"""

from __future__ import annotations

__all__ = [
    "CAUTIONS", "cautions", "estimand", "assumptions", "in_command_line_words", "plain_warning",
]  # fmt: skip

_DEFAULT_WORDS = {
    "event": "death", "unit": "unit", "units": "units",
    "treated_arm": "treatment", "control_arm": "control",
    "treated_condition": "treatment = 1", "control_condition": "treatment = 0",
    "survived_condition": "survival = 1", "event_condition": "survival = 0",
}  # fmt: skip


def _cap(text):
    return text[:1].upper() + text[1:]


def cautions(words=None):
    """The cautions that go with every SACE, in the study's words."""
    w = {**_DEFAULT_WORDS, **(words or {})}
    return (
        "The always-survivor stratum is latent: nobody can be identified as an always-survivor, "
        f"so the effect describes a subpopulation of {w['units']} that cannot be listed, not "
        "everyone in the data.",
        "Monotonicity and principal ignorability cannot be tested with these data; the estimate "
        "is only as good as they are. Read it together with the bounds and the sensitivity "
        "analysis.",
        "These are population-level summaries. Do not use them to decide anything about an "
        f"individual {w['unit']}.",
        "Interpret the results under the study's protocol and statistical analysis plan and "
        "local regulation, and have a qualified statistician review the analysis before it "
        "informs practice.",
    )


CAUTIONS = cautions()


def estimand(roles, monotonicity, words=None):
    """The estimand, attribute by attribute (ICH E9(R1))."""
    w = {**_DEFAULT_WORDS, **(words or {})}
    event = w["event"]
    return {
        "framework": "ICH E9(R1)",
        "population": (
            f"Always-survivors: the {w['units']} who would have '{w['survived_condition']}' "
            f"(no {event}) whichever arm they were in (a latent principal stratum of the "
            "population the data represent)."
        ),
        "treatment": (
            f"{_cap(w['treated_arm'])} ('{w['treated_condition']}') compared with "
            f"{w['control_arm']} ('{w['control_condition']}')."
        ),
        "variable": (
            f"'{roles.outcome}', which exists only for {w['units']} with "
            f"'{w['survived_condition']}'."
        ),
        "intercurrent_event": (
            f"{_cap(event)} ('{w['event_condition']}'), after which the outcome "
            "does not exist; handled by the principal stratum strategy (the effect is defined "
            f"within the stratum where {event} would not occur under either arm)."
        ),
        "summary_measure": (
            f"Difference in mean outcome between {w['treated_arm']} and {w['control_arm']} among "
            "always-survivors: the survivor average causal effect (SACE)."
        ),
        "monotonicity": (
            f"{w['treated_arm']} can only prevent {event} (no {w['unit']} has {event} because "
            "of it)"
            if monotonicity == "increasing"
            else f"{w['treated_arm']} can only cause {event} (no {w['unit']} avoids {event} "
            "because of it)"
        ),
    }


def assumptions(roles, monotonicity, words=None):
    """The assumptions behind the estimate, in plain words, with what checks them."""
    w = {**_DEFAULT_WORDS, **(words or {})}
    event, unit = w["event"], w["unit"]
    direction = (
        f"{_cap(w['treated_arm'])} never causes {event} in a {unit} that would avoid it under "
        f"{w['control_arm']} (no harmed stratum)."
        if monotonicity == "increasing"
        else f"{_cap(w['treated_arm'])} never prevents {event} in a {unit} that would have it "
        f"under {w['control_arm']} (no protected stratum)."
    )
    changed = "protected" if monotonicity == "increasing" else "harmed"
    return [
        {
            "name": "Consistency and no interference",
            "statement": f"A {unit}'s outcome depends only on its own arm.",
            "checked_by": "Study design; use --cluster for clustered units.",
        },
        {
            "name": "Treatment ignorability and overlap",
            "statement": (
                "Given the covariates, the arm is as good as random, and every kind of "
                f"{unit} could be in either arm."
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
                f"Given the covariates, the {changed} {w['units']} (whose {event} depends on "
                "the arm) have the same mean outcome as the always-survivors."
            ),
            "checked_by": "Untestable; the bounds drop it and the sensitivity analysis relaxes it.",
        },
    ]


# numpy's floating-point warnings ("invalid value encountered in scalar divide") say nothing
# to a reader of the report; the numbers they concern print as n/a.
_NUMPY_TEXTS = ("encountered in", "Mean of empty slice", "Degrees of freedom <= 0",
                "divide by zero", "overflow")  # fmt: skip


def plain_warning(warning):
    """A warning's text for the report: numpy's texts and Python names in plain words."""
    text = " ".join(str(warning.message).split())
    if issubclass(warning.category, RuntimeWarning) and any(p in text for p in _NUMPY_TEXTS):
        return ("a computation gave an undefined value (a division by zero or an overflow); "
                "the numbers it concerns are shown as n/a")  # fmt: skip
    return in_command_line_words(text)


# A reader of the report runs the command line, not Python: the library's argument names in a
# message become the quantities they stand for.
_PYTHON_WORDS = (
    ("; returning NaN.", "; shown as n/a."),
    ("for harmed_ratio in", "for the harmed / protected stratum-size ratio in"),
    ("for pi_difference in", "for the principal-ignorability difference in"),
    ("at harmed_ratio=", "at a harmed / protected stratum-size ratio of "),
    ("at pi_difference=", "at a principal-ignorability difference of "),
    ("see sensitivity_grid around that value", "see the sensitivity table around that value"),
    ("only the principal scores that predict_proba reports are clipped",
     "only the principal scores shown in the figures are clipped"),
    ("see sensitivity_grid(outcome_shift=...)",
     "see the outcome-shift sensitivity analysis under Missing data"),
)


def in_command_line_words(text):
    """Python argument and function names in a message, as the command line says them."""
    for python, words in _PYTHON_WORDS:
        text = text.replace(python, words)
    return text
