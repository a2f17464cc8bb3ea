"""The principal strata: their names, their role in the oriented view, and what they assume.

The oriented view of :mod:`._view` names the arms by role: the *mixed* arm is the one where the
treatment changes the intermediate of some units (the treated arm under increasing
monotonicity), the *pure* arm the other one. In that view there are three strata whatever the
direction: the always stratum (intermediate 1 under both arms), the changed stratum (1 under the
mixed arm only: protected under "increasing", harmed under "decreasing") and the doomed (0 under
both). Each has a principal score linear in the two intermediate models,
``e = a p_mixed + b p_pure + c``, and sits in one observed cell per arm
(docs/guide/derivations/strata.md); the formulas of :mod:`._formulas` are written once over those
coefficients and cells.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = [
    "Stratum",
    "STRATA",
    "STRATUM_ALIASES",
    "resolve_stratum",
    "stratum_names",
    "ALWAYS",
    "stratum_role",
    "needs_zero_cells",
    "arm_cells",
    "stratum_words",
    "ignorability_statement",
    "require_always_survivor",
]


@dataclass(frozen=True)
class Stratum:
    """A principal stratum in the oriented view."""

    role: str  # "always", "changed" or "doomed"
    mixed_coefficient: float  # a in e = a p_mixed + b p_pure + c
    pure_coefficient: float  # b
    constant: float  # c
    s_mixed: int  # the stratum's intermediate under the mixed arm
    s_pure: int  # ... and under the pure arm

    def score(self, p_mixed, p_pure):
        e = self.constant + self.mixed_coefficient * p_mixed
        return e + self.pure_coefficient * p_pure


ROLES = {
    "always": Stratum("always", 0.0, 1.0, 0.0, 1, 1),
    "changed": Stratum("changed", 1.0, -1.0, 0.0, 1, 0),
    "doomed": Stratum("doomed", -1.0, 0.0, 1.0, 0, 0),
}

ALWAYS = ROLES["always"]

# The stratum names by monotonicity direction, and their role in the oriented view.
STRATA = {
    "increasing": {"always_survivor": "always", "protected": "changed", "doomed": "doomed"},
    "decreasing": {"always_survivor": "always", "harmed": "changed", "doomed": "doomed"},
}
# Noncompliance names (assignment T, treatment received S; no defiers).
STRATUM_ALIASES = {"always_taker": "always_survivor", "complier": "protected",
                   "never_taker": "doomed"}  # fmt: skip


def stratum_names():
    """Every name ``stratum=`` accepts."""
    return ("always_survivor", "protected", "doomed", "harmed", *STRATUM_ALIASES)


def resolve_stratum(stratum, monotonicity):
    """The canonical stratum name for ``stratum=`` under ``monotonicity``, or a clear error."""
    if not isinstance(stratum, str) or stratum not in stratum_names():
        raise ValueError(f"`stratum` must be one of {list(stratum_names())}; got {stratum!r}.")
    if stratum in STRATUM_ALIASES:
        if monotonicity != "increasing":
            raise ValueError(
                f"`stratum`={stratum!r} is a noncompliance name, defined under monotonicity="
                "'increasing' (no defiers); with monotonicity='decreasing' use "
                "'always_survivor', 'harmed' or 'doomed'."
            )
        return STRATUM_ALIASES[stratum]
    if stratum not in STRATA[monotonicity]:
        needed = "decreasing" if stratum == "harmed" else "increasing"
        raise ValueError(
            f"`stratum`={stratum!r} exists only under monotonicity='{needed}'; with "
            f"monotonicity={monotonicity!r} the strata are {list(STRATA[monotonicity])}."
        )
    return stratum


def needs_zero_cells(stratum):
    """Whether the stratum's formulas use units whose intermediate is 0 (their outcomes)."""
    return stratum != "always_survivor"


def arm_cells(stratum, monotonicity):
    """``{1: s_g(1), 0: s_g(0)}``: the stratum's intermediate under each arm (its cells)."""
    spec = ROLES[STRATA[monotonicity][stratum]]
    if monotonicity == "increasing":
        return {1: spec.s_mixed, 0: spec.s_pure}
    return {1: spec.s_pure, 0: spec.s_mixed}


_WORDS = {"always_survivor": "always-survivor", "protected": "protected", "harmed": "harmed",
          "doomed": "doomed"}  # fmt: skip


def stratum_words(stratum):
    """The stratum's name in text (``"always-survivor"``, ``"protected"``, ...)."""
    return _WORDS[stratum]


# Principal ignorability in mean form, one statement per observed cell that mixes two strata
# (docs/guide/derivations/strata.md section 3); keyed by (monotonicity, arm of the cell).
_IGNORABILITY = {
    ("increasing", 1): "E[Y(1) | always-survivor, X] = E[Y(1) | protected, X]",
    ("increasing", 0): "E[Y(0) | protected, X] = E[Y(0) | doomed, X]",
    ("decreasing", 0): "E[Y(0) | always-survivor, X] = E[Y(0) | harmed, X]",
    ("decreasing", 1): "E[Y(1) | harmed, X] = E[Y(1) | doomed, X]",
}


def ignorability_statement(stratum, monotonicity):
    """The principal ignorability the stratum's effect rests on, in words."""
    cells = arm_cells(stratum, monotonicity)
    mixed_cells = {("increasing", 1, 1), ("increasing", 0, 0), ("decreasing", 0, 1),
                   ("decreasing", 1, 0)}  # fmt: skip
    needed = [_IGNORABILITY[(monotonicity, arm)] for arm in (1, 0)
              if (monotonicity, arm, cells[arm]) in mixed_cells]  # fmt: skip
    return (
        f"The {stratum_words(stratum)} effect assumes principal ignorability (mean form): "
        + " and ".join(needed)
        + ", with monotonicity "
        + ("S(1) >= S(0)" if monotonicity == "increasing" else "S(1) <= S(0)")
        + ". These assumptions cannot be checked from the data."
    )


def require_always_survivor(estimator, what):
    """Refuse ``what`` for an estimator fitted for another stratum than the always-survivors."""
    stratum = getattr(estimator, "stratum_", "always_survivor")
    if stratum != "always_survivor":
        raise ValueError(
            f"{what}: not available yet for an estimator fitted with `stratum`="
            f"{getattr(estimator, 'stratum', stratum)!r} (only for the always-survivor stratum). "
            "Refit with stratum='always_survivor', or report the stratum's mean effect without "
            "it."
        )


def stratum_role(stratum, monotonicity):
    """The :class:`Stratum` (oriented role) of a canonical stratum name."""
    return ROLES[STRATA[monotonicity][stratum]]
