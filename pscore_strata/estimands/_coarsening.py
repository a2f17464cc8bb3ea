"""The oriented view of missing-at-random data: observation indicators over their probabilities.

Monotone coarsening (Tsiatis 2006, *Semiparametric Theory and Missing Data*; derivation in
docs/guide/derivations/missing-data.md): the full-data estimating functions are kept, and each
full-data residual is multiplied by the indicator that it is observed over the probability of
that, given X and what came before. For the SACE formulas this means, in each arm,

- ``A -> A C / c(X)`` in the survival residuals (the status is observed when ``C = 1``);
- ``A S -> A C S R / (c(X) r(X))`` in the outcome terms (the outcome is observed when also
  ``R = 1``).

With ``c = r = 1`` (nothing missing) these are the full-data indicators. The strata other than
the always-survivors also use the outcomes of units with intermediate 0:
``A (1 - S) -> A C (1 - S) R / (c(X) r0(X))`` with the response model ``r0`` of those units.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Coarsening", "coarsening", "parametric_view", "weight_derivatives"]


@dataclass(frozen=True)
class Coarsening:
    """Per-row observation indicators, probabilities and the weighted indicators, by role."""

    known: np.ndarray  # C: survival status known
    responded: np.ndarray  # R: outcome observed (0 where the status is unknown)
    c_mixed: np.ndarray
    c_pure: np.ndarray
    r_mixed: np.ndarray
    r_pure: np.ndarray
    known_mixed: np.ndarray  # A C / c_mixed
    known_pure: np.ndarray  # (1 - A) C / c_pure
    observed_mixed: np.ndarray  # A C S R / (c_mixed r_mixed)
    observed_pure: np.ndarray  # (1 - A) C S R / (c_pure r_pure)
    # Units with intermediate 0 (strata other than the always-survivors; None otherwise).
    r_mixed0: np.ndarray | None = None
    r_pure0: np.ndarray | None = None
    observed_mixed0: np.ndarray | None = None  # A C (1 - S) R / (c_mixed r_mixed0)
    observed_pure0: np.ndarray | None = None

    def observed(self, role, s):
        """The observed indicator of the cell ``(role, s)`` over its observation probability."""
        if s == 1:
            return self.observed_mixed if role == "mixed" else self.observed_pure
        cell = self.observed_mixed0 if role == "mixed" else self.observed_pure0
        if cell is None:
            raise ValueError("internal: no response model for units with intermediate 0")
        return cell


def _over(numerator, denominator):
    out = np.zeros(np.broadcast(numerator, denominator).shape)
    np.divide(numerator, denominator, out=out, where=numerator != 0)
    return out


def coarsening(data, nuisance, mixed_arm, pure_arm):
    """The :class:`Coarsening` of ``data``, or ``None`` when nothing is missing."""
    if data.status_known is None or nuisance.missingness is None:
        return None
    c, r = nuisance.missingness["follow_up"], nuisance.missingness["response"]
    A = (data.treatment == mixed_arm).astype(float)
    C = data.status_known.astype(float)
    R = data.outcome_observed.astype(float)
    S = data.survival.astype(float)
    zero = {}
    if (mixed_arm, 0) in r:
        r0 = {arm: r[(arm, 0)] for arm in (0, 1)}
        zero = dict(
            r_mixed0=r0[mixed_arm], r_pure0=r0[pure_arm],
            observed_mixed0=_over(A * C * (1 - S) * R, c[mixed_arm] * r0[mixed_arm]),
            observed_pure0=_over((1 - A) * C * (1 - S) * R, c[pure_arm] * r0[pure_arm]),
        )  # fmt: skip
    return Coarsening(
        known=C,
        responded=R,
        c_mixed=c[mixed_arm],
        c_pure=c[pure_arm],
        r_mixed=r[mixed_arm],
        r_pure=r[pure_arm],
        known_mixed=_over(A * C, c[mixed_arm]),
        known_pure=_over((1 - A) * C, c[pure_arm]),
        observed_mixed=_over(A * C * S * R, c[mixed_arm] * r[mixed_arm]),
        observed_pure=_over((1 - A) * C * S * R, c[pure_arm] * r[pure_arm]),
        **zero,
    )


def parametric_view(source, mixed_arm, pure_arm):
    """Sandwich pieces of the fitted follow-up and response models, keyed by role."""
    view = {}
    for kind, prefix in (("follow_up", "c"), ("response", "r")):
        for arm, role in ((mixed_arm, "mixed"), (pure_arm, "pure")):
            if (kind, arm) in source:
                view[f"{prefix}_{role}"] = source[(kind, arm)]
            if (kind, arm, 0) in source:
                view[f"{prefix}_{role}0"] = source[(kind, arm, 0)]
    return view


def weight_derivatives(o, f, role, s=1):
    """d f / d c and d f / d r of an estimating function ``f`` proportional to ``1/(c r)``,
    for the cell of ``role`` with intermediate ``s`` (its own response model when ``s = 0``)."""
    co = o.coarsening
    if co is None:
        return {}
    c = co.c_mixed if role == "mixed" else co.c_pure
    if s == 1:
        r, key = (co.r_mixed if role == "mixed" else co.r_pure), f"r_{role}"
    else:
        r, key = (co.r_mixed0 if role == "mixed" else co.r_pure0), f"r_{role}0"
    return {f"c_{role}": -_over(f, c), key: -_over(f, r)}

