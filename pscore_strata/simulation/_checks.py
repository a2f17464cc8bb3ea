"""Argument checks of the simulation harness; each error names the argument and the fix."""

from __future__ import annotations

import itertools
import json
import numbers

import numpy as np

from ..datasets import SCENARIOS


def check_estimators(estimators):
    if isinstance(estimators, dict):
        named = dict(estimators)
    elif isinstance(estimators, list | tuple):
        named = {}
        for est in estimators:
            name = type(est).__name__
            if name in named:
                raise ValueError(
                    f"`estimators` holds two {name} instances; pass a dict that gives each "
                    "estimator its own name, e.g. {'weighting_a': ..., 'weighting_b': ...}."
                )
            named[name] = est
    else:
        raise TypeError(
            "`estimators` must be a dict mapping names to unfitted estimators, or a list of "
            f"estimators; got {type(estimators).__name__}."
        )
    if not named:
        raise ValueError("`estimators` is empty; pass at least one estimator.")
    for name, est in named.items():
        if not isinstance(name, str) or not name:
            raise TypeError(f"`estimators` names must be non-empty strings; got {name!r}.")
        if not (hasattr(est, "fit") and hasattr(est, "get_params")):
            raise TypeError(
                f"`estimators[{name!r}]` must be an unfitted scikit-learn style estimator (with "
                f"fit and get_params); got {type(est).__name__}."
            )
    return named


def check_scenarios(scenarios):
    if isinstance(scenarios, str) or callable(scenarios):
        scenarios = [scenarios]
    if isinstance(scenarios, dict):
        items = list(scenarios.items())
    elif isinstance(scenarios, list | tuple):
        items = [(s if isinstance(s, str) else getattr(s, "__name__", None), s) for s in scenarios]
    else:
        raise TypeError(
            "`scenarios` must be a scenario name, a callable, a list of them, or a dict mapping "
            f"names to them; got {type(scenarios).__name__}."
        )
    if not items:
        raise ValueError("`scenarios` is empty; pass at least one scenario name or callable.")
    named = {}
    for name, spec in items:
        if isinstance(spec, str):
            if spec not in SCENARIOS:
                raise ValueError(
                    f"`scenarios` holds the unknown scenario {spec!r}; choose from "
                    f"{', '.join(map(repr, SCENARIOS))} or pass a callable."
                )
        elif not callable(spec):
            raise TypeError(
                f"`scenarios` entries must be scenario names or callables "
                f"f(n_samples=..., random_state=...) returning a Bunch; got "
                f"{type(spec).__name__}."
            )
        if not isinstance(name, str) or not name or name == "<lambda>":
            raise ValueError(
                "`scenarios` holds a callable without a usable name; pass a dict such as "
                "{'my_setting': my_function} to name it."
            )
        if name in named:
            raise ValueError(f"`scenarios` names {name!r} twice; give each scenario one name.")
        named[name] = spec
    return named


def check_sizes(n_samples):
    sizes = [n_samples] if isinstance(n_samples, numbers.Integral) else n_samples
    try:
        sizes = list(sizes)
    except TypeError:
        raise TypeError(
            f"`n_samples` must be a positive integer or a list of them; got {n_samples!r}."
        ) from None
    if not sizes or any(
        isinstance(n, bool | np.bool_) or not isinstance(n, numbers.Integral) or n < 2
        for n in sizes
    ):
        raise ValueError(
            f"`n_samples` must be an integer >= 2 or a non-empty list of them; got {n_samples!r}."
        )
    if len(set(sizes)) != len(sizes):
        raise ValueError(f"`n_samples` repeats a size; got {n_samples!r}. List each size once.")
    return [int(n) for n in sizes]


def root_seed(random_state):
    if isinstance(random_state, np.random.SeedSequence):
        return random_state
    if random_state is None or (
        isinstance(random_state, numbers.Integral)
        and not isinstance(random_state, bool | np.bool_)
        and random_state >= 0
    ):
        return np.random.SeedSequence(random_state)
    raise TypeError(
        "`random_state` must be None, a non-negative int or a numpy.random.SeedSequence; got "
        f"{random_state!r}. (A Generator is refused: its state could not be stored for a resume.)"
    )


def check_count(value, name):
    """Return ``value`` as an int >= 1, or raise naming the argument."""
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Integral) or value < 1:
        raise ValueError(f"`{name}` must be a positive integer; got {value!r}.")
    return int(value)


def check_level(level):
    if (
        isinstance(level, bool | np.bool_)
        or not isinstance(level, numbers.Real)
        or not (0 < level < 1)
    ):
        raise ValueError(f"`level` must lie strictly between 0 and 1; got {level!r}.")
    return float(level)


def _json_value(value, where):
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        if not np.isfinite(value):
            raise ValueError(f"`params` {where} must be finite; got {value!r}.")
        return float(value)
    if isinstance(value, list | tuple):
        return [_json_value(v, where) for v in value]
    if isinstance(value, dict):
        return {str(k): _json_value(v, where) for k, v in value.items()}
    raise TypeError(
        f"`params` {where} must be a number, string, bool, None or a list or dict of them (so "
        f"that it can be stored with the results); got {type(value).__name__}."
    )


def check_params(params):
    """The study's parameter settings as canonical JSON strings (``"{}"``: the scenario's own).

    A dict of lists is crossed (every combination, in order); a list of dicts is taken as is.
    """
    if params is None:
        return ["{}"]
    if isinstance(params, dict):
        names = list(params)
        values = []
        for name in names:
            if not isinstance(name, str) or not name:
                raise TypeError(f"`params` keys must be parameter names; got {name!r}.")
            options = params[name]
            if isinstance(options, str) or not isinstance(options, list | tuple):
                raise TypeError(
                    f"`params[{name!r}]` must be a list of values to vary over; got "
                    f"{options!r}. Write params={{{name!r}: [{options!r}]}} for one value."
                )
            if not options:
                raise ValueError(f"`params[{name!r}]` is empty; list at least one value.")
            values.append(options)
        settings = [dict(zip(names, combo, strict=True)) for combo in itertools.product(*values)]
    elif isinstance(params, list | tuple) and params and all(isinstance(p, dict) for p in params):
        settings = [dict(p) for p in params]
    else:
        raise TypeError(
            "`params` must be None, a dict mapping parameter names to lists of values (crossed), "
            f"or a non-empty list of dicts (one setting each); got {params!r}."
        )
    keys = []
    for setting in settings:
        for name in setting:
            if not isinstance(name, str) or not name:
                raise TypeError(f"`params` keys must be parameter names; got {name!r}.")
        clean = {k: _json_value(v, f"value of {k!r}") for k, v in setting.items()}
        keys.append(json.dumps(clean, sort_keys=True))
    if len(set(keys)) != len(keys):
        raise ValueError("`params` repeats a setting; list each setting once.")
    return keys


def check_overwrite(overwrite):
    if overwrite not in (None, "changed"):
        raise ValueError(
            f"`overwrite` must be None (refuse results of changed code) or 'changed' (recompute "
            f"them); got {overwrite!r}."
        )
    return overwrite


def check_version(version):
    if version is not None and not isinstance(version, str):
        raise TypeError(
            f"`version` must be None or a string naming what the fingerprints cannot see (data "
            f"files, global settings); got {type(version).__name__}."
        )
    return version
