"""Sensitivity settings and the target stratum's principal score under them.

A :class:`Setting` holds the three sensitivity parameters (Ding & Lu 2017; Jiang, Yang & Ding
2022; derivation in docs/guide/derivations/bounds-sensitivity.md), in the oriented view:

- ``pi_difference`` ``delta = E[Y|helped,X] - E[Y|always,X]`` in the mixed arm;
- ``pi_ratio`` ``eps = E[Y|helped,X] / E[Y|always,X]`` in the mixed arm (``None``: unused);
- ``harmed_ratio`` ``xi = e_opposite(X) / e_helped(X)``, in ``[0, 1)``;
- ``pi_difference_doomed`` ``delta_0 = E[Y|helped,X] - E[Y|doomed,X]`` among the pure arm's
  units with intermediate 0 (the cell that the helped and doomed strata share; used by the
  helped and doomed strata's effects, docs/guide/derivations/strata.md section 7).

The null setting (``delta = 0``, no ``eps``, ``xi = 0``) is principal ignorability with
monotonicity, and the formulas at it are the estimators themselves.

:class:`Scores` evaluates, on one oriented view, the target stratum's principal score
``e = a p_mixed + b p_pure + c`` (with ``xi``: ``e_always = (p_p - xi p_m)/(1 - xi)``, clipped
at 0 where negative, ``e_helped = p_m - e_always``, ``e_doomed = 1 - p_p - e_helped``) and, in
each of the stratum's cells, the functional ``G(m) = e mu_stratum(X)``, linear in the cell's
outcome mean ``m``. Under principal ignorability ``G = e m``. In the mixed arm's
intermediate-1 cell (always-survivors and helped) ``G_always = e_a m - delta e_a e_h / p_m``
or ``e_a m p_m / (e_a + eps e_h)`` (``e_h = (p_m - p_p)/(1 - xi)``), and ``G_helped = e_h m +
delta e_a e_h / p_m`` or ``eps e_h m p_m / (e_a + eps e_h)`` (the two strata's means average to
the cell's mean); in the pure arm's intermediate-0 cell (helped and doomed)
``G_helped = e_h m + delta_0 e_h e_d / (1 - p_p)`` and ``G_doomed = e_d m - delta_0 e_h e_d /
(1 - p_p)``.
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
    pi_difference_doomed : float, default=0.0
        ``delta_0 = E[Y|helped,X] - E[Y|doomed,X]`` among the pure arm's units with
        intermediate 0 (used by the helped and doomed strata's effects).
    """

    pi_difference: float = 0.0
    pi_ratio: float | None = None
    harmed_ratio: float = 0.0
    pi_difference_doomed: float = 0.0

    @property
    def is_null(self):
        """Whether this is principal ignorability with monotonicity (the estimators)."""
        eps_null = self.pi_ratio is None or self.pi_ratio == 1.0
        return (eps_null and self.pi_difference == 0.0 and self.harmed_ratio == 0.0
                and self.pi_difference_doomed == 0.0)  # fmt: skip


NULL_SETTING = Setting()


def times(coefficient, values):
    """``coefficient * values``, or 0.0 for a scalar zero coefficient (no term at all)."""
    if np.isscalar(coefficient) and coefficient == 0:
        return 0.0
    return coefficient * values


