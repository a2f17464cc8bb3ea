"""The words of the study: what the event is called, what a unit is, what the arms are.

Every heading and sentence of the report (and the command line's summary) takes its nouns from
the record built here, so an employment study reads "employment ends" and "worker", not
"death" and "patient". The field's stratum names (always-survivor, protected, harmed, doomed)
stay, because they are the terms of the literature.
"""

from __future__ import annotations

__all__ = ["study_wording", "plural"]


def plural(noun):
    """English plural of a simple noun ('patient' -> 'patients', 'county' -> 'counties')."""
    if noun.endswith("y") and noun[-2:-1] not in "aeiou":
        return noun[:-1] + "ies"
    if noun.endswith(("s", "x", "z", "ch", "sh")):
        return noun + "es"
    return noun + "s"


def _unit_names(unit_name):
    # "person/people" gives an irregular plural explicitly.
    singular, _, given_plural = str(unit_name).partition("/")
    singular = singular.strip() or "unit"
    return singular, given_plural.strip() or plural(singular)


def outcome_label(results):
    """What headings and axes call the outcome: ``--outcome-label``, else its column name."""
    return (results.get("wording") or {}).get("outcome_label") or results["columns"]["outcome"]


def study_wording(options, data, roles):
    """The nouns and level names of one analysis (the ``wording`` record of results.json)."""
    unit, units = _unit_names(options.unit_name or "unit")
    treated_level, control_level = data.levels.get("treatment", ("1", "0"))
    survived_level, event_level = data.levels.get("survival", ("1", "0"))
    coded = (treated_level, control_level) != ("1", "0")
    if options.arm_names:
        treated_arm, control_arm = options.arm_names
    elif coded:
        treated_arm, control_arm = treated_level, control_level
    else:
        treated_arm, control_arm = "treatment", "control"
    return {
        "event": options.event_name or "death",
        "unit": unit,
        "units": units,
        "treated_arm": str(treated_arm),
        "control_arm": str(control_arm),
        "treated_level": str(treated_level),
        "control_level": str(control_level),
        "survived_level": str(survived_level),
        "event_level": str(event_level),
        "treated_condition": f"{roles.treatment} = {treated_level}",
        "control_condition": f"{roles.treatment} = {control_level}",
        "survived_condition": f"{roles.survival} = {survived_level}",
        "event_condition": f"{roles.survival} = {event_level}",
        "outcome_label": str(getattr(options, "outcome_label", None) or roles.outcome),
    }
