"""The oriented view of missing-at-random data: observation indicators over their probabilities.

Monotone coarsening (Tsiatis 2006, *Semiparametric Theory and Missing Data*; derivation in
docs/guide/derivations/missing-data.md): the full-data estimating functions are kept, and each
full-data residual is multiplied by the indicator that it is observed over the probability of
that, given X and what came before. For the SACE formulas this means, in each arm,

- ``A -> A C / c(X)`` in the survival residuals (the status is observed when ``C = 1``);
- ``A S -> A C S R / (c(X) r(X))`` in the outcome terms (the outcome is observed when also
  ``R = 1``).

With ``c = r = 1`` (nothing missing) these are the full-data indicators.
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
    )


def parametric_view(source, mixed_arm, pure_arm):
    """Sandwich pieces of the fitted follow-up and response models, keyed by role."""
    view = {}
    for kind, prefix in (("follow_up", "c"), ("response", "r")):
        for arm, role in ((mixed_arm, "mixed"), (pure_arm, "pure")):
            if (kind, arm) in source:
                view[f"{prefix}_{role}"] = source[(kind, arm)]
    return view


def weight_derivatives(o, f, role):
    """d f / d c and d f / d r of an estimating function ``f`` proportional to ``1/(c r)``."""
    co = o.coarsening
    if co is None:
        return {}
    c, r = (co.c_mixed, co.r_mixed) if role == "mixed" else (co.c_pure, co.r_pure)
    return {f"c_{role}": -_over(f, c), f"r_{role}": -_over(f, r)}

