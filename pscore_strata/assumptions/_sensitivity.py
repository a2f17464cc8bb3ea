"""Sensitivity of the SACE to principal ignorability and monotonicity, without refitting.

Every quantity is a formula over the per-row nuisance predictions a fitted estimator stored
(``est.nuisance_``, ``est.training_data_``), written in the oriented view of
:func:`pscore_strata.estimands._view.orient`: the *mixed* arm's survivors are
always-survivors plus the *helped* stratum (protected units when treatment can only help
survival), the *pure* arm's are always-survivors plus the *opposite* stratum, which monotonicity
rules out.

Parameters (Ding & Lu 2017; Jiang, Yang & Ding 2022):

- ``pi_difference`` ``delta = E[Y|helped,X] - E[Y|always,X]`` in the mixed arm;
- ``pi_ratio`` ``eps = E[Y|helped,X] / E[Y|always,X]`` in the mixed arm;
- ``harmed_ratio`` ``xi = e_opposite(X) / e_helped(X)``, in ``[0, 1)``.

With ``xi``, ``e_helped = (p_m - p_p)/(1 - xi)`` and ``e_always = (p_p - xi p_m)/(1 - xi)``; the
always-survivor mean in the mixed arm is ``m_m - delta e_helped/p_m`` or
``m_m p_m/(e_always + eps e_helped)``, in the pure arm ``m_p`` (principal ignorability extended
to the opposite stratum), and ``mu = E[e_always mu(X)] / E[e_always]``. The derivation of the
influence functions is in docs/guide/derivations/bounds-sensitivity.md.
"""

from __future__ import annotations

import itertools
import numbers
import weakref

import numpy as np
import pandas as pd
from sklearn.utils.validation import check_is_fitted

from .._validation import check_level
from ..estimands._methods import method_of
from ..estimands._setting import Setting
from ..estimands._strata import stratum_role, stratum_words
from ..estimands._view import orient, scale_effect
from ..estimators._summary import CAUTIONS
from ..inference._standard_errors import estimator_dof, normal_interval
from ._paths import SensitivityPath

__all__ = ["sensitivity_grid", "adjusted_effect"]

NULL_SETTING = {"pi_difference": 0.0, "pi_ratio": 1.0, "harmed_ratio": 0.0,
                "pi_difference_doomed": 0.0}  # fmt: skip


def _check_estimator(estimator):
    """The estimator's method record (:data:`pscore_strata.estimands.METHODS`)."""
    method = method_of(estimator)
    check_is_fitted(estimator, "nuisance_")
    return method


def _check_relevant(estimator, names):
    """Refuse a parameter that the fitted stratum's effect does not depend on.

    The always-survivor effect rests on the mixed arm's intermediate-1 cell only; the doomed
    effect on the pure arm's intermediate-0 cell only; the helped stratum's on both
    (docs/guide/derivations/strata.md section 7).
    """
    stratum = getattr(estimator, "stratum_", "always_survivor")
    role = stratum_role(stratum, estimator.monotonicity).role
    words = stratum_words(stratum)
    for name in names:
        if role != "always" and name == "outcome_shift":
            raise ValueError(
                f"`outcome_shift` is not available yet for the {words} effect (only for the "
                "always-survivor stratum); use the principal-ignorability parameters, or refit "
                "with stratum='always_survivor'."
            )
        if role == "doomed" and name in ("pi_difference", "pi_ratio"):
            raise ValueError(
                f"`{name}` does not change the {words} effect: it describes the mixed arm's units "
                "with intermediate 1, and the doomed stratum has none there. Use "
                "`pi_difference_doomed` (the pure arm's units with intermediate 0) or "
                "`harmed_ratio`."
            )
        if role == "always" and name == "pi_difference_doomed":
            raise ValueError(
                "`pi_difference_doomed` does not change the always-survivor effect: it describes "
                "units with intermediate 0, which the always-survivors never are. Use "
                "`pi_difference`, `pi_ratio` or `harmed_ratio`."
            )


