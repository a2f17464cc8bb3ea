"""The report for a principal stratum other than the always-survivors, and the all-strata table.

When the outcome exists for every unit (noncompliance: the intermediate is the treatment
received; an intercurrent event after which the outcome is still measured), the effect exists in
each principal stratum (docs/guide/derivations/strata.md). ``--stratum NAME`` picks the one
the report is about; the "all strata" table puts the effects of every stratum of the
monotonicity direction side by side with their shares, each fitted by the primary method.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..estimands._strata import (
    STRATA,
    STRATUM_ALIASES,
    arm_cells,
    ignorability_statement,
    resolve_stratum,
    stratum_words,
)
from ._options import METHOD_LABELS, build_estimator, fit_arguments, number
from ._text import _DEFAULT_WORDS, _cap

__all__ = [
    "outcome_for_everyone",
    "stratum_record",
    "stratum_estimand",
    "stratum_assumption",
    "stratum_cautions",
    "stratum_definition",
    "strata_section",
    "latent_label",
    "stratum_label",
]

_ALIAS_OF = {name: alias for alias, name in STRATUM_ALIASES.items()}


def outcome_for_everyone(data):
    """Whether every unit with intermediate 0 has an outcome (so every stratum's effect exists)."""
    S = data.survival.astype(float)
    zero = S == 0
    return bool(zero.any()) and not np.isnan(data.outcome[zero]).any()


_PLURAL = {"always-survivor": "always-survivors", "always-taker": "always-takers",
           "never-taker": "never-takers", "complier": "compliers"}  # fmt: skip


def stratum_label(stratum, monotonicity, plural=False):
    """``"protected (complier)"``, ``"doomed (never-takers)"``: words and noncompliance name."""
    words = stratum_words(stratum)
    alias = _ALIAS_OF.get(stratum) if monotonicity == "increasing" else None
    alias = alias and alias.replace("_", "-")
    if plural:
        words = _PLURAL.get(words, words)
        alias = alias and _PLURAL.get(alias, alias)
    return f"{words} ({alias})" if alias else words


def _display(given, stratum):
    """``"complier (protected)"`` for an alias, the stratum's words otherwise."""
    words = stratum_words(stratum)
    if given in STRATUM_ALIASES:
        return f"{given.replace('_', '-')} ({words})"
    return words


def _table_label(stratum, monotonicity):
    """``"protected (complier)"``: the stratum, and its noncompliance name where it has one."""
    alias = _ALIAS_OF.get(stratum) if monotonicity == "increasing" else None
    words = stratum_words(stratum)
    return f"{words} ({alias.replace('_', '-')})" if alias else words


def stratum_record(given, monotonicity, words=None):
    """The ``stratum`` record of results.json: the name asked for, the stratum, its wording."""
    w = {**_DEFAULT_WORDS, **(words or {})}
    stratum = resolve_stratum(given, monotonicity)
    cells = arm_cells(stratum, monotonicity)
    return {
        "requested": given,
        "name": stratum,
        "label": _display(given, stratum),
        "members": (
            f"the {w['units']} who would have '{_condition(w, cells[1])}' under "
            f"{w['treated_arm']} and '{_condition(w, cells[0])}' under {w['control_arm']}"
        ),
        "principal_ignorability": ignorability_statement(stratum, monotonicity),
    }


def _condition(words, value):
    return words["survived_condition"] if value == 1 else words["event_condition"]


def stratum_estimand(estimand, roles, monotonicity, given, words=None):
    """The ICH E9(R1) attributes of the always-survivor estimand, reworded for the stratum."""
    w = {**_DEFAULT_WORDS, **(words or {})}
    stratum = resolve_stratum(given, monotonicity)
    label = _display(given, stratum)
    return {
        **estimand,
        "population": (
            f"{_cap(label)}: {stratum_record(given, monotonicity, w)['members']} (a latent "
            "principal stratum of the population the data represent)."
        ),
        "variable": f"'{roles.outcome}', observed for every {w['unit']}.",
        "intercurrent_event": (
            f"'{w['event_condition']}' against '{w['survived_condition']}', after which the "
            "outcome is still measured; handled by the principal stratum strategy (the effect "
            f"is defined within the {label} stratum)."
        ),
        "summary_measure": (
            f"Difference in mean outcome between {w['treated_arm']} and {w['control_arm']} in "
            f"the {label} stratum."
        ),
        "monotonicity": (
            f"{w['treated_arm']} can only turn '{w['event_condition']}' into "
            f"'{w['survived_condition']}' (no {w['unit']} has '{w['event_condition']}' because "
            "of it)" if monotonicity == "increasing" else
            f"{w['treated_arm']} can only turn '{w['survived_condition']}' into "
            f"'{w['event_condition']}' (no {w['unit']} has '{w['survived_condition']}' because "
            "of it)"
        ),
    }


def stratum_assumption(given, monotonicity):
    """The principal ignorability entry of the assumptions list, for the stratum."""
    stratum = resolve_stratum(given, monotonicity)
    return {
        "name": "Principal ignorability",
        "statement": ignorability_statement(stratum, monotonicity),
        "checked_by": "Untestable. The sensitivity analysis relaxes it in each cell the "
        "stratum shares with another; the trimming bounds drop it.",
    }


def stratum_cautions(given, monotonicity, words=None):
    """The report's cautions, for a stratum other than the always-survivors."""
    w = {**_DEFAULT_WORDS, **(words or {})}
    label = _display(given, resolve_stratum(given, monotonicity))
    return (
        f"The {label} stratum is latent: nobody can be identified as a member of it, so the "
        f"effect describes a subpopulation of {w['units']} that cannot be listed, not everyone "
        "in the data.",
        "Monotonicity and principal ignorability cannot be tested with these data; the estimate "
        "is only as good as they are.",
        "These are population-level summaries. Do not use them to decide anything about an "
        f"individual {w['unit']}.",
        "Interpret the results under the study's protocol and statistical analysis plan and "
        "local regulation, and have a qualified statistician review the analysis before it "
        "informs practice.",
    )


def latent_label(results):
    """The report's stratum as its sentences name it: ``"always-survivor"`` unless --stratum."""
    return (results.get("stratum") or {}).get("label", "always-survivor")


def stratum_definition(target, words, outcome):
    """The manuscript results table's definition of the effect, for the ``stratum`` record."""
    return (
        f"Effect: the mean difference in {outcome} between {words['treated_arm']} "
        f"('{words['treated_condition']}') and {words['control_arm']} "
        f"('{words['control_condition']}') in the {target['label']} stratum, "
        f"{target['members']}. Naive cell contrast: the difference of the mean outcomes of the "
        "two observed cells the stratum belongs to, biased when the arms' cells hold different "
        "strata. SE: standard error; CI: confidence interval."
    )


def strata_section(collector, options, data):
    """Every stratum's effect and share by the primary method; ``None`` under truncation."""
    if not outcome_for_everyone(data) or options.missing != "error":
        return None
    rows, shared = [], None
    for stratum in STRATA[options.monotonicity]:
        estimator = build_estimator(options.method, replace(options, stratum=stratum),
                                    int(len(data.treatment)))  # fmt: skip
        # The strata other than the always-survivors read the same data and models: one fit.
        nuisance = shared if stratum != "always_survivor" else None
        collector.run("all strata", estimator.fit, data.design, data.outcome,
                      **fit_arguments(data), nuisance=nuisance)  # fmt: skip
        if stratum != "always_survivor":
            shared = shared or estimator.nuisance_
        table = estimator.summary(options.level)
        share = table.loc[f"share {stratum_words(stratum)}"]
        low, high = estimator.conf_int(options.level)
        rows.append({
            "stratum": stratum,
            "label": _table_label(stratum, options.monotonicity),
            "share": number(share["estimate"]),
            "share_ci_low": number(share["ci_low"]),
            "share_ci_high": number(share["ci_high"]),
            "effect": number(estimator.effect_),
            "std_error": number(estimator.std_error_),
            "ci_low": number(low),
            "ci_high": number(high),
            "mean_treated": number(estimator.mean_treated_),
            "mean_control": number(estimator.mean_control_),
            "std_error_method": str(estimator.std_error_method_),
        })  # fmt: skip
    return {
        "method": options.method,
        "label": METHOD_LABELS[options.method],
        "rows": rows,
        "notes": [
            "Each stratum's effect rests on its own principal ignorability: "
            + " ".join(ignorability_statement(s, options.monotonicity)
                       for s in STRATA[options.monotonicity]),  # fmt: skip
            "The shares sum to one; the effects are not comparable populations: each describes "
            "its own latent stratum.",
        ],
    }
