"""Every public callable documents its arguments and its result in numpydoc sections.

The walk covers the public names (``__all__`` of the package and of every subpackage, as
recorded in tests/test_public_names.py) and the public methods that the package defines on its
public classes (methods inherited from scikit-learn or pandas are theirs to document). A
function or method that takes arguments has a Parameters section naming every one of them; each
has a Returns (or Yields) section. A class's constructor arguments are named under Parameters
(estimators) or Attributes (containers whose constructor only stores them). Properties are
attributes and need neither.
"""

import importlib
import inspect

import pytest
from numpydoc.docscrape import NumpyDocString
from test_public_names import PUBLIC_NAMES

_OWN = "pscore_strata"


def _arguments(function, bound):
    try:
        parameters = list(inspect.signature(function).parameters.values())
    except (TypeError, ValueError):  # a builtin without a signature
        return []
    if bound and parameters:
        parameters = parameters[1:]  # self / cls
    return [p.name for p in parameters if p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)]


def _named(doc, *sections):
    names = set()
    for section in sections:
        for item in doc[section]:
            names.update(n.strip().lstrip("*") for n in item.name.replace("\\", "").split(","))
    return names


def _public_callables():
    """(label, object, kind, bound) for every public function, class and method."""
    found, seen = [], set()
    for module_name, names in PUBLIC_NAMES.items():
        module = importlib.import_module(module_name)
        for name in names:
            obj = getattr(module, name)
            if inspect.ismodule(obj) or not callable(obj) or id(obj) in seen:
                continue
            seen.add(id(obj))
            if not inspect.isclass(obj):
                found.append((f"{module_name}.{name}", obj, "function", False))
                continue
            if issubclass(obj, BaseException):
                continue  # warnings and errors: documented by their class docstring alone
            found.append((f"{module_name}.{name}", obj, "class", True))
            for attr in sorted(dir(obj)):
                if attr.startswith("_"):
                    continue
                owner = next((c for c in obj.__mro__ if attr in vars(c)), None)
                if owner is None or not owner.__module__.startswith(_OWN):
                    continue
                raw = vars(owner)[attr]
                if isinstance(raw, property) or (owner, attr) in seen:
                    continue
                seen.add((owner, attr))
                if isinstance(raw, staticmethod):
                    found.append((f"{owner.__name__}.{attr}", raw.__func__, "method", False))
                elif isinstance(raw, classmethod):
                    found.append((f"{owner.__name__}.{attr}", raw.__func__, "method", True))
                elif inspect.isfunction(raw):
                    found.append((f"{owner.__name__}.{attr}", raw, "method", True))
    return found


CALLABLES = _public_callables()


def test_the_walk_finds_the_interface():
    labels = {label for label, *_ in CALLABLES}
    for expected in ("pscore_strata.weight_summary", "pscore_strata.overlap_summary",
                     "pscore_strata.diagnostic_warnings", "SurvivorEffectEstimator.conf_int",
                     "SurvivorEffectEstimator.summary", "PrincipalScoresMixin.predict",
                     "PrincipalScoresMixin.predict_proba", "TrimmingBounds.conf_int",
                     "BootstrapResult.conf_int", "PrincipalScoreModel.fit"):  # fmt: skip
        assert expected in labels, expected
    assert len(CALLABLES) > 100


@pytest.mark.parametrize("label, obj, kind, bound", CALLABLES, ids=[c[0] for c in CALLABLES])
def test_numpydoc_sections(label, obj, kind, bound):
    doc = NumpyDocString(inspect.getdoc(obj) or "")
    assert doc["Summary"], f"{label}: no docstring"
    if kind == "class":
        init = obj.__init__
        if not getattr(init, "__module__", "").startswith(_OWN):
            return  # the constructor of object, or of a scikit-learn / pandas base
        arguments = _arguments(init, bound=True)
        missing = [a for a in arguments if a not in _named(doc, "Parameters", "Attributes")]
        assert not missing, f"{label}: constructor arguments not documented: {missing}"
        return
    arguments = _arguments(obj, bound)
    if arguments:
        assert doc["Parameters"], f"{label}: takes {arguments} but has no Parameters section"
        missing = [a for a in arguments if a not in _named(doc, "Parameters", "Other Parameters")]
        assert not missing, f"{label}: arguments not in Parameters: {missing}"
    assert doc["Returns"] or doc["Yields"], f"{label}: no Returns section"