def _check_value(name, value):
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real):
        raise TypeError(f"`{name}` values must be real numbers; got {value!r}.")
    value = float(value)
    if not np.isfinite(value):
        raise ValueError(f"`{name}` values must be finite; got {value}.")
    with np.errstate(over="ignore"):
        # Standard errors sum n squared influence values proportional to the parameter; the
        # margin 1e6 leaves room for a million rows.
        overflows = not np.isfinite(value * value * 1e6)
    if overflows:
        raise ValueError(
            f"`{name}` value {value:.3g} is too large: its square overflows double precision, "
            "so the standard error would be infinite. Use values on the outcome's scale."
        )
    if name == "pi_ratio" and value <= 0:
        raise ValueError(f"`pi_ratio` values must be positive; got {value}.")
    if name == "harmed_ratio" and not 0 <= value < 1:
        raise ValueError(f"`harmed_ratio` values must lie in [0, 1); got {value}.")
    return value


def adjusted_effect(estimator, *, pi_ratio=None, pi_difference=None, harmed_ratio=None,
                    pi_difference_doomed=None):  # fmt: skip
    """The fitted stratum's effect and influence values at one setting of the sensitivity
    parameters (those of :func:`sensitivity_grid`, one value each).

    Parameters
    ----------
    estimator : PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust, fitted
    pi_ratio, pi_difference, harmed_ratio, pi_difference_doomed : float, optional
        As in :func:`sensitivity_grid`.

    Returns
    -------
    effect : float
    influence : ndarray of shape (n_samples,)
    n_clipped : int
        Rows whose implied always-survivor score was negative (set to 0).
    """
    method = _check_estimator(estimator)
    _check_one_scale(pi_ratio, pi_difference)
    given = {"pi_ratio": pi_ratio, "pi_difference": pi_difference, "harmed_ratio": harmed_ratio,
             "pi_difference_doomed": pi_difference_doomed}  # fmt: skip
    _check_relevant(estimator, [name for name, value in given.items() if value is not None])
    eps = None if pi_ratio is None else _check_value("pi_ratio", pi_ratio)
    delta = 0.0 if pi_difference is None else _check_value("pi_difference", pi_difference)
    xi = 0.0 if harmed_ratio is None else _check_value("harmed_ratio", harmed_ratio)
    delta_0 = (0.0 if pi_difference_doomed is None
               else _check_value("pi_difference_doomed", pi_difference_doomed))  # fmt: skip
    setting = Setting(delta, eps, xi, delta_0)
    return _adjusted(method, estimator, estimator.nuisance_, setting)


def _check_one_scale(pi_ratio, pi_difference):
    if pi_ratio is not None and pi_difference is not None:
        raise ValueError(
            "Give `pi_ratio` or `pi_difference`, not both: they are two scales for the same "
            "departure from principal ignorability."
        )


def _adjusted(method, estimator, nuisance, setting):
    data = estimator.training_data_
    o = orient(data, nuisance, estimator.monotonicity, getattr(estimator, "stratum_",
                                                               "always_survivor"))
    parts, clipped = method.adjusted(o, setting)
    effect, influence = scale_effect(parts, estimator.scale)
    return float(effect), influence, clipped


def sensitivity_path(estimator):
    """The :class:`._paths.SensitivityPath` over the estimator's stored predictions.

    Kept per fitted estimator (weakly: it goes with the estimator), so that the grids and
    tipping points of one estimator share the oriented views, the affine and harmed-ratio paths
    and the answers at settings already evaluated. A refit (new stored predictions) or a change
    of ``scale`` or ``monotonicity`` gets a new path.
    """
    method = _check_estimator(estimator)
    fits = getattr(estimator, "_repeat_fits", None) or [estimator.nuisance_]
    key = (method, estimator.training_data_, *fits, estimator.scale, estimator.monotonicity,
           getattr(estimator, "stratum_", "always_survivor"))  # fmt: skip
    try:
        cached = _PATHS.get(estimator)
    except TypeError:  # not hashable or not weakly referable: no cache
        return SensitivityPath(estimator, method)
    if cached is not None and len(cached[0]) == len(key) and all(
            a is b or (isinstance(a, str) and a == b)
            for a, b in zip(cached[0], key, strict=True)):  # fmt: skip
        return cached[1]
    path = SensitivityPath(estimator, method)
    _PATHS[estimator] = (key, path)
    return path


