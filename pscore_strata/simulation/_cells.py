"""One cell of a study: its seeds, its simulated data and its fitted rows; ``simulate_cell``.

Every (scenario, sample size, parameter setting, replicate) cell draws its data from its own
:class:`numpy.random.SeedSequence`, keyed by the scenario name, the sample size, the replicate
number and (when set) the parameter setting, so a cell's result depends on neither the number of
workers, the order in which cells finish, nor which other cells are in the study.
"""

from __future__ import annotations

import json
import numbers
import zlib
from collections.abc import Mapping

import numpy as np
from sklearn.utils import Bunch
from threadpoolctl import threadpool_limits

from ..datasets import SCENARIOS, make_scenario
from ._checks import check_params, check_scenarios, root_seed
from ._fit import fit_one, seeded_clone

__all__ = ["simulate_cell"]

_FIELDS = ("X", "y", "treatment", "survival", "true_effect")


def _key(text):
    return zlib.crc32(text.encode("utf-8"))


def cell_seed(entropy, scenario, n, params, replicate, *more):
    # Keyed spawning: the same (entropy, key) always gives the same stream, independently of the
    # other cells (numpy SeedSequence spawn_key semantics). A study without parameter settings
    # keeps the keys it had before settings existed.
    extra = () if params == "{}" else (_key(params),)
    return np.random.SeedSequence(
        entropy, spawn_key=(_key(scenario), n, replicate, *more, *extra)
    )


def _truth(value, what):
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real):
        raise TypeError(
            f"A scenario returned {what}={value!r}; it must be a real number (NaN when the truth "
            "is unknown: then bias, RMSE and coverage are NaN)."
        )
    value = float(value)
    if np.isinf(value):
        raise ValueError(
            f"A scenario returned {what}={value}; it must be finite (or NaN for an unknown truth)."
        )
    return value


def draw(spec, n, params, seed):
    """Simulate a cell's data; check the fields the harness needs."""
    rng = np.random.default_rng(seed)
    settings = json.loads(params)
    if isinstance(spec, str):
        data = make_scenario(spec, n, random_state=rng, **settings)
    else:
        data = spec(n_samples=n, random_state=rng, **settings)
    if isinstance(data, Mapping) and not isinstance(data, Bunch):
        data = Bunch(**data)
    missing = [f for f in _FIELDS if not isinstance(data, Mapping) or f not in data]
    if missing:
        raise ValueError(
            f"A scenario callable returned an object without {', '.join(missing)}; it must "
            "return a Bunch with X, y, treatment, survival and true_effect (groups and "
            "true_bounds optional)."
        )
    data.true_effect = _truth(data.true_effect, "true_effect")
    bounds = data.get("true_bounds")
    if bounds is not None:
        data.true_bounds = tuple(_truth(b, "true_bounds") for b in bounds)
    return data


def run_cell(estimators, scenario, spec, n, params, replicate, entropy, level):
    # A study parallelizes over cells; a multithreaded BLAS inside each fit only competes with
    # the other workers (and is many times slower on a busy machine), so each cell runs with one.
    with threadpool_limits(limits=1, user_api="blas"):
        return _run_cell(estimators, scenario, spec, n, params, replicate, entropy, level)


def _run_cell(estimators, scenario, spec, n, params, replicate, entropy, level):
    data = draw(spec, n, params, cell_seed(entropy, scenario, n, params, replicate, 0))
    truth_lower, truth_upper = data.get("true_bounds") or (np.nan, np.nan)
    rows = []
    for name, estimator in estimators.items():
        seed = cell_seed(entropy, scenario, n, params, replicate, 1, _key(name))
        row = {
            "scenario": scenario,
            "n_samples": n,
            "params": params,
            "replicate": replicate,
            "estimator": name,
            "truth": data.true_effect,
            "truth_lower": truth_lower,
            "truth_upper": truth_upper,
        }
        row.update(fit_one(seeded_clone(estimator, seed), data, level))
        rows.append(row)
    if data.get("true_bounds") is None and any(row["kind"] == "bounds" for row in rows):
        truth_lower, truth_upper = _registered_bounds(spec, params)
        for row in rows:
            row["truth_lower"], row["truth_upper"] = truth_lower, truth_upper
    return rows


def _registered_bounds(spec, params):
    """The identified set a named scenario knows (computed once per setting), else NaN."""
    if not isinstance(spec, str) or SCENARIOS[spec].bounds is None:
        return np.nan, np.nan
    record = SCENARIOS[spec]
    return record.bounds(**{**record.params, **json.loads(params)})


def simulate_cell(scenario, n_samples, replicate, random_state, *, params=None):
    """The data of one replicate of a study, exactly as :func:`run_study` drew them.

    Parameters
    ----------
    scenario : str, callable or dict
        A scenario name, a named callable (its ``__name__`` is the name the study used) or a
        one-entry dict ``{name: callable}`` as passed to :func:`run_study`. The name matters:
        it keys the replicate's seed.
    n_samples : int
        The cell's sample size.
    replicate : int
        The replicate number, from 0.
    random_state : int or numpy.random.SeedSequence
        The study's ``random_state`` (for a study run with ``random_state=None``, the
        ``entropy`` stored in its checkpoint's ``study.json``).
    params : dict, optional
        The cell's parameter setting (one element of the study's ``params``).

    Returns
    -------
    data : sklearn.utils.Bunch
        What the scenario returned for that cell, ``true_effect`` checked.

    Examples
    --------
    >>> import pscore_strata as ps
    >>> results = ps.simulation.run_study(
    ...     [ps.PrincipalScoreWeighting()], "linear", 300, n_reps=2, random_state=5)
    >>> data = ps.simulation.simulate_cell("linear", 300, 1, random_state=5)
    >>> est = ps.PrincipalScoreWeighting().fit(
    ...     data.X, data.y, treatment=data.treatment, survival=data.survival)
    >>> bool(est.effect_ == results["estimate"].iloc[1])
    True
    """
    if isinstance(scenario, dict) and len(scenario) != 1:
        raise ValueError(
            f"`scenario` as a dict must hold exactly one name and callable; got {len(scenario)}."
        )
    ((name, spec),) = check_scenarios(scenario).items()
    if isinstance(n_samples, bool) or not isinstance(n_samples, numbers.Integral) or n_samples < 2:
        raise ValueError(f"`n_samples` must be an integer >= 2; got {n_samples!r}.")
    if isinstance(replicate, bool) or not isinstance(replicate, numbers.Integral) or replicate < 0:
        raise ValueError(f"`replicate` must be an integer >= 0; got {replicate!r}.")
    if random_state is None:
        raise TypeError(
            "`random_state` must be the study's seed (an int or SeedSequence); a study run with "
            "random_state=None stores it as 'entropy' in its checkpoint's study.json."
        )
    root = root_seed(random_state)
    if params is not None and not isinstance(params, dict):
        raise TypeError(f"`params` must be None or a dict of one setting; got {params!r}.")
    (key,) = check_params([params] if params else None)
    return draw(spec, int(n_samples), key, cell_seed(root.entropy, name, int(n_samples), key,
                                                       int(replicate), 0))  # fmt: skip
