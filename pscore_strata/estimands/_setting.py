"""Sensitivity settings and the target stratum's principal score under them.

A :class:`Setting` holds the three sensitivity parameters (Ding & Lu 2017; Jiang, Yang & Ding
2022; derivation in docs/guide/derivations/bounds-sensitivity.md), in the oriented view:

- ``pi_difference`` ``delta = E[Y|helped,X] - E[Y|always,X]`` in the mixed arm;
- ``pi_ratio`` ``eps = E[Y|helped,X] / E[Y|always,X]`` in the mixed arm (``None``: unused);
- ``harmed_ratio`` ``xi = e_opposite(X) / e_helped(X)``, in ``[0, 1)``.

The null setting (``delta = 0``, no ``eps``, ``xi = 0``) is principal ignorability with
monotonicity, and the formulas at it are the estimators themselves.

:class:`Scores` evaluates, on one oriented view, the target stratum's principal score
``e = a p_mixed + b p_pure + c`` (with ``xi``: ``e_always = (p_p - xi p_m)/(1 - xi)``, clipped
at 0 where negative) and the mixed cell's functional ``G(m) = e mu_stratum(X)``, linear in the
cell's outcome mean ``m``: ``e m`` under principal ignorability, ``e m - delta e e_h / p_m`` or
``e m p_m / (e + eps e_h)`` away from it (``e_h = (p_m - p_p)/(1 - xi)``, the helped stratum's
score).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Setting", "NULL_SETTING", "Scores"]


@dataclass(frozen=True)
class Setting:
    """One setting of the sensitivity parameters (checked by the caller).

    Attributes
    ----------
    pi_difference : float, default=0.0
        ``delta = E[Y|helped,X] - E[Y|always,X]`` in the mixed arm.
    pi_ratio : float or None, default=None
        ``eps = E[Y|helped,X] / E[Y|always,X]`` in the mixed arm (``None``: unused).
    harmed_ratio : float in [0, 1), default=0.0
        ``xi = e_opposite(X) / e_helped(X)``.
    """

    pi_difference: float = 0.0
    pi_ratio: float | None = None
    harmed_ratio: float = 0.0

    @property
    def is_null(self):
        """Whether this is principal ignorability with monotonicity (the estimators)."""
        eps_null = self.pi_ratio is None or self.pi_ratio == 1.0
        return eps_null and self.pi_difference == 0.0 and self.harmed_ratio == 0.0


NULL_SETTING = Setting()


def times(coefficient, values):
    """``coefficient * values``, or 0.0 for a scalar zero coefficient (no term at all)."""
    if np.isscalar(coefficient) and coefficient == 0:
        return 0.0
    return coefficient * values


class Scores:
    """The target stratum's score and mixed-cell functional on a view, at a setting.

    Attributes
    ----------
    e, a, b : arrays (or scalars for ``a``, ``b``)
        Score and its coefficients on ``p_mixed`` and ``p_pure``.
    pure_is_cell : bool
        ``e`` equals the pure cell's own probability identically (the always stratum at
        ``xi = 0``): the pure cell's weight ``e / q`` is then exactly 1.
    plain : bool
        ``G(m) = e m`` (no departure from principal ignorability in the mixed cell).
    clipped : int
        Rows whose score under ``xi`` was negative and set to 0.
    """

    def __init__(self, o, setting=NULL_SETTING):
        spec = o.stratum
        self.o, self.setting = o, setting
        if not setting.is_null and spec.role != "always":
            raise ValueError(
                "The sensitivity parameters pi_difference, pi_ratio and harmed_ratio are "
                "defined for the always-survivor stratum only."
            )
        xi = setting.harmed_ratio
        self.clipped = 0
        if xi == 0.0:
            self.a, self.b = spec.mixed_coefficient, spec.pure_coefficient
            self.e = spec.score(o.p_mixed, o.p_pure)
            self.pure_is_cell = spec.role == "always"
        else:
            p_p, p_m = o.p_pure, o.p_mixed
            self.e = (p_p - xi * p_m) / (1 - xi)
            self.a, self.b = -xi / (1 - xi), 1 / (1 - xi)
            negative = self.e < 0
            if negative.any():
                # A negative always-survivor score is impossible: xi is too large for these rows.
                self.clipped = int(negative.sum())
                self.e = np.where(negative, 0.0, self.e)
                self.a = np.where(negative, 0.0, self.a)
                self.b = np.where(negative, 0.0, self.b)
            self.pure_is_cell = False
        # Other strata: null setting only (checked above), so G(m) = e m.
        always = spec.role == "always"
        self.eps = setting.pi_ratio if always else None
        self.delta = setting.pi_difference if always else 0.0
        self.plain = self.delta == 0.0 and self.eps is None

    def g(self, m):
        """``(G, dG/dp_pure, dG/dp_mixed, dG/dm)`` of the mixed cell at outcome mean ``m``."""
        e_a, a_p, a_m = self.e, self.b, self.a
        if self.plain:
            return e_a * m, times(a_p, m), times(a_m, m), e_a
        xi, p_m, p_p = self.setting.harmed_ratio, self.o.p_mixed, self.o.p_pure
        e_h, h = (p_m - p_p) / (1 - xi), 1 / (1 - xi)
        if self.eps is not None:
            eps = self.eps
            denominator = e_a + eps * e_h
            d_pp = a_p - eps * h
            d_pm = a_m + eps * h
            k = e_a * p_m / denominator
            k_pp = (a_p * p_m * denominator - e_a * p_m * d_pp) / denominator**2
            k_pm = ((a_m * p_m + e_a) * denominator - e_a * p_m * d_pm) / denominator**2
            return k * m, k_pp * m, k_pm * m, k
        delta = self.delta
        shift = e_a * e_h / p_m
        shift_pp = (a_p * e_h - e_a * h) / p_m
        shift_pm = (a_m * e_h + e_a * h) / p_m - shift / p_m
        return e_a * m - delta * shift, a_p * m - delta * shift_pp, a_m * m - delta * shift_pm, e_a