# Fitted estimator -> (what its path was built from, the path); entries go with the estimator.
_PATHS = weakref.WeakKeyDictionary()


def _effect_and_error(estimator, setting, path=None):
    """Effect and standard error at one setting, combined over cross-fitting repeats.

    Each repeat's nuisance fit gives its own adjusted effect; they are combined as the estimator
    combines its repeats (median, variance adding the spread between repeats), so the null
    setting reproduces ``effect_`` and ``std_error_``. Returns ``(effect, std_error, clipped)``.
    """
    _check_estimator(estimator)
    _check_one_scale(setting.get("pi_ratio"), setting.get("pi_difference"))
    path = path or sensitivity_path(estimator)
    return path.evaluate(setting)


def _grid_axes(pi_ratio, pi_difference, harmed_ratio, pi_difference_doomed=None):
    given = {
        name: values
        for name, values in (
            ("pi_ratio", pi_ratio),
            ("pi_difference", pi_difference),
            ("harmed_ratio", harmed_ratio),
            ("pi_difference_doomed", pi_difference_doomed),
        )
        if values is not None
    }
    if not given:
        raise ValueError(
            "Give at least one of `pi_ratio`, `pi_difference`, `harmed_ratio`, "
            "`pi_difference_doomed` or `outcome_shift` (a number or a list of values)."
        )
    axes = {}
    for name, values in given.items():
        values = np.atleast_1d(np.asarray(values, dtype=object))
        if values.ndim != 1 or values.size == 0:
            raise ValueError(f"`{name}` must be a number or a non-empty 1-d list of numbers.")
        axes[name] = [_check_value(name, v) for v in values]
    return axes