class Scores:
    """The target stratum's score and cell functionals on a view, at a setting.

    Attributes
    ----------
    e, a, b : arrays (or scalars for ``a``, ``b``)
        Score and its coefficients on ``p_mixed`` and ``p_pure``.
    pure_is_cell : bool
        ``e`` equals the pure cell's own probability identically (the always stratum at
        ``xi = 0``): the pure cell's weight ``e / q`` is then exactly 1.
    clipped : int
        Rows whose score under ``xi`` was negative and set to 0.
    """

    def __init__(self, o, setting=NULL_SETTING):
        spec = o.stratum
        self.o, self.setting, self.role = o, setting, spec.role
        p_m, p_p = o.p_mixed, o.p_pure
        xi = setting.harmed_ratio
        self.clipped = 0
        self.pure_is_cell = xi == 0.0 and spec.role == "always"
        if xi == 0.0:
            self.a, self.b = spec.mixed_coefficient, spec.pure_coefficient
            self.e = spec.score(p_m, p_p)
            self.always = (p_p, 0.0, 1.0)
        else:
            e_a = (p_p - xi * p_m) / (1 - xi)
            a_a, b_a = -xi / (1 - xi), 1 / (1 - xi)
            negative = e_a < 0
            if negative.any():
                # A negative always-survivor score is impossible: xi is too large for these rows.
                e_a = np.where(negative, 0.0, e_a)
                a_a, b_a = np.where(negative, 0.0, a_a), np.where(negative, 0.0, b_a)
            self.always = (e_a, a_a, b_a)
            if spec.role == "always":
                e, a, b = e_a, a_a, b_a
            elif spec.role == "changed":  # the mixed arm's intermediate-1 cell: p_m = e_a + e_h
                e, a, b = p_m - e_a, 1 - a_a, -b_a
            else:  # the pure arm's intermediate-0 cell: 1 - p_p = e_h + e_d
                e, a, b = 1 - p_p - p_m + e_a, a_a - 1, b_a - 1
            low = e < 0
            if spec.role != "always" and low.any():
                negative = negative | low
                e, a, b = (np.where(low, 0.0, v) for v in (e, a, b))
            self.e, self.a, self.b = e, a, b
            self.clipped = int(np.count_nonzero(negative))
        always = spec.role == "always"
        changed = spec.role == "changed"
        # Which cells depart from principal ignorability at this setting.
        mixed_shift = setting.pi_difference != 0.0 or setting.pi_ratio is not None
        self._adjusted = {
            "mixed": mixed_shift and (always or changed),
            "pure": setting.pi_difference_doomed != 0.0 and not always,
        }

    def plain(self, role):
        """Whether ``G = e m`` in the stratum's cell of that arm."""
        return not self._adjusted[role]

    def g(self, role, m):
        """``(G, dG/dp_pure, dG/dp_mixed, dG/dm)`` in the stratum's cell of ``role``."""
        if self.plain(role):
            return self.e * m, times(self.b, m), times(self.a, m), self.e
        if role == "mixed":
            return self._always_mixed(m) if self.role == "always" else self._helped_mixed(m)
        return self._zero_cell(m)

    def _always_mixed(self, m):
        """The always-survivors' functional in the mixed arm's intermediate-1 cell."""
        e_a, a_m, a_p = self.always
        xi, p_m, p_p = self.setting.harmed_ratio, self.o.p_mixed, self.o.p_pure
        e_h, h = (p_m - p_p) / (1 - xi), 1 / (1 - xi)
        if self.setting.pi_ratio is not None:
            eps = self.setting.pi_ratio
            denominator = e_a + eps * e_h
            d_pp = a_p - eps * h
            d_pm = a_m + eps * h
            k = e_a * p_m / denominator
            k_pp = (a_p * p_m * denominator - e_a * p_m * d_pp) / denominator**2
            k_pm = ((a_m * p_m + e_a) * denominator - e_a * p_m * d_pm) / denominator**2
            return k * m, k_pp * m, k_pm * m, k
        delta = self.setting.pi_difference
        shift = e_a * e_h / p_m
        shift_pp = (a_p * e_h - e_a * h) / p_m
        shift_pm = (a_m * e_h + e_a * h) / p_m - shift / p_m
        return e_a * m - delta * shift, a_p * m - delta * shift_pp, a_m * m - delta * shift_pm, e_a

    def _helped_mixed(self, m):
        """The helped stratum's functional in the mixed arm's intermediate-1 cell: its mean is
        the always-survivors' plus ``delta`` (times ``eps`` on the ratio scale)."""
        e_a, a_a, b_a = self.always
        e_h, a_h, b_h = self.e, self.a, self.b
        p_m = self.o.p_mixed
        if self.setting.pi_ratio is not None:
            eps = self.setting.pi_ratio
            denominator = e_a + eps * e_h
            d_pp, d_pm = b_a + eps * b_h, a_a + eps * a_h
            k = eps * e_h * p_m / denominator
            k_pp = eps * p_m * (b_h * denominator - e_h * d_pp) / denominator**2
            k_pm = eps * ((a_h * p_m + e_h) * denominator - e_h * p_m * d_pm) / denominator**2
            return k * m, k_pp * m, k_pm * m, k
        delta = self.setting.pi_difference
        shift = e_a * e_h / p_m
        shift_pp = (b_a * e_h + e_a * b_h) / p_m
        shift_pm = (a_a * e_h + e_a * a_h) / p_m - shift / p_m
        return e_h * m + delta * shift, b_h * m + delta * shift_pp, a_h * m + delta * shift_pm, e_h

    def _zero_cell(self, m):
        """The helped or doomed stratum's functional in the pure arm's intermediate-0 cell,
        which the two share: the helped mean is the doomed's plus ``delta_0``."""
        u = 1 - self.o.p_pure
        e_t, a_t, b_t = self.e, self.a, self.b  # the target stratum (clipped under xi)
        e_o, a_o, b_o = u - e_t, -a_t, -1 - b_t  # the other stratum of the cell
        sign = 1.0 if self.role == "changed" else -1.0
        delta = sign * self.setting.pi_difference_doomed
        shift = e_t * e_o / u
        shift_pp = (b_t * e_o + e_t * b_o) / u + shift / u
        shift_pm = (a_t * e_o + e_t * a_o) / u
        return e_t * m + delta * shift, b_t * m + delta * shift_pp, a_t * m + delta * shift_pm, e_t
