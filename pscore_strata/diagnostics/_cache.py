"""Diagnostics computed once per fitted estimator.

The summary, its notes, the report and the figures all ask for the same balance, weight,
overlap and monotonicity tables and warnings. Each is a function of the estimator's stored
nuisance predictions (and, for balance, of the covariates passed), so it is computed on the
first request and kept on the estimator. The cache belongs to one nuisance fit: a refit gives the
estimator a new ``nuisance_`` and the old results are dropped. Covariates are recognized by a
digest of their values, so changing them in place gives fresh results. Tables are handed out as
copies, so a caller editing one does not change what the next caller sees.
"""

from __future__ import annotations

import copy
import functools
import hashlib

import numpy as np
import pandas as pd

__all__ = ["cached_diagnostic"]


def _digest(X):
    if X is None:
        return None
    if isinstance(X, pd.Series):
        X = X.to_frame()
    if isinstance(X, pd.DataFrame):
        hashed = pd.util.hash_pandas_object(X, index=False).to_numpy()
        names = repr(list(X.columns)).encode()
    else:
        array = np.asarray(X)
        if array.dtype == object:
            return None  # no cheap digest: do not cache
        hashed = np.ascontiguousarray(array)
        names = repr((array.shape, array.dtype.str)).encode()
    digest = hashlib.blake2b(names, digest_size=16)
    digest.update(hashed.tobytes())
    return digest.hexdigest()


def cached_diagnostic(cacheable, takes_x=True):
    """Decorate ``f(estimator, X=None, ...)`` (or ``f(estimator)`` when ``takes_x`` is false);
    ``cacheable(X, **kwargs)`` says when to cache."""

    def decorate(function):
        def call(estimator, X, args, kwargs):
            if takes_x:
                return function(estimator, X, *args, **kwargs)
            return function(estimator, *args, **kwargs)

        @functools.wraps(function)
        def wrapper(estimator, *args, **kwargs):
            X = None
            if takes_x:
                X = kwargs.pop("X", None) if "X" in kwargs else (args[0] if args else None)
                args = args[1:]
            nuisance = getattr(estimator, "nuisance_", None)
            if nuisance is None or args or not cacheable(X, **kwargs):
                return call(estimator, X, args, kwargs)
            digest = _digest(X)
            if X is not None and digest is None:
                return call(estimator, X, args, kwargs)
            store = estimator.__dict__.get("_diagnostic_cache")
            if store is None or store["nuisance"] is not nuisance:
                # Holding the nuisance keeps its identity unique while the cache lives.
                store = {"nuisance": nuisance, "values": {}}
                estimator.__dict__["_diagnostic_cache"] = store
            key = (function.__name__, digest, getattr(estimator, "monotonicity", None),
                   tuple(sorted((k, repr(v)) for k, v in kwargs.items())))  # fmt: skip
            if key not in store["values"]:
                store["values"][key] = call(estimator, X, args, kwargs)
            return copy.deepcopy(store["values"][key])

        return wrapper

    return decorate


def always(X, **kwargs):
    return True


def without_strata(X, strata=None, **kwargs):
    return strata is None