def sensitivity_grid(
    estimator, *, pi_ratio=None, pi_difference=None, harmed_ratio=None, level=0.95,
    outcome_shift=None, pi_difference_doomed=None,
):  # fmt: skip
    """The effect over a grid of sensitivity parameters, from a fitted estimator, no refitting.

    The effect is that of the stratum the estimator was fitted for (``stratum_``; the SACE by
    default). Each parameter describes one observed cell that mixes two strata, so each
    stratum's effect depends on some of them only: the always-survivors' on ``pi_difference``
    (or ``pi_ratio``) and ``harmed_ratio``; the helped (protected or harmed; compliers) on all
    four; the doomed on ``pi_difference_doomed`` and ``harmed_ratio``. A parameter the effect
    does not depend on is refused.

    Parameters
    ----------
    estimator : PrincipalScoreWeighting, OutcomeRegression or MultiplyRobust, fitted
    pi_ratio, pi_difference : float or sequence of float, optional
        Departure from principal ignorability in the mixed arm (treated, for increasing
        monotonicity), as a ratio (``1`` = none) or a difference (``0`` = none) of the helped
        stratum's mean outcome to the always-survivors' given X. Give at most one.
    harmed_ratio : float or sequence of float in [0, 1), optional
        Size of the stratum monotonicity rules out relative to the helped one (``0`` = none).
    level : float, default=0.95
    outcome_shift : float, sequence of float or dict, optional
        Outcomes missing not at random (estimators fitted with ``missing="at_random"``): the
        mean outcome of survivors without an observed outcome is that of responders with the
        same X and arm plus ``outcome_shift`` (the delta adjustment; ``0`` = missing at
        random). A number or list applies to both arms (column ``outcome_shift``); a dict
        ``{"treated": [...], "control": [...]}`` sets each arm (columns
        ``outcome_shift_treated``, ``outcome_shift_control``, every combination). Give it
        alone, not with the other parameters.
    pi_difference_doomed : float or sequence of float, optional
        Departure from principal ignorability among the pure arm's units with intermediate 0
        (control, for increasing monotonicity), which mix the helped and the doomed strata:
        the helped stratum's mean outcome minus the doomed's given X (``0`` = none). For the
        effects in the helped and doomed strata (outcome measured for everyone).

    Returns
    -------
    DataFrame
        One row per combination of the given values: the parameter columns, ``effect``,
        ``std_error``, ``ci_low``, ``ci_high`` and ``n_rows_clipped``. At the null values the
        row reproduces the estimator's own effect and standard error (cross-fitting repeats
        are combined as the estimator combines them). ``attrs["notes"]`` holds the cautions.

    Notes
    -----
    Standard errors come from influence values. For the multiply robust estimator they are
    the adjusted efficient influence function; for weighting and outcome regression they
    include the M-estimation terms of the default logistic/linear models (as the estimators
    do) and otherwise ignore the estimation of the nuisance models (a bootstrap of the
    estimator would be needed then). The always-survivor stratum is latent and the parameters
    cannot be estimated from the data: read the grid as "how strong would a violation have to
    be", and consult a qualified statistician before drawing conclusions.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> data = ps.datasets.make_truncation(2000, pi_difference=0.5, random_state=0)
    >>> est = ps.MultiplyRobust().fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> grid = ps.sensitivity_grid(est, pi_difference=[0.0, 0.5], harmed_ratio=[0.0, 0.2])
    >>> grid.shape
    (4, 7)
    >>> bool(grid["effect"].iloc[0] == est.effect_)
    True
    """
    if outcome_shift is not None:
        _check_estimator(estimator)
        _check_relevant(estimator, ["outcome_shift"])
        if any(v is not None for v in (pi_ratio, pi_difference, harmed_ratio)):
            raise ValueError(
                "Give `outcome_shift` on its own: combining it with `pi_ratio`, `pi_difference` "
                "or `harmed_ratio` is not supported; run two grids."
            )
        from ._outcome_shift import outcome_shift_grid

        return outcome_shift_grid(estimator, outcome_shift, check_level(level))
    axes = _grid_axes(pi_ratio, pi_difference, harmed_ratio, pi_difference_doomed)
    _check_estimator(estimator)
    _check_relevant(estimator, list(axes))
    path = sensitivity_path(estimator)
    log_scale = estimator.scale != "difference"
    rows = []
    for values in itertools.product(*axes.values()):
        setting = dict(zip(axes, values, strict=True))
        effect, se, clipped = _effect_and_error(estimator, setting, path)
        low, high = normal_interval(effect, se, level, log_scale, estimator_dof(estimator))
        rows.append({**setting, "effect": effect, "std_error": se, "ci_low": low,
                     "ci_high": high, "n_rows_clipped": clipped})  # fmt: skip
    table = pd.DataFrame(rows)
    table.attrs["notes"] = [
        "The sensitivity parameters cannot be estimated from the data: read the grid as how "
        "strong a departure from the assumptions would have to be to change the conclusion.",
        CAUTIONS,
    ]
    most = int(table["n_rows_clipped"].max())
    if most:
        # Clipping makes the adjusted estimate jump (tipping_point refuses roots there).
        table.attrs["notes"].insert(1, (
            f"At {int((table['n_rows_clipped'] > 0).sum())} of {len(table)} settings some rows' "
            f"implied always-survivor score was negative and was set to 0 (up to {most} of "
            f"{estimator.training_data_.n_samples} rows; column n_rows_clipped): there the "
            "harmed_ratio is too large for those rows and the estimate describes the clipping "
            "as much as the data."
        ))  # fmt: skip
    return table
