"""Fingerprints of what makes a simulation result: scenarios, estimators, library, user tag.

A checkpoint stores the fingerprint of every scenario and estimator beside its rows, so a rerun
can tell a scenario name that now stands for other code or other arguments, or an estimator whose
parameters or class code changed, from the study that wrote the rows. A fingerprint is a nested
dict of JSON values; ``differences`` lists, in words, where two of them differ.

What is read: a callable's module and qualified name, a SHA-256 of its source (of its compiled
code when the source is unavailable, as for code typed at a prompt), its default arguments, the
values its closure holds and, for ``functools.partial``, the wrapped callable, the bound
arguments and keywords; for an estimator, its class (and the source of every class in its method
resolution order outside scikit-learn and the standard library) and its parameters, nested
estimators included. What cannot be read (a global variable the code reads, a file it opens, a
compiled extension) is what the ``version=`` tag of :func:`run_study` is for.
"""

from __future__ import annotations

import functools
import hashlib
import inspect
import json
import numbers
import types

import numpy as np

__all__ = ["scenario_fingerprint", "estimator_fingerprint", "differences"]

_DEPTH = 4
_FOREIGN = ("sklearn.", "builtins", "abc", "numpy.", "scipy.", "joblib.")


def _sha(text):
    return hashlib.sha256(text.encode("utf-8") if isinstance(text, str) else text).hexdigest()


def _code_digest(code):
    """A digest of a code object: bytecode, constants (nested code too) and names."""
    parts = [code.co_code, repr(code.co_names).encode(), repr(code.co_varnames).encode()]
    for const in code.co_consts:
        if isinstance(const, types.CodeType):
            parts.append(_code_digest(const).encode())
        else:
            parts.append(repr(const).encode())
    return _sha(b"\x1f".join(parts))


def _source_digest(obj):
    try:
        return "source:" + _sha(inspect.getsource(obj))
    except (OSError, TypeError):
        pass
    code = getattr(obj, "__code__", None)
    if code is not None:
        return "code:" + _code_digest(code)
    if inspect.isclass(obj):
        # A class typed at a prompt or made by exec: digest the code of its own functions.
        functions = {
            name: _code_digest(member.__code__)
            for name, member in sorted(vars(obj).items())
            if inspect.isfunction(getattr(member, "__func__", member))
            and hasattr(getattr(member, "__func__", member), "__code__")
            for member in [getattr(member, "__func__", member)]
        }
        return "code:" + _sha(json.dumps(functions, sort_keys=True))
    return "unavailable"


def _name(obj):
    module = getattr(obj, "__module__", None) or type(obj).__module__
    qualname = getattr(obj, "__qualname__", None) or type(obj).__qualname__
    return f"{module}.{qualname}"


def describe_value(value, depth=0):
    """A JSON value standing for ``value``: equal values give equal descriptions."""
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, numbers.Real):
        value = float(value)
        return value if np.isfinite(value) else repr(value)
    if depth > _DEPTH:
        return f"<{_name(type(value))}>"
    if isinstance(value, np.ndarray):
        array = np.ascontiguousarray(value)
        return {"array": _sha(array.tobytes()), "shape": list(array.shape),
                "dtype": str(array.dtype)}  # fmt: skip
    if isinstance(value, list | tuple):
        return [describe_value(v, depth + 1) for v in value]
    if isinstance(value, dict):
        return {str(k): describe_value(v, depth + 1) for k, v in sorted(value.items(), key=str)}
    if isinstance(value, set | frozenset):
        return sorted((describe_value(v, depth + 1) for v in value), key=json.dumps)
    if hasattr(value, "get_params") and hasattr(value, "fit"):
        return estimator_fingerprint(value, depth + 1)
    if callable(value):
        return callable_fingerprint(value, depth + 1)
    text = repr(value)
    if " at 0x" in text:  # the default repr: an address, not the value
        return f"<{_name(type(value))} object>"
    return text


def callable_fingerprint(func, depth=0):
    """Name, source digest, defaults, closure values and partial arguments of a callable."""
    if isinstance(func, functools.partial):
        return {
            "partial": callable_fingerprint(func.func, depth + 1),
            "args": describe_value(list(func.args), depth + 1),
            "keywords": describe_value(dict(func.keywords), depth + 1),
        }
    target = func if inspect.isfunction(func) or inspect.ismethod(func) else None
    if target is None and not inspect.isclass(func) and callable(func):
        # A callable object: its class's code and its state.
        state = getattr(func, "__dict__", {})
        return {
            "callable": _name(type(func)),
            "source": _source_digest(type(func)),
            "state": describe_value(dict(state), depth + 1),
        }
    if inspect.ismethod(func):
        return {
            "method": callable_fingerprint(func.__func__, depth + 1),
            "self": describe_value(func.__self__, depth + 1),
        }
    fingerprint = {"callable": _name(func), "source": _source_digest(func)}
    if target is not None:
        fingerprint["defaults"] = describe_value(list(func.__defaults__ or ()), depth + 1)
        fingerprint["keyword_defaults"] = describe_value(dict(func.__kwdefaults__ or {}), depth + 1)
        names = func.__code__.co_freevars
        cells = func.__closure__ or ()
        closure = {}
        for name, cell in zip(names, cells, strict=True):
            try:
                closure[name] = describe_value(cell.cell_contents, depth + 1)
            except ValueError:  # an empty cell
                closure[name] = "<empty>"
        if closure:
            fingerprint["closure"] = closure
    return fingerprint


def estimator_fingerprint(estimator, depth=0):
    """Class, class sources outside scikit-learn, and parameters (nested estimators too)."""
    cls = type(estimator)
    sources = {
        _name(klass): _source_digest(klass)
        for klass in cls.__mro__
        if klass is not object and not klass.__module__.startswith(_FOREIGN)
    }
    params = estimator.get_params(deep=False)
    return {
        "class": _name(cls),
        "sources": sources,
        "params": {k: describe_value(v, depth + 1) for k, v in sorted(params.items())},
    }


def scenario_fingerprint(name, spec):
    """What a scenario name stands for: a registered scenario's settings, or a callable's code."""
    if isinstance(spec, str):
        from ..datasets import SCENARIOS

        record = SCENARIOS[spec]
        return {
            "registered": spec,
            "family": record.family,
            "params": describe_value(dict(record.params)),
            "make": callable_fingerprint(record.make),
        }
    return callable_fingerprint(spec)


def _flatten(value, path=""):
    if isinstance(value, dict):
        out = {}
        for key, item in value.items():
            out.update(_flatten(item, f"{path}.{key}" if path else str(key)))
        return out or {path: {}}
    return {path: value}


def differences(stored, current, limit=4):
    """Where two fingerprints differ, in words (at most ``limit`` items and a count)."""
    a, b = _flatten(stored), _flatten(current)
    changed = []
    for key in sorted(set(a) | set(b)):
        if a.get(key, "<absent>") != b.get(key, "<absent>"):
            old, new = a.get(key, "<absent>"), b.get(key, "<absent>")
            if key.startswith("sources."):
                changed.append(f"the code of class {key.removeprefix('sources.')} changed")
            elif key.endswith("source"):
                where = key.removesuffix("source").rstrip(".") or "the callable"
                changed.append(f"the code of {where} changed")
            else:
                changed.append(f"{key or 'value'} {_short(old)} -> {_short(new)}")
    if len(changed) > limit:
        changed = [*changed[:limit], f"and {len(changed) - limit} more"]
    return changed


def _short(value, width=40):
    text = json.dumps(value) if isinstance(value, dict | list) else repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."
