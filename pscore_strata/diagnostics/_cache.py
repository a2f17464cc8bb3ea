"""Diagnostics computed once per nuisance fit.

The summary, its notes, the report and the figures all ask for the same balance, weight,
overlap and monotonicity tables and warnings. Each is a function of the estimator's stored
nuisance predictions, the rows they were fitted on, the monotonicity direction and the target
stratum (and, for balance, of the covariates passed), so it is computed on the first request and
kept in the nuisance fit's ``derived`` store. Estimators that share a fit (``nuisance=``: the
same predictions on the same rows, checked by ``nuisance/_share.py``) share the store, so the
report's three estimators compute each diagnostic once. A refit gives the estimator a new
``nuisance_`` and a fresh store. Covariates are recognized by a
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
            store = getattr(nuisance, "derived", None)
            if store is None:
                return call(estimator, X, args, kwargs)
            key = ("diagnostic", function.__name__, digest,
                   getattr(estimator, "monotonicity", None),
                   getattr(estimator, "stratum_", "always_survivor"),
                   tuple(sorted((k, repr(v)) for k, v in kwargs.items())))  # fmt: skip
            if key not in store:
                store[key] = call(estimator, X, args, kwargs)
            return copy.deepcopy(store[key])

        return wrapper

    return decorate


def always(X, **kwargs):
    return True


def without_strata(X, strata=None, **kwargs):
    return strata is None
